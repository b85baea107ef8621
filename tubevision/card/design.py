"""The tool's own printable reference card: geometry (mm), patch table, raster art.

Layout of card version 1 (150 × 100 mm, origin at the top-left, x right, y down):

* six ArUco markers (dictionary ``DICT_4X4_50``, ids 10-15), 12 mm square: the four
  corners and the middles of the left and right edges, so that the pose survives with any
  two of them hidden (four markers still span the card);
* a band of text across the top: the card's id, version and printing instructions;
* 32 colour patches, 11 mm square, in a 4 × 8 grid: row A a neutral ramp of eight greys
  from near-white to near-black, rows B-D 24 chromatic patches chosen for the hues of
  precipitates and coloured solutions (yellows, oranges, reds, browns, pinks, violet, blues,
  greens);
* a millimetre scale, 110 mm long, along the bottom edge.

The patch colours are this project's own choice: 8-bit sRGB values kept between 20 and 245
(never clipped), all inside the sRGB gamut by construction. Their nominal CIELAB values
follow from IEC 61966-2-1 (sRGB → XYZ D65) and the Bradford transform (D65 → D50), both
through :mod:`tubevision.colorimetry`; ``calibration/card_v1.cgats.txt`` carries them as
data.

References
----------
.. [1] S. Garrido-Jurado, R. Muñoz-Salinas, F. J. Madrid-Cuevas, M. J. Marín-Jiménez,
   "Automatic generation and detection of highly reliable fiducial markers under
   occlusion", Pattern Recognition 47(6), 2280-2292, 2014. DOI 10.1016/j.patcog.2014.01.005.
.. [2] IEC 61966-2-1:1999, Default RGB colour space - sRGB.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from ..colorimetry import WHITE_D50, WHITE_D65, adapt_bradford, lab_to_xyz, srgb_to_lab, xyz_to_lab

__all__ = [
    "CARD_ID",
    "CARD_VERSION",
    "CARD_SIZE_MM",
    "ARUCO_DICTIONARY",
    "CardMarker",
    "CardPatch",
    "CardLayout",
    "card_layout",
    "render_card",
    "mm_to_px",
]

CARD_ID = "TVRC"
"""Identifier printed on the card (tubevision reference card); our own name."""
CARD_VERSION = "1"
"""Version of the card's design; a new layout or new colours get a new version."""
CARD_SIZE_MM = (150.0, 100.0)
"""Card width and height in mm (the task's limit: at most 150 × 100 mm)."""
ARUCO_DICTIONARY = "DICT_4X4_50"
"""OpenCV ArUco dictionary of the markers: 4 × 4 bits, 50 ids; coarse bits survive blur
and small prints best (Garrido-Jurado et al. 2014 [1]_)."""
MARKER_SIZE_MM = 12.0
"""Marker side (black border included), mm: 2 mm per module of the 6 × 6 module marker."""
MARKER_IDS = (10, 11, 12, 13, 14, 15)
"""Marker ids: top-left, top-right, bottom-right, bottom-left, middle-left, middle-right."""
_MARKER_TOPLEFT_MM = ((4.0, 4.0), (134.0, 4.0), (134.0, 84.0), (4.0, 84.0), (4.0, 44.0), (134.0, 44.0))
PATCH_SIZE_MM = 11.0
"""Patch side, mm: large enough that the inner 60 % still holds many pixels when the card
fills 3 % of a 12 MP frame (≈ 5 px/mm → ≈ 1000 px per patch)."""
PATCH_GRID_ORIGIN_MM = (20.0, 20.0)
"""Top-left of the patch grid, mm (clear of the markers and the text band)."""
PATCH_PITCH_MM = (13.75, 15.0)
"""Distance between patch centres along x and y, mm (8 columns in 110 mm, 4 rows in 60 mm)."""
SCALE_ORIGIN_MM = (20.0, 87.0)
"""Left end of the millimetre scale's baseline, mm."""
SCALE_LENGTH_MM = 110
"""Length of the millimetre scale, mm."""

# The design: 8-bit sRGB of each patch, row by row (our own choice, see the module docstring).
_PATCH_SRGB8 = (
    # A: neutral ramp, near-white to near-black
    (242, 242, 242), (212, 212, 212), (178, 178, 178), (145, 145, 145),
    (112, 112, 112), (82, 82, 82), (54, 54, 54), (30, 30, 30),
    # B: yellows, oranges, reds
    (244, 234, 150), (232, 206, 42), (222, 178, 62), (236, 150, 52),
    (210, 110, 40), (200, 52, 45), (150, 32, 36), (236, 220, 190),
    # C: browns, pinks, violet
    (190, 150, 105), (150, 95, 50), (110, 70, 40), (80, 52, 36),
    (240, 172, 190), (214, 110, 150), (178, 60, 120), (120, 80, 160),
    # D: blues, greens
    (172, 200, 234), (100, 168, 212), (40, 118, 200), (36, 56, 130),
    (182, 220, 160), (70, 150, 80), (122, 130, 50), (40, 130, 120),
)
_PATCH_NAMES = (
    "grey 95", "grey 83", "grey 70", "grey 57", "grey 44", "grey 32", "grey 21", "grey 12",
    "pale yellow", "lemon yellow", "amber", "orange", "deep orange", "red", "dark red", "cream",
    "tan", "light brown", "brown", "dark brown", "pale pink", "pink", "magenta", "violet",
    "pale blue", "sky blue", "blue", "deep blue", "pale green", "green", "olive", "teal",
)
NEUTRAL_IDS = ("A1", "A2", "A3", "A4", "A5", "A6", "A7", "A8")
"""Patch ids of the neutral ramp (used for white balance)."""


