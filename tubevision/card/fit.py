"""Colour correction fitted to the card: linear camera RGB → CIE XYZ (D65).

Three models are fitted by weighted least squares and one is chosen by
leave-one-out cross-validation over the patches:

* ``matrix``: a 3 × 3 matrix (the classic linear colour correction);
* ``root-polynomial-2`` and ``root-polynomial-3``: the root-polynomial
  expansions of Finlayson, Mackiewicz & Hurlbert (2015) [1]_, 6 and 13 terms.
  Every term has degree one in the RGB values, so the fit is invariant to
  exposure: scaling the light scales XYZ by the same factor, which the
  plain polynomial fits lack.

Before fitting, the neutral ramp gives per-channel white-balance gains (the
least-squares gains that map the ramp's camera RGB to its reference
luminance on all three channels). The models include a full matrix, so the
gains change the fit only by conditioning; they also let the record state
how far from neutral the light was.

The weights make the least-squares fit approximate a fit in CIELAB: near a
colour of luminance Y, L* changes by (116/3)·Y^(-2/3) per unit of Y
(CIE 015:2018 eq. 8.1 differentiated), so each patch's XYZ residual is
weighted by max(Y, 0.02)^(-2/3).

Every model is also tried on camera values first linearised by per-channel
tone curves read off the neutral ramp (:func:`fit_tone_curves`): phone JPEGs
carry a tone curve that no matrix can undo.

Leave-one-out predictions: for a chromatic patch from the hat matrix (for
weighted least squares the deleted residual is e_i / (1 - h_ii); Cook &
Weisberg 1982 [2]_); for a ramp patch by refitting in full, since the white
balance or tone curves depend on it too.

References
----------
.. [1] G. D. Finlayson, M. Mackiewicz, A. Hurlbert, "Color correction using
   root-polynomial regression", IEEE Transactions on Image Processing 24(5),
   1460-1470, 2015. DOI 10.1109/TIP.2015.2405336.
.. [2] R. D. Cook, S. Weisberg, Residuals and Influence in Regression,
   Chapman & Hall, 1982, §2.2 (deleted residuals via leverages).
.. [3] G. Sharma, W. Wu, E. N. Dalal (2005), CIEDE2000 (see tubevision.colorimetry).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..colorimetry import M_SRGB_TO_XYZ, WHITE_D65, delta_e00, xyz_to_lab
from .design import NEUTRAL_IDS

__all__ = ["CardCorrection", "CORRECTION_METHODS", "fit_card_correction", "apply_card_correction",
           "uncalibrated_correction", "expand_rgb", "ToneCurves", "fit_tone_curves", "apply_tone_curves",
           "TONE_PREFIX", "CARD_MAX_MEAN_DE00", "CARD_MAX_PATCH_DE00"]

CARD_MAX_MEAN_DE00 = 2.0
"""Mean residual ΔE00 over the patches above which the record warns: a difference of
about 2 is noticeable side by side (common practice in print and colour QC)."""
CARD_MAX_PATCH_DE00 = 5.0
"""Largest single-patch residual ΔE00 before a warning: a patch that far off usually
means glare, shadow or a dirty card (our limit, from the studio's clean renders' 99th
percentile of about 3)."""
MIN_PATCHES_FOR_POLYNOMIAL = 20
"""Root-polynomial fits need comfortably more patches than their 13 terms (our rule:
at least 1.5 × terms)."""
LAB_WEIGHT_FLOOR_Y = 0.02
"""Luminance below which weights stop growing (the darkest patch is Y ≈ 0.013)."""
SIMPLER_MODEL_MARGIN_DE00 = 0.05
"""A more complex model must beat a simpler one's LOO median by this much to be chosen."""


def _terms_matrix(rgb: np.ndarray) -> np.ndarray:
    return rgb


def _terms_rp2(rgb: np.ndarray) -> np.ndarray:
    """Finlayson et al. 2015 [1]_ eq. 6, degree 2: r, g, b, √(rg), √(gb), √(rb)."""
    r, g, b = (np.maximum(rgb[..., i], 0.0) for i in range(3))
    return np.stack([r, g, b, np.sqrt(r * g), np.sqrt(g * b), np.sqrt(r * b)], axis=-1)


def _terms_rp3(rgb: np.ndarray) -> np.ndarray:
    """Finlayson et al. 2015 [1]_ eq. 7, degree 3: the 13 terms of degree-one roots."""
    r, g, b = (np.maximum(rgb[..., i], 0.0) for i in range(3))
    c = np.cbrt
    return np.stack([r, g, b, np.sqrt(r * g), np.sqrt(g * b), np.sqrt(r * b),
                     c(r * g * g), c(g * b * b), c(r * b * b), c(g * r * r), c(b * g * g),
                     c(b * r * r), c(r * g * b)], axis=-1)


