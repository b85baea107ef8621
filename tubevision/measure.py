"""Stage 4, measure: colour, turbidity and settled solid of each tube.

What is measured, and why
-------------------------
**Liquid colour.** The contract's ``lab`` is the apparent colour of the liquid
column over the light backdrop. It is taken from the *central third of the
tube's width* (``TubeRegion.inner_col0``/``inner_col1``), from a few rows
below the meniscus down to just above the settled solid or the round bottom.
Light crosses a cylinder of inner radius r at distance d from the axis along
a chord of length 2·sqrt(r² − d²) (geometry). Over the central third
(|d| ≤ r/3) the chord is between 2r·sqrt(8/9) ≈ 0.943·2r and 2r: near its
maximum and within 6 % of constant, so Beer–Lambert absorption — and the
colour — is nearly the same in every measured pixel. Outside it the path
shortens fast (to 0 at the wall), the glass walls refract and reflect, and
specular streaks sit there. Inside the central third the stage further
leaves out:

* specular highlights: pixels with two or more channels ≥ :data:`NEAR_CLIP_SRGB8`
  (of 255) or with luminance above :data:`HIGHLIGHT_RATIO` × the column's
  median (a single clipped channel is a saturated colour beyond the camera's range, not
  glare: it stays in, and the tube is warned about clipping);
* the meniscus: :data:`MENISCUS_SKIP_FRACTION` of the tube width below
  ``liquid_top``;
* things in front of the tube (the rack's bar, a label, a finger), of any colour: rows
  where the glass walls' lines vanish (:func:`_occluder_rows`: an object in front hides
  both walls), with a margin for its edges and shadow; and rows whose level is below
  :data:`OCCLUDED_ROW_FRACTION` × the column's level (shadows), and, on a banded backdrop,
  dark runs much longer than the backdrop's bands;
* the settled solid, when one is found, with a margin above it;
* where the backdrop is banded, every row where the backdrop *beside* the
  tube (strips left and right of the glass) is dark, with a margin of rows
  at each band edge. Colour is measured over the light rows only.

Pixels are converted to linear light only in the window around the tube
(:func:`tubevision.image.to_linear`), through the card's correction to CIE
XYZ (D65, white Y = 1), and to CIELAB D65/2° by
:func:`tubevision.colorimetry.xyz_to_lab`. ``lab`` is the CIELAB of the mean
XYZ; ``lab_sd`` is the per-channel standard deviation of the pixels' CIELAB,
``lab_sem`` its standard error of the mean (sd / sqrt(n_eff), n_eff counting
rows rather than pixels, because neighbouring pixels share JPEG blocks and
demosaicking and are not independent — common practice).

Turbidity (our own quantity; the README repeats this)
------------------------------------------------------
Light scattered by suspended solid adds a veil of light that does not depend
on what lies behind the tube; dissolved colour absorbs, scaling the light
from behind without adding any. With luminance Y (linear light) through the
liquid over the backdrop's light rows ``I_L = T·R_L + S`` and over its dark
rows ``I_D = T·R_D + S`` (T transmittance, S scattered-back veil), the
Michelson contrast (I_L − I_D) / (I_L + I_D) is unchanged by absorption
alone (S = 0 gives R-contrast whatever T is) and falls as S grows. So, on
the banded backdrop (:mod:`tubevision.backdrop`),

    τ = −ln(C_through / C_beside),   C = (Y_light − Y_dark) / (Y_light + Y_dark)

with C_through from the central third of the column and C_beside from the
backdrop strips beside the glass, in the same rows. τ is dimensionless (an
optical-depth-like "veil depth", written "1"), 0 means no scattering (clear
liquid, coloured or not), and with the model above
τ = ln(1 + 2S / (T·(R_L + R_D))), which rises monotonically with suspended
solid (S grows and T falls). Each row is summarised by the mean of its central-third
pixels without highlights, and τ uses the medians of those row values over the light and
the dark rows. Its standard deviation is analytic: the standard error of each median
(sqrt(π/2)·σ/sqrt(n), σ from the MAD) propagated through the formula to first order
(JCGM 100:2008 GUM §5.1), floored at :data:`TURBIDITY_SD_FLOOR`; the raw estimate can be
slightly negative from noise and is reported clipped at 0 only after the sd is taken.

On a plain light backdrop there is no dark reference behind the tube, so the
stage falls back on the veil alone: with the same model, ``q = I/B`` (column
over backdrop beside, per channel) is T + S/B; taking the least-absorbed
channel (``q_max``, where a coloured solution is nearly transparent)
τ_plain = max(0, ln(max_c(q_c / q_air,c))), where q_air is the same ratio over the
empty glass above the liquid (the walls alone; :data:`Q_CLEAR_PLAIN` when none is
visible). This assumes the suspended solid
is lighter than the backdrop and reads dark suspended solid as clear; the
tube carries a warning saying so, and the banded backdrop is recommended.

Settled solid
-------------
A distinct opaque layer at the bottom. Darker or coloured liquid is not a solid: a
liquid, coloured or cloudy, only changes the light from behind it (absorbs, or adds a
veil), in proportion to its path; an opaque layer shows its own colour whatever lies
behind it. So, along a strip on the tube's axis, for each row from the inside bottom
(``inner_bottom``) up to :data:`PELLET_MAX_HEIGHT_FRACTION` widths above the round bottom:

1. the apparent absorbance A = −ln(I/B) of R, G, B and luminance is taken, I the light
   through the tube, B the backdrop beside it in the same row;
2. the liquid above is modelled per channel as I = T·B + S from its reference rows (light
   and dark bands: T its transmittance, S its veil), which predicts its absorbance
   A_liq(B) for any row's backdrop, band edges included;
3. in the round bottom the chord is shorter, by k = sqrt(1 − (1 − h/r)²) at height h for a
   hemisphere of inner radius r (geometry); a liquid there reads A = k'·A_liq with k' in
   :data:`PELLET_CHORD_TOLERANCE` × k (Beer–Lambert: absorbance ∝ path);
4. a row is opaque when no such k' (and no registration of the backdrop reading within a
   few rows at band edges) brings A within :data:`PELLET_MIN_OPACITY` of the liquid's
   (:func:`_opacity_dev`; colour channels weighted by :data:`PELLET_CHANNEL_WEIGHTS`).

In the round bottom the glass and liquid form a lens curved both ways (a filled
hemisphere is a ball lens, focal length ~ n·D / (4(n − 1)) ≈ 1.0·D for water, Hecht,
Optics, 5th ed., §5.2): through liquid it shows the bands behind displaced, inverted or
rescaled, out of register with the backdrop beside the tube. So there a row counts as
opaque only where the view below it is also flat: where it shows band texture
(:func:`_band_texture`) it is liquid, however it compares with the strip beside it.

The solid is one run of opaque rows from the bottom upward, at least
:data:`PELLET_MIN_HEIGHT_MM` high (or :data:`PELLET_MIN_HEIGHT_PX` without a scale);
rows where this solid would look like the liquid (a white solid over a light band) and
the lowest rows (the glass bottom's dark edge, :data:`PELLET_BOTTOM_SKIP_FRACTION`) can
neither confirm nor end it. It must also be distinct — its colour at least
:data:`PELLET_MIN_CONTRAST_DE00` (CIEDE2000) from the liquid's over the light or the dark
bands — and, where it spans light and dark bands, opaque to them: the band step seen
through it at most :data:`PELLET_MAX_BAND_FOLLOW` of the step the liquid transmits. A
white solid on a plain white backdrop has nothing to show its opacity against and is not
found; the banded backdrop shows it in its dark bands.

The height is measured on the axis from the inside bottom of the glass to the sub-row
position where the opacity measure crosses half-way between solid and liquid, times the
scale. When the top lies in rows where solid and liquid look alike, a weak step in
luminance is fitted there (:data:`PELLET_WEAK_EDGE_MIN`); failing that the middle of those
rows is taken, with an sd of their span / sqrt(12). The scale should be the card's at the tube's position
(:func:`mm_per_px_at`, through the card's homography), not only at the card.

Uncertainty
-----------
``lab_sd``/``lab_sem`` are pixel statistics; ``calibration_de00`` is the
card fit's mean residual ΔE00 (a stated term, 0 for the uncalibrated sRGB
assumption, whose error is unknown); ``colour_uncertainty_de00`` combines
them as sqrt(ΔE_sem² + ΔE_cal²), with ΔE_sem the CIE76 length of
``lab_sem``. The pellet height's sd combines the edge position's sd (quantisation,
or the span of undecidable rows / sqrt(12)) with :data:`INNER_BOTTOM_SD_PX` for the glass
bottom's position.

Speed: only the window around each tube and the beside strips is converted to linear light
(an 8-bit table lookup); row statistics are vectorised; the solid is looked for only in
the rows it can reach.
"""

from __future__ import annotations

import logging
import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from .colorimetry import M_SRGB_TO_XYZ, delta_e00, linear_srgb_to_xyz, xyz_to_lab
from .errors import TubevisionInputError
from .image import to_linear

__all__ = [
    "FEATURE_NAMES",
    "LiquidMeasurement",
    "PelletMeasurement",
    "TubeMeasurement",
    "measure_tube",
    "mm_per_px_at",
    "photo_quality",
]

log = logging.getLogger(__name__)

# --------------------------------------------------------------------------- constants

NEAR_CLIP_SRGB8 = 250
"""Channel code (of 255) counted as clipped or near-clipped (the task's quality limit)."""

CLIPPED_WARN_FRACTION = 0.15
"""Warn when more than this fraction of channel values in the measured area is clipped:
a narrow specular streak covers less than this of the central third and is left out;
more means the exposure clips the liquid itself (chosen)."""

HIGHLIGHT_RATIO = 1.35
"""A pixel brighter than this × the column's median luminance is a specular highlight
(glass reflections are several times brighter than the liquid; chosen with margin
above the ±6 % chord variation of the central third)."""

GLARE_WARN_FRACTION = 0.5
"""Warn 'glare covers most of the tube' above this fraction of the column's pixels."""

MENISCUS_SKIP_FRACTION = 0.15
"""Rows skipped below liquid_top, as a fraction of the tube's outer width: the meniscus
of water in glass rises about one capillary length (~2.7 mm for water, from memory) at
the wall; on the axis it is a fraction of that."""

PELLET_MARGIN_FRACTION = 0.1
"""Rows left out above a settled solid, as a fraction of the tube width (blur of its edge)."""

OCCLUDED_ROW_FRACTION = 0.6
"""A column row darker than this × the column's robust level is hidden (rack bar,
shadow, label) and left out."""

BAND_MIN_RATIO = 2.0
"""The backdrop beside the tube counts as banded when its 95th/5th percentile luminance
ratio is at least this (the printed bands give ~20; shading of a plain sheet < 1.5)."""

