"""Colour words from CIELAB: one documented table of CIE LCh(ab) regions.

The contract's twelve words (``colourless, white, grey, black, yellow, orange,
red, pink, brown, violet, blue, green``) are what a bench chemist writes in a
notebook. :data:`COLOUR_NAME_TABLE` maps a colour to a word by its lightness
L*, chroma C*ab and hue angle h_ab (CIE 015:2018 [1]_, eqs. 8.4-8.5, computed
by :func:`tubevision.colorimetry.lab_to_lch`). The table is read top to
bottom and the first row that contains the colour names it, so each row only
has to say what makes it differ from the rows below it.

The hue boundaries sit where the Munsell hue families [2]_ that carry a
conventional name change it (converted to CIELAB D65: e.g. 10R lies near
h = 44°, 10YR near 78°, 2.5GY near 108°, 7.5BG near 197°, 7.5PB near 300°,
2.5RP near 341°); the lightness and chroma limits for white, grey, black,
pink and brown follow the ISCC-NBS colour-name blocks [3]_ as we recall their
extent (from memory) and are checked against the Munsell renotation data in
``tests/classify/test_naming.py``.

A cloudy liquid is named as a solid (``solid=True``; see
:func:`tubevision.classify.calls.classify_tube`): the contract keeps
``colourless`` for a clear liquid and never gives it to a solid, and a chemist
writes a faint white cloud as "faint white turbidity", so its word is
``white`` however faint it is; how faint it is, is the turbidity's business.

References
----------
.. [1] CIE 015:2018, Colorimetry, 4th edition. CIE, Vienna.
   DOI 10.25039/TR.015.2018.
.. [2] S. M. Newhall, D. Nickerson, D. B. Judd, "Final report of the O.S.A.
   subcommittee on the spacing of the Munsell colors", Journal of the Optical
   Society of America 33(7), 385-418, 1943. DOI 10.1364/JOSA.33.000385.
.. [3] K. L. Kelly, D. B. Judd, "Color: Universal Language and Dictionary of
   Names", NBS Special Publication 440, US Department of Commerce, 1976.
.. [4] D. L. MacAdam-style tolerance as summarised by M. Mahy, L. Van Eycken,
   A. Oosterlinck, "Evaluation of uniform color spaces developed after the
   adoption of CIELAB and CIELUV", Color Research & Application 19(2),
   105-121, 1994 (just-noticeable difference ΔE*ab ≈ 2.3).
   DOI 10.1002/col.5080190206.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..colorimetry import lab_to_lch
from ..errors import TubevisionInputError

__all__ = [
    "COLOUR_WORDS",
    "NameRegion",
    "COLOUR_NAME_TABLE",
    "ACHROMATIC_MAX_CHROMA",
    "GLASS_REFLECTANCE",
    "SOLID_BLACK_MAX_L",
    "NAMING_TOLERANCE_DE",
    "CANDIDATE_MIN_SCORE",
    "colour_name",
    "colour_names",
    "colour_name_candidates",
]

COLOUR_WORDS = ("colourless", "white", "grey", "black", "yellow", "orange", "red", "pink",
                "brown", "violet", "blue", "green")
"""The contract's vocabulary of colour names, in the contract's order."""

ACHROMATIC_MAX_CHROMA = 6.0
"""C*ab below which a colour has no noticeable hue (unit: CIELAB chroma).