CORRECTION_METHODS = {
    "matrix": _terms_matrix,
    "root-polynomial-2": _terms_rp2,
    "root-polynomial-3": _terms_rp3,
}
"""Name → term expansion, simplest first."""


def expand_rgb(rgb: np.ndarray, method: str) -> np.ndarray:
    """Expand linear RGB ``(..., 3)`` into the terms of ``method``."""
    return CORRECTION_METHODS[method](np.asarray(rgb, dtype=np.float64))


@dataclass(frozen=True)
class ToneCurves:
    """Per-channel response curves from the neutral ramp: camera value → relative luminance Y.

    ``knots[c]`` is ``(log_x, log_y)`` for channel c, increasing; outside the knots the
    curve continues as a power law with the end segments' exponents ``slopes[c]``
    (clipped to :data:`TONE_SLOPE_RANGE`).
    """

    knots: tuple[tuple[np.ndarray, np.ndarray], ...]
    slopes: tuple[tuple[float, float], ...]


TONE_MIN_KNOTS = 4
"""Fewest distinct neutral patches per channel for a tone curve (our rule: the ramp has 8;
with fewer than 4 a curve is no better than a gain)."""
TONE_SLOPE_RANGE = (0.5, 2.5)
"""Allowed log-log slope where a tone curve is extrapolated beyond the ramp (a plain gain
has slope 1; phone tone curves stay within about 0.6–2 over the ramp's range, from
memory); keeps a noisy end patch from bending the extrapolation wildly."""


def fit_tone_curves(rgb_neutral: np.ndarray, y_ref: np.ndarray) -> ToneCurves | None:
    """Per-channel curves mapping the ramp's camera values onto its reference luminance.

    Phone JPEGs go through a tone curve (and often a per-channel one) after white balance, so
    decoding sRGB does not give values proportional to light. The neutral ramp samples that
    curve at known luminances on every channel (common practice in camera characterisation:
    linearise from a grey scale, then fit the colour transform). The curve is piecewise
    linear in log-log coordinates through the ramp's points, so it is monotone and a gain is
    a special case (slope 1). Returns None when a channel has fewer than
    :data:`TONE_MIN_KNOTS` usable, strictly increasing points.
    """
    rgb_neutral = np.asarray(rgb_neutral, dtype=np.float64)
    y_ref = np.asarray(y_ref, dtype=np.float64)
    order = np.argsort(y_ref)
    ly_all = np.log(np.maximum(y_ref[order], 1e-6))
    knots, slopes = [], []
    for c in range(3):
        x = rgb_neutral[order, c]
        keep, last = [], 0.0
        for k, v in enumerate(x):
            if np.isfinite(v) and v > max(last, 1e-6):
                keep.append(k)
                last = v
        if len(keep) < TONE_MIN_KNOTS:
            return None
        lx, ly = np.log(x[keep]), ly_all[keep]
        lo = float(np.clip((ly[1] - ly[0]) / (lx[1] - lx[0]), *TONE_SLOPE_RANGE))
        hi = float(np.clip((ly[-1] - ly[-2]) / (lx[-1] - lx[-2]), *TONE_SLOPE_RANGE))
        knots.append((lx, ly))
        slopes.append((lo, hi))
    return ToneCurves(tuple(knots), tuple(slopes))


def apply_tone_curves(curves: ToneCurves, rgb: np.ndarray) -> np.ndarray:
    """Camera values ``(..., 3)`` through :func:`fit_tone_curves`' curves (relative luminance units)."""
    rgb = np.asarray(rgb, dtype=np.float64)
    out = np.empty_like(rgb)
    for c, ((kx, ky), (lo, hi)) in enumerate(zip(curves.knots, curves.slopes)):
        lx = np.log(np.maximum(rgb[..., c], 1e-7))
        ly = np.interp(lx, kx, ky)
        ly = np.where(lx < kx[0], ky[0] + lo * (lx - kx[0]), ly)
        ly = np.where(lx > kx[-1], ky[-1] + hi * (lx - kx[-1]), ly)
        out[..., c] = np.exp(ly)
    return out


TONE_PREFIX = "ramp-tone+"
"""Prefix of a method name whose camera values first go through the ramp's tone curves."""