BAND_EDGE_SKIP_FRACTION = 0.2
"""Rows left out at each band edge, as a fraction of the median band height."""

OCCLUDER_RUN_FACTOR = 2.5
"""A dark run longer than this × the median dark-band height is an occluder, not a band."""

TURBIDITY_SD_FLOOR = 0.002
"""Smallest turbidity sd reported: one 8-bit code step at the light level changes τ by
~0.01, and its uniform quantisation sd (1/sqrt(12)) over ≥ 10 rows is ~0.002."""

AIR_MIN_ROWS = 3
"""Rows of empty glass above the liquid needed to use them as the clear reference."""

Q_CLEAR_PLAIN = 1.0
"""Expected column/backdrop ratio of the least-absorbed channel for clear liquid on a
plain backdrop when no empty glass above the liquid is visible to measure it (the
cylinder of liquid relays the backdrop behind it; glass losses of a few percent are
neglected)."""

PELLET_MIN_CONTRAST_DE00 = 8.0
"""A settled solid must differ from the liquid above by at least this CIEDE2000 (a
difference plainly visible side by side; ΔE00 ≈ 1 is a just-noticeable difference,
common practice)."""

PELLET_MIN_OPACITY = 0.35
"""A row belongs to a settled solid only when its apparent absorbance −ln(I/B) (per channel,
I through the tube, B the backdrop beside it in the same row) departs by at least this from
what the liquid above would give over that row's chord (Beer–Lambert: absorbance ∝ path,
IUPAC Gold Book "Beer–Lambert law"). A liquid — coloured or cloudy — only scales its own
absorbance with the path; an opaque layer shows its own colour whatever lies behind it.
0.35 is a 30 % change of transmitted light (chosen: glass-bottom shading stays below ~15 %)."""

PELLET_CHORD_TOLERANCE = (0.5, 1.6)
"""Range allowed around the round bottom's chord ratio k = sqrt(1 − (1 − h/r)²) (geometry of
a hemisphere of inner radius r at height h) for the liquid's absorbance scale: refraction
in the bottom and its glass thickness change the effective path (chosen)."""

PELLET_ROW_SHIFT_FRACTION = 0.03
"""Rows (fraction of the tube width) by which the view through the tube and the backdrop
strip beside it may be out of register at a band edge (chosen: 3 px on a 100 px tube)."""

PELLET_MAX_HEIGHT_FRACTION = 1.0
"""Settled solid is looked for up to this × the tube width above the round bottom's start
(a solid ~1.5 diameters high; more is a packed tube, not a pellet)."""

PELLET_BOTTOM_SHIFT_FRACTION = 0.03
"""The same, for rows through the round bottom, whose glass and liquid form a lens curved in
both directions that shifts the band edges behind vertically too (chosen: 8 px on 100)."""

PELLET_K_STEPS = 7

PELLET_TEXTURE_MIN = 0.15
"""Smallest range of ln(luminance) over a band height of rows counted as band texture seen
through the round bottom (16 %; far above row noise, ~1 %; chosen)."""

PELLET_STRIP_MAX_COLS = 16
"""At most about this many columns of the axis strip are read for the solid (every n-th)."""
"""Grid of chord ratios tried per row in :func:`_opacity_dev`."""

PELLET_CHANNEL_WEIGHTS = np.array([0.25, 0.25, 0.25, 1.0])
"""Weights of R, G, B and luminance Y in the opacity measure: opacity is foremost a matter
of how much light comes through (Y); the colour channels count half, because JPEG stores
colour at half resolution (4:2:0 subsampling, ITU-T T.81 / JFIF common practice) so it
bleeds across band edges, and a phone's colour processing is less linear than its
luminance (chosen)."""

PELLET_MAX_ABSORBANCE = 3.0
"""Apparent absorbances (natural log) are capped here: transmission below e⁻³ ≈ 5 %."""

PELLET_FLARE_FRACTION = 0.005
"""Light added to every reading of the opacity test, as a fraction of the light backdrop's
level, so that two near-black readings (a black solid over a black band) are compared as
a camera can tell them apart rather than in ratio. A camera's veiling glare is of the
order of 1–3 % (ISO 18844 measures it; from memory); 0.5 % is taken, a floor below it so
that real dark-on-dark differences are not hidden (chosen)."""

PELLET_WEAK_EDGE_MIN = 0.03
"""Where the solid's top lies in rows where solid and liquid look alike (a white solid over
a light band), a step in luminance is still fitted when the two differ by at least this in
ln Y (3 %, several times the row noise of a phone JPEG; chosen)."""

PELLET_WEAK_EDGE_MAX_BAD = 0.2
"""... and accepted when at most this fraction of those rows disagree with the step."""

PELLET_REF_GAP_FRACTION = 0.15
"""Reference liquid rows end this far (fraction of width) above the round bottom's start."""

PELLET_REF_SPAN_FRACTION = 1.0
"""Reference liquid rows start this far (fraction of width) above the round bottom's start."""

PELLET_MIN_HEIGHT_MM = 0.5
"""Smallest settled solid reported (mm): below this the glass bottom's own shading
dominates."""

PELLET_MIN_HEIGHT_PX = 3
"""Smallest settled solid reported when no mm scale is known (px)."""

PELLET_BOTTOM_SKIP_FRACTION = 0.04
"""Rows at the inside bottom allowed not to differ (glass bottom shading), as a fraction
of the tube width."""

PELLET_MAX_BAND_FOLLOW = 0.5
"""On a banded backdrop, where a solid spans light and dark band rows, the band step seen
through it may be at most this fraction of the step the liquid above transmits (an opaque
layer shows ~0, the liquid itself 1; chosen half-way)."""

PELLET_MIN_LIQUID_TRANSMISSION = 0.05
"""The band-follow test needs the liquid above to transmit at least this fraction of the
band step (a nearly black liquid shows no bands to compare with)."""

PELLET_AXIS_HALF_FRACTION = 0.12
"""Half-width of the strip along the axis read for the solid, as a fraction of the tube
width (the round bottom narrows quickly towards its lowest point)."""

INNER_BOTTOM_SD_PX = 1.0
"""Assumed sd of the tubes stage's inside-bottom row (px), a stated term of the height sd."""

LAB_STATS_MAX_PIXELS = 6000
"""Pixels converted one by one for the colour statistics; more are subsampled evenly."""

MIN_LIQUID_PIXELS = 200
"""Fewer measured pixels than this gives the warning 'too few pixels' (the sem of the
colour then exceeds ~0.1 L* for typical JPEG noise; chosen)."""

MIN_TUBE_WIDTH_PX = 12
"""Tubes narrower than this (px) get the warning 'too small in the photo' (the central
third is then four pixels or fewer)."""

BLUR_MAX_EDGE_WIDTH_FRACTION = 0.06
"""Glass edges wider than this fraction of the tube width (see :func:`_edge_width_px`)
give the warning 'blurred' (a sharp phone photo spreads an edge over 1–3 px of a
≥ 60 px wide tube)."""

SIDE_GAP_FRACTION = 0.06
"""Gap between the tube's box and the backdrop strips beside it (fraction of width)."""

SIDE_STRIP_FRACTION = 0.2
"""Width of each backdrop strip beside the tube (fraction of the tube width)."""

SIDE_STRIP_MAX_COLS = 16
"""At most about this many columns of each beside strip are read (every n-th column)."""

WALL_ZONE_FRACTION = 0.15
"""Width of the zone at each side of the box read for the glass wall's line (fraction of
the tube width; the wall and its refracted edge lie within ~10 % of the width)."""

OCCLUDER_EDGE_FRACTION = 0.2
"""A row whose wall-line strength is below this × the tube's median is hidden by an object
in front (an unhidden wall keeps well over half its strength from band to band; chosen)."""

OCCLUDER_MIN_ROWS = 3
"""Fewest consecutive rows counted as an object in front."""

OCCLUDER_MARGIN_FRACTION = 0.06
"""Rows added on each side of an object in front (its edges, its shadow), fraction of width."""

FEATURE_NAMES: tuple[str, ...] = (
    "col_L", "col_a", "col_b", "col_chroma",         # CIELAB of the column (D65)
    "col_L_sd", "col_a_sd", "col_b_sd",              # pixel sd of the column
    "col_L_top_minus_bottom",                        # L* upper half − lower half (settling)
    "col_row_cv",                                    # cv of row luminance (light rows)
    "col_gradient",                                  # mean |dY/drow| / mean Y along the column
    "transmission_ratio",                            # Y column / Y backdrop beside (light rows)
    "col_backdrop_de00",                             # ΔE00 column vs backdrop beside (light rows)
    "turbidity", "turbidity_raw", "turbidity_sd",    # τ (see module docstring)
    "band_contrast_ratio",                           # C_through / C_beside (1.0 on plain backdrop)
    "backdrop_banded",                               # 1.0 banded, 0.0 plain
    "meniscus_strength",                             # darkness of the meniscus line (0 none)
    "above_liquid_de00",                             # ΔE00 column vs tube above the liquid
    "pellet_present",                                # 1.0 / 0.0
    "pellet_height_mm",                              # 0.0 when absent or no scale
    "pellet_height_rel",                             # pellet height px / tube width px
    "pellet_contrast_de00",                          # ΔE00 solid vs liquid above
    "pellet_L", "pellet_chroma",                     # of the solid (0 when absent)
    "pellet_band_follow",                            # corr. of solid rows with the bands
    "bottom_de00",                                   # ΔE00 bottom region vs column
    "clipped_fraction", "highlight_fraction",
    "n_pixels_log10",                                # log10(1 + measured pixel count)
    "edge_width_rel",                                # glass edge width / tube width (blur)
)
"""Names of :attr:`TubeMeasurement.features`, in a stable order, for the state classifier.

Neutral values where a quantity does not apply: empty tube → column features from the
inside of the glass; plain backdrop → ``band_contrast_ratio`` = 1; no solid → pellet
features 0. No feature is ever NaN."""


# --------------------------------------------------------------------------- results

@dataclass(frozen=True)
class LiquidMeasurement:
    """The liquid column of one tube.

    ``lab`` CIELAB D65/2° (L* 0–100) of the mean XYZ; ``lab_sd`` per-channel pixel sd;
    ``lab_sem`` its standard error; ``n_pixels`` measured pixels; ``turbidity`` τ ≥ 0
    (dimensionless, module docstring) and ``turbidity_sd``; ``clipped_fraction`` of
    channel values ≥ 250/255 in the measured area; ``calibration_de00`` the card's mean
    residual; ``colour_uncertainty_de00`` the combined colour uncertainty;
    ``turbidity_method`` ``"band-contrast"`` or ``"plain-veil"``;
    ``turbidity_standard`` the reading in the standards' unit through a fitted curve
    (None without a curve or outside its range), ``turbidity_standard_sd`` its standard
    uncertainty (the reading's sd through the curve's slope, with the curve's residual;
    :func:`tubevision.turbidity.standard_units_sd`).
    """

    lab: tuple[float, float, float]
    lab_sd: tuple[float, float, float]
    n_pixels: int
    turbidity: float
    turbidity_sd: float
    clipped_fraction: float
    lab_sem: tuple[float, float, float] = (0.0, 0.0, 0.0)
    calibration_de00: float = 0.0
    colour_uncertainty_de00: float = 0.0
    turbidity_raw: float = 0.0
    turbidity_method: str = "band-contrast"
    turbidity_standard: float | None = None
    turbidity_standard_unit: str | None = None
    turbidity_standard_sd: float | None = None