About 2.5 just-noticeable differences (ΔE*ab ≈ 2.3, Mahy et al. 1994 [4]_)
from the neutral axis; roughly Munsell chroma 1, the ISCC-NBS [3]_ limit of the
neutral names (from memory). Used for the colourless, white, grey and black rows.
"""

GLASS_REFLECTANCE = 0.04
"""Share of the light a tube's glass wall reflects at near-normal incidence:
Fresnel reflectance ((n - 1)/(n + 1))² for soda-lime or borosilicate glass,
n ≈ 1.5 (E. Hecht, Optics, 4th ed., §4.6.2). A settled solid is always seen
through the wall, so this veil adds to its luminance factor Y; the printed card
is not behind glass, so calibration does not remove it."""

BLACK_MAX_VALUE_Y = 0.0450
"""Luminance factor of Munsell value 2.5 (ASTM D1535-08 value-to-Y polynomial:
4.50 %, L* ≈ 25.3), the top of the ISCC-NBS neutral black block [3]_ (the
block's extent from memory)."""


def _l_star(Y: float) -> float:  # noqa: N803
    """CIE 1976 lightness from a luminance factor Y in (0.008856, 1] (CIE 015:2018 eq. 8.3)."""
    return 116.0 * Y ** (1.0 / 3.0) - 16.0


SOLID_BLACK_MAX_L = _l_star(BLACK_MAX_VALUE_Y + GLASS_REFLECTANCE)
"""L* below which a low-chroma *solid* is black (≈ 35.0): the ISCC-NBS black
limit seen through one glass wall (:data:`GLASS_REFLECTANCE` added to its Y).
A black solid behind glass reads L* 25-35 in photos (common practice), where
the bare-chip limit L* 25.8 would call it grey."""

NAMING_TOLERANCE_DE = 3.0
"""Standard deviation (ΔE*ab, per Lab axis) of the perceptual blur used by
:func:`colour_name_candidates`: a little more than one JND (2.3, Mahy et al.
1994 [4]_), so that colours within a JND or two of a boundary list both words."""

CANDIDATE_MIN_SCORE = 0.02
"""Candidates with less than this share of the blurred colour are not listed
(a 1-in-50 share is below what a reader would act on; our choice)."""


@dataclass(frozen=True)
class NameRegion:
    """One row of the naming table: a box in LCh(ab) and the word it gets.

    ``phase`` is ``"liquid"``, ``"solid"`` or ``"any"``. L* is in [``L_min``,
    ``L_max``), C*ab in [``C_min``, ``C_max``), and the hue angle in
    [``h_from``, ``h_to``) degrees, wrapping through 0 when ``h_from > h_to``.
    ``reason`` says why the boundaries are where they are.
    """

    word: str
    phase: str
    L_min: float
    L_max: float
    C_min: float
    C_max: float
    h_from: float
    h_to: float
    reason: str


_INF = float("inf")
_C0 = ACHROMATIC_MAX_CHROMA

COLOUR_NAME_TABLE: tuple[NameRegion, ...] = (
    NameRegion("colourless", "liquid", 55.0, _INF, 0.0, _C0, 0.0, 360.0,
               "a light liquid with no noticeable hue (C*ab < ACHROMATIC_MAX_CHROMA) over the light "
               "backdrop; below L* 55 it reads as grey or black liquid instead"),
    NameRegion("white", "any", 80.0, _INF, 0.0, _C0, 0.0, 360.0,
               "ISCC-NBS white starts near Munsell value 8.5 (L* ≈ 86); a settled solid seen "
               "through glass reads a little darker than its powder, so L* 80 (Munsell ≈ 7.9)"),
    NameRegion("black", "solid", -_INF, SOLID_BLACK_MAX_L, 0.0, _C0, 0.0, 360.0,
               "a solid is seen through the tube wall, whose Fresnel reflection (4 %) veils it: the "
               "ISCC-NBS black limit (Munsell value 2.5) plus that veil is L* ≈ 35 (SOLID_BLACK_MAX_L)"),
    NameRegion("grey", "any", 25.0, 80.0, 0.0, _C0, 0.0, 360.0,
               "neutral between black and white (ISCC-NBS light/medium/dark grey, Munsell 2.5-8)"),
    NameRegion("black", "any", -_INF, 25.0, 0.0, _C0, 0.0, 360.0,
               "ISCC-NBS black lies below about Munsell value 2.5 (L* ≈ 25.8)"),
    NameRegion("pink", "any", 62.0, _INF, _C0, _INF, 330.0, 45.0,
               "light (Munsell value ≥ 6, L* ≈ 62) red, rose and magenta hues are the ISCC-NBS pinks; "
               "hue span from between 7.5P and 10P (h ≈ 330°) to 10R"),
    NameRegion("brown", "any", -_INF, 40.0, _C0, 45.0, 30.0, 45.0,
               "dark (Munsell value < 4), moderately chromatic red-orange hues (7.5R-10R) are "
               "reddish brown; strongly chromatic dark reds (C*ab ≥ 45) stay red"),
    NameRegion("brown", "any", -_INF, 55.0, _C0, 60.0, 45.0, 95.0,
               "orange and orange-yellow hues (Munsell 10R-5Y) below Munsell value ≈ 5.5 and short "
               "of deep-orange chroma (C*ab < 60, about Munsell chroma 10) are the ISCC-NBS browns"),
    NameRegion("red", "any", -_INF, _INF, _C0, _INF, 342.0, 45.0,
               "Munsell 2.5RP-10R (h ≈ 341°-44°): purplish red to reddish orange"),
    NameRegion("orange", "any", -_INF, _INF, _C0, _INF, 45.0, 78.0,
               "Munsell 10R-10YR (h ≈ 44°-78°): reddish orange to orange yellow"),
    NameRegion("yellow", "any", -_INF, _INF, _C0, _INF, 78.0, 108.0,
               "Munsell 10YR-2.5GY (h ≈ 78°-108°): orange yellow to greenish yellow"),
    NameRegion("green", "any", -_INF, _INF, _C0, _INF, 108.0, 197.0,
               "Munsell 2.5GY-7.5BG (h ≈ 108°-197°): yellow green to bluish green"),
    NameRegion("blue", "any", -_INF, _INF, _C0, _INF, 197.0, 295.0,
               "Munsell 7.5BG-7.5PB (h ≈ 197°-300°): greenish blue to purplish blue"),
    NameRegion("violet", "any", -_INF, _INF, _C0, _INF, 295.0, 342.0,
               "Munsell 7.5PB-2.5RP (h ≈ 300°-341°): violet and purple (the vocabulary has no purple)"),
)
"""The naming table, read top to bottom, first match wins (see :class:`NameRegion`).

Every colour (any L*, C*ab ≥ 0, any hue) falls in some row for either phase:
the last six rows tile the hue circle for C*ab ≥ ACHROMATIC_MAX_CHROMA and the
achromatic rows tile L* below it. Solids never reach ``colourless``.
"""


def _as_lab(lab, where: str) -> np.ndarray:
    arr = np.asarray(lab, dtype=np.float64)
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise TubevisionInputError(f"{where}: expected CIELAB values of shape (..., 3), got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise TubevisionInputError(f"{where}: CIELAB values must be finite numbers")
    return arr


def _row_index(lch: np.ndarray, solid: bool) -> np.ndarray:
    """Index into :data:`COLOUR_NAME_TABLE` of the first row containing each colour."""
    L, C, h = lch[..., 0], lch[..., 1], lch[..., 2]  # noqa: N806
    out = np.full(L.shape, -1, dtype=np.int64)
    for i, row in enumerate(COLOUR_NAME_TABLE):
        if row.phase == ("liquid" if solid else "solid"):
            continue
        if row.h_from <= row.h_to:
            in_h = (h >= row.h_from) & (h < row.h_to)
        else:
            in_h = (h >= row.h_from) | (h < row.h_to)
        hit = (out < 0) & (L >= row.L_min) & (L < row.L_max) & (C >= row.C_min) & (C < row.C_max) & in_h
        out[hit] = i
    return out


def colour_names(lab, *, solid: bool = False) -> np.ndarray:
    """Colour words for many colours at once (vectorised :func:`colour_name`).

    Parameters
    ----------
    lab : array_like of shape (..., 3) — CIELAB, D65/2°, L* in [0, 100].
    solid : bool — name as a solid (never ``colourless``).

    Returns
    -------
    ndarray of shape (...), dtype object — words from :data:`COLOUR_WORDS`.
    """
    arr = _as_lab(lab, "colour_names")
    idx = _row_index(lab_to_lch(arr), solid)
    words = np.array([r.word for r in COLOUR_NAME_TABLE], dtype=object)
    return words[idx]


def colour_name(lab, *, solid: bool = False) -> str:
    """The notebook colour word for one CIELAB colour.

    Parameters
    ----------
    lab : array_like of shape (3,) — CIELAB, D65/2°, L* in [0, 100].
    solid : bool — True for a settled solid (or the solid a suspension
        carries): low-chroma colours are then white, grey or black by L*,
        never ``colourless``.

    Returns
    -------
    str — one of :data:`COLOUR_WORDS`.

    Raises
    ------
    TubevisionInputError
        ``lab`` is not three finite numbers.

    Notes
    -----
    Looks the colour's CIE LCh(ab) (CIE 015:2018 eqs. 8.4-8.5) up in
    :data:`COLOUR_NAME_TABLE`; the boundaries and their reasons are there.

    Examples
    --------
    >>> colour_name([96.0, -1.0, 2.0])
    'colourless'
    >>> colour_name([96.0, -1.0, 2.0], solid=True)
    'white'
    >>> colour_name([85.0, -2.0, 60.0])
    'yellow'
    """
    arr = _as_lab(lab, "colour_name")
    if arr.shape != (3,):
        raise TubevisionInputError(f"colour_name: expected one CIELAB colour (3 numbers), got shape {arr.shape}")
    return str(colour_names(arr, solid=solid))


def colour_name_candidates(lab, *, solid: bool = False, lab_sd=None,
                           tolerance_de: float = NAMING_TOLERANCE_DE) -> list[tuple[str, float]]:
    """The words a colour could fairly get, with the share of each.

    The colour is blurred by an isotropic Gaussian in CIELAB whose standard
    deviation per axis is ``sqrt(tolerance_de**2 + lab_sd**2)`` (perceptual
    tolerance plus measurement uncertainty), and each word's score is the
    probability mass of the blurred colour that the table gives that word,
    computed by 7-point Gauss-Hermite quadrature on each axis [1]_.

    Parameters
    ----------
    lab : array_like of shape (3,) — CIELAB, D65/2°.
    solid : bool — name as a solid.
    lab_sd : array_like of shape (3,) or None — measurement standard deviation
        of L*, a*, b*.
    tolerance_de : float — perceptual blur, ΔE*ab per axis (default
        :data:`NAMING_TOLERANCE_DE`).

    Returns
    -------
    list of (word, score), best first; scores sum to 1 over the listed words
    plus those dropped below :data:`CANDIDATE_MIN_SCORE`. The first word is
    usually, but near a boundary not always, :func:`colour_name` of ``lab``.

    References
    ----------
    .. [1] M. Abramowitz, I. A. Stegun, Handbook of Mathematical Functions,
       NBS 1964, §25.4.46 (Gauss-Hermite quadrature).

    Examples
    --------
    >>> colour_name_candidates([80.0, 30.0, 80.0])[0][0]
    'orange'
    """
    arr = _as_lab(lab, "colour_name_candidates")
    if arr.shape != (3,):
        raise TubevisionInputError("colour_name_candidates: expected one CIELAB colour (3 numbers)")
    sd = np.full(3, float(tolerance_de))
    if lab_sd is not None:
        s = np.asarray(lab_sd, dtype=np.float64).reshape(-1)
        if s.shape != (3,) or not np.all(np.isfinite(s)) or np.any(s < 0):
            raise TubevisionInputError("colour_name_candidates: lab_sd must be three finite numbers ≥ 0")
        sd = np.sqrt(sd**2 + s**2)
    nodes, weights = np.polynomial.hermite_e.hermegauss(7)  # probabilists' Hermite, N(0, 1)
    weights = weights / weights.sum()
    g = np.stack(np.meshgrid(nodes, nodes, nodes, indexing="ij"), axis=-1).reshape(-1, 3)
    w = np.prod(np.stack(np.meshgrid(weights, weights, weights, indexing="ij"), axis=-1).reshape(-1, 3), axis=1)
    pts = arr + g * sd
    pts[:, 0] = np.clip(pts[:, 0], 0.0, 100.0)
    idx = _row_index(lab_to_lch(pts), solid)
    scores: dict[str, float] = {}
    for i, wi in zip(idx, w):
        word = COLOUR_NAME_TABLE[i].word
        scores[word] = scores.get(word, 0.0) + float(wi)
    ranked = sorted(scores.items(), key=lambda kv: (-kv[1], COLOUR_WORDS.index(kv[0])))
    return [(word, round(s, 4)) for word, s in ranked if s >= CANDIDATE_MIN_SCORE]