@dataclass(frozen=True)
class CardMarker:
    """One ArUco marker: id and its four corners in mm (top-left, top-right,
    bottom-right, bottom-left: the order OpenCV's detector returns)."""

    id: int
    corners_mm: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class CardPatch:
    """One colour patch.

    Attributes
    ----------
    id : str — row letter and column number, e.g. ``"B3"``.
    name : str — a plain description ("amber").
    centre_mm : (x, y) — centre from the card's top-left, mm.
    size_mm : (w, h) — mm.
    nominal_srgb : (r, g, b) — sRGB-encoded, in [0, 1] (8-bit value / 255).
    lab_d65 : (L, a, b) — nominal CIELAB D65/2° (IEC 61966-2-1 sRGB to XYZ).
    lab_d50 : (L, a, b) — nominal CIELAB D50/2° (Bradford adaptation of the D65 XYZ).
    neutral : bool — part of the neutral ramp.
    """

    id: str
    name: str
    centre_mm: tuple[float, float]
    size_mm: tuple[float, float]
    nominal_srgb: tuple[float, float, float]
    lab_d65: tuple[float, float, float]
    lab_d50: tuple[float, float, float]
    neutral: bool


@dataclass(frozen=True)
class CardLayout:
    """The whole card: id, version, size (w, h) mm, markers, patches, scale position."""

    card_id: str
    version: str
    size_mm: tuple[float, float]
    aruco_dictionary: str
    markers: tuple[CardMarker, ...]
    patches: tuple[CardPatch, ...]
    scale_origin_mm: tuple[float, float]
    scale_length_mm: int

    @property
    def patch_ids(self) -> tuple[str, ...]:
        """Patch ids in card order."""
        return tuple(p.id for p in self.patches)