@dataclass(frozen=True)
class PelletMeasurement:
    """Settled solid at the bottom: ``height_mm`` (None without a scale or when absent)
    on the axis from the inside bottom; ``lab``/``lab_sd`` CIELAB D65 of the solid.
    ``light_solid_hidden`` (when none is found): the lowest rows, where a thin solid would
    sit, see only the light backdrop, so a white solid there could not be told apart from
    it (an opaque white layer reads like the liquid over white). ``dark_solid_hidden``
    likewise: those rows see only a dark band, where a black solid would not show.
    ``seen_over_light``/``seen_over_dark`` (when one is found): rows of it in front of a
    light (dark) band were confirmed as opaque there, so that band does not hide this solid
    (a yellow solid shows its colour over the light band; a white one does not)."""

    present: bool
    height_mm: float | None = None
    height_mm_sd: float | None = None
    lab: tuple[float, float, float] | None = None
    lab_sd: tuple[float, float, float] | None = None
    n_pixels: int = 0
    height_px: float = 0.0
    contrast_de00: float = 0.0
    light_solid_hidden: bool = False
    dark_solid_hidden: bool = False
    seen_over_light: bool = False
    seen_over_dark: bool = False


@dataclass(frozen=True)
class TubeMeasurement:
    """All measurements of one tube; ``features`` has the keys of :data:`FEATURE_NAMES`."""

    index: int
    empty: bool
    liquid: LiquidMeasurement | None
    pellet: PelletMeasurement
    features: dict[str, float]
    warnings: tuple[str, ...] = field(default_factory=tuple)


# --------------------------------------------------------------------------- helpers

_Y_WEIGHTS = np.asarray(M_SRGB_TO_XYZ[1], dtype=np.float32)


def _to_xyz(correction, rgb_linear: np.ndarray) -> np.ndarray:
    """Linear camera RGB (..., 3) to XYZ D65 through the card correction.

    Falls back on the plain sRGB assumption (IEC 61966-2-1) when ``correction`` is None
    or the card module is not installed."""
    if correction is not None:
        try:
            from .card.fit import apply_card_correction
        except ImportError:  # card stage not present in this checkout
            apply_card_correction = None
        if apply_card_correction is not None:
            return np.asarray(apply_card_correction(correction, rgb_linear), dtype=np.float64)
    return linear_srgb_to_xyz(np.asarray(rgb_linear, dtype=np.float64))


def _luminance(rgb_linear: np.ndarray) -> np.ndarray:
    """Relative luminance of linear sRGB (IEC 61966-2-1 matrix, row Y)."""
    return rgb_linear @ _Y_WEIGHTS


def _runs(mask: np.ndarray) -> list[tuple[int, int, bool]]:
    """Runs of equal values in a 1-D bool array as (start, stop, value)."""
    if mask.size == 0:
        return []
    edges = np.flatnonzero(np.diff(mask.astype(np.int8))) + 1
    starts = np.concatenate([[0], edges])
    stops = np.concatenate([edges, [mask.size]])
    return [(int(a), int(b), bool(mask[a])) for a, b in zip(starts, stops)]


def _validate(pixels, region, mm_per_px) -> None:
    if not isinstance(pixels, np.ndarray) or pixels.ndim != 3 or pixels.shape[2] != 3:
        shape = getattr(pixels, "shape", None)
        raise TubevisionInputError(f"pixels must be an (H, W, 3) RGB array, got shape {shape}")
    if pixels.dtype not in (np.uint8, np.uint16):
        raise TubevisionInputError(f"pixels must be uint8 or uint16 sRGB-encoded, got {pixels.dtype}")
    h, w = pixels.shape[:2]
    x0, y0, x1, y1 = region.bbox
    if not (0 <= x0 < x1 <= w and 0 <= y0 < y1 <= h):
        raise TubevisionInputError(f"tube {region.index + 1}: bbox {list(region.bbox)} is outside the {w}x{h} photo")
    if mm_per_px is not None and not (np.isfinite(mm_per_px) and mm_per_px > 0):
        raise TubevisionInputError(f"mm_per_px must be a positive number or None, got {mm_per_px}")


@dataclass(frozen=True)
class _Window:
    """Linear-light window around one tube and its beside strips (internal)."""

    lin: np.ndarray          # (rows, cols, 3) float32 linear
    clip: np.ndarray         # (rows, cols) bool, two or more channels near-clipped (glare-like)
    row0: int                # full-res row of lin[0]
    col0: int                # full-res col of lin[:, 0]
    side_cols: np.ndarray    # window columns of the beside strips


def _to_linear_fast(sub: np.ndarray) -> np.ndarray:
    """sRGB codes → float32 linear light: the same table as :func:`tubevision.image.to_linear`
    (IEC 61966-2-1), applied with OpenCV's table lookup for 8-bit windows (≈3× faster)."""
    if sub.dtype == np.uint8:
        import cv2

        from .image import _linear_lut

        return cv2.LUT(np.ascontiguousarray(sub), _linear_lut(np.uint8))
    return to_linear(sub)


