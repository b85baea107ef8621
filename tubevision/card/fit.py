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

Leave-one-out predictions come from the hat matrix (for weighted least
squares the deleted residual is e_i / (1 - h_ii); Cook & Weisberg 1982 [2]_),
so cross-validation costs one fit per model.

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
           "uncalibrated_correction", "expand_rgb", "CARD_MAX_MEAN_DE00", "CARD_MAX_PATCH_DE00"]

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
class CardCorrection:
    """A fitted (or assumed) correction and its quality.

    ``coefficients`` is (terms, 3): XYZ = expand(rgb · white_gains) @ coefficients.
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

    @property
    def terms(self) -> str:
        return self.method if self.method in CORRECTION_METHODS else "matrix"


def uncalibrated_correction() -> CardCorrection:
    """The plain assumption without a card: camera RGB is linear sRGB (IEC 61966-2-1 eq. 6)."""
    return CardCorrection(method="none: camera sRGB assumed (IEC 61966-2-1)", white_gains=np.ones(3),
                          coefficients=M_SRGB_TO_XYZ.T.copy(), calibrated=False)


def apply_card_correction(correction: CardCorrection, rgb_linear: np.ndarray) -> np.ndarray:
    """Linear camera RGB ``(..., 3)`` → CIE XYZ D65 (white Y = 1) through ``correction``."""
    rgb = np.asarray(rgb_linear, dtype=np.float64) * correction.white_gains
    return expand_rgb(rgb, correction.terms) @ correction.coefficients


def _white_gains(rgb: np.ndarray, y_ref: np.ndarray) -> np.ndarray:
    """Per-channel gains g_c minimising Σ (g_c·rgb_c − Y_ref)² over the neutral patches."""
    den = np.sum(rgb * rgb, axis=0)
    gains = np.sum(rgb * y_ref[:, None], axis=0) / np.where(den > 0, den, 1.0)
    return np.where(gains > 0, gains, 1.0)


def _wls(a: np.ndarray, y: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weighted least squares with one weight per row; returns coefficients, fitted, LOO predictions."""
    sw = np.sqrt(w)[:, None]
    aw = a * sw
    yw = y * sw
    coef, *_ = np.linalg.lstsq(aw, yw, rcond=None)
    fitted = a @ coef
    # leverages of the weighted design: h = diag(Aw (AwᵀAw)⁻¹ Awᵀ)
    pinv = np.linalg.pinv(aw.T @ aw)
    h = np.einsum("ij,jk,ik->i", aw, pinv, aw)
    h = np.clip(h, 0.0, 0.999)
    loo = y - (y - fitted) / (1.0 - h)[:, None]
    return coef, fitted, loo


def fit_card_correction(detection, reference, *, method: str = "auto") -> CardCorrection:
    """Fit the colour correction to the card's patches.

    Parameters
    ----------
    detection : CardDetection — ``patch_ids``, ``patch_rgb_linear`` (N, 3) linear camera RGB,
        ``patch_ok`` (N,) which patches are usable.
    reference : CardReference — the patches' CIELAB (D50), adapted here to D65.
    method : ``"auto"`` (choose by leave-one-out ΔE00) or a name in :data:`CORRECTION_METHODS`.

    Returns
    -------
    CardCorrection

    Raises
    ------
    ValueError
        ``method`` is not a known name (a programming error; the CLI offers no choice).
    """
    if method != "auto" and method not in CORRECTION_METHODS:
        raise ValueError(f"method: expected 'auto' or one of {sorted(CORRECTION_METHODS)}, got {method!r}")
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
    if neutral.sum() >= 3:
        gains = _white_gains(rgb[neutral], xyz_ref[neutral, 1])
    else:
        gains = np.ones(3)
        warnings.append("fewer than 3 neutral patches usable: no white balance from the ramp")
    rgb_wb = rgb * gains
    w = np.maximum(xyz_ref[:, 1], LAB_WEIGHT_FLOOR_Y) ** (-2.0 / 3.0)

    names = list(CORRECTION_METHODS) if method == "auto" else [method]
    if len(ids) < MIN_PATCHES_FOR_POLYNOMIAL:
        if method == "auto":
            names = ["matrix"]
        warnings.append(f"only {len(ids)} usable card patches: colour correction is less certain")
    results = {}
    for name in names:
        a = expand_rgb(rgb_wb, name)
        if a.shape[0] <= a.shape[1]:
            continue
        coef, fitted, loo = _wls(a, xyz_ref, w)
        loo_de = delta_e00(xyz_to_lab(np.clip(loo, 1e-6, None)), lab_ref)
        fit_de = delta_e00(xyz_to_lab(np.clip(fitted, 1e-6, None)), lab_ref)
        results[name] = (coef, fit_de, float(np.median(loo_de)))
    if not results:
        raise ValueError("too few patches to fit any colour correction")
    chosen = None
    for name in CORRECTION_METHODS:  # simplest first; a complex model must win by a margin
        if name not in results:
            continue
        if chosen is None or results[name][2] < results[chosen][2] - SIMPLER_MODEL_MARGIN_DE00:
            chosen = name
    coef, fit_de, loo_med = results[chosen]
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
                          warnings=tuple(warnings))