@dataclass(frozen=True)
class CardCorrection:
    """A fitted (or assumed) correction and its quality.

    ``coefficients`` is (terms, 3): XYZ = expand(rgb') @ coefficients, where rgb' is
    rgb · white_gains, or, for a method named ``ramp-tone+…``, rgb through ``tone``.
    ``residual_de00`` is per used patch (ids in ``patch_ids``), in-sample;
    ``loo_de00_median`` the median leave-one-out ΔE00 of the chosen model;
    ``candidates`` that figure for every model tried.
    """

    method: str
    white_gains: np.ndarray
    coefficients: np.ndarray
    patch_ids: tuple[str, ...] = ()
    residual_de00: np.ndarray = field(default_factory=lambda: np.zeros(0))
    mean_de00: float | None = None
    max_de00: float | None = None
    loo_de00_median: float | None = None
    candidates: dict = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    calibrated: bool = True
    tone: ToneCurves | None = None

    @property
    def terms(self) -> str:
        name = self.method.removeprefix(TONE_PREFIX)
        return name if name in CORRECTION_METHODS else "matrix"


def uncalibrated_correction() -> CardCorrection:
    """The plain assumption without a card: camera RGB is linear sRGB (IEC 61966-2-1 eq. 6)."""
    return CardCorrection(method="none: camera sRGB assumed (IEC 61966-2-1)", white_gains=np.ones(3),
                          coefficients=M_SRGB_TO_XYZ.T.copy(), calibrated=False)


def _prepare(parts, rgb: np.ndarray) -> np.ndarray:
    """Camera values through ``parts`` = (white gains, tone curves or None)."""
    gains, tone = parts
    rgb = np.asarray(rgb, dtype=np.float64)
    return apply_tone_curves(tone, rgb) if tone is not None else rgb * gains


def apply_card_correction(correction: CardCorrection, rgb_linear: np.ndarray) -> np.ndarray:
    """Linear camera RGB ``(..., 3)`` → CIE XYZ D65 (white Y = 1) through ``correction``."""
    x = _prepare((correction.white_gains, correction.tone), rgb_linear)
    return expand_rgb(x, correction.terms) @ correction.coefficients


def _white_gains(rgb: np.ndarray, y_ref: np.ndarray) -> np.ndarray:
    """Per-channel gains g_c minimising Σ (g_c·rgb_c − Y_ref)² over the neutral patches."""
    den = np.sum(rgb * rgb, axis=0)
    gains = np.sum(rgb * y_ref[:, None], axis=0) / np.where(den > 0, den, 1.0)
    return np.where(gains > 0, gains, 1.0)


def _fit_parts(rgb, xyz_ref, w, neutral, name, tone: bool):
    """One candidate fitted on the given patches: ((gains, tone curves), coefficients) or None."""
    curves = None
    gains = np.ones(3)
    if tone:
        curves = fit_tone_curves(rgb[neutral], xyz_ref[neutral, 1])
        if curves is None:
            return None
    elif neutral.sum() >= 3:
        gains = _white_gains(rgb[neutral], xyz_ref[neutral, 1])
    a = expand_rgb(_prepare((gains, curves), rgb), name)
    if a.shape[0] <= a.shape[1]:
        return None
    sw = np.sqrt(w)[:, None]
    coef, *_ = np.linalg.lstsq(a * sw, xyz_ref * sw, rcond=None)
    return (gains, curves), coef


def _predict(parts, coef, name, rgb):
    return expand_rgb(_prepare(parts, rgb), name) @ coef


def _loo_predictions(rgb, xyz_ref, w, neutral, name, tone: bool, fitted) -> np.ndarray | None:
    """Leave-one-out XYZ of every patch, the model refitted without it.

    Leaving out a chromatic patch changes only the regression (the white balance and the
    tone curves come from the ramp), so its deleted prediction comes from the leverage:
    ŷ_(i) = y_i − e_i / (1 − h_ii) (Cook & Weisberg 1982 [2]_). Leaving out a ramp patch
    also changes the gains or curves, so those are refitted in full; the choice of model
    thus pays for everything it learns from the patches.
    """
    parts, coef = fitted
    a = expand_rgb(_prepare(parts, rgb), name)
    sw = np.sqrt(w)[:, None]
    aw = a * sw
    h = np.einsum("ij,jk,ik->i", aw, np.linalg.pinv(aw.T @ aw), aw)
    resid = xyz_ref - a @ coef
    out = xyz_ref - resid / np.clip(1.0 - h, 1e-3, None)[:, None]
    keep = np.ones(len(rgb), bool)
    for i in np.flatnonzero(neutral):
        keep[i] = False
        refit = _fit_parts(rgb[keep], xyz_ref[keep], w[keep], neutral[keep], name, tone)
        keep[i] = True
        if refit is None:
            return None
        out[i] = _predict(refit[0], refit[1], name, rgb[i:i + 1])[0]
    return out