def _window(pixels: np.ndarray, region) -> _Window:
    h, w = pixels.shape[:2]
    x0, y0, x1, y1 = region.bbox
    width = x1 - x0
    gap = max(1, int(round(width * SIDE_GAP_FRACTION)))
    strip = max(2, int(round(width * SIDE_STRIP_FRACTION)))
    c0 = max(0, x0 - gap - strip)
    c1 = min(w, x1 + gap + strip)
    sub = pixels[y0:y1, c0:c1]
    top = np.iinfo(pixels.dtype).max
    thr = sub.dtype.type(np.ceil(NEAR_CLIP_SRGB8 / 255.0 * top))
    c0_, c1_, c2_ = (sub[..., 0] >= thr), (sub[..., 1] >= thr), (sub[..., 2] >= thr)
    # glare clips all channels together; one clipped channel alone is a saturated colour
    # beyond the camera's range (a deep orange's red), which stays in and is warned about
    clip = (c0_ & c1_) | (c0_ & c2_) | (c1_ & c2_)
    step = max(1, strip // SIDE_STRIP_MAX_COLS)   # a few columns describe the backdrop (speed)
    left = np.arange(max(0, x0 - gap - strip), max(0, x0 - gap))[::step]
    right = np.arange(min(w, x1 + gap), min(w, x1 + gap + strip))[::step]
    side = np.concatenate([left, right]) - c0
    return _Window(lin=_to_linear_fast(sub), clip=clip, row0=y0, col0=c0, side_cols=side.astype(int))


def _occluder_rows(y_win: np.ndarray, region, win: _Window, classes=None) -> np.ndarray:
    """Rows where something in front hides the tube (rack bar, label, finger), any colour.

    The glass walls of a tube always show as lines in the photo: refraction at grazing
    incidence and reflection make the wall's outer edge darker or brighter than what lies
    beside it (geometric optics; visible over light and dark backdrop alike). An opaque
    object in front of the tube hides both walls, so across those rows the luminance
    profile over the wall zones is flat. A row is occluded when its strongest horizontal
    step within the wall zones, relative to the row's level, is below
    :data:`OCCLUDER_EDGE_FRACTION` × the median of that measure over the tube's column rows;
    the medians are taken per backdrop class (``classes``: light, dark, unclassified rows),
    since over a black band the walls may show only faintly. The result is widened by
    :data:`OCCLUDER_MARGIN_FRACTION` of the tube width for the
    object's own edges and shadow. The round bottom (rows from ``bottom_top``) is not
    judged: there the walls curve in and leave the wall zones.
    """
    x0, y0, x1, y1 = region.bbox
    width = x1 - x0
    n = y_win.shape[0]
    out = np.zeros(n, bool)
    zone = max(2, int(round(WALL_ZONE_FRACTION * width)))
    gap = max(1, int(round(width * SIDE_GAP_FRACTION)))
    a0 = max(0, x0 - gap - win.col0)
    cols = np.r_[a0:min(y_win.shape[1], x0 - win.col0 + zone),
                 max(0, x1 - zone - win.col0):min(y_win.shape[1], x1 + gap - win.col0)]
    if cols.size < 4:
        return out
    zy = y_win[:, cols]
    step = np.abs(np.diff(zy, axis=1))
    # the two wall zones are not adjacent: drop the step across their junction
    jump = np.flatnonzero(np.diff(cols) > 1)
    if jump.size:
        step[:, jump] = 0.0
    e = step.max(axis=1) / np.maximum(zy.mean(axis=1), 1e-4)
    judged = np.zeros(n, bool)
    judged[: max(0, min(n, region.bottom_top - y0))] = True
    if judged.sum() < 8:
        return out
    # compared within each backdrop class: over a black band the walls may show only faintly
    low = np.zeros(n, bool)
    classes = [judged & c for c in classes] if classes is not None else [judged]
    for sel in classes:
        if sel.sum() < 8:
            sel = judged
        ref = float(np.median(e[sel]))
        if ref > 1e-3:
            low |= sel & (e < OCCLUDER_EDGE_FRACTION * ref)
    # a run of at least a few rows (single noisy rows are not an object)
    runs = [(a, b) for a, b, v in _runs(low) if v and b - a >= OCCLUDER_MIN_ROWS]
    m = max(1, int(round(OCCLUDER_MARGIN_FRACTION * width)))
    for a, b in runs:
        out[max(0, a - m):min(n, b + m)] = True
    return out


def _lab_stats(correction, rgb: np.ndarray, n_eff: int):
    """Mean-XYZ Lab, pixel Lab sd and sem of linear RGB pixels (N, 3).

    Beyond :data:`LAB_STATS_MAX_PIXELS` pixels an evenly strided subset is used (speed): its
    mean differs from the full mean by ~sd/sqrt(that many), far below the sem over rows."""
    if len(rgb) > LAB_STATS_MAX_PIXELS:
        rgb = rgb[:: -(-len(rgb) // LAB_STATS_MAX_PIXELS)]
    xyz = _to_xyz(correction, rgb)
    lab_px = xyz_to_lab(np.clip(xyz, 0.0, None))
    lab = xyz_to_lab(np.clip(xyz.mean(axis=0), 0.0, None))
    sd = lab_px.std(axis=0, ddof=1) if len(rgb) > 1 else np.zeros(3)
    sem = sd / math.sqrt(max(1, n_eff))
    return lab, sd, sem


def _row_lab(correction, rgb_rows: np.ndarray) -> np.ndarray:
    """Lab of per-row linear RGB medians (R, 3)."""
    return xyz_to_lab(np.clip(_to_xyz(correction, rgb_rows), 0.0, None))


def _edge_width_px(y_rows: np.ndarray, col: int, half: int, row_step: int = 3) -> float:
    """Width of a vertical glass edge (px): step height / steepest slope of the row-median
    horizontal profile around column ``col`` (an ideal step gives 1; a Gaussian blur of
    sd σ gives σ·sqrt(2π) ≈ 2.5σ — geometry of the normal distribution)."""
    c0, c1 = max(0, col - half), min(y_rows.shape[1], col + half + 1)
    if c1 - c0 < 3:
        return float("nan")
    prof = np.median(y_rows[::row_step, c0:c1], axis=0)      # every third row: enough for a profile
    step = float(prof.max() - prof.min())
    slope = float(np.abs(np.diff(prof)).max())
    if step <= 1e-4 or slope <= 1e-9:
        return float("nan")
    return step / slope


# --------------------------------------------------------------------------- scale

def mm_per_px_at(homography_mm_to_px, point_px, direction=(0.0, 1.0)) -> float:
    """Scale (mm per px) at a photo point, along a photo direction, from the card's homography.

    The card lies in the scene plane of the rack's front (as the user is told to place it),
    so the homography from card mm to photo px also maps that plane near the tubes. Its
    local scale changes across the frame under perspective; the card's own ``mm_per_px``
    holds only at the card. Here the inverse homography maps ``point_px`` and a point one
    pixel away along ``direction`` (default: down the image, along an upright tube's axis)
    to the plane, and their distance in mm is the scale there (projective geometry:
    Hartley & Zisserman, Multiple View Geometry, 2nd ed., 2004, §2.3).

    Parameters
    ----------
    homography_mm_to_px : (3, 3) array — ``CardDetection.homography_mm_to_px``.
    point_px : (x, y) — e.g. the tube's axis at its inside bottom.
    direction : (dx, dy) — photo direction of the length measured; normalised here.

    Returns
    -------
    float — mm per px, > 0.

    Raises
    ------
    TubevisionInputError
        A singular homography or a point on its horizon line.

    Examples
    --------
    >>> round(mm_per_px_at(np.diag([4.0, 4.0, 1.0]), (100, 200)), 6)   # 4 px per mm
    0.25
    """
    h = np.asarray(homography_mm_to_px, dtype=float)
    if h.shape != (3, 3) or not np.isfinite(h).all() or abs(np.linalg.det(h)) < 1e-12:
        raise TubevisionInputError("card homography must be a finite, invertible 3x3 matrix")
    inv = np.linalg.inv(h)
    d = np.asarray(direction, dtype=float)
    d = d / max(float(np.hypot(*d)), 1e-12)
    pts = np.array([[point_px[0], point_px[1], 1.0],
                    [point_px[0] + d[0], point_px[1] + d[1], 1.0]]) @ inv.T
    if np.any(np.abs(pts[:, 2]) < 1e-12):
        raise TubevisionInputError("point lies on the card homography's horizon")
    mm = pts[:, :2] / pts[:, 2:3]
    scale = float(np.hypot(*(mm[1] - mm[0])))
    if not (np.isfinite(scale) and scale > 0):
        raise TubevisionInputError("card homography gives no scale at this point")
    return scale


# --------------------------------------------------------------------------- main

def _median_axis1(a: np.ndarray) -> np.ndarray:
    """``np.median(a, axis=1)`` for finite ``a`` by one partition (the same values: the middle
    element, or the mean of the two middle ones), without np.median's NaN bookkeeping."""
    n = a.shape[1]
    if n % 2:
        return np.partition(a, n // 2, axis=1)[:, n // 2]
    part = np.partition(a, [n // 2 - 1, n // 2], axis=1)
    return part[:, n // 2 - 1:n // 2 + 1].mean(axis=1)


def measure_tube(pixels: np.ndarray, region, *, correction=None, mm_per_px: float | None = None,
                 turbidity_curve=None) -> TubeMeasurement:
    """Measure colour, turbidity and settled solid of one tube.

    Parameters
    ----------
    pixels : ndarray of shape (H, W, 3), uint8 or uint16
        The full-resolution upright photo, sRGB-encoded (``Photo.pixels``).
    region : tubevision.tubes.TubeRegion
        Where the tube is (full-resolution px).
    correction : tubevision.card.fit.CardCorrection or None, keyword-only
        Card colour correction (``uncalibrated_correction()`` when there is no card);
        None means the plain sRGB assumption.
    mm_per_px : float or None, keyword-only
        Scale at the rack from the card (mm per px); None leaves heights in px only.
    turbidity_curve : tubevision.turbidity.TurbidityCurve or None, keyword-only
        Fitted standards curve; when given, the liquid's ``turbidity_standard`` is filled.

    Returns
    -------
    TubeMeasurement
        ``liquid`` is None for an empty tube (``region.liquid_top`` None, or no
        measurable liquid rows).

    Raises
    ------
    TubevisionInputError
        Pixels not (H, W, 3) uint8/uint16, bbox outside the photo, bad mm_per_px.
    """
    _validate(pixels, region, mm_per_px)
    warnings: list[str] = []
    tid = f"T{region.index + 1}"
    win = _window(pixels, region)
    x0, y0, x1, y1 = region.bbox
    width = x1 - x0
    y_win = _luminance(win.lin)                       # (rows, cols)
    n_rows = y_win.shape[0]

    if width < MIN_TUBE_WIDTH_PX:
        warnings.append(f"{tid}: tube only {width} px wide in the photo; move closer for reliable numbers")

    # backdrop beside the tube, row by row
    if win.side_cols.size:
        beside_rgb = _median_axis1(win.lin[:, win.side_cols])
        beside_y = _luminance(beside_rgb)
    else:
        beside_y = np.full(n_rows, np.nan)
        beside_rgb = np.full((n_rows, 3), np.nan)
    light_rows, dark_rows, banded, occluded = _classify_rows(beside_y)
    hidden_front = _occluder_rows(y_win, region, win,
                                  (light_rows, dark_rows, ~(light_rows | dark_rows)) if banded else None)
    occluded = occluded | hidden_front
    light_rows = light_rows & ~hidden_front
    dark_rows = dark_rows & ~hidden_front

    ic0, ic1 = region.inner_col0 - win.col0, region.inner_col1 - win.col0
    inner_y = y_win[:, ic0:ic1]
    inner_rgb = win.lin[:, ic0:ic1]
    inner_clip = win.clip[:, ic0:ic1]
    col_row_y = inner_y.mean(axis=1)

    # settled solid first: the column stops above it
    pellet, pellet_info = _find_pellet(win, region, correction, mm_per_px, light_rows, dark_rows,
                                       banded, beside_y, beside_rgb)

    empty = region.liquid_top is None
    top = (region.liquid_top if region.liquid_top is not None else y0) - y0
    menisc = int(round(MENISCUS_SKIP_FRACTION * width))
    bottom = region.liquid_bottom - y0
    if pellet.present:
        bottom = min(bottom, int(math.floor(region.inner_bottom - pellet.height_px
                                            - PELLET_MARGIN_FRACTION * width)) - y0)
    col_rows = np.zeros(n_rows, bool)
    col_rows[max(0, top + menisc):max(0, min(n_rows, bottom))] = True

    # rows hidden by something in front (rack bar) or in its shadow
    use_light = col_rows & light_rows & ~occluded
    if use_light.any():
        level = float(np.median(col_row_y[use_light]))
        hidden = col_row_y < OCCLUDED_ROW_FRACTION * level
        use_light &= ~hidden
    use_dark = col_rows & dark_rows & ~occluded

    # highlights and clipping within the measured rows
    meas = np.zeros_like(inner_clip)
    meas[use_light] = True
    med = float(np.median(col_row_y[use_light])) if use_light.any() else 0.0
    highlight = inner_clip | (inner_y > HIGHLIGHT_RATIO * med)
    n_meas = int(meas.sum())
    clipped_fraction = (float((pixels[y0:y1, win.col0 + ic0:win.col0 + ic1][meas]
                               >= np.ceil(NEAR_CLIP_SRGB8 / 255.0 * np.iinfo(pixels.dtype).max)).mean())
                        if n_meas else 0.0)
    highlight_fraction = float(highlight[meas].mean()) if n_meas else 0.0
    good = meas & ~highlight
    n_good = int(good.sum())

    cal_de = float(getattr(correction, "mean_de00", 0.0) or 0.0) if correction is not None else 0.0
    liquid = None
    col_lab = np.full(3, np.nan)
    lab_sd = np.zeros(3)
    tau = dict(value=0.0, raw=0.0, sd=0.0, ratio=1.0, method="none")
    if not empty and n_good >= 3:
        sel = good & _light_columns(inner_y, good)[None, :]
        rgb = inner_rgb[sel if sel.any() else good]
        n_eff = int(good.any(axis=1).sum())
        col_lab, lab_sd, lab_sem = _lab_stats(correction, rgb, n_eff)
        air = _air_ratio(win, inner_rgb, inner_clip, light_rows & ~occluded, beside_rgb, top - menisc)
        tau = _turbidity(inner_y, inner_rgb, good, use_light, use_dark, beside_y, beside_rgb, banded,
                         highlight, air)
        de_sem = float(np.linalg.norm(lab_sem))
        t_std, t_unit, t_std_sd = None, None, None
        if turbidity_curve is not None:
            from .turbidity import standard_units_sd, to_standard_units

            t_std, w = to_standard_units(turbidity_curve, tau["value"])
            t_unit = turbidity_curve.unit
            if t_std is not None and np.isfinite(tau["sd"]):
                t_std_sd = standard_units_sd(turbidity_curve, tau["value"], float(tau["sd"]))
            if w:
                warnings.append(f"{tid}: {w}")
        liquid = LiquidMeasurement(
            lab=tuple(float(v) for v in col_lab), lab_sd=tuple(float(v) for v in lab_sd),
            n_pixels=n_good, turbidity=float(tau["value"]), turbidity_sd=float(tau["sd"]),
            clipped_fraction=clipped_fraction, lab_sem=tuple(float(v) for v in lab_sem),
            calibration_de00=cal_de, colour_uncertainty_de00=float(math.hypot(de_sem, cal_de)),
            turbidity_raw=float(tau["raw"]), turbidity_method=tau["method"],
            turbidity_standard=t_std, turbidity_standard_unit=t_unit, turbidity_standard_sd=t_std_sd)
        if n_good < MIN_LIQUID_PIXELS:
            warnings.append(f"{tid}: too few pixels measured ({n_good} < {MIN_LIQUID_PIXELS}); "
                            "move closer or use a higher resolution")
        if tau["method"] == "plain-veil":
            warnings.append(f"{tid}: plain backdrop, turbidity read from brightness only (dark suspended "
                            "solid reads as clear); use the banded backdrop for a contrast reading")
    elif not empty:
        empty = True
        warnings.append(f"{tid}: no measurable liquid rows (hidden, glare or too small); reported empty")

    if clipped_fraction > CLIPPED_WARN_FRACTION:
        warnings.append(f"{tid}: {100 * clipped_fraction:.0f} % of the measured values are clipped "
                        "(glare, or a colour beyond the camera's range); lower the exposure")
    if highlight_fraction > GLARE_WARN_FRACTION:
        warnings.append(f"{tid}: glare covers most of the tube; move the light or the camera")

    edge = _tube_edge_width(y_win, region, win)
    if np.isfinite(edge) and edge > BLUR_MAX_EDGE_WIDTH_FRACTION * width:
        warnings.append(f"{tid}: the tube's edges look blurred (motion or focus); hold the camera still")

    features = _features(region, win, y_win, inner_y, inner_rgb, col_row_y, col_lab, lab_sd, good,
                         use_light, beside_y, beside_rgb, banded, tau, pellet, pellet_info,
                         clipped_fraction, highlight_fraction, n_good, edge, correction)
    return TubeMeasurement(index=region.index, empty=bool(empty), liquid=liquid, pellet=pellet,
                           features=features, warnings=tuple(warnings))


DARK_COLUMN_FRACTION = 0.85
"""Columns of the central third whose level is below this fraction of the brightest ones'
(90th percentile of the column medians) see a dark part of the backdrop through the glass —
vertical bands, or any dark pattern behind the tube, magnified by the liquid's cylinder lens
— and are left out of the colour (contract: the colour over the light backdrop). Over a
light backdrop the central third's columns differ by a few per cent only (its chord is
within 6 % of constant), so nothing is left out there (our threshold)."""


def _light_columns(inner_y: np.ndarray, good: np.ndarray) -> np.ndarray:
    """Which columns of the central third see the light backdrop (see DARK_COLUMN_FRACTION)."""
    ncol = inner_y.shape[1]
    keep = np.ones(ncol, bool)
    rows = good.any(axis=1)
    if rows.sum() < 3 or ncol < 3:
        return keep
    # column levels over the measured (non-highlight) pixels only: a specular streak runs
    # down a few columns and would otherwise lift them above the rest
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a column with no measured pixel
        level = np.nanmedian(np.where(good[rows], inner_y[rows], np.nan), axis=0)
    if not np.isfinite(level).any():
        return keep
    keep = np.isfinite(level) & (level >= DARK_COLUMN_FRACTION * float(np.nanpercentile(level, 90)))
    if keep.sum() < 2:
        return np.ones(ncol, bool)
    return keep


def _classify_rows(beside_y: np.ndarray):
    """Light/dark rows of the backdrop beside the tube, whether it is banded, and the
    rows taken by an occluder (dark runs much longer than a band)."""
    n = beside_y.size
    light = np.ones(n, bool)
    dark = np.zeros(n, bool)
    occluded = np.zeros(n, bool)
    if n == 0 or not np.isfinite(beside_y).all():
        return light, dark, False, occluded
    p5, p95 = np.percentile(beside_y, [5, 95])
    if p95 <= 0 or p95 / max(p5, 1e-6) < BAND_MIN_RATIO:
        # plain backdrop; a long dark stretch beside the tube is an occluder or shadow
        level = float(np.median(beside_y))
        occluded = beside_y < OCCLUDED_ROW_FRACTION * level
        return ~occluded, dark, False, occluded
    thr = math.sqrt(max(p5, 1e-6) * p95)
    is_light = beside_y > thr
    runs = _runs(is_light)
    dark_runs = [(a, b) for a, b, v in runs if not v]
    light_runs = [(a, b) for a, b, v in runs if v]
    banded = len(dark_runs) >= 2 and len(light_runs) >= 2
    if not banded:
        occluded = ~is_light
        return is_light.copy(), dark, False, occluded
    inner = [b - a for a, b in dark_runs if a > 0 and b < n] or [b - a for a, b in dark_runs]
    band_h = float(np.median(inner))
    for a, b in dark_runs:
        if b - a > OCCLUDER_RUN_FACTOR * band_h:
            occluded[a:b] = True
    skip = max(1, int(round(BAND_EDGE_SKIP_FRACTION * band_h)))
    light = is_light.copy()
    dark = ~is_light & ~occluded
    for a, b, v in runs:
        if a > 0:
            light[max(0, a - skip):min(n, a + skip)] = False
            dark[max(0, a - skip):min(n, a + skip)] = False
    dark &= ~occluded
    light &= ~occluded
    return light, dark, True, occluded


def _median_se(x: np.ndarray) -> float:
    """Standard error of a median: sqrt(π/2)·σ/sqrt(n), σ from the MAD (× 1.4826, the normal
    consistency factor). Asymptotic result for the sample median of normal data (e.g.
    Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, §10.10)."""
    x = np.asarray(x, float)
    if x.size < 2:
        return float("nan")
    sigma = 1.4826 * float(np.median(np.abs(x - np.median(x))))
    return math.sqrt(math.pi / 2.0) * sigma / math.sqrt(x.size)


def _log_michelson_var(light: np.ndarray, dark: np.ndarray) -> tuple[float, float]:
    """Michelson contrast of the medians and the variance of its natural log (delta method:
    ∂C/∂L = 2D/(L+D)², ∂C/∂D = −2L/(L+D)²; first-order error propagation, JCGM 100:2008 §5.1)."""
    lo, da = float(np.median(light)), float(np.median(dark))
    s = max(lo + da, 1e-9)
    c = (lo - da) / s
    sl, sd = _median_se(light), _median_se(dark)
    dc = math.hypot(2 * da / s ** 2 * sl, 2 * lo / s ** 2 * sd)
    return c, (dc / max(abs(c), 1e-4)) ** 2


def _air_ratio(win, inner_rgb, inner_clip, light_rows, beside_rgb, stop: int):
    """Per-channel ratio tube/backdrop above the liquid (glass walls only), or None."""
    rows = np.zeros(inner_rgb.shape[0], bool)
    rows[2:max(2, stop)] = True
    rows &= light_rows
    if rows.sum() < AIR_MIN_ROWS:
        return None
    px = inner_rgb[rows][~inner_clip[rows]]
    if px.shape[0] < AIR_MIN_ROWS:
        return None
    q = np.median(px, axis=0) / np.maximum(np.median(beside_rgb[rows], axis=0), 1e-6)
    return q if np.all(np.isfinite(q)) and np.all(q > 0.2) else None


def _masked_row_mean(values: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Per-row mean of ``values`` (R, C) or (R, C, 3) over ``ok`` (R, C); NaN for rows with none."""
    cnt = ok.sum(axis=1)
    if values.ndim == 3:
        tot = np.einsum("rc,rck->rk", ok.astype(values.dtype), values)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(cnt[:, None] > 0, tot / np.maximum(cnt, 1)[:, None], np.nan)
    tot = (values * ok).sum(axis=1)
    return np.where(cnt > 0, tot / np.maximum(cnt, 1), np.nan)


def _turbidity(inner_y, inner_rgb, good, use_light, use_dark, beside_y, beside_rgb, banded, highlight,
               air=None):
    """τ and its sd (module docstring). Rows are summarised by the mean of their pixels
    without highlights; τ uses the medians of those row values; its sd is propagated
    analytically from the medians' standard errors (:func:`_median_se`)."""
    ok = ~highlight
    row_y = _masked_row_mean(inner_y, ok)
    fin = np.isfinite(row_y)
    if banded and (use_dark & fin).sum() >= 3 and (use_light & fin).sum() >= 3:
        lsel, dsel = use_light & fin, use_dark & fin
        ct, vt = _log_michelson_var(row_y[lsel], row_y[dsel])
        cb, vb = _log_michelson_var(beside_y[lsel], beside_y[dsel])
        if cb <= 0:
            return dict(value=0.0, raw=0.0, sd=float("nan"), ratio=1.0, method="band-contrast")
        raw = -math.log(max(ct, 1e-4) / cb)
        sd = max(TURBIDITY_SD_FLOOR, math.sqrt(vt + vb))
        return dict(value=max(0.0, raw), raw=raw, sd=sd, ratio=math.exp(-raw), method="band-contrast")
    rows = use_light & fin
    if rows.sum() < 3:
        return dict(value=0.0, raw=0.0, sd=float("nan"), ratio=1.0, method="plain-veil")
    row_rgb = _masked_row_mean(inner_rgb[rows], ok[rows])
    b_rgb = beside_rgb[rows]
    q_clear = np.asarray(air) if air is not None else np.full(3, Q_CLEAR_PLAIN)
    q_rows = row_rgb / np.maximum(b_rgb, 1e-6) / q_clear        # (n, 3)
    q = np.median(q_rows, axis=0)
    c = int(np.argmax(q))
    raw = math.log(max(float(q[c]), 1e-6))
    sd = max(TURBIDITY_SD_FLOOR, _median_se(q_rows[:, c]) / max(float(q[c]), 1e-6))
    return dict(value=max(0.0, raw), raw=raw, sd=sd, ratio=1.0, method="plain-veil")


def _reach_extremes(v: np.ndarray, shift: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least and most of ``v`` (n[, C]) over the rows within each of ``rows``' registration
    reach (``shift[row]`` rows either way, clipped to the ends): the backdrop a row of the
    view through the tube may stand in front of."""
    n = v.shape[0]
    reach = shift[rows]
    lo, hi = v[rows].copy(), v[rows].copy()
    for s_ in range(1, int(reach.max(initial=0)) + 1):
        ok = s_ <= reach
        if v.ndim > 1:
            ok = ok[:, None]
        for j in (np.clip(rows - s_, 0, n - 1), np.clip(rows + s_, 0, n - 1)):
            lo = np.where(ok, np.minimum(lo, v[j]), lo)
            hi = np.where(ok, np.maximum(hi, v[j]), hi)
    return lo, hi


def _opacity_dev(ln_i, ln_b, model, k_lo, k_hi, shift) -> np.ndarray:
    """Per row, how far the light seen through the tube is from any liquid-like reading.

    ``ln_i`` (n, C) log of the light through the tube, ``ln_b`` (n, C) log of the backdrop
    beside it, ``model`` = (T, S) per channel, the liquid's full-chord transmittance and veil
    (I = T·B + S). Over a chord shorter by k (in [k_lo, k_hi]) a liquid row reads
    I = B·T^k + S·g with g anywhere between k (thin veil, growing with the path) and 1
    (saturated veil): Beer–Lambert for T, the two limits of a scattering layer for S. Returned: the smallest max-channel
    |difference| (channels weighted by :data:`PELLET_CHANNEL_WEIGHTS`) over k (a grid of
    :data:`PELLET_K_STEPS`) and over the backdrop behind the row: the view through the tube
    and the strip beside it may be out of register by up to ``shift`` rows (per row) at band
    edges (lean, parallax, the tube's own lens), by any fraction of a row, so the backdrop
    behind a row near an edge is taken as anywhere between the least and the most of the
    beside readings within that reach (I grows with B, so the liquid's readings then span
    [I(B_min) thin, I(B_max) saturated]). Whole-row registrations alone miss the readings
    half-way down an edge: clear water read one opaque row per light-to-dark edge, and a
    water blank showed a 1 mm "solid" where one such row sat just above the glass bottom.
    Absorbances are capped at :data:`PELLET_MAX_ABSORBANCE`: below ~5 % transmission a
    camera's flare, noise and tone curve leave no reliable reading (common practice).
    """
    n, nc = ln_i.shape
    kk = k_lo[:, None] + (k_hi - k_lo)[:, None] * np.linspace(0.0, 1.0, PELLET_K_STEPS)[None, :]   # (n, K)
    shift = np.broadcast_to(np.asarray(shift, dtype=int), (n,))
    w = PELLET_CHANNEL_WEIGHTS[:nc]

    t_c, s_c = model
    ln_t = np.log(np.maximum(np.asarray(t_c, float), 1e-6))

    def dev_at(rows_i, lb_lo, lb_hi):
        # predicted light through the liquid over the chord ratio k, given a backdrop between
        # exp(lb_lo) and exp(lb_hi): I = B·T^k + S·g, the veil g between k (thin) and 1
        # (saturated); the least with the darkest backdrop, the most with the lightest
        k = kk[rows_i]                                                     # (m, K)
        t_k = np.exp(k[:, :, None] * ln_t[None, None, :])                  # (m, K, C)
        floor = (lb_lo - PELLET_MAX_ABSORBANCE)[:, None, :]
        lo = np.maximum(np.log(np.maximum(np.exp(lb_lo)[:, None, :] * t_k + s_c * k[:, :, None], 1e-6)),
                        floor)                                                                # thin veil
        hi = np.maximum(np.log(np.maximum(np.exp(lb_hi)[:, None, :] * t_k + s_c[None, None, :], 1e-6)),
                        (lb_hi - PELLET_MAX_ABSORBANCE)[:, None, :])                         # saturated
        obs = np.maximum(ln_i[rows_i][:, None, :], floor)                  # darker reads as the cap
        d = np.maximum(np.maximum(lo - obs, obs - hi), 0.0)                # outside [thin, saturated]
        return (d * w).max(axis=2).min(axis=1)

    idx = np.arange(n)
    best = dev_at(idx, ln_b, ln_b)
    # other registrations matter only near a band edge (the backdrop changes within reach)
    m = int(shift.max())
    if m > 0 and n > 1:
        from scipy.ndimage import maximum_filter1d, minimum_filter1d

        y = ln_b[:, -1]
        span = maximum_filter1d(y, 2 * m + 1, mode="nearest") - minimum_filter1d(y, 2 * m + 1, mode="nearest")
        near = np.flatnonzero(span > 0.5 * PELLET_MIN_OPACITY)
        if near.size:
            lb_lo, lb_hi = _reach_extremes(ln_b, shift, near)
            best[near] = np.minimum(best[near], dev_at(near, lb_lo, lb_hi))
    return best


def _band_texture(i_y, b_y, cls_light, cls_dark, t_y, s_y, banded: bool, stop: int) -> np.ndarray:
    """Rows below which the view through the tube shows band texture (light and dark).

    For each row, the range of ln(luminance) through the tube over the next band height of
    rows (down to ``stop``) is compared with the contrast the liquid would show between the
    backdrop's light and dark bands (model I = T·B + S with the liquid's ``t_y``, ``s_y``):
    at least half of it, and at least :data:`PELLET_TEXTURE_MIN` (so that sensor noise over a
    flat surface never counts), is texture. Always False on a plain backdrop (nothing to
    image). A window looking downward keeps the top rows of a solid flat.
    """
    n = i_y.size
    out = np.zeros(n, bool)
    if not banded or cls_light.sum() < 2 or cls_dark.sum() < 2 or stop < 3:
        return out
    bl, bd = float(np.median(b_y[cls_light])), float(np.median(b_y[cls_dark]))
    contrast = abs(math.log(max(t_y * bl + s_y, 1e-4)) - math.log(max(t_y * bd + s_y, 1e-4)))
    thr = max(PELLET_TEXTURE_MIN, 0.5 * contrast)
    # band height: median length of the interior runs of light or dark beside rows
    runs = [b - a for a, b, v in _runs(cls_light | ~cls_dark) if a > 0 and b < n]
    band = int(np.median(runs)) if runs else 8
    wdw = max(3, band)
    ly = np.log(np.maximum(i_y[:stop], 1e-4))
    if ly.size < wdw:
        return out
    from numpy.lib.stride_tricks import sliding_window_view

    win = sliding_window_view(np.concatenate([ly, np.full(wdw - 1, np.nan)]), wdw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        rng_ = np.nanmax(win, axis=1) - np.nanmin(win, axis=1)
    out[:stop] = rng_ >= thr
    return out


HIDDEN_SOLID_ZONE_MM = 1.5
"""Height (mm) above the lowest judged row within which a dark backdrop row must be seen
for a thin white solid to show (our choice: the issue's smallest solid is 1 mm). Without a
card scale, :data:`HIDDEN_SOLID_ZONE_FRACTION` of the tube's width stands in."""
HIDDEN_SOLID_ZONE_FRACTION = 0.1
"""The zone of :data:`HIDDEN_SOLID_ZONE_MM` as a fraction of the tube's outer width (1.6 mm
for a 16 mm tube)."""


def _no_solid(cls_light: np.ndarray, cls_dark: np.ndarray, last_judged: int, width: float, mm_per_px,
              banded: bool):
    """No solid found; say whether a white one could hide against a light band, or a black
    one against a dark band (see :class:`PelletMeasurement`): common practice is to look at
    a white precipitate against a dark background and a dark one against a light one.

    A solid shows only over rows where the backdrop is plainly the other shade: a white one
    over dark-band rows (``cls_dark``), a black one over light-band rows (``cls_light``;
    every row of a plain backdrop); :func:`_rows_that_show` gives them. Rows near a band
    edge are neither: there the backdrop beside the tube changes within the few rows by
    which the view through the tube may be out of register with it
    (:data:`PELLET_ROW_SHIFT_FRACTION`, the round bottom's lens), so a solid there can always
    be read as the liquid over the other band; rows hidden by something in front are neither
    either. So each flag is raised when the zone holds no row that would show that solid:
    the same test both ways."""
    zone = (HIDDEN_SOLID_ZONE_MM / mm_per_px if mm_per_px else HIDDEN_SOLID_ZONE_FRACTION * width)
    lo = max(0, int(last_judged - max(2, round(zone))))
    sel = slice(lo, max(lo + 1, last_judged))
    dark_seen = bool(banded and cls_dark[sel].any())
    light_seen = bool(cls_light[sel].any()) if banded else True
    return PelletMeasurement(present=False, light_solid_hidden=not dark_seen,
                             dark_solid_hidden=bool(banded and not light_seen))


def _rows_that_show(b_y: np.ndarray, cls_light: np.ndarray, cls_dark: np.ndarray, shift: np.ndarray,
                    banded: bool) -> tuple[np.ndarray, np.ndarray]:
    """Rows where a black solid could show (light-band rows) and where a white one could
    (dark-band rows), for :func:`_no_solid`: a row counts only when the backdrop beside the
    tube stays on its side of the light/dark threshold (the geometric mean of the two band
    levels, as :func:`_classify_rows` divides them) over every row within the registration
    reach ``shift`` (per row, as :func:`_opacity_dev` allows it): otherwise the opacity
    test can always read a solid there as the liquid over the other band. On narrow bands
    (few pixels per band: a small or distant rack) that reach exceeds the band-edge margin
    of :func:`_classify_rows`, and a light row next to a dark band showed nothing."""
    if not banded or cls_light.sum() < 1 or cls_dark.sum() < 1:
        return cls_light, cls_dark
    thr = math.sqrt(max(float(np.median(b_y[cls_light])), 1e-6) * max(float(np.median(b_y[cls_dark])), 1e-6))
    lo, hi = _reach_extremes(b_y, shift, np.arange(b_y.size))
    return cls_light & (lo > thr), cls_dark & (hi < thr)


def _find_pellet(win: _Window, region, correction, mm_per_px, light_rows, dark_rows, banded, beside_y,
                 beside_rgb):
    """Settled solid at the bottom (module docstring). Returns (PelletMeasurement, info)."""
    x0, y0, x1, y1 = region.bbox
    width = x1 - x0
    info = dict(contrast=0.0, band_follow=0.0, bottom_de=0.0, lab=np.zeros(3), height_px=0.0)
    none = PelletMeasurement(present=False)
    ax = int(round(region.axis_col)) - win.col0
    half = max(1, int(round(PELLET_AXIS_HALF_FRACTION * width)))
    a0, a1 = max(0, ax - half), min(win.lin.shape[1], ax + half + 1)
    ib = min(region.inner_bottom - y0, win.lin.shape[0] - 1)
    top = (region.liquid_top if region.liquid_top is not None else y0) - y0
    # rows read: the reference liquid and where a solid can reach, nothing higher (speed)
    top = max(top, region.bottom_top - y0 - int(round(max(PELLET_REF_SPAN_FRACTION,
                                                             PELLET_MAX_HEIGHT_FRACTION) * width)) - 1)
    if ib - top < 6 or a1 <= a0:
        return none, info
    cstep = max(1, (a1 - a0) // PELLET_STRIP_MAX_COLS)    # a few columns suffice (speed)
    strip = win.lin[top:ib + 1, a0:a1:cstep]
    row_rgb = np.median(strip, axis=1)                    # rows top..ib (robust to the rim)
    lab_rows = _row_lab(correction, row_rgb)
    rows = np.arange(top, ib + 1)
    # the liquid above the bottom region, per backdrop class
    bt = region.bottom_top - y0
    ref_sel = (rows < bt - int(round(PELLET_REF_GAP_FRACTION * width))) & \
        (rows >= bt - int(round(PELLET_REF_SPAN_FRACTION * width)))
    if ref_sel.sum() < 3:
        ref_sel = rows < bt
    if ref_sel.sum() < 2:
        return none, info
    cls_light, cls_dark = light_rows[rows], dark_rows[rows]
    ref_light_sel = ref_sel & cls_light
    ref_dark_sel = ref_sel & cls_dark
    use_l = ref_light_sel if ref_light_sel.sum() >= 2 else ref_sel
    ref_light = np.median(lab_rows[use_l], axis=0)
    have_dark = banded and ref_dark_sel.sum() >= 2
    ref_dark = np.median(lab_rows[ref_dark_sel], axis=0) if have_dark else ref_light
    ref = np.where(cls_dark[:, None], ref_dark, ref_light)
    de = delta_e00(lab_rows, ref)
    # opacity: each row's apparent absorbance against the backdrop beside it, compared
    # with what the liquid above would show there. The liquid is modelled per channel as
    # I = T·B + S (module docstring) from its light and dark reference rows, so the
    # prediction holds for any backdrop level B, band edges included; over the round
    # bottom's shorter chord its absorbance scales by k (Beer–Lambert).
    # Channels: R, G, B and luminance Y; see PELLET_CHANNEL_WEIGHTS.
    i4 = np.concatenate([row_rgb, (row_rgb @ _Y_WEIGHTS)[:, None]], axis=1)
    b_rgb4 = beside_rgb[rows]
    b_rows = np.maximum(np.concatenate([b_rgb4, (b_rgb4 @ _Y_WEIGHTS)[:, None]], axis=1), 1e-4)
    # a flare floor: differences between two near-black readings mean nothing
    flare = PELLET_FLARE_FRACTION * float(np.median(b_rows[use_l, 3]))
    i4 = i4 + flare
    b_rows = b_rows + flare
    i_l, b_l = np.median(i4[use_l], axis=0), np.median(b_rows[use_l], axis=0)
    if have_dark:
        i_d, b_d = np.median(i4[ref_dark_sel], axis=0), np.median(b_rows[ref_dark_sel], axis=0)
        t_c = np.clip((i_l - i_d) / np.maximum(b_l - b_d, 1e-4), 1e-4, None)
        s_c = np.clip(i_l - t_c * b_l, 0.0, None)
    else:
        t_c, s_c = i_l / np.maximum(b_l, 1e-4), np.zeros(4)
    a_ref = -np.log(np.maximum(t_c * b_rows + s_c, 1e-4) / b_rows)              # (n, 4)
    r_in = max(1.0, float(region.inner_bottom - region.bottom_top))
    h = (region.inner_bottom - y0) + 0.5 - rows
    k_geo = np.sqrt(np.clip(1.0 - (1.0 - np.clip(h / r_in, 0.0, 1.0)) ** 2, 0.0, 1.0))
    k_lo = PELLET_CHORD_TOLERANCE[0] * k_geo
    k_hi = np.minimum(1.0, PELLET_CHORD_TOLERANCE[1] * k_geo)
    # rows through the round bottom see the backdrop through a lens curved both ways, so
    # the band edges behind may appear several rows off there
    shift = np.where(rows >= bt, max(1, int(round(PELLET_BOTTOM_SHIFT_FRACTION * width))),
                     max(1, int(round(PELLET_ROW_SHIFT_FRACTION * width))))
    ln_b = np.log(b_rows)
    # only rows where a settled solid can reach are judged (speed); above them is liquid
    low = rows >= bt - int(round(PELLET_MAX_HEIGHT_FRACTION * width))
    dev = np.zeros(rows.size)
    dev[low] = _opacity_dev(np.log(np.maximum(i4[low], 1e-4)), ln_b[low], (t_c, s_c),
                            k_lo[low], k_hi[low], shift[low])
    fin = np.isfinite(dev)
    dev = np.where(fin, dev, 0.0)
    # bottom-region difference, whatever is there
    bsel = rows >= bt
    info["bottom_de"] = float(np.median(de[bsel])) if bsel.any() else 0.0
    # one run from the bottom upward
    skip = max(1, int(round(PELLET_BOTTOM_SKIP_FRACTION * width)))
    is_solid = (dev >= PELLET_MIN_OPACITY) & fin
    shows = _rows_that_show(b_rows[:, 3], cls_light, cls_dark, shift, banded)
    unknown = ~fin
    # the lowest rows show the glass bottom's dark edge (refraction at grazing angles,
    # blur): they can neither confirm nor end a solid
    is_solid[rows.size - skip:] = False
    unknown[rows.size - skip:] = True
    # the round bottom is a lens curved both ways: through liquid it shows the bands behind
    # displaced, inverted or rescaled, so a row there need not match the backdrop beside it.
    # What a liquid does show there is band texture; an opaque layer is flat.
    textured = _band_texture(i4[:, 3], b_rows[:, 3], cls_light, cls_dark, t_c[3], s_c[3], banded,
                             rows.size - skip)
    in_bottom = rows >= bt
    is_solid &= ~(textured & in_bottom)
    if is_solid.any():
        # rows where this solid would look like the liquid (a white solid over the light
        # bands, a dark one over the dark bands) can neither confirm nor end it
        # the solid's own reading: from rows away from band edges where there are such;
        # at band edges blur mixes it with the liquid, so there take its extreme reading
        # on the side away from the liquid (darker or lighter than the liquid would be)
        ly = np.log(b_rows[:, 3])
        m_ = max(1, int(np.max(shift)))
        from scipy.ndimage import maximum_filter1d, minimum_filter1d

        stable = (maximum_filter1d(ly, 2 * m_ + 1, mode="nearest")
                  - minimum_filter1d(ly, 2 * m_ + 1, mode="nearest")) < 0.5 * PELLET_MIN_OPACITY
        if (is_solid & stable).sum() >= 2:
            s_read = np.median(i4[is_solid & stable], axis=0)
        else:
            liq_y = ly - np.minimum(k_geo * a_ref[:, 3], PELLET_MAX_ABSORBANCE)
            darker = float(np.median(np.log(i4[is_solid, 3]) - liq_y[is_solid])) < 0
            s_read = i4[is_solid].min(axis=0) if darker else i4[is_solid].max(axis=0)
        ln_s = np.log(np.maximum(s_read, 1e-4))
        dev_s = np.full(rows.size, np.inf)
        dev_s[low] = _opacity_dev(np.broadcast_to(ln_s, (int(low.sum()), 4)), ln_b[low], (t_c, s_c),
                                  k_lo[low], k_hi[low], shift[low])
        # ... and rows that read nearer the solid's own reading than anything the liquid
        # gives (a black solid over a dark band, just under the opacity threshold there) are
        # the solid's as much as the liquid's: they do not end it either
        d_solid = (np.abs(np.log(np.maximum(i4, 1e-4)) - ln_s) * PELLET_CHANNEL_WEIGHTS).max(axis=1)
        unknown |= ~is_solid & ((dev_s < PELLET_MIN_OPACITY) | (low & (d_solid < dev)))
    unknown &= ~(textured & in_bottom)          # band texture seen: liquid, the walk ends there
    allowed = is_solid | unknown
    last = len(rows) - 1
    j = last
    while j >= 0 and (allowed[j] or (j - 1 >= 0 and allowed[j - 1] and is_solid[j - 1])):
        j -= 1
    walked = np.arange(j + 1, last + 1)
    solid_idx = walked[is_solid[walked]]
    if solid_idx.size == 0:
        return _no_solid(*shows, rows.size - skip, width, mm_per_px, banded), info
    top_j = int(solid_idx.min())
    start = int(solid_idx.max())
    run = slice(top_j, start + 1)
    # sub-row edge: where the opacity measure crosses half-way between solid and liquid
    solid_level = float(np.median(dev[run][is_solid[run]]))
    above = dev[max(0, top_j - max(3, skip * 2)):top_j]
    liquid_level = float(np.median(above)) if above.size else 0.0
    half_level = 0.5 * (solid_level + liquid_level)
    edge_row = float(rows[top_j]) - 0.5
    unknown_above = top_j - (j + 1)          # undecidable rows between the solid and the stop
    edge_spread = float(unknown_above)
    if unknown_above > 0:
        # the top lies somewhere in those rows, where solid and liquid look alike; a weak
        # difference in luminance may still show a step: fit one (least disagreements)
        span = np.arange(j + 1, top_j + 1)
        ky = np.minimum(k_geo[span] * a_ref[span, 3], PELLET_MAX_ABSORBANCE)
        liq = np.log(b_rows[span, 3]) - ky
        sol = math.log(max(float(np.median(i4[run, 3][is_solid[run]])), 1e-4))
        contrast = sol - liq
        step_at = None
        if float(np.median(np.abs(contrast))) >= PELLET_WEAK_EDGE_MIN:
            z = (np.log(np.maximum(i4[span, 3], 1e-4)) - liq) / np.where(np.abs(contrast) > 1e-6, contrast, 1e-6)
            like = z >= 0.5
            # rows 0..e-1 liquid-like, e..end solid-like: disagreements for each e
            above_bad = np.concatenate([[0], np.cumsum(like)])
            below_bad = np.concatenate([np.cumsum((~like)[::-1])[::-1], [0]])
            bad = above_bad + below_bad
            e = int(np.argmin(bad))
            if bad[e] <= PELLET_WEAK_EDGE_MAX_BAD * span.size:
                step_at = e
        if step_at is not None and step_at < span.size:
            edge_row = float(rows[span[step_at]]) - 0.5
            edge_spread = 1.0
        else:
            # no step to see: take the middle, sd = span / sqrt(12)
            edge_row -= unknown_above / 2.0
    elif top_j >= 1 and dev[top_j] != dev[top_j - 1]:
        # linear interpolation between the last liquid row and the first solid row
        f = (half_level - dev[top_j - 1]) / (dev[top_j] - dev[top_j - 1])
        edge_row = float(rows[top_j - 1]) + float(np.clip(f, 0.0, 1.0))
    height_px = (region.inner_bottom - y0) + 0.5 - edge_row
    # distinct: the solid's colour differs from the liquid's over light (or dark) band rows
    lab_s = _row_lab(correction, np.median(row_rgb[run][is_solid[run]], axis=0)[None])[0]
    contrast = float(delta_e00(lab_s, ref_light))
    if have_dark:
        contrast = max(contrast, float(delta_e00(lab_s, ref_dark)))
    follow = 0.0
    if banded:
        # opacity against the bands: how much of the band pattern behind still shows through
        # the solid rows, as a fraction of what the liquid above transmits of it
        yr = row_rgb @ _Y_WEIGHTS
        sr = np.zeros(rows.size, bool)
        sr[run] = is_solid[run]
        ls, ds = sr & cls_light, sr & cls_dark
        lr_, dr_ = ref_light_sel, ref_dark_sel
        if ls.sum() >= 2 and ds.sum() >= 2 and lr_.sum() >= 2 and dr_.sum() >= 2:
            bl, bd = np.median(beside_y[rows[ls]]), np.median(beside_y[rows[ds]])
            t_liq = (np.median(yr[lr_]) - np.median(yr[dr_])) / max(
                float(np.median(beside_y[rows[lr_]]) - np.median(beside_y[rows[dr_]])), 1e-6)
            t_sol = (np.median(yr[ls]) - np.median(yr[ds])) / max(float(bl - bd), 1e-6)
            if t_liq > PELLET_MIN_LIQUID_TRANSMISSION:
                follow = float(t_sol / t_liq)
    info.update(contrast=contrast, band_follow=follow, height_px=height_px)
    min_px = PELLET_MIN_HEIGHT_PX if mm_per_px is None else max(PELLET_MIN_HEIGHT_PX - 1,
                                                                PELLET_MIN_HEIGHT_MM / mm_per_px)
    if height_px < min_px or contrast < PELLET_MIN_CONTRAST_DE00 or follow > PELLET_MAX_BAND_FOLLOW:
        return _no_solid(*shows, rows.size - skip, width, mm_per_px, banded), info
    # colour of the solid: the axis strip over the run, highlights out
    srows = rows[run][is_solid[run]]
    px = win.lin[srows, a0:a1].reshape(-1, 3)
    cl = win.clip[srows, a0:a1].reshape(-1)
    if (~cl).sum() >= 3:
        px = px[~cl]
    lab, sd, _ = _lab_stats(correction, px, int(srows.size))
    info["lab"] = lab
    # edge sd: quantisation (1/sqrt(12) px) ⊕ edge spread ⊕ inner-bottom position
    edge_sd = max(1.0, edge_spread) / math.sqrt(12.0)
    sd_px = math.sqrt(edge_sd ** 2 + INNER_BOTTOM_SD_PX ** 2)
    # rows are counted vertically; a tube leaning by θ has its axis 1/cos θ longer
    lean = 1.0 / max(math.cos(math.radians(float(getattr(region, "axis_angle_deg", 0.0) or 0.0))), 0.5)
    height_mm = None if mm_per_px is None else float(height_px * lean * mm_per_px)
    height_sd = None if mm_per_px is None else float(sd_px * lean * mm_per_px)
    return PelletMeasurement(present=True, height_mm=height_mm, height_mm_sd=height_sd,
                             lab=tuple(float(v) for v in lab), lab_sd=tuple(float(v) for v in sd),
                             n_pixels=int(px.shape[0]), height_px=float(height_px),
                             contrast_de00=contrast,
                             seen_over_light=bool((is_solid[run] & shows[0][run]).any()),
                             seen_over_dark=bool((is_solid[run] & shows[1][run]).any())), info


def _tube_edge_width(y_win, region, win) -> float:
    """Mean width (px) of the tube's two outer glass edges over its light rows."""
    x0, _, x1, _ = region.bbox
    width = x1 - x0
    half = max(2, int(round(0.12 * width)))
    vals = [_edge_width_px(y_win, c - win.col0, half) for c in (x0, x1 - 1)]
    vals = [v for v in vals if np.isfinite(v)]
    return float(np.mean(vals)) if vals else float("nan")


def _features(region, win, y_win, inner_y, inner_rgb, col_row_y, col_lab, lab_sd, good, use_light,
              beside_y, beside_rgb, banded, tau, pellet, pinfo, clipped_fraction, highlight_fraction,
              n_good, edge, correction) -> dict[str, float]:
    x0, y0, x1, y1 = region.bbox
    width = x1 - x0
    rows_sel = good.any(axis=1)
    if not np.isfinite(col_lab).all():
        # empty or unmeasurable: read the inside of the glass above the bottom
        sel = np.zeros(inner_y.shape[0], bool)
        sel[: max(1, region.bottom_top - y0)] = True
        rgb = inner_rgb[sel].reshape(-1, 3)
        col_lab, lab_sd, _ = _lab_stats(correction, rgb, int(sel.sum()))
        rows_sel = sel
    f: dict[str, float] = {}
    f["col_L"], f["col_a"], f["col_b"] = (float(v) for v in col_lab)
    f["col_chroma"] = float(math.hypot(col_lab[1], col_lab[2]))
    f["col_L_sd"], f["col_a_sd"], f["col_b_sd"] = (float(v) for v in lab_sd)
    idx = np.flatnonzero(rows_sel)
    if idx.size >= 4:
        mid = idx.size // 2
        up = _row_lab(correction, inner_rgb[idx[:mid]].reshape(-1, 3).mean(axis=0)[None])[0]
        lo = _row_lab(correction, inner_rgb[idx[mid:]].reshape(-1, 3).mean(axis=0)[None])[0]
        f["col_L_top_minus_bottom"] = float(up[0] - lo[0])
        ry = col_row_y[idx]
        f["col_row_cv"] = float(ry.std() / max(ry.mean(), 1e-6))
        g = np.abs(np.diff(inner_y[idx], axis=0)).mean()
        f["col_gradient"] = float(g / max(inner_y[idx].mean(), 1e-6))
    else:
        f["col_L_top_minus_bottom"] = f["col_row_cv"] = f["col_gradient"] = 0.0
    if idx.size and np.isfinite(beside_y[idx]).all():
        f["transmission_ratio"] = float(np.median(col_row_y[idx]) / max(np.median(beside_y[idx]), 1e-6))
        b_lab = _row_lab(correction, np.median(beside_rgb[idx], axis=0)[None])[0]
        f["col_backdrop_de00"] = float(delta_e00(col_lab, b_lab))
    else:
        f["transmission_ratio"], f["col_backdrop_de00"] = 1.0, 0.0
    f["turbidity"] = float(tau["value"])
    f["turbidity_raw"] = float(tau["raw"])
    f["turbidity_sd"] = float(tau["sd"]) if np.isfinite(tau["sd"]) else 0.0
    f["band_contrast_ratio"] = float(tau["ratio"]) if tau["method"] == "band-contrast" else 1.0
    f["backdrop_banded"] = 1.0 if banded else 0.0
    # meniscus: how much darker the rows around liquid_top are than the column below
    if region.liquid_top is not None and idx.size:
        lt = region.liquid_top - y0
        k = max(2, int(round(0.15 * width)))
        band = col_row_y[max(0, lt - k):min(len(col_row_y), lt + k)]
        band_light = band[use_light[max(0, lt - k):min(len(col_row_y), lt + k)] |
                          ~banded] if band.size else band
        ref = float(np.median(col_row_y[idx]))
        low = float(band_light.min()) if band_light.size else ref
        f["meniscus_strength"] = float(max(0.0, 1.0 - low / max(ref, 1e-6)))
        above = inner_rgb[:max(0, lt - k)]
        if above.shape[0] >= 2:
            a_lab = _row_lab(correction, np.median(above[::3].reshape(-1, 3), axis=0)[None])[0]
            f["above_liquid_de00"] = float(delta_e00(col_lab, a_lab))
        else:
            f["above_liquid_de00"] = 0.0
    else:
        f["meniscus_strength"] = 0.0
        f["above_liquid_de00"] = 0.0
    f["pellet_present"] = 1.0 if pellet.present else 0.0
    f["pellet_height_mm"] = float(pellet.height_mm) if pellet.present and pellet.height_mm is not None else 0.0
    f["pellet_height_rel"] = float(pinfo["height_px"] / width) if pellet.present else 0.0
    f["pellet_contrast_de00"] = float(pinfo["contrast"])
    plab = np.asarray(pellet.lab) if pellet.present else np.zeros(3)
    f["pellet_L"] = float(plab[0])
    f["pellet_chroma"] = float(math.hypot(plab[1], plab[2]))
    f["pellet_band_follow"] = float(pinfo["band_follow"]) if np.isfinite(pinfo["band_follow"]) else 0.0
    f["bottom_de00"] = float(pinfo["bottom_de"])
    f["clipped_fraction"] = float(clipped_fraction)
    f["highlight_fraction"] = float(highlight_fraction)
    f["n_pixels_log10"] = float(math.log10(1 + n_good))
    f["edge_width_rel"] = float(edge / width) if np.isfinite(edge) else 0.0
    out = {name: (float(f[name]) if np.isfinite(f[name]) else 0.0) for name in FEATURE_NAMES}
    return out


# --------------------------------------------------------------------------- photo level

def photo_quality(pixels: np.ndarray, regions) -> tuple[str, ...]:
    """Photo-level quality warnings that affect the measurements.

    Checks, over the tube boxes only (no full-frame work): motion or focus blur (the
    median glass-edge width, :func:`_edge_width_px`, above
    :data:`BLUR_MAX_EDGE_WIDTH_FRACTION` of the tube width); clipped highlights (more
    than :data:`CLIPPED_WARN_FRACTION` of channel values ≥ 250/255 in the boxes'
    central thirds); tubes too small (median width below :data:`MIN_TUBE_WIDTH_PX`).

    Parameters
    ----------
    pixels : ndarray (H, W, 3) uint8/uint16, sRGB-encoded, full resolution.
    regions : sequence of tubevision.tubes.TubeRegion

    Returns
    -------
    tuple of str
        One-line warnings for the record; empty when all is well.

    Raises
    ------
    TubevisionInputError
        Bad pixels or a box outside the photo.
    """
    regions = tuple(regions)
    if not regions:
        if not isinstance(pixels, np.ndarray) or pixels.ndim != 3:
            raise TubevisionInputError(f"pixels must be an (H, W, 3) RGB array, got shape "
                                       f"{getattr(pixels, 'shape', None)}")
        return ()
    out: list[str] = []
    widths, edges, clipped, total = [], [], 0, 0
    top = np.iinfo(pixels.dtype).max if isinstance(pixels, np.ndarray) and pixels.dtype.kind == "u" else 255
    thr = np.ceil(NEAR_CLIP_SRGB8 / 255.0 * top)
    for region in regions:
        _validate(pixels, region, None)
        x0, y0, x1, y1 = region.bbox
        w = x1 - x0
        widths.append(w)
        sub = pixels[y0:y1, region.inner_col0:region.inner_col1]
        clipped += int((sub >= thr).sum())
        total += sub.size
        half = max(2, int(round(0.12 * w)))
        for c in (x0, x1 - 1):
            # only a narrow strip around each wall, every third row (speed)
            s0, s1 = max(0, c - half), min(pixels.shape[1], c + half + 1)
            yy = _luminance(_to_linear_fast(pixels[y0:y1:3, s0:s1]))
            e = _edge_width_px(yy, c - s0, half, row_step=1)
            if np.isfinite(e):
                edges.append(e / w)
    if edges and float(np.median(edges)) > BLUR_MAX_EDGE_WIDTH_FRACTION:
        out.append("photo looks blurred (motion or focus) at the tube edges; retake it with the camera held still")
    if total and clipped / total > CLIPPED_WARN_FRACTION:
        out.append(f"photo is overexposed over the tubes ({100 * clipped / total:.0f} % of values clipped); "
                   "lower the exposure or move the light")
    if float(np.median(widths)) < MIN_TUBE_WIDTH_PX:
        out.append(f"tubes are only ~{int(np.median(widths))} px wide; move closer so each is at least "
                   f"{MIN_TUBE_WIDTH_PX} px wide")
    return tuple(out)