def _nominal_lab(srgb: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nominal Lab D65 (IEC 61966-2-1) and D50 (Bradford, ICC.1:2022 Annex E) of sRGB values."""
    lab65 = srgb_to_lab(srgb)
    xyz50 = adapt_bradford(lab_to_xyz(lab65, WHITE_D65), WHITE_D65, WHITE_D50)
    return lab65, xyz_to_lab(xyz50, WHITE_D50)


@functools.lru_cache(maxsize=1)
def card_layout() -> CardLayout:
    """The card's geometry and patch table (version 1).

    Returns
    -------
    CardLayout — all positions in mm from the card's top-left corner, x right, y down.

    Examples
    --------
    >>> lay = card_layout()
    >>> lay.size_mm, len(lay.markers), len(lay.patches)
    ((150.0, 100.0), 6, 32)
    """
    s = MARKER_SIZE_MM
    markers = tuple(
        CardMarker(mid, ((x, y), (x + s, y), (x + s, y + s), (x, y + s)))
        for mid, (x, y) in zip(MARKER_IDS, _MARKER_TOPLEFT_MM)
    )
    srgb = np.array(_PATCH_SRGB8, dtype=np.float64) / 255.0
    lab65, lab50 = _nominal_lab(srgb)
    patches = []
    for k, name in enumerate(_PATCH_NAMES):
        row, col = divmod(k, 8)
        pid = f"{'ABCD'[row]}{col + 1}"
        cx = PATCH_GRID_ORIGIN_MM[0] + (col + 0.5) * PATCH_PITCH_MM[0]
        cy = PATCH_GRID_ORIGIN_MM[1] + (row + 0.5) * PATCH_PITCH_MM[1]
        patches.append(CardPatch(
            pid, name, (cx, cy), (PATCH_SIZE_MM, PATCH_SIZE_MM), tuple(float(v) for v in srgb[k]),
            tuple(float(v) for v in lab65[k]), tuple(float(v) for v in lab50[k]), pid in NEUTRAL_IDS))
    return CardLayout(CARD_ID, CARD_VERSION, CARD_SIZE_MM, ARUCO_DICTIONARY, markers, tuple(patches),
                      SCALE_ORIGIN_MM, SCALE_LENGTH_MM)


def mm_to_px(v_mm: float, dpi: float) -> int:
    """A length or position in mm to the nearest pixel edge at ``dpi`` (25.4 mm per inch)."""
    return int(round(v_mm * dpi / 25.4))


def _fill(img: np.ndarray, x0: float, y0: float, x1: float, y1: float, dpi: float, value) -> None:
    c0, c1, r0, r1 = mm_to_px(x0, dpi), mm_to_px(x1, dpi), mm_to_px(y0, dpi), mm_to_px(y1, dpi)
    img[max(r0, 0):max(r1, r0 + 1), max(c0, 0):max(c1, c0 + 1)] = value


def render_card(dpi: float = 300) -> np.ndarray:
    """Raster art of the card at ``dpi``.

    Parameters
    ----------
    dpi : float — dots per inch, 72 to 2400; the image is 150 × 100 mm at that density.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8 — sRGB-encoded, white paper = 255.

    Raises
    ------
    TubevisionInputError
        ``dpi`` outside 72-2400.

    Examples
    --------
    >>> render_card(100).shape
    (394, 591, 3)
    """
    import cv2

    from ..errors import TubevisionInputError

    if not (72 <= float(dpi) <= 2400):
        raise TubevisionInputError(f"card dpi: expected 72 to 2400, got {dpi}")
    lay = card_layout()
    w, h = mm_to_px(lay.size_mm[0], dpi), mm_to_px(lay.size_mm[1], dpi)
    img = np.full((h, w, 3), 255, np.uint8)
    dictionary = cv2.aruco.getPredefinedDictionary(getattr(cv2.aruco, lay.aruco_dictionary))
    for m in lay.markers:
        (x0, y0), (x1, y1) = m.corners_mm[0], m.corners_mm[2]
        c0, c1, r0, r1 = mm_to_px(x0, dpi), mm_to_px(x1, dpi), mm_to_px(y0, dpi), mm_to_px(y1, dpi)
        art = cv2.aruco.generateImageMarker(dictionary, m.id, 6 * 40)
        art = cv2.resize(art, (c1 - c0, r1 - r0), interpolation=cv2.INTER_AREA)
        img[r0:r1, c0:c1] = art[:, :, None]
    for p in lay.patches:
        (cx, cy), (pw, ph) = p.centre_mm, p.size_mm
        rgb8 = np.round(np.array(p.nominal_srgb) * 255.0).astype(np.uint8)
        _fill(img, cx - pw / 2, cy - ph / 2, cx + pw / 2, cy + ph / 2, dpi, rgb8)
    # millimetre scale: baseline, ticks every mm (1.5 mm), 5 mm (2.5 mm), 10 mm (3.5 mm)
    sx, sy = lay.scale_origin_mm
    line_mm = max(0.15, 25.4 / dpi)
    _fill(img, sx - line_mm / 2, sy - line_mm / 2, sx + lay.scale_length_mm + line_mm / 2,
          sy + line_mm / 2, dpi, 0)
    ppm = dpi / 25.4
    font = cv2.FONT_HERSHEY_SIMPLEX
    for k in range(lay.scale_length_mm + 1):
        length = 3.5 if k % 10 == 0 else 2.5 if k % 5 == 0 else 1.5
        _fill(img, sx + k - line_mm / 2, sy, sx + k + line_mm / 2, sy + length, dpi, 0)
        if k % 10 == 0:
            cv2.putText(img, str(k), (mm_to_px(sx + k - 1.0, dpi), mm_to_px(sy + 7.0, dpi)), font,
                        0.09 * ppm / 3.0, (0, 0, 0), max(1, int(round(0.2 * ppm))), cv2.LINE_AA)
    cv2.putText(img, "mm", (mm_to_px(sx + lay.scale_length_mm + 2.0, dpi), mm_to_px(sy + 4.0, dpi)),
                font, 0.09 * ppm / 3.0, (0, 0, 0), max(1, int(round(0.2 * ppm))), cv2.LINE_AA)
    lines = (f"tubevision reference card  {lay.card_id}  version {lay.version}",
             "print at 100 % on matte paper - keep flat, clean and dry - 150 x 100 mm")
    for k, text in enumerate(lines):
        scale = (0.11 if k == 0 else 0.075) * ppm / 3.0
        cv2.putText(img, text, (mm_to_px(20.0, dpi), mm_to_px(9.5 + 6.0 * k, dpi)), font, scale,
                    (0, 0, 0), max(1, int(round((0.25 if k == 0 else 0.18) * ppm))), cv2.LINE_AA)
    for p in lay.patches:  # patch id under each patch, small
        (cx, cy), (_, ph) = p.centre_mm, p.size_mm
        cv2.putText(img, p.id, (mm_to_px(cx - 1.8, dpi), mm_to_px(cy + ph / 2 + 2.6, dpi)), font,
                    0.05 * ppm / 3.0, (60, 60, 60), max(1, int(round(0.12 * ppm))), cv2.LINE_AA)
    return img