def fit_card_correction(detection, reference, *, method: str = "auto") -> CardCorrection:
    """Fit the colour correction to the card's patches.

    Parameters
    ----------
    detection : CardDetection — ``patch_ids``, ``patch_rgb_linear`` (N, 3) linear camera RGB,
        ``patch_ok`` (N,) which patches are usable.
    reference : CardReference — the patches' CIELAB (D50), adapted here to D65.
    method : ``"auto"`` (choose by leave-one-out ΔE00) or a name in :data:`CORRECTION_METHODS`,
        optionally prefixed by :data:`TONE_PREFIX`.

    Every model is tried twice: on white-balanced camera values (per-channel gains from the
    neutral ramp) and on values linearised by the ramp's tone curves
    (:func:`fit_tone_curves`). The simplest model whose leave-one-out median ΔE00 is not
    beaten by :data:`SIMPLER_MODEL_MARGIN_DE00` is chosen.

    Returns
    -------
    CardCorrection

    Raises
    ------
    ValueError
        ``method`` is not a known name (a programming error; the CLI offers no choice).
    """
    known = list(CORRECTION_METHODS) + [TONE_PREFIX + m for m in CORRECTION_METHODS]
    if method != "auto" and method not in known:
        raise ValueError(f"method: expected 'auto' or one of {known}, got {method!r}")
    ref_lab = dict(zip(reference.ids, reference.lab_d65()))
    ok = np.asarray(detection.patch_ok, dtype=bool)
    ids = [pid for pid, flag in zip(detection.patch_ids, ok) if flag and pid in ref_lab]
    index = {pid: k for k, pid in enumerate(detection.patch_ids)}
    rgb = np.array([detection.patch_rgb_linear[index[pid]] for pid in ids], dtype=np.float64)
    lab_ref = np.array([ref_lab[pid] for pid in ids], dtype=np.float64)
    from ..colorimetry import lab_to_xyz

    xyz_ref = lab_to_xyz(lab_ref, WHITE_D65)
    warnings: list[str] = []
    neutral = np.array([pid in NEUTRAL_IDS for pid in ids])
    if neutral.sum() < 3:
        warnings.append("fewer than 3 neutral patches usable: no white balance from the ramp")
    w = np.maximum(xyz_ref[:, 1], LAB_WEIGHT_FLOOR_Y) ** (-2.0 / 3.0)

    # simplest first: each expansion on white-balanced values, then on tone-linearised ones
    order = [c for m in CORRECTION_METHODS for c in ((m, False), (m, True))]
    if method != "auto":
        order = [(method.removeprefix(TONE_PREFIX), method.startswith(TONE_PREFIX))]
    elif len(ids) < MIN_PATCHES_FOR_POLYNOMIAL:
        order = [("matrix", False), ("matrix", True)]
    if len(ids) < MIN_PATCHES_FOR_POLYNOMIAL:
        warnings.append(f"only {len(ids)} usable card patches: colour correction is less certain")
    results = {}
    for name, tone in order:
        fitted = _fit_parts(rgb, xyz_ref, w, neutral, name, tone)
        if fitted is None:
            continue
        loo = _loo_predictions(rgb, xyz_ref, w, neutral, name, tone, fitted)
        if loo is None:
            continue
        pred = _predict(fitted[0], fitted[1], name, rgb)
        loo_de = delta_e00(xyz_to_lab(np.clip(loo, 1e-6, None)), lab_ref)
        fit_de = delta_e00(xyz_to_lab(np.clip(pred, 1e-6, None)), lab_ref)
        label = (TONE_PREFIX if tone else "") + name
        results[label] = (fitted, fit_de, float(np.median(loo_de)))
    if not results:
        raise ValueError("too few patches to fit any colour correction")
    chosen = None
    for label in results:  # in order, simplest first; a complex model must win by a margin
        if chosen is None or results[label][2] < results[chosen][2] - SIMPLER_MODEL_MARGIN_DE00:
            chosen = label
    ((gains, curves), coef), fit_de, loo_med = results[chosen]
    mean_de, max_de = float(np.mean(fit_de)), float(np.max(fit_de))
    if mean_de > CARD_MAX_MEAN_DE00:
        warnings.append(f"card fit residual mean ΔE00 {mean_de:.2f} exceeds {CARD_MAX_MEAN_DE00}: "
                        "check light, glare and the card-ref values")
    if max_de > CARD_MAX_PATCH_DE00:
        worst = ids[int(np.argmax(fit_de))]
        warnings.append(f"card patch {worst} residual ΔE00 {max_de:.2f} exceeds {CARD_MAX_PATCH_DE00}")
    return CardCorrection(method=chosen, white_gains=gains, coefficients=coef, patch_ids=tuple(ids),
                          residual_de00=np.asarray(fit_de), mean_de00=mean_de, max_de00=max_de,
                          loo_de00_median=loo_med,
                          candidates={k: round(v[2], 4) for k, v in results.items()},
                          warnings=tuple(warnings), tone=curves)
