"""Stage 3, tubes: where each tube is, and which parts of it to measure.

Boxes follow the contract: ``[x0, y0, x1, y1]`` in pixels of the upright
photo, x0/y0 inclusive, x1/y1 exclusive. Inside the code arrays are indexed
``[row, col]``; :func:`bbox_to_slices` is the one conversion.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field, replace

import numpy as np

from .errors import TubevisionInputError

__all__ = [
    "TubeRegion",
    "TubeFinding",
    "TubeMasks",
    "tube_masks",
    "bbox_to_slices",
    "parse_layout",
    "tubes_from_layout",
    "find_tubes",
    "reading_order",
]

BBox = tuple[int, int, int, int]

ROW_OVERLAP_FRACTION = 0.5
"""Two boxes are in the same rack row when their vertical overlap is at least
this fraction of the shorter box's height (common practice for reading order)."""


@dataclass(frozen=True)
class TubeRegion:
    """One tube, in full-resolution pixels of the upright photo.

    ``bbox`` covers the glass from rim to bottom. ``axis_col`` is the column
    of the tube's axis; ``inner_col0``/``inner_col1`` (half-open) bound the
    inside of the glass without the wall margin. ``liquid_top`` is the row
    just below the meniscus (None for an empty tube); ``liquid_bottom`` the
    row where the straight liquid column ends above the round bottom;
    ``bottom_top`` the first row of the bottom region where a pellet would
    sit; ``inner_bottom`` the row of the inside bottom of the glass on the
    axis. ``source`` is ``"found"`` or ``"layout"``. ``axis_angle_deg`` is the
    lean of the axis from rim to bottom, degrees from the image's vertical,
    positive when the bottom lies to the right of the rim (camera roll,
    perspective); 0 for layout boxes. ``outer_width`` is the glass's outer width (px)
    and ``axis_row`` the row at which the axis passes ``axis_col``; 0 means unknown (then
    the box's width and middle row stand in), as for layout boxes and older callers.
    """

    index: int
    row: int
    bbox: BBox
    axis_col: float
    inner_col0: int
    inner_col1: int
    liquid_top: int | None
    liquid_bottom: int
    bottom_top: int
    inner_bottom: int
    source: str = "found"
    axis_angle_deg: float = 0.0
    outer_width: float = 0.0
    axis_row: float = 0.0

    @property
    def id(self) -> str:
        """Contract id: ``T`` + (index + 1)."""
        return f"T{self.index + 1}"


@dataclass(frozen=True)
class TubeFinding:
    """The tubes of one photo in reading order, with warnings for the record."""

    regions: tuple[TubeRegion, ...]
    expected: int | None = None
    warnings: tuple[str, ...] = field(default_factory=tuple)


def bbox_to_slices(bbox: BBox) -> tuple[slice, slice]:
    """``[x0, y0, x1, y1]`` (half-open) to ``(rows, cols)`` slices for ``array[rows, cols]``.

    Examples
    --------
    >>> bbox_to_slices((10, 20, 30, 60))
    (slice(20, 60, None), slice(10, 30, None))
    """
    x0, y0, x1, y1 = bbox
    return slice(y0, y1), slice(x0, x1)


def parse_layout(text: str, where: str = "layout") -> list[BBox]:
    """Read a layout file: ``{"tubes": [{"bbox": [x0, y0, x1, y1]}, ...]}``.

    Raises
    ------
    TubevisionInputError
        Not JSON, no ``tubes`` list, or a bbox that is not four integers with
        x0 < x1 and y0 < y1.
    """
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise TubevisionInputError(f"{where} line {exc.lineno}: not valid JSON ({exc.msg})") from None
    if not isinstance(doc, dict) or not isinstance(doc.get("tubes"), list):
        raise TubevisionInputError(f'{where}: expected {{"tubes": [{{"bbox": [x0, y0, x1, y1]}}, ...]}}')
    boxes: list[BBox] = []
    for i, tube in enumerate(doc["tubes"]):
        bbox = tube.get("bbox") if isinstance(tube, dict) else None
        if (not isinstance(bbox, list) or len(bbox) != 4
                or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in bbox)):
            raise TubevisionInputError(f"{where}: tubes[{i}].bbox must be four numbers [x0, y0, x1, y1]")
        x0, y0, x1, y1 = (int(round(v)) for v in bbox)
        if x0 >= x1 or y0 >= y1:
            raise TubevisionInputError(f"{where}: tubes[{i}].bbox {bbox} needs x0 < x1 and y0 < y1")
        boxes.append((x0, y0, x1, y1))
    return boxes


def reading_order(boxes: list[BBox]) -> list[tuple[int, int]]:
    """Order boxes in reading order: rows top to bottom, then left to right.

    Returns a list of ``(original position, row number)`` in reading order.

    Examples
    --------
    >>> reading_order([(50, 0, 60, 40), (0, 2, 10, 41), (0, 60, 10, 100)])
    [(1, 0), (0, 0), (2, 1)]
    """
    order = sorted(range(len(boxes)), key=lambda i: (boxes[i][1] + boxes[i][3]) / 2)
    rows: list[list[int]] = []
    for i in order:
        x0, y0, x1, y1 = boxes[i]
        placed = False
        for row in rows:
            ry0 = np.median([boxes[j][1] for j in row])
            ry1 = np.median([boxes[j][3] for j in row])
            overlap = min(y1, ry1) - max(y0, ry0)
            if overlap >= ROW_OVERLAP_FRACTION * min(y1 - y0, ry1 - ry0):
                row.append(i)
                placed = True
                break
        if not placed:
            rows.append([i])
    out = []
    for r, row in enumerate(rows):
        for i in sorted(row, key=lambda j: boxes[j][0]):
            out.append((i, r))
    return out


WALL_MARGIN_FRACTION = 1 / 3
"""The contract measures colour over the central third of the tube's width,
so the inner columns leave out a third of the width on each side."""

ROUND_BOTTOM_FRACTION = 0.5
"""Height of a round test-tube bottom as a fraction of the tube's outer
width: a hemispherical bottom is half the diameter high (geometry)."""


def _geometry_in_box(pixels: np.ndarray, bbox: BBox, index: int, row: int, source: str) -> TubeRegion:
    """Liquid column and bottom region inside a known box, from the box's shape alone.

    This assumes an upright tube that fills its box: the axis is the box's
    centre line and the round bottom is half the width high. The liquid top
    is the box's top here; :func:`tubes_from_layout` replaces it by the meniscus
    (:func:`_layout_liquid_top`).
    """
    x0, y0, x1, y1 = bbox
    width = x1 - x0
    axis = (x0 + x1 - 1) / 2.0
    margin = int(round(width * WALL_MARGIN_FRACTION))
    c0, c1 = x0 + margin, max(x0 + margin + 1, x1 - margin)
    bottom_h = int(round(width * ROUND_BOTTOM_FRACTION))
    inner_bottom = y1 - 1
    bottom_top = max(y0, y1 - bottom_h)
    return TubeRegion(index=index, row=row, bbox=bbox, axis_col=axis, inner_col0=c0, inner_col1=c1,
                      liquid_top=y0, liquid_bottom=bottom_top, bottom_top=bottom_top,
                      inner_bottom=inner_bottom, source=source)


GLASS_EDGE_FRACTION = 0.15
"""Width of the glass-edge margin inside the outline, as a fraction of the outer width:
the wall itself (≈ 0.07 widths, common lab glassware) and, beside it, the band where
refraction at the curved wall shows a squeezed, distorted view (from memory)."""

SPECULAR_RATIO = 1.35
"""A pixel inside the tube (off the glass-edge margin) brighter than this × its row's
median linear luminance inside the outline is a specular highlight (the same rule as :data:`tubevision.measure.HIGHLIGHT_RATIO`:
glass reflections are several times brighter than the liquid)."""

SPECULAR_CLIP_SRGB8 = 250
"""Any channel at or above this code (of 255) counts as a highlight (near clipping)."""


@dataclass(frozen=True)
class TubeMasks:
    """Pixel masks of one tube over its box (arrays of the box's shape, ``[row, col]``).

    ``outline``: inside the glass outline (rim to round bottom); ``glass_edge``: the
    margin of :data:`GLASS_EDGE_FRACTION` along the outline, where the wall and refraction
    distort the view; ``specular``: highlights inside the outline
    (:data:`SPECULAR_RATIO` off the margin, :data:`SPECULAR_CLIP_SRGB8` anywhere).
    """

    bbox: BBox
    outline: np.ndarray
    glass_edge: np.ndarray
    specular: np.ndarray


def tube_masks(pixels: np.ndarray, region: TubeRegion) -> TubeMasks:
    """Outline, glass-edge margin and specular highlights of ``region`` in ``pixels``
    (the upright sRGB-encoded photo the region was found in).

    The outline is the tube's capsule: straight walls about the axis (leaning by
    ``axis_angle_deg``) from the rim down to the round bottom's centre (``bottom_top``),
    then a hemisphere of half the outer width (geometry of a round-bottom tube).
    """
    x0, y0, x1, y1 = region.bbox
    w = region.outer_width or float(x1 - x0)
    y_ref = region.axis_row or (y0 + y1 - 1) / 2.0
    t = float(np.tan(np.radians(region.axis_angle_deg)))
    yy, xx = np.mgrid[y0:y1, x0:x1].astype(np.float32)
    cos_a = 1.0 / np.sqrt(1.0 + t * t)
    d = (xx - (region.axis_col + t * (yy - y_ref))) * cos_a     # distance from the axis
    r = 0.5 * w
    below = np.maximum(yy - region.bottom_top, 0.0)
    rho = np.sqrt(d * d + below * below)                          # distance from the axis / centre
    outline = rho <= r
    glass_edge = outline & (rho > r - GLASS_EDGE_FRACTION * w)
    from .image import to_linear

    rgb = pixels[y0:y1, x0:x1]
    top = float(np.iinfo(rgb.dtype).max)
    lum = to_linear(rgb).mean(axis=2)          # linear light: a reflection adds to it
    lum_in = np.where(outline, lum, np.nan)
    with np.errstate(invalid="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)   # rows outside the outline: all-NaN
            med = np.nanmedian(lum_in, axis=1, keepdims=True)
    clip = (rgb.astype(np.float32) / top * 255.0 >= SPECULAR_CLIP_SRGB8).any(axis=2)
    # in the glass-edge margin only near-clipped pixels count: a strongly absorbing liquid
    # is lighter there anyway (shorter chord), which is no highlight
    specular = outline & (clip | (~glass_edge & (lum > SPECULAR_RATIO * np.nan_to_num(med, nan=np.inf))))
    return TubeMasks(bbox=region.bbox, outline=outline, glass_edge=glass_edge, specular=specular)


def tubes_from_layout(pixels: np.ndarray, boxes: list[BBox]) -> TubeFinding:
    """Tubes from hand-given boxes (``--layout``), in reading order.

    Raises
    ------
    TubevisionInputError
        A box reaching outside the photo.
    """
    h, w = pixels.shape[:2]
    for i, (x0, y0, x1, y1) in enumerate(boxes):
        if x0 < 0 or y0 < 0 or x1 > w or y1 > h:
            raise TubevisionInputError(
                f"layout: tubes[{i}].bbox {[x0, y0, x1, y1]} reaches outside the {w}x{h} photo")
    lean = 0.0
    if boxes:
        from .image import reduced_copy

        small, _ = reduced_copy(pixels, max_side=FIND_MAX_SIDE_PX)
        gray = small.astype(np.float32).mean(axis=2)
        lean = -_estimate_roll_deg(gray, np.ones(gray.shape, bool))    # bottom to the right: +
    regions = []
    for k, (i, r) in enumerate(reading_order(boxes)):
        g = _geometry_in_box(pixels, boxes[i], index=k, row=r, source="layout")
        # no meniscus seen: the box's top stays (the whole column is measured, as the
        # classifier is trained to read it); a hand-given box says a tube is there
        lt = _layout_liquid_top(pixels, g, lean)
        regions.append(g if lt is None else replace(g, liquid_top=lt))
    regions = tuple(regions)
    warnings = () if regions else ("layout lists no tubes",)
    return TubeFinding(regions=regions, expected=len(boxes), warnings=warnings)


# --------------------------------------------------------------------------
# Automatic finding
# --------------------------------------------------------------------------
#
# How the finder works (all on the reduced copy unless said otherwise):
#
# 1. Roll. Tube walls are the longest near-vertical edges in a rack photo.
#    The gradient direction of strong, near-vertical edges is histogrammed
#    (weighted by gradient magnitude); its mode is the camera roll. The copy
#    is rotated by it so that tubes stand upright (perspective may leave each
#    tube leaning by a few degrees; step 3 follows that lean).
# 2. Wall pairs. Refraction at the glass makes each wall a dark thin
#    vertical line (common practice; it holds for colourless water and for
#    empty tubes, where colour gives no cue), and a coloured or cloudy liquid
#    adds a colour step at the same place. Both show in the horizontal
#    gradient |∂I/∂x| (largest over R, G, B), which horizontal backdrop bands
#    and the rack's horizontal bars do not excite. The gradient is averaged
#    over horizontal strips; in each strip a tube of width w is where both
#    x − w/2 and x + w/2 carry a wall and its central third carries none:
#        S_w(x) = min(P(x − w/2), P(x + w/2)) − k·max P over |x' − x| < w/6.
#    Likely widths are the modes of the strip-wise best responses summed
#    over trial widths.
# 3. Tracks. Peaks of S_w in successive strips are linked into tracks that
#    may lean; a gap of up to 1.5 widths (the rack's bar in front) is bridged.
#    A track is only a hypothesis.
# 4. Verification (see the comment above :data:`VERIFY_WIDTH_RATIO`): the
#    walls are found again across the profile (this gives the width), must be
#    thin dark lines, with no third one inside, a free rim above which they
#    stop, and a round bottom whose outline is radially oriented, curving
#    inward rather than outward (a gap between two tubes). The rim and the
#    bottom's centre come from here; a track longer than a tube is split at
#    its longest gap (two rack rows). The likely width whose verified tubes
#    are best supported wins; its multiples (1.4, 1.7, 2×: a gap between close
#    tubes or a wall-streak pair is narrower than the tube round it) and
#    neighbours (×/÷ 1.15) are tried until the best width stays put, and a
#    ladder of widths (×1.2) when nothing verifies at the modes. Tubes verified
#    at any trial width whose width agrees are kept, and widths ±8 % round the
#    measured width are added (perspective); overlaps keep the better
#    supported, and a tube whose width or length is off its rack row's median
#    is dropped. No vertical lines may stand above a rim (a striped backdrop).
#    The bottom is refined on
#    full-resolution pixels along the axis, where the outline ends.
# 5. Liquid top, on full-resolution pixels sampled along each tube's axis:
#    the ratio of the central third to the backdrop just beside the glass in
#    the same rows (which removes horizontal backdrop bands: a cylinder with
#    a vertical axis refracts only across its width, see
#    :mod:`tubevision.backdrop`; the samples beside are shifted along the
#    axis onto the bands seen through the tube, for perspective). The meniscus
#    is the top-most dark line (a dip of the ratio) or colour step in that
#    ratio below the rim, over light rows, then over dark-band rows on their
#    own, then at a lower threshold (the Fresnel step of clear water); none
#    means an empty tube.

COARSE_MAX_SIDE_PX = 640
"""Longer side (px) of the first, quick search. Its result stands when the tubes found
there are at least :data:`COARSE_MIN_WIDTH_PX` wide (and as many as the user expects, when
told); otherwise the search runs again on the :data:`FIND_MAX_SIDE_PX` copy (our choice, measured in ``bench/bench_tubes.py``)."""

COARSE_MIN_WIDTH_PX = 24
"""Median tube width (px of the quick search's copy) above which its result stands: wide
enough that walls, rim and round bottom are each several pixels (≈ 2.7 × the narrowest
width looked for, :data:`MIN_TUBE_WIDTH_PX`)."""

COARSE_MIN_TUBES = 2
"""Fewest tubes for the quick search's result to stand at once: a lone wide "tube" found
there may be a pair of walls spanning a gap, left over where narrow tubes in front of fine
bands did not verify at that scale (studio benchmark: a rack of 24 found as one). The full
search then runs, and the quick result is kept only when the full one finds fewer tubes
(a single tube, seen well on the small copy)."""

FIND_MAX_SIDE_PX = 1024
"""Longer side (px) of the reduced copy the finder searches. A 24-tube rack
filling a 12-MP photo still gives tubes ≳ 25 px wide there (at 768 px the walls
of such tubes are too thin to verify, studio benchmark)."""

ROLL_MAX_DEG = 15.0
"""Largest camera roll (degrees) the finder looks for; the task asks for 10°,
with margin for perspective lean."""

ROLL_RECHECK_DEG = 2.0
"""When the tubes found lean together by more than this (median axis lean, degrees), the
search runs again turned by that lean, and its result replaces the first when it holds more
tubes (our choice: the finder's walls are followed within ±15° of lean, but verification
loses thin leaning walls; studio benchmark, a rolled rack of 24 in front of fine bands: 1
tube found at 4.7° of residual roll, 23 after turning)."""

ROLL_BIN_DEG = 0.5
"""Histogram bin of the roll estimate (degrees)."""

STRIP_PX = 6
"""Height (px of the reduced copy) of the strips the wall gradient is averaged over;
short enough that a tube leaning 8° moves < 1 px within one strip (tan 8° · 6 ≈ 0.8)."""

MIN_TUBE_WIDTH_PX = 9
"""Narrowest tube (px of the reduced copy) looked for: a 16 mm tube seen across a
≈ 600 mm wide field at 1024 px is ~27 px wide; 9 px leaves room for wider framing."""

MAX_TUBE_WIDTH_FRACTION = 0.3
"""Widest tube looked for, as a fraction of the reduced copy's width (one tube filling
the frame would not show its rack; the task's closest case is one tube)."""

WIDTH_STEP_RATIO = 1.04
"""Ratio between successive trial widths (4 % steps, finer than the ±6 % wall tolerance)."""

WIDTH_REVISIT_FRACTION = 0.1
"""A likely width whose verified tubes measure a median width more than this fraction
away is searched again at that median (the pair score's modes favour the narrower pairs
a tube's interior makes; the verified walls know better)."""

WALL_TOLERANCE_FRACTION = 0.06
"""A wall may sit this fraction of the width off its nominal place (perspective
makes near tubes a few per cent wider than far ones; refraction shifts the lines)."""

WIDTH_SPREAD_STEPS = 1
"""Around the best trial width, widths best·r^(2k) for |k| ≤ this are searched too
(r = :data:`WIDTH_STEP_RATIO`, so ±8 %, and with the wall tolerance ±14 %): perspective
up to 15° makes near tubes up to ~15 % wider than far ones (pinhole geometry)."""

WIDER_TRIAL_FACTORS = (1.4, 1.7, 2.0)
"""Widths tried beyond the best verified one (its multiples): a gap between tubes in a
close-packed rack is ~0.3-0.7 tube widths wide, a wall-streak pair ~0.7 (the streak at
0.3 widths off the axis, common for a cylinder lit from the front)."""

NEIGHBOUR_WIDTH_RATIO = 1.15
"""Ratio of the neighbouring widths tried round the best verified width (just beyond
:data:`WIDTH_REVISIT_FRACTION`, so each is a new search; with the walls' tolerance of
±6 % they leave no gap)."""

LADDER_WIDTH_RATIO = 1.2
"""Ratio of the widths searched one after another when no tube verifies at the width
score's modes (each trial finds walls ±6 %, verification refits the width by up to -25/+30 %)."""

CENTRE_PENALTY = 0.6
"""Weight k of the central-third term in S_w: a strong line on the axis means the
trial pair spans two tubes (wall-gap-wall in the middle), not one."""

SATURATION_NOISE_FACTOR = 10.0
"""The wall gradient is saturated as P / (P + e0), with e0 this many times the
median horizontal gradient of the photo (its noise and texture level), so that a
faint glass wall counts nearly as much as a dark rack post and strong edges do
not outvote many weak tubes."""

PEAK_MIN_SCORE = 0.3
"""Smallest saturated pair score S_w of a strip peak: both walls at least ~0.6·e0
above noise, the central third clean (noise pairs score ≈ 0.1–0.2)."""

MIN_LENGTH_WIDTHS = 2.5
"""A track must be at least this many tube widths long to be a tube: test tubes are
6–10 widths long (common lab sizes, 12×75 to 16×150 mm), and even behind a rack bar
more than 2.5 widths stay visible."""

MIN_TRACK_DENSITY = 0.45
"""Fraction of a track's strips that must carry a peak (random alignments are sparse)."""

MAX_GAP_WIDTHS = 1.5
"""Longest gap (in tube widths) a track may bridge: the rack's bar in front of the tubes
(12 mm on a 16 mm tube in common racks, from memory), but not the space between two rack
rows (a base plate and free space, ≳ 1.5 widths)."""

BOTTOM_SEARCH_WIDTHS = 1.3
"""How far below the walls' end (in tube widths) the outline's bottom is looked for on
full-resolution pixels (our choice: the hemisphere adds 0.5 width, the walls' end may be
placed up to ~0.35 width short, plus margin)."""

WALL_FRACTION = 0.07
"""Glass wall thickness as a fraction of the outer width (a 16 mm tube has ≈ 1.1 mm
walls, common lab glassware, from memory)."""

MENISCUS_MIN_SCORE = 0.08
"""Smallest dip + step of the inside/beside ratio that counts as a meniscus; an empty
tube's ratio is flat to ≈ 0.02 (sensor noise), a water meniscus dips by > 0.2."""

MENISCUS_FALLBACK_SCORE = 0.05
"""Where no meniscus reaches :data:`MENISCUS_MIN_SCORE` (its dark line hidden in a dark
band), a step this large still marks the top of a clear liquid: a filled tube loses light
at two air-glass surfaces, an empty one at four (Fresnel, ≈ 4 % each at n = 1.5; Hecht,
*Optics*, 5th ed., 2017, Sec. 4.6), so water raises the inside/beside ratio by ≈ 8 %; an
empty tube's ratio is flat to ≈ 0.02."""

EDGE_MARGIN_FRACTION = 0.05
"""Rows within this fraction of the tube width of a dark backdrop band or an occluder
are left out of the meniscus search (their inside/beside ratio is unreliable)."""

MENISCUS_LOWEST_FRACTION = 0.3
"""The meniscus is looked for down to this fraction of the width above the round
bottom's centre; lower down, a settled solid's top would be taken for it."""

MENISCUS_RIM_CLEARANCE = 0.45
"""The meniscus is looked for from this fraction of the width below the rim (7 mm in a
16 mm tube): the rim's lip is a dark line too, and a rim placed up to ~0.3 widths high
(a band or a rack bar at the rim) brought it into the search (studio benchmark, banded
backdrop: two liquid tops 38-50 mm off, mean error 2.08 -> 1.70 mm from 0.25). A tube is
not filled that close to its rim (common practice: headspace for mixing and centrifuging)."""

BAND_SAMPLES = 37
"""Samples across a tube (over ±0.9 widths) taken from full-resolution pixels."""

DARK_ROW_SCORE_FACTOR = 5.0
"""Over dark backdrop rows a meniscus must score this many times :data:`MENISCUS_MIN_SCORE`:
the ratio of two dark samples carries sensor and JPEG noise several times that of light ones
(a dark band is ~5 % of the light backdrop's linear signal)."""

DARK_ROW_MIN_FRACTION = 0.01
"""Rows beside the tube darker than this fraction of the light backdrop (an occluder, a
shadow, clipped black) carry no meniscus information at all."""

LIGHT_ROW_FRACTION = 0.4
"""Backdrop rows darker than this fraction of the tube's brightest backdrop rows (dark
backdrop bands, shadows) carry no meniscus information and are skipped."""


def _pct(a: np.ndarray, q: float) -> np.ndarray:
    """``np.percentile(a, q, axis=0)`` (its default linear interpolation) by a partial sort
    of the two order statistics it needs: the same values, a fraction of the overhead on the
    small arrays verification reads."""
    n = a.shape[0]
    v = q / 100.0 * (n - 1)
    lo = int(np.floor(v))
    hi = min(lo + 1, n - 1)
    part = np.partition(a, [lo, hi] if hi != lo else [lo], axis=0)
    f = v - lo
    return part[lo] + f * (part[hi] - part[lo]) if hi != lo else part[lo]


def _validate_pixels(pixels) -> None:
    if not isinstance(pixels, np.ndarray) or pixels.ndim != 3 or pixels.shape[2] != 3:
        shape = getattr(pixels, "shape", None)
        raise TubevisionInputError(f"pixels: expected an (H, W, 3) RGB array, got shape {shape}")
    if pixels.dtype not in (np.uint8, np.uint16):
        raise TubevisionInputError(f"pixels: expected uint8 or uint16, got {pixels.dtype}")


def _validate_quad(exclude_quad):
    if exclude_quad is None:
        return None
    q = np.asarray(exclude_quad, dtype=float)
    if q.shape != (4, 2) or not np.all(np.isfinite(q)):
        raise TubevisionInputError(f"exclude_quad: expected 4 finite (x, y) corners, got shape {q.shape}")
    return q


def _estimate_roll_deg(gray: np.ndarray, valid: np.ndarray) -> float:
    """Mode of the gradient direction of strong near-vertical edges (degrees)."""
    import cv2

    g = cv2.GaussianBlur(gray, (0, 0), 1.0)
    gx = cv2.Sobel(g, cv2.CV_32F, 1, 0, ksize=3)
    gy = cv2.Sobel(g, cv2.CV_32F, 0, 1, ksize=3)
    agx = np.abs(gx)
    lim = np.tan(np.radians(ROLL_MAX_DEG))
    near_vertical = valid & (np.abs(gy) <= lim * agx)
    if near_vertical.sum() < 50:
        return 0.0
    mag = agx[near_vertical]
    thr = max(6.0, float(np.percentile(mag, 80)))
    strong = mag > thr
    if strong.sum() < 50:
        return 0.0
    ang = np.degrees(np.arctan(gy[near_vertical][strong] / gx[near_vertical][strong]))
    nb = int(round(2 * ROLL_MAX_DEG / ROLL_BIN_DEG))
    hist, edges = np.histogram(ang, bins=nb, range=(-ROLL_MAX_DEG, ROLL_MAX_DEG), weights=mag[strong])
    hist = np.convolve(hist, [1, 2, 3, 2, 1], mode="same")
    k = int(np.argmax(hist))
    centre = (edges[k] + edges[k + 1]) / 2
    if 0 < k < nb - 1:  # parabolic peak interpolation (common practice)
        a, b, c = hist[k - 1], hist[k], hist[k + 1]
        den = a - 2 * b + c
        if den != 0:
            centre += 0.5 * (a - c) / den * ROLL_BIN_DEG
    return float(centre)


def _wall_profile(rot: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """|∂/∂x| largest over the channels, zero outside the valid area (float32 (H, W))."""
    import cv2

    e = None
    for ch in range(3):
        gx = np.abs(cv2.Sobel(rot[..., ch], cv2.CV_32F, 1, 0, ksize=3))
        e = gx if e is None else np.maximum(e, gx)
    e[~valid] = 0.0
    return e


def _shift(a: np.ndarray, k: int) -> np.ndarray:
    """``out[..., x] = a[..., x - k]`` with zeros shifted in."""
    out = np.zeros_like(a)
    if k > 0:
        out[:, k:] = a[:, :-k]
    elif k < 0:
        out[:, :k] = a[:, -k:]
    else:
        out[:] = a
    return out


def _hmax(a: np.ndarray, half: int) -> np.ndarray:
    """Running maximum along rows over ``[x − half, x + half]`` (grey dilation)."""
    import cv2

    if half <= 0:
        return a
    return cv2.dilate(a, np.ones((1, 2 * half + 1), np.uint8), borderType=cv2.BORDER_REPLICATE)


_HMAX_CACHE: dict = {}
"""Running maxima of the wall profile by half-width, for the profile last searched (trial
widths share them: the walls' tolerance and the central third take few distinct sizes)."""


def _hmax_p(P: np.ndarray, half: int) -> np.ndarray:
    """:func:`_hmax` of the wall profile ``P``, kept for the other trial widths of one search."""
    if _HMAX_CACHE.get("P") is not P:
        _HMAX_CACHE.clear()
        _HMAX_CACHE["P"] = P
    if half not in _HMAX_CACHE:
        _HMAX_CACHE[half] = _hmax(P, half)
    return _HMAX_CACHE[half]


def _pair_score(P: np.ndarray, w: float) -> np.ndarray:
    """S_w of step 2 for every strip and column (float32 (n_strips, W))."""
    tol = max(1, int(round(WALL_TOLERANCE_FRACTION * w)))
    Pm = _hmax_p(P, tol)
    h = int(round(w / 2))
    left, right = _shift(Pm, h), _shift(Pm, -h)
    cen = _hmax_p(P, max(1, int(round(w / 6))))
    return np.minimum(left, right) - CENTRE_PENALTY * cen


def _width_scores(P: np.ndarray, w_max: float) -> tuple[np.ndarray, np.ndarray]:
    """Trial widths and, for each, the sum of the strip-wise pair peaks above
    :data:`PEAK_MIN_SCORE` (P is saturated, so each tube-like pair counts about
    once per strip)."""
    ws, sc = [], []
    w = float(MIN_TUBE_WIDTH_PX)
    while w <= w_max:
        S = _pair_score(P, w)
        nms = _hmax(S, int(round(0.6 * w)))
        pk = (S >= nms) & (S > PEAK_MIN_SCORE)
        ws.append(w)
        sc.append(float(S[pk].sum()))
        w *= WIDTH_STEP_RATIO
    return np.asarray(ws), np.asarray(sc)


def _width_modes(ws: np.ndarray, sc: np.ndarray, n: int = 4) -> list[float]:
    """Up to ``n`` local maxima of the width score, best first, at least 25 % apart."""
    if sc.size == 0 or sc.max() <= 0:
        return []
    order = np.argsort(-sc)
    modes: list[float] = []
    for k in order:
        if sc[k] < 0.4 * sc[order[0]]:
            break
        if all(abs(ws[k] - m) > 0.25 * m for m in modes):
            modes.append(float(ws[k]))
        if len(modes) >= n:
            break
    return modes


class _Track:
    """Peaks linked so far: strips ``s``, centres ``c``, scores ``v``; predicts the
    centre in a later strip from a line through its last 12 points."""

    __slots__ = ("s", "c", "v", "_fit")

    def __init__(self, s: int, c: float, v: float):
        self.s, self.c, self.v = [s], [c], [v]
        self._fit = (float(s), float(c), 0.0)

    def add(self, s: int, c: float, v: float) -> None:
        self.s.append(s)
        self.c.append(c)
        self.v.append(v)
        if len(self.s) >= 4:
            ss, cc = self.s[-12:], self.c[-12:]
            sm, cm = sum(ss) / len(ss), sum(cc) / len(cc)
            var = sum((x - sm) ** 2 for x in ss)
            b = sum((x - sm) * (y - cm) for x, y in zip(ss, cc)) / var if var > 0 else 0.0
            self._fit = (sm, cm, b)
        else:
            self._fit = (float(s), float(c), 0.0)

    def predict(self, s: int) -> float:
        sm, cm, b = self._fit
        return cm + b * (s - sm)


def _link(peaks: list, w: float) -> list:
    """Greedy strip-to-strip linking of peaks into tracks (step 3); gaps up to
    :data:`MAX_GAP_WIDTHS` are bridged."""
    max_gap = int(np.ceil(MAX_GAP_WIDTHS * w / STRIP_PX)) + 1
    done: list[_Track] = []
    active: list[_Track] = []
    by_strip: dict[int, list] = {}
    for s, c, v in peaks:
        by_strip.setdefault(s, []).append((c, v))
    reach = 0.35 * w
    inf = float("inf")
    for s in sorted(by_strip):
        still = []
        for t in active:
            (still if s - t.s[-1] <= max_gap else done).append(t)
        active = still
        # plain lists: a strip holds a few peaks and tracks, where numpy's per-call cost dominates
        pred = [t.predict(s) for t in active]
        for c, v in sorted(by_strip[s], key=lambda t: -t[1]):
            best = None
            if pred:
                k = min(range(len(pred)), key=lambda i: abs(pred[i] - c))   # the first nearest
                if abs(pred[k] - c) < reach:
                    best = k
            if best is None:
                active.append(_Track(s, c, v))
                pred.append(inf)
            else:
                active[best].add(s, c, v)
                pred[best] = inf   # one peak per track and strip
    tracks = done + active
    return tracks


@dataclass(frozen=True)
class _Candidate:
    """A hypothesis on the rotated reduced copy: axis x = a + b·y from row ``top`` to
    ``end`` (the track's ends), trial width ``w``, strength, and the track's peaks
    (rows ``ys``, columns ``xs``)."""

    a: float
    b: float
    top: float
    end: float
    w: float
    strength: float
    ys: tuple = ()
    xs: tuple = ()


def _sub_track(c: _Candidate, y0: float, y1: float) -> _Candidate | None:
    """The part of a track between rows y0 and y1, its axis fitted to its own peaks."""
    ys, xs = np.asarray(c.ys, float), np.asarray(c.xs, float)
    sel = (ys >= y0) & (ys < y1)
    if sel.sum() < 3:
        return None
    b, a = np.polyfit(ys[sel], xs[sel], 1)
    return replace(c, a=float(a), b=float(b), top=float(max(c.top, y0 - 0.5 * STRIP_PX)),
                   end=float(min(c.end, y1)), ys=tuple(ys[sel]), xs=tuple(xs[sel]))



def _candidates(rot: np.ndarray, valid: np.ndarray) -> list[_Candidate]:
    """Steps 2–4 on the rotated reduced copy."""
    E = _wall_profile(rot, valid)
    h, wd = E.shape
    ns = h // STRIP_PX
    if ns < 3:
        return []
    P = E[: ns * STRIP_PX].reshape(ns, STRIP_PX, wd).mean(axis=1)
    e0 = SATURATION_NOISE_FACTOR * float(np.median(P)) + 1.0
    Pn = P / (P + e0)
    w_max = max(MIN_TUBE_WIDTH_PX + 1.0, MAX_TUBE_WIDTH_FRACTION * wd)
    ws, sc = _width_scores(Pn, w_max)
    ev = _Evidence(rot, valid)
    # every track at every likely width is a hypothesis that :func:`_verify` confirms or
    # rejects; tubes differ in apparent width (perspective, two rows at different
    # distances), so a band of widths round each mode is searched. Where verified
    # hypotheses overlap, the better supported wins, support growing with the width: the
    # inside of a tube (specular streaks, the liquid's edges) can mimic a narrower pair,
    # but nothing narrower mimics a whole tube's walls, rim and bottom.
    best_w, best_total, best_tubes = None, 0.0, []
    verified: list[_Tube] = []
    trial = list(_width_modes(ws, sc))
    done: list[float] = []
    wider_from: list[float] = []
    ladder_done = False
    while True:
        while trial:
            w = trial.pop(0)
            if w > w_max or any(abs(w / d - 1.0) < WIDTH_REVISIT_FRACTION for d in done):
                continue
            done.append(w)
            cands = _tracks_at_width(Pn, w)
            if best_w is not None and w > VERIFY_WIDTH_RATIO[1] * best_w:
                # a much wider pair centred on a tube verified already is that tube with a
                # neighbour's wall, not a tube: not worth verifying (a gap or a wall-streak
                # pair is centred off the tube round it)
                cands = [c for c in cands if not any(_same_axis(c, k, widths=False) for k in best_tubes)]
            tubes = _drop_overlapping_tubes(_verify_all(cands, ev))
            total = sum(t.score for t in tubes)
            verified.extend(tubes)
            if total > best_total:
                best_w, best_total, best_tubes = w, total, tubes
            if tubes:
                # the walls measured by verification may say the tubes are wider or narrower
                # than the trial width that found them: try their median width too
                med = float(np.median([t.w for t in tubes]))
                if abs(med / w - 1.0) > WIDTH_REVISIT_FRACTION:
                    trial.insert(0, med)
        # the gap between two tubes standing close, or a wall and a specular streak, is a
        # narrower pair that can verify too; the whole tube round it is wider: try wider
        # widths than the best so far (its support grows with the width, so it wins if it
        # holds). The score's modes may also miss the tubes' width by more than the walls'
        # tolerance (a few tubes verify, most do not): try the neighbouring widths too,
        # until the best width stays put
        if best_w is None:
            if ladder_done:
                break
            # nothing verified at the score's modes (a few tubes against many narrow pairs
            # inside them and round the card): search a ladder of widths over the range
            ladder_done = True
            trial = list(np.geomspace(MIN_TUBE_WIDTH_PX, w_max,
                                      max(2, int(np.ceil(np.log(w_max / MIN_TUBE_WIDTH_PX)
                                                         / np.log(LADDER_WIDTH_RATIO))) + 1)))
            continue
        if best_w in wider_from:
            break
        wider_from.append(best_w)
        trial = [best_w * f for f in WIDER_TRIAL_FACTORS] + [best_w * NEIGHBOUR_WIDTH_RATIO ** k for k in (-1, 1)]
    if best_w is None:
        return []
    # tubes verified at the other trial widths stay in the running where their measured
    # width agrees with the best width's tubes (one tube size per rack; a wall on the edge
    # of the tolerance verifies at one trial width and not at the next)
    w_ref = float(np.median([t.w for t in best_tubes])) if best_tubes else best_w
    found = list(best_tubes) + [t for t in verified if t not in best_tubes
                                and abs(t.w / w_ref - 1.0) <= ROW_WIDTH_TOLERANCE]
    # perspective: nearer tubes wider, farther ones narrower, round the width the verified
    # walls measure (the trial width that found them may lie off it by the walls' tolerance)
    for k in range(-WIDTH_SPREAD_STEPS, WIDTH_SPREAD_STEPS + 1):
        if k:
            w = w_ref * WIDTH_STEP_RATIO ** (2 * k)
            # held to the same width agreement: a tube the walls measure much wider than
            # the row's would win the overlap against the right one (its support grows with
            # the width) and then be dropped as off its row's median, losing both
            found.extend(t for t in _verify_all(_tracks_at_width(Pn, w), ev, known=found)
                         if abs(t.w / w_ref - 1.0) <= ROW_WIDTH_TOLERANCE)
    return _consistent_rows(_drop_overlapping_tubes(found))


def _tracks_at_width(Pn: np.ndarray, w: float) -> list[_Candidate]:
    """Peaks at width ``w`` linked into tracks: the hypotheses :func:`_verify` tests."""
    S = _pair_score(Pn, w)
    nms = _hmax(S, int(round(0.6 * w)))
    peaks = _strip_peaks(S, nms, w)
    tracks = _link(peaks, w)
    out = []
    min_strips = MIN_LENGTH_WIDTHS * w / STRIP_PX
    for t in tracks:
        span = t.s[-1] - t.s[0] + 1
        if span < min_strips or len(t.s) < MIN_TRACK_DENSITY * span or len(t.s) < 3:
            continue
        ys = (np.asarray(t.s, float) + 0.5) * STRIP_PX
        b, a = np.polyfit(ys, np.asarray(t.c, float), 1)
        if abs(b) > np.tan(np.radians(ROLL_MAX_DEG)):
            continue
        # the track's ends are only where :func:`_verify` starts looking for rim and bottom
        out.append(_Candidate(a=float(a), b=float(b), top=float(t.s[0] * STRIP_PX),
                              end=float((t.s[-1] + 1) * STRIP_PX), w=float(w), strength=float(np.sum(t.v)),
                              ys=tuple(ys), xs=tuple(float(x) for x in t.c)))
    return out


# --------------------------------------------------------------------------
# Verification of tube hypotheses (step 3b)
# --------------------------------------------------------------------------
#
# A track of wall-pair peaks is only a hypothesis: two backdrop bands, a rack
# post beside a tube, or the gap between two tubes also give pairs of vertical
# edges. A hypothesis becomes a tube only when the photo shows what a test tube
# is made of (geometry of a round-bottom tube, common practice):
#
# * two walls, found again across the profile at the outer edges of the glass
#   (the refined width must agree with the track's width), present over most of
#   the rows where the backdrop beside the tube is light;
# * a rim: above it the walls stop (a backdrop band or rack post runs on);
# * a round bottom: a hemisphere of the tube's radius whose outline is an edge
#   whose gradient points along the radius (a vertical edge, a band or a post,
#   has its gradient across the radius there); :func:`_arc_scores`;
# * a plausible shape: rim to bottom 3-15 widths (test tubes are 5-10 widths
#   long, common lab sizes; a rack bar may hide part of the wall but not the
#   ends).
# Within a rack row the tubes' widths agree (same tube size, perspective makes
# them differ by ≲ 15 %); an outlier is dropped (:func:`_consistent_rows`).

VERIFY_WIDTH_RATIO = (0.75, 1.3)
"""Refined width over the track's trial width: outside this the two outermost edges
found across the profile are not the walls the track was made of."""

WALL_COVERAGE_MIN = 0.55
"""Smallest fraction of the light-backdrop rows between rim and bottom where both walls
show (a rack bar in front hides ≲ 25 % of a tube; the rest is noise margin)."""

ABOVE_RIM_MAX = 0.4
"""Largest fraction of light rows, from 0.8 to 0.1 widths above the rim, where both wall
edges carry on: more means the edges belong to something longer than a tube."""

WALL_VALLEY_CONTRAST = 0.04
"""A wall row is a dark line when the darkest sample on the wall is this fraction darker
(sRGB codes) than both the backdrop just outside and the glass just inside."""

WALL_VALLEY_MIN = 0.25
"""Smallest fraction of the light rows where both walls are dark lines: the air above the
liquid and clear liquids show them, dark or cloudy liquids may hide the inner side."""

WALL_VALLEY_TOP_MIN = 0.5
"""Or the smallest fraction of the upper third of those rows (the air above the liquid in a
tube filled up to two thirds, common practice) where both walls are dark lines: a tube
nearly full of a coloured or cloudy liquid shows its walls as lines only there."""

INNER_WALL_FREE_FRACTION = 0.36
"""Half-width (fraction of the outer width) of the inside that must carry no dark line as
dark as half the walls' (the glass walls are 0.07 widths thick, and refraction keeps them
within ~0.1 widths of the outline)."""

ABOVE_RIM_LINES_MAX = 0.05
"""Largest fraction of the samples from 0.8 to 0.1 widths above the rim, across 1.5 widths,
that are near-vertical edges as strong as the walls' threshold: a plain or horizontally
banded backdrop has next to none there; the two walls' own lines, if they ran on, would
be ~4 samples of ~50 per row (see :data:`ABOVE_RIM_MAX`, which tests those)."""

ABOVE_RIM_LIGHT_MIN = 0.2
"""Smallest fraction of light-backdrop rows from 0.8 to 0.1 widths above the rim: a rim
stands free above the rack; walls that start right under a dark bar are a tube's lower
part (or a gap) seen below it. Dark bands of the printed backdrop are 1/4 of a 16 mm
tube's width (:data:`tubevision.backdrop.BAND_WIDTH_MM`), so a free rim has ≳ 1/3 light rows."""

BACKDROP_LIKE_FRACTION = 0.75
"""A row beside the tube looks like the backdrop when, on both sides, it is at least this
fraction of the median brightness of the same columns beside the tube's body (sRGB codes;
a rack bar in front is darker)."""

RIM_SEARCH_WIDTHS = 2.0
"""The rim is looked for from one width above the track's first peak down to this many
widths below it: a track can start well above the rim where blur or a neighbour's lean
leaves pair peaks over the free backdrop (our choice, studio benchmark on plain and
horizontally banded photos: recall 94.1 -> 96.6 % at seed 500 and 91.7 -> 93.9 % at seed
901 from 1.0, precision 100 % both; 3.0 adds nothing). The checks above the rim then
reject a rim found under something that runs on."""

GAP_ARC_MARGIN = 1.15
"""A hypothesis is a gap between two tubes when the outward (mirrored) arc under it scores at
least this many times its inward arc: an empty or faintly cloudy tube's own bottom is a weak
arc, and its neighbours' bottoms in a close-packed rack make the mirrored one about as
strong (our choice, studio benchmark on plain and banded photos, seeds 500/901/1234/2024:
recall 97.2/94.9/98.3/98.7 -> 98.3/96.2/98.7/98.9 % from 1.0, precision 100 %; at 1.3 a gap
passed for a tube)."""

ARC_SCORE_MIN = 0.3
"""Smallest round-bottom score (:func:`_arc_scores`, 0-1): mean over the lower arc of
radially oriented edge strength relative to the walls' own strength. A visible bottom
scores 0.5-1; vertical edges (bands, posts) score ≲ 0.1 (orientation term cos⁴ 45° = 0.25 at
the arc's ends, 0 at its middle); a horizontal edge touches only the middle of the arc."""

TRACK_SPLIT_WIDTHS = 11.0
"""A track longer than this many tube widths (longer than any test tube, 5-10 widths) is
split at its longest gap when that gap is at least :data:`TRACK_SPLIT_GAP_WIDTHS`."""

TRACK_SPLIT_GAP_WIDTHS = 0.8
"""Shortest gap (tube widths) in the peaks of a long track taken for the space between two
rack rows (a rack's base plate and the free space above the next rims are ≳ 1 width)."""

LENGTH_WIDTHS = (3.0, 15.0)
"""Rim to bottom, in tube widths: test tubes are 5-10 widths long (12×75 to 16×150 mm,
common lab sizes, from memory); the range leaves margin for perspective."""

ROW_WIDTH_TOLERANCE = 0.25
"""A tube whose width differs from its row's median by more than this fraction is dropped
(one tube size per rack row; perspective ≤ 15° changes widths by ≲ 15 %, pinhole geometry)."""


class _Evidence:
    """Gradients of the log grey level of the rotated reduced copy (contrast, not
    brightness: a wall on a dim part of the photo counts as much as on a bright one)."""

    def __init__(self, rot: np.ndarray, valid: np.ndarray):
        import cv2

        self.gray = rot.mean(axis=2).astype(np.float32)
        lg = np.log(self.gray + 4.0).astype(np.float32)     # +4: sRGB codes, keeps dark noise down
        self.gx = cv2.Sobel(lg, cv2.CV_32F, 1, 0, ksize=3) / 8.0
        self.gy = cv2.Sobel(lg, cv2.CV_32F, 0, 1, ksize=3) / 8.0
        self.gx[~valid] = 0.0
        self.gy[~valid] = 0.0
        self.ax = np.abs(self.gx)
        self.valid = valid
        v = self.ax[valid]
        self.noise = float(np.median(v)) if v.size else 0.0


@dataclass(frozen=True)
class _Tube:
    """A verified tube on the rotated reduced copy: axis x = a + b·y, rim row ``top``,
    hemisphere centre row ``end``, outer width ``w``, and a support ``score``."""

    a: float
    b: float
    top: float
    end: float
    w: float
    score: float
    arc: float = 0.0
    coverage: float = 0.0


def _outer_peak(prof: np.ndarray, us: np.ndarray, lo: float, hi: float, outer_sign: int):
    """Sub-pixel position of the outermost strong local maximum of ``prof`` over
    ``lo ≤ u ≤ hi`` (strong: ≥ half the window's maximum), or None."""
    sel = np.nonzero((us >= lo) & (us <= hi))[0]
    if sel.size < 3:
        return None
    vals = prof[sel]
    top = float(vals.max())
    if top <= 0:
        return None
    idx = [i for i in sel[1:-1] if prof[i] >= prof[i - 1] and prof[i] >= prof[i + 1] and prof[i] >= 0.5 * top]
    if not idx:
        idx = [int(sel[int(np.argmax(vals))])]
    i = min(idx) if outer_sign < 0 else max(idx)
    u = float(us[i])
    if 0 < i < len(prof) - 1:   # parabolic peak interpolation (common practice)
        a, b, c = prof[i - 1], prof[i], prof[i + 1]
        den = a - 2 * b + c
        if den < 0:
            u += float(np.clip(0.5 * (a - c) / den, -0.5, 0.5))
    return u


def _arc_scores(ev: _Evidence, a: float, b: float, r: float, ycs: np.ndarray, level: float,
                polarity: float = 0.0, mirror: bool = False) -> np.ndarray:
    """Round-bottom score for hemisphere centres at rows ``ycs`` (see :data:`ARC_SCORE_MIN`).

    Along the lower arc (40°-140° below the centre) the gradient g is compared with the
    outward radius n: o = min(|g| / level, 1) · (|g·n| / |g|)⁴, edge strength relative to
    ``level`` (the walls' gradient), capped at 1, times the agreement of its orientation
    with the circle's; best within ±1 px of the radius. Arc points on dark backdrop rows are left out (a
    glass edge does not show there). The score is the weakest of the arc's left, middle
    and right parts that show; NaN when fewer than two show.
    """
    h, wd = ev.gx.shape
    th = np.radians(np.linspace(40.0, 140.0, 11))
    nx, ny = np.cos(th), np.sin(th)
    dr = np.array([-1.0, -0.5, 0.0, 0.5, 1.0])
    rr = r + dr
    xc = a + b * ycs
    X = xc[:, None, None] + rr[None, :, None] * nx[None, None, :]
    if mirror:
        # the arcs mirrored about the wall lines: where the outline of two neighbouring
        # tubes' bottoms runs when the pair's walls are those of a gap between them
        X = xc[:, None, None] + np.sign(nx)[None, None, :] * 2 * r - rr[None, :, None] * nx[None, None, :]
        nx = -nx
    Y = ycs[:, None, None] + rr[None, :, None] * ny[None, None, :]
    xi = np.clip(np.round(X).astype(int), 0, wd - 1)
    yi = np.clip(np.round(Y).astype(int), 0, h - 1)
    gx, gy = ev.gx[yi, xi], ev.gy[yi, xi]
    proj = gx * nx + gy * ny
    # the bottom's outline is the same glass-against-backdrop edge as the walls: the
    # same sign of the outward gradient (when the walls agree on one)
    proj = np.abs(proj) if polarity == 0 else np.maximum(polarity * proj, 0.0)
    mag = np.sqrt(gx * gx + gy * gy) + 1e-6
    o = np.minimum(mag / max(level, 1e-6), 1.0) * (proj / mag) ** 4
    o = o.max(axis=1)                                               # (n_yc, n_theta)
    # light backdrop beside the arc point's row
    yrow = np.clip(np.round(ycs[:, None] + r * ny[None, :]).astype(int), 0, h - 1)
    xl = np.clip(np.round(xc[:, None] - 1.4 * r).astype(int), 0, wd - 1)
    xr = np.clip(np.round(xc[:, None] + 1.4 * r).astype(int), 0, wd - 1)
    beside = np.maximum(ev.gray[yrow, xl], ev.gray[yrow, xr])
    ref = float(_pct(beside.ravel(), 90)) if beside.size else 0.0
    light = beside >= LIGHT_ROW_FRACTION * max(ref, 1e-6)
    # the score is the weakest of three parts of the arc (left, middle, right): a
    # horizontal edge (rack base, bar, band) supports only the middle
    parts = (th < np.radians(65)), (np.abs(th - np.pi / 2) < np.radians(25)), (th > np.radians(115))
    scores = []
    for part in parts:
        lp = light & part[None, :]
        n = lp.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            sc = np.where(lp, o, 0.0).sum(axis=1) / n
        sc[n < 2] = np.nan
        scores.append(sc)
    scores = np.vstack(scores)
    n_parts = np.isfinite(scores).sum(axis=0)
    score = np.full(ycs.shape, np.nan)
    ok = n_parts >= 2
    score[ok] = np.nanmin(scores[:, ok], axis=0)
    return score


POLARITY = False
"""Require the bottom's outline to have the walls' edge polarity: off, as a bottom standing on
a darker rack base shows the opposite polarity (studio benchmark)."""

_TRACE: list | None = None
"""Set to a list to collect (hypothesis, reason) of each rejection (diagnostics only)."""


def _reject(c, why: str) -> None:
    if _TRACE is not None:
        _TRACE.append((c, why))


def _verify(c, ev: _Evidence, out: list, pending: list, refit: bool = True) -> None:
    """Test one hypothesis (see the comment above :data:`VERIFY_WIDTH_RATIO`); append a
    :class:`_Tube` to ``out`` when it holds. A track that runs on past a round bottom
    (two rack rows) is split: the rest goes to ``pending``."""
    h, wd = ev.gx.shape
    w = float(c.w)
    if len(c.ys) > 1 and c.end - c.top > TRACK_SPLIT_WIDTHS * w:
        # longer than a tube: tubes of two rack rows in line, linked across the gap
        # between the rows. Split at the track's longest gap, each part with its own axis
        ys = np.asarray(c.ys)
        k = int(np.argmax(np.diff(ys)))
        if ys[k + 1] - ys[k] >= TRACK_SPLIT_GAP_WIDTHS * w:
            top_part = _sub_track(c, c.top, 0.5 * (ys[k] + ys[k + 1]))
            rest = _sub_track(c, 0.5 * (ys[k] + ys[k + 1]), c.end)
            if rest is not None:
                pending.append(rest)
            if top_part is None:
                return _reject(c, "split part too short")
            c = top_part
    ya, yb = int(max(0, np.floor(c.top - w))), int(min(h, np.ceil(c.end + w)))
    rows = np.arange(ya, yb)
    if rows.size < LENGTH_WIDTHS[0] * w:
        return _reject(c, "too short")
    half = int(np.ceil(0.8 * w))
    us = np.arange(-half, half + 1)
    xc = c.a + c.b * rows
    X = np.clip(np.round(xc[:, None] + us[None, :]).astype(int), 0, wd - 1)
    AX = ev.ax[rows[:, None], X]
    G = ev.gray[rows[:, None], X]
    outside = np.abs(us) >= 0.62 * w
    beside = np.maximum(G[:, outside & (us < 0)].mean(axis=1), G[:, outside & (us > 0)].mean(axis=1))
    core = (rows >= c.top) & (rows < c.end)
    ref = float(_pct(beside[core], 90)) if core.any() else 0.0
    light = (beside >= LIGHT_ROW_FRACTION * max(ref, 1e-6)) & ev.valid[rows, np.clip(np.round(xc).astype(int), 0, wd - 1)]
    sel = core & light
    if sel.sum() < 2 * w:
        return _reject(c, "too few light rows")
    prof = _pct(AX[sel], 60)
    ul = _outer_peak(prof, us, -0.75 * w, -0.3 * w, -1)
    ur = _outer_peak(prof, us, 0.3 * w, 0.75 * w, +1)
    if ul is None or ur is None:
        return _reject(c, "no walls")
    w2 = ur - ul
    if not VERIFY_WIDTH_RATIO[0] <= w2 / w <= VERIFY_WIDTH_RATIO[1] or w2 < MIN_TUBE_WIDTH_PX:
        return _reject(c, "width disagrees")
    shift = 0.5 * (ul + ur)
    if refit:
        # the track's lean comes from pair peaks; the walls themselves, measured in the
        # upper and lower halves of the body, give it better: refit and test again
        rs = np.nonzero(sel)[0]
        halves = rs[: rs.size // 2], rs[rs.size // 2:]
        cents, ymids = [], []
        for hr in halves:
            p_h = _pct(AX[hr], 60)
            pl = _outer_peak(p_h, us, ul - 0.1 * w, ul + 0.1 * w, -1)
            pr = _outer_peak(p_h, us, ur - 0.1 * w, ur + 0.1 * w, +1)
            if pl is None or pr is None:
                break
            cents.append(0.5 * (pl + pr))
            ymids.append(float(np.mean(rows[hr])))
        if len(cents) == 2 and ymids[1] > ymids[0]:
            db = (cents[1] - cents[0]) / (ymids[1] - ymids[0])
            if abs(db) * (ymids[1] - ymids[0]) >= 1.0:
                a_new = c.a + cents[0] - db * ymids[0]
                return _verify(replace(c, a=float(a_new), b=float(c.b + db)), ev, out, pending, refit=False)
    # the sample nearest a position u: us[i] = i - half, and the lower one on an exact tie
    # (as np.argmin of |us - u| picks the first)
    def cu(u: float) -> int:
        return min(max(int(math.ceil(u - 0.5)) + half, 0), us.size - 1)

    il, ir = cu(ul), cu(ur)
    el = AX[:, max(0, il - 1):il + 2].max(axis=1)
    er = AX[:, max(0, ir - 1):ir + 2].max(axis=1)
    both = np.minimum(el, er)
    level = float(np.median(both[sel]))
    thr = max(0.35 * level, 3.0 * ev.noise)
    if level <= thr:
        return _reject(c, "walls too faint")
    on = (el > thr) & (er > thr)
    # glass walls are thin dark lines (refraction at grazing incidence, common practice):
    # darker than both the backdrop outside and the glass inside, at least in the rows of
    # air or clear liquid; a step edge (a rack post, a backdrop band) is not
    m = max(2, int(round(0.06 * w2)))
    valley = np.ones(rows.size, bool)
    for u_wall, sgn in ((ul, -1), (ur, 1)):
        line = G[:, min(cu(u_wall), cu(u_wall - sgn * m)):max(cu(u_wall), cu(u_wall - sgn * m)) + 1].min(axis=1)
        out_v = G[:, cu(u_wall + sgn * m)]
        in_v = G[:, cu(u_wall - sgn * 2 * m)]
        valley &= np.minimum(out_v, in_v) - line > WALL_VALLEY_CONTRAST * out_v
    vs = valley[sel]
    if vs.mean() < WALL_VALLEY_MIN and vs[:max(1, vs.size // 3)].mean() < WALL_VALLEY_TOP_MIN:
        return _reject(c, "walls not dark lines")
    # no third wall inside: a dark line inside the glass, nearly as dark as the walls'
    # lines, is another tube's wall (a pair spanning a tube and a gap). Specular streaks
    # inside are bright lines, the meniscus is horizontal.
    d = max(2, int(round(0.06 * w2)))
    Gs = G[sel]
    dark = np.zeros(us.size)
    dark[d:-d] = np.median((np.minimum(Gs[:, :-2 * d], Gs[:, 2 * d:]) - Gs[:, d:-d])
                           / np.maximum(np.maximum(Gs[:, :-2 * d], Gs[:, 2 * d:]), 1.0), axis=0)
    u_rel = us - shift
    near_l = np.abs(u_rel - (ul - shift) - 0.5 * d) <= d
    near_r = np.abs(u_rel - (ur - shift) + 0.5 * d) <= d
    wall_dark = min(float(dark[near_l].max()), float(dark[near_r].max())) if near_l.any() and near_r.any() else 0.0
    inner = np.abs(u_rel) <= INNER_WALL_FREE_FRACTION * w2
    if wall_dark > 0 and float(dark[inner].max()) >= 0.5 * wall_dark:
        return _reject(c, "a third wall inside")
    # rim: first row with both walls that starts a run where they mostly stay
    k = max(3, int(round(0.4 * w)))
    on_l = (on | ~light).astype(float)
    run = np.convolve(on_l, np.ones(k), mode="full")[k - 1:k - 1 + on_l.size] / k   # mean of on_l[i:i+k]
    lim = int(np.searchsorted(rows, c.top + RIM_SEARCH_WIDTHS * w))
    starts = np.nonzero(on[:lim] & (run[:lim] >= 0.8))[0]
    if starts.size == 0:
        return _reject(c, "no rim")
    i_rim = int(starts[0])
    rim = float(rows[i_rim])
    near = (rows >= rim - 0.8 * w) & (rows < rim - 0.1 * w)
    # on both sides, as bright as the same columns beside the tube's body (a vertical
    # band keeps its brightness; a bar in front does not)
    backdrop_like = np.ones(rows.size, bool)
    for side in (outside & (us < 0), outside & (us > 0)):
        g_side = G[:, side].mean(axis=1)
        backdrop_like &= g_side >= BACKDROP_LIKE_FRACTION * max(float(np.median(g_side[core])), 1e-6)
    if near.sum() >= 3 and backdrop_like[near].mean() < ABOVE_RIM_LIGHT_MIN:
        return _reject(c, "rim under something dark in front (a rack bar)")
    above = near & light
    if above.sum() >= 3 and on[above].mean() > ABOVE_RIM_MAX:
        return _reject(c, "walls run on above the rim")
    if above.sum() >= 3:
        # above a rim stands the backdrop: no vertical lines there, across the tube's width
        # and beside it. Where it has vertical lines as strong as the walls (a backdrop of
        # vertical bands, seen refracted through the tubes too), two of them pass for walls
        span = np.abs(us) <= 0.75 * w
        ra = rows[above]
        Xa = X[above][:, span]
        vert = (AX[above][:, span] > thr) & (AX[above][:, span] > 2.0 * np.abs(ev.gy[ra[:, None], Xa]))
        if vert.mean() > ABOVE_RIM_LINES_MAX:
            return _reject(c, "vertical lines above the rim (a striped backdrop)")
    a2 = c.a + shift
    r = 0.5 * w2
    # round bottom: the first strong arc (from the rim down) below which the walls stop
    # and do not resume within 1.4 widths (an occluding bar hides them for less; the next
    # rack row starts lower)
    gl = float(np.median(-ev.gx[rows[sel], np.clip(np.round(xc[sel] + ul).astype(int), 0, wd - 1)]))
    gr = float(np.median(ev.gx[rows[sel], np.clip(np.round(xc[sel] + ur).astype(int), 0, wd - 1)]))
    polarity = float(np.sign(gl)) if (POLARITY and np.sign(gl) == np.sign(gr)) else 0.0
    y_lo, y_hi = rim + LENGTH_WIDTHS[0] * w2 - r, min(h - 1 - r, rim + LENGTH_WIDTHS[1] * w2)
    if y_hi <= y_lo:
        return _reject(c, "no room for a bottom")
    ycs = np.arange(np.ceil(y_lo), np.floor(y_hi) + 1)
    # a tube does not run into the left-out area (the card): stop at its edge
    yi = ycs.astype(int) + int(np.ceil(r))
    inside = (yi < h) & ev.valid[np.clip(yi, 0, h - 1), np.clip(np.round(a2 + c.b * ycs).astype(int), 0, wd - 1)]
    if not inside.all():
        ycs = ycs[:int(np.argmin(inside))]
    if ycs.size == 0:
        return _reject(c, "no room for a bottom")
    # walls beyond the sampled rows: extend the row evidence down to y_hi + 2.5 w
    ext = np.arange(yb, int(min(h, y_hi + r + 1.5 * w2)))
    if ext.size:
        xe = c.a + c.b * ext
        def _e(u):  # noqa: E306
            cols = np.clip(np.round(xe[:, None] + u + np.arange(-1, 2)[None, :]).astype(int), 0, wd - 1)
            return ev.ax[ext[:, None], cols].max(axis=1)
        on = np.concatenate([on, (_e(us[il]) > thr) & (_e(us[ir]) > thr)])
        rows = np.concatenate([rows, ext])
    arc = _arc_scores(ev, a2, c.b, r, ycs, level, polarity)
    arc_f = np.nan_to_num(arc, nan=0.0)
    chosen = None
    for j in range(ycs.size):
        if arc_f[j] < ARC_SCORE_MIN or (j > 0 and arc_f[j - 1] > arc_f[j]) or \
                (j + 1 < ycs.size and arc_f[j + 1] > arc_f[j]):
            continue
        yc = ycs[j]
        below = (rows >= yc + 1.1 * r) & (rows < yc + 1.8 * r)
        later = (rows >= yc + r + 0.9 * w2) & (rows < yc + r + 1.4 * w2)
        if below.any() and on[below].mean() < 0.3 and not (later.any() and on[later].mean() >= 0.5):
            chosen = j
            break
    if chosen is None:
        return _reject(c, "no round bottom")
    yc = float(ycs[chosen])
    # a gap between two tubes has walls too, but below them the outlines curve away
    # (outward) rather than toward each other: the inward arc must beat the mirrored one
    out_arc = _arc_scores(ev, a2, c.b, r, np.array([yc]), level, polarity, mirror=True)[0]
    if np.isfinite(out_arc) and out_arc >= GAP_ARC_MARGIN * arc_f[chosen]:
        return _reject(c, "bottom curves outward (a gap)")
    length = yc + r - rim
    if not LENGTH_WIDTHS[0] <= length / w2 <= LENGTH_WIDTHS[1]:
        return _reject(c, "implausible length")
    span = (rows >= rim) & (rows < yc) & np.concatenate([light, np.zeros(rows.size - light.size, bool)])
    coverage = float(on[span].mean()) if span.any() else 0.0
    if coverage < WALL_COVERAGE_MIN:
        return _reject(c, "walls too sparse")
    arc_v = float(arc_f[chosen])
    out.append(_Tube(a=float(a2), b=float(c.b), top=rim, end=yc, w=float(w2),
                     score=float(coverage * arc_v * length * w2),
                     arc=arc_v, coverage=coverage))
    if c.end - (yc + r) > LENGTH_WIDTHS[0] * w:
        rest = _sub_track(c, yc + 1.6 * w, c.end) if c.ys else None
        if rest is not None:
            pending.append(rest)


def _verify_all(cands, ev: _Evidence, known: list[_Tube] | None = None) -> list[_Tube]:
    """Verify hypotheses; one whose axis runs within a tenth of a width of a ``known``
    tube's over most of its rows is that tube again (found at another trial width) and
    is not verified twice."""
    out: list[_Tube] = []
    pending = list(cands)
    known = known or []
    while pending:
        c = pending.pop()
        if any(_same_axis(c, k) for k in known):
            continue
        _verify(c, ev, out, pending)
    return out


def _same_axis(c, k: _Tube, widths: bool = True) -> bool:
    y0, y1 = max(c.top, k.top), min(c.end, k.end)
    if y1 - y0 < 0.5 * (c.end - c.top):
        return False
    ym = 0.5 * (y0 + y1)
    return abs((c.a + c.b * ym) - (k.a + k.b * ym)) < 0.1 * k.w and (not widths or abs(c.w / k.w - 1) < 0.2)


def _drop_overlapping_tubes(tubes: list[_Tube]) -> list[_Tube]:
    """Where two tubes overlap (rows overlap and their axes are closer than the mean
    half-width sum: tubes in a rack stand side by side), keep the better supported."""
    def clash(t, k):
        y0, y1 = max(t.top, k.top), min(t.end, k.end)
        if y1 <= y0:
            return False
        ym = (y0 + y1) / 2
        return abs((t.a + t.b * ym) - (k.a + k.b * ym)) < 0.45 * (t.w + k.w)

    keep: list[_Tube] = []
    for t in sorted(tubes, key=lambda t: -t.score):
        if not any(clash(t, k) for k in keep):
            keep.append(t)
    return keep


def _up_box(t: _Tube) -> BBox:
    xm = t.a + t.b * (t.top + t.end) / 2
    return (int(xm - t.w / 2), int(t.top), int(xm + t.w / 2) + 1, int(t.end + t.w / 2) + 1)


def _consistent_rows(tubes: list[_Tube]) -> list[_Tube]:
    """Drop tubes whose width or length (rim to the bottom's centre) is off their rack row's
    median by more than :data:`ROW_WIDTH_TOLERANCE` (one tube size per rack row: a box that
    runs on into the row above, or stops at a rack bar, is not that tube's)."""
    if len(tubes) < 3:
        return tubes
    order = reading_order([_up_box(t) for t in tubes])
    rows: dict[int, list[int]] = {}
    for i, r in order:
        rows.setdefault(r, []).append(i)
    keep = []
    for members in rows.values():
        med = float(np.median([tubes[i].w for i in members]))
        med_len = float(np.median([tubes[i].end - tubes[i].top for i in members]))
        for i in members:
            t = tubes[i]
            if len(members) < 3 or (abs(t.w / med - 1.0) <= ROW_WIDTH_TOLERANCE
                                    and abs((t.end - t.top) / med_len - 1.0) <= ROW_WIDTH_TOLERANCE):
                keep.append(t)
    return keep






def _strip_peaks(S: np.ndarray, nms: np.ndarray, w: float) -> list:
    """Peaks (strip, centre col, score) of S per strip, one per plateau and at least
    0.6 w apart; a plateau's centre is its middle column."""
    out = []
    is_max = (S >= nms) & (S > PEAK_MIN_SCORE)
    sep = 0.6 * w
    for s in np.nonzero(is_max.any(axis=1))[0]:
        cols = np.nonzero(is_max[s])[0]
        # group runs of adjacent columns (plateaus)
        groups = np.split(cols, np.nonzero(np.diff(cols) > 1)[0] + 1)
        cand = sorted(((float(g.mean()), float(S[s, g[0]])) for g in groups), key=lambda t: -t[1])
        kept: list = []
        for c, v in cand:
            if all(abs(c - k) >= sep for k, _ in kept):
                kept.append((c, v))
        out.extend((int(s), c, v) for c, v in kept)
    return out










def _meniscus(inner: np.ndarray, beside: np.ndarray, flat: np.ndarray, lo: int, hi: int,
              w_full: float) -> int | None:
    """Row (band coordinates) just below the meniscus, or None (step 5).

    inner, beside : (NV, 3) linear RGB profiles along the axis.
    """
    beside_l = beside.mean(axis=1)
    ref = float(np.percentile(beside_l[lo:hi], 95)) if hi > lo else 0.0
    if hi - lo < 6 or ref <= 0:
        return None
    R = inner / np.maximum(beside, 1e-4)
    m = max(2, int(round(EDGE_MARGIN_FRACTION * w_full)))
    light = beside_l > LIGHT_ROW_FRACTION * ref
    # the light rows; then the rows of dark backdrop bands, on their own (a cloudy liquid
    # shows most over dark bands, where its scattered light adds to little; the ratio is
    # noisier there, hence the higher threshold); the top-most meniscus found wins; with
    # none, the light rows again at the fallback threshold
    classes = [(light, MENISCUS_MIN_SCORE),
               (~light & (beside_l > DARK_ROW_MIN_FRACTION * ref), DARK_ROW_SCORE_FACTOR * MENISCUS_MIN_SCORE),
               (light, MENISCUS_FALLBACK_SCORE)]
    # rows well inside dark bands (the edge margin off their edges): where a meniscus
    # hidden in a band is placed from the step of the ratio there
    dark_rows = np.convolve((~classes[1][0]).astype(float), np.ones(2 * m + 1), mode="same") == 0
    found = []
    for k, (cls, min_score) in enumerate(classes):
        if k == 2 and found:
            break
        bad = ~cls | flat
        # leave out a margin at each edge of a dark band or occluder: the inner and beside
        # samples cross a slightly slanted edge at slightly different rows
        bad = np.convolve(bad.astype(float), np.ones(2 * m + 1), mode="same") > 0
        v = _meniscus_rows(R, ~bad, flat, lo, hi, w_full, min_score, dark_rows if k != 1 else None)
        if v is not None:
            found.append(v)
    return min(found) if found else None


def _meniscus_rows(R: np.ndarray, ok: np.ndarray, flat: np.ndarray, lo: int, hi: int, w_full: float,
                   min_score: float, dark_rows: np.ndarray | None = None) -> int | None:
    """:func:`_meniscus` over the rows ``ok`` of the inside/beside ratio ``R`` (NV, 3).

    A meniscus found just below a gap of left-out rows (a dark band) lies inside the gap;
    it is placed where the ratio over the band's own rows (``dark_rows``) crosses half-way
    from its level over the dark rows above to that below, else in the gap's middle.
    """
    # work on the valid rows only, in order: a step or dip is judged against the
    # nearest valid rows above and below, however far a dark band pushes them; none
    # above ``lo`` (the rim and its lip would pass for a step)
    ok = ok.copy()
    ok[:max(lo, 0)] = False
    vv = np.nonzero(ok)[0]
    n = vv.size
    k = max(2, int(round(0.12 * w_full)))
    if n < 2 * k + 3:
        return None
    Rc = R[vv]
    Rl = Rc.mean(axis=1)
    cs = np.vstack([np.zeros((1, 3)), np.cumsum(Rc, axis=0)])
    csl = np.concatenate([[0.0], np.cumsum(Rl)])
    i = np.arange(n)

    def mean3(lo_i, hi_i):
        lo_i, hi_i = np.clip(lo_i, 0, n), np.clip(hi_i, 0, n)
        cnt = np.maximum(hi_i - lo_i, 1)[:, None]
        return (cs[hi_i] - cs[lo_i]) / cnt, hi_i - lo_i

    def mean1(lo_i, hi_i):
        lo_i, hi_i = np.clip(lo_i, 0, n), np.clip(hi_i, 0, n)
        return (csl[hi_i] - csl[lo_i]) / np.maximum(hi_i - lo_i, 1), hi_i - lo_i

    above, na = mean3(i - k, i)          # rows before the boundary above index i
    below, nb = mean3(i, i + k)
    step = np.abs(below - above).mean(axis=1)
    step[(na < k) | (nb < k)] = 0.0
    cen, _ = mean1(i - 1, i + 2)
    far_a, nfa = mean1(i - 2 * k, i - k // 2)
    far_b, nfb = mean1(i + k // 2 + 1, i + 2 * k + 1)
    dip = np.minimum(far_a, far_b) - cen
    dip[(nfa < k) | (nfb < k)] = 0.0
    score = step + np.clip(dip, 0, None)
    score[(vv < lo) | (vv >= hi)] = 0.0
    best = float(score.max())
    if best < min_score:
        return None
    thr = max(min_score, 0.35 * best)
    first = int(np.nonzero(score >= thr)[0][0])
    run_end = first
    while run_end + 1 < n and score[run_end + 1] >= thr:
        run_end += 1
    j = first + int(np.argmax(score[first:run_end + 1]))
    v = int(vv[j])
    if dip[j] > 0.5 * step[j]:
        # just below the dark meniscus line: the first row, going down, where the ratio
        # is back above half-way from the line's darkest to the liquid below it
        half = 0.5 * (cen[j] + far_b[j])
        jj = j
        while jj + 1 < n and vv[jj + 1] - vv[jj] <= 2 and Rl[jj] < half and jj - j < 2 * k:
            jj += 1
        return int(vv[jj]) if jj > j else v + 1
    if j == 0 or vv[j] - vv[j - 1] <= 2:
        return v                       # first row of the liquid
    gap = slice(int(vv[j - 1]) + 1, v)
    if flat[gap].mean() > 0.5:
        return v                       # hidden behind an occluder: first visible liquid row
    g0, g1 = int(vv[j - 1]) + 1, v
    if dark_rows is not None:
        Rd = R.mean(axis=1)
        idx = np.nonzero(dark_rows)[0]
        inside = idx[(idx >= g0) & (idx < g1)]
        above_d = idx[(idx < g0) & (idx >= lo)]
        below_d = idx[(idx >= g1) & (idx < g1 + 3 * (g1 - g0))]
        if inside.size >= 3 and above_d.size >= 3 and below_d.size >= 3:
            top_l, bot_l = float(np.median(Rd[above_d])), float(np.median(Rd[below_d]))
            if abs(bot_l - top_l) >= MENISCUS_FALLBACK_SCORE:
                half = 0.5 * (top_l + bot_l)
                past = (Rd[inside] - half) * np.sign(bot_l - top_l) > 0
                if past.all():
                    return g0                   # the meniscus sits at the band's upper edge
                if not past.any():
                    return g1                   # ... at its lower edge
                return int(inside[int(np.argmax(past))])
    return int(round((g0 + g1 - 1) / 2))       # inside a dark band: its middle


BAND_ALIGN_MAX_FRACTION = 0.1
"""Largest shift (fraction of the tube's width) of the samples beside a tube along its axis
that aligns the backdrop's horizontal bands with those seen through it: a 15° tilted camera
turns lines about 4° against a tube's axis (pinhole geometry), 0.66 widths away ≈ 0.05 widths."""


def _aligned(side: np.ndarray, inner: np.ndarray, lo: int, hi: int, max_shift: int) -> np.ndarray:
    """``side`` (NV, 3) shifted along the axis by the lag (|lag| ≤ ``max_shift``) that best
    correlates its log luminance with that of ``inner`` over rows [lo, hi); unshifted when
    the profiles carry no pattern (plain backdrop) or no lag does clearly better."""
    if hi - lo < 4 * max_shift + 8 or max_shift < 1:
        return side
    a = np.log(side.mean(axis=1) + 1e-3)
    b = np.log(inner.mean(axis=1) + 1e-3)
    if a[lo:hi].std() < 0.1 or b[lo:hi].std() < 0.1:
        return side
    # Pearson correlation at every lag at once: rows of X are a[lo + max_shift + k : ...]
    n = hi - lo - 2 * max_shift
    X = np.lib.stride_tricks.sliding_window_view(a[lo:hi], n)          # (2 max_shift + 1, n)
    y = b[lo + max_shift:hi - max_shift]
    xc = X - X.mean(axis=1, keepdims=True)
    yc = y - y.mean()
    with np.errstate(invalid="ignore", divide="ignore"):
        r = (xc @ yc) / np.sqrt((xc * xc).sum(axis=1) * float(yc @ yc))
    r = np.where(np.isfinite(r), r, -np.inf)
    j = int(np.argmax(r))                  # first best, as the lags run from -max_shift up
    best, best_c, c0 = j - max_shift, float(r[j]), float(r[max_shift])
    if best == 0 or not np.isfinite(c0) or best_c - c0 < 0.02:
        return side
    idx = np.clip(np.arange(side.shape[0]) + best, 0, side.shape[0] - 1)
    return side[idx]


def _refine_full(pixels: np.ndarray, cand: _Candidate, A: np.ndarray, index_hint: int):
    """Step 4 (bottom) and step 5 on full-resolution pixels along the axis.

    Returns a dict of full-resolution geometry.
    """
    import cv2

    from .image import to_linear

    h, w_img = pixels.shape[:2]
    L = A[:, :2]
    pt = A @ np.array([cand.a + cand.b * cand.top, cand.top, 1.0])
    pe = A @ np.array([cand.a + cand.b * cand.end, cand.end, 1.0])
    dv = L @ np.array([cand.b, 1.0])
    dv = dv / np.linalg.norm(dv)
    n = np.array([dv[1], -dv[0]])
    scale = float(np.sqrt(abs(np.linalg.det(L))))
    w_full = cand.w * scale
    length = float(np.dot(pe - pt, dv))
    v0 = -0.3 * w_full
    nv = int(np.ceil(length + 0.9 * w_full - v0)) + 1
    du = n * (1.8 * w_full / (BAND_SAMPLES - 1))
    o = pt + v0 * dv - 0.9 * w_full * n
    M = np.array([[du[0], dv[0], o[0]], [du[1], dv[1], o[1]]], dtype=np.float64)
    band = cv2.warpAffine(pixels, M, (BAND_SAMPLES, nv), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                          borderMode=cv2.BORDER_REPLICATE)
    lin = to_linear(band).astype(np.float32)
    U = np.linspace(-0.9, 0.9, BAND_SAMPLES)
    inner_sel = np.abs(U) < 1 / 6
    beside_sel = (np.abs(U) > 0.58) & (np.abs(U) < 0.75)
    inner = lin[:, inner_sel].mean(axis=1)
    # each side's samples are shifted along the axis onto the inside's rows: under
    # perspective the backdrop's bands are not quite square to the tube's axis
    lo_r, hi_r = int(max(0, -v0)), int(min(nv, length - v0))
    max_shift = int(np.ceil(BAND_ALIGN_MAX_FRACTION * w_full))
    beside = 0.5 * (_aligned(lin[:, beside_sel & (U < 0)].mean(axis=1), inner, lo_r, hi_r, max_shift)
                    + _aligned(lin[:, beside_sel & (U > 0)].mean(axis=1), inner, lo_r, hi_r, max_shift))
    lum = lin.mean(axis=2)
    flat = lum.std(axis=1) < 0.04 * np.maximum(lum.mean(axis=1), 1e-4)
    v_rim = -v0
    v_end = length - v0
    # bottom: last row near the expected round bottom where the axis differs from beside
    diff = np.abs(inner - beside).sum(axis=1) / np.maximum(beside.mean(axis=1) * 3, 1e-3)
    # the walls' end (v_end) from the reduced copy can stop up to about a third of the width
    # short of the round bottom's centre (a band or the solid hides the walls' last rows), so
    # the outline's end is looked for down to 1.3 widths below it; under a tube the axis and
    # the strips beside it see the same backdrop, so no later row differs
    lo_b, hi_b = int(v_end + 0.2 * w_full), int(min(nv, v_end + BOTTOM_SEARCH_WIDTHS * w_full))
    v_bottom = v_end + 0.5 * w_full
    idx = np.nonzero(diff[lo_b:hi_b] > 0.15)[0]
    if idx.size:
        vb = lo_b + idx[-1] + 1.0
        if v_end + 0.3 * w_full <= vb <= v_end + (BOTTOM_SEARCH_WIDTHS - 0.05) * w_full:
            v_bottom = vb
    v_centre = v_bottom - 0.5 * w_full
    v_inner_bottom = v_bottom - WALL_FRACTION * w_full
    lo_m = int(round(v_rim + MENISCUS_RIM_CLEARANCE * w_full))
    # the meniscus is looked for above the round bottom as the walls place it (a bottom
    # found further down must not open the search to a solid's top edge)
    hi_m = int(round(min(v_centre, v_end + 0.3 * w_full) - MENISCUS_LOWEST_FRACTION * w_full))
    v_lt = _meniscus(inner, beside, flat, lo_m, hi_m, w_full)

    def at(v, u=0.0):
        return o + (0.9 * w_full + u) * n + v * dv

    rim_l, rim_r = at(v_rim, -0.5 * w_full), at(v_rim, 0.5 * w_full)
    centre = at(v_centre)
    r = 0.5 * w_full
    xs = [rim_l[0], rim_r[0], centre[0] - r, centre[0] + r]
    ys = [rim_l[1], rim_r[1], centre[1] - r, centre[1] + r]
    x0, y0 = max(0, int(np.floor(min(xs)))), max(0, int(np.floor(min(ys))))
    x1, y1 = min(w_img, int(np.ceil(max(xs)))), min(h, int(np.ceil(max(ys))))
    lt_pt = None if v_lt is None else at(v_lt)
    mid_v = (v_lt if v_lt is not None else v_rim) * 0.5 + v_centre * 0.5
    axis_mid = at(mid_v)
    angle = float(np.degrees(np.arctan2(dv[0], dv[1])))
    return dict(bbox=(x0, y0, x1, y1), axis_col=float(axis_mid[0]), w_full=w_full,
                liquid_top=None if lt_pt is None else int(round(lt_pt[1])),
                centre_row=float(centre[1]), inner_bottom=float(at(v_inner_bottom)[1]),
                angle=angle, axis_row=float(axis_mid[1]))


LAYOUT_LEAN_MIN_PX = 1.0
"""A layout box's lean is followed only when it moves the axis at the box's ends by at least
this many pixels from the box's centre line."""


def _layout_liquid_top(pixels: np.ndarray, region: TubeRegion, lean_deg: float = 0.0) -> int | None:
    """Row just below the meniscus inside a hand-given box (None: no meniscus seen), by
    the finder's own step 5 (:func:`_refine_full`) along the line through the box's centre
    at the photo's lean ``lean_deg`` (degrees, bottom to the right positive): rim at the
    box's top, round bottom's centre half a width above its bottom."""
    x0, y0, x1, y1 = region.bbox
    W, H = float(x1 - x0), float(y1 - y0)
    # a box drawn round a leaning tube (camera roll) is wider than the tube: the lean is
    # the photo's roll (step 1's estimate, ``lean_deg``), the tube's width what the lean
    # leaves of the box's width
    t = float(np.tan(np.radians(lean_deg)))
    if 0.5 * H * abs(t) < LAYOUT_LEAN_MIN_PX:
        # the lean moves the axis by less than a pixel from rim to bottom: nothing to follow
        # at the samples' resolution, only the estimate's own scatter (± a bin, 0.5°)
        t = 0.0
    cos_a = 1.0 / np.sqrt(1.0 + t * t)
    # box width = w / cos + (H - w·(1 + sin)) · |tan| for a capsule of width w (geometry),
    # solved for w to first order: w ≈ (W - H·|tan|) · cos
    w = max(0.5 * W, (W - H * abs(t)) * cos_a)
    if H < 2 * w:
        return None          # too short for a column above a round bottom
    xc, yc = 0.5 * (x0 + x1 - 1), 0.5 * (y0 + y1 - 1)
    top, end = y0 + 0.5 * w * abs(t), y1 - 0.5 * w
    cand = _Candidate(a=xc - t * yc, b=t, top=float(top), end=float(end), w=w, strength=0.0)
    A = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    g = _refine_full(pixels, cand, A, region.index)
    lt = g["liquid_top"]
    if lt is None or not (y0 <= lt < region.bottom_top):
        return None
    return int(lt)


STRIPE_MIN_RUNS = 8
"""Dark runs across the photo (columns of the upright reduced copy, outside the card, dark
in more than half their rows, between columns dark in under 15 %) from which the backdrop
counts as striped along the tubes. Our choice, measured over the 72 photos of
``bench/bench_tubes.py``: plain and horizontally banded backdrops give 0 runs (a rack's
posts and its tubes' contents cover well under half a column), vertical 4 mm bands 17-53."""

STRIPE_DARK_FRACTION = 0.5
"""A pixel is dark (for :func:`_striped_backdrop`) below this fraction of the brightest
pixel within a twentieth of the photo's width on its row (a printed dark band reflects
≲ 10 % of the light paper's light; a glass wall's line or a pale liquid stay above half)."""

STRIPED_BACKDROP_WARNING = (
    "no tubes looked for: the backdrop's dark bands run along the tubes (vertical stripes), "
    "where a band's edge looks like a tube's wall; turn the backdrop so its bands run across "
    "the tubes, use a plain light one, or give --layout")


def _striped_backdrop(rot: np.ndarray, valid: np.ndarray) -> bool:
    """Whether the backdrop of the upright reduced copy is striped along the tubes: many
    columns dark over most of their height, alternating with light ones
    (:data:`STRIPE_MIN_RUNS`). Against such stripes every band edge is a wall candidate and
    the finder's verification passes band pairs for tubes (studio benchmark: 10 % precision),
    so no tubes are reported rather than wrong ones."""
    import cv2

    g = rot.mean(axis=2)
    h, w = g.shape
    win = max(3, int(round(w / 20)) | 1)
    local_max = cv2.dilate(g, np.ones((1, win), np.uint8))
    dark = (g < STRIPE_DARK_FRACTION * local_max) & valid & (local_max > 10.0)
    n = valid.sum(axis=0)
    frac = dark.sum(axis=0) / np.maximum(n, 1)
    frac = frac[n > 0.3 * h]
    # a run: a dark column (> 0.5 of its rows) after a light one (< 0.15)
    state = np.where(frac > 0.5, 1, np.where(frac < 0.15, -1, 0))
    state = state[state != 0]
    runs = int(np.count_nonzero((state[1:] == 1) & (state[:-1] == -1)))
    return runs >= STRIPE_MIN_RUNS


def _search_mask(shape: tuple[int, int], quad, scale: float) -> np.ndarray:
    """Where the finder searches on a reduced copy of ``shape`` (uint8, 1 = search): all but
    the card's quad (full-resolution corners, or None), with a margin round it for its edge
    and shadow."""
    import cv2

    valid = np.ones(shape, np.uint8)
    if quad is not None:
        q = (quad + 0.5) / scale - 0.5
        c = q.mean(axis=0)
        cv2.fillPoly(valid, [np.round(c + (q - c) * 1.08).astype(np.int32)], 0)
    return valid


def _turned(smallf: np.ndarray, valid: np.ndarray, roll: float):
    """The reduced copy turned upright by ``roll`` degrees about its centre: (2×3 matrix,
    turned float pixels, turned valid mask eroded by one pixel off its edge)."""
    import cv2

    hs, ws = smallf.shape[:2]
    M = cv2.getRotationMatrix2D((ws / 2.0, hs / 2.0), roll, 1.0)
    rot = cv2.warpAffine(smallf, M, (ws, hs), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    rvalid = cv2.warpAffine(valid, M, (ws, hs), flags=cv2.INTER_NEAREST, borderValue=0)
    return M, rot, cv2.erode(rvalid, np.ones((3, 3), np.uint8)).astype(bool)


TUBES_ON_SIDE_WARNING = (
    "no upright tubes found, but tubes lie on their side in this photo (its orientation tag may "
    "be missing or wrong): turn the photo so the tubes stand upright, rims at the top, and "
    "analyse it again")


def _tubes_on_their_side(pixels: np.ndarray, quad) -> bool:
    """Where no upright tube was found: whether tubes are found on the quick search's copy
    turned by a quarter turn. A photo whose orientation tag was lost (messaging apps strip
    it) shows the rack on its side; the stages after this one read tubes upright, so the
    person is told to turn the photo rather than have turned tubes read."""
    from .image import reduced_copy

    small, scale = reduced_copy(pixels, max_side=COARSE_MAX_SIDE_PX)
    valid = _search_mask(small.shape[:2], quad, scale)
    sm = np.ascontiguousarray(np.rot90(small)).astype(np.float32)
    va = np.ascontiguousarray(np.rot90(valid))
    _, rot, rvalid = _turned(sm, va, _estimate_roll_deg(sm.mean(axis=2), va.astype(bool)))
    return not _striped_backdrop(rot, rvalid) and bool(_candidates(rot, rvalid))


def find_tubes(pixels: np.ndarray, *, expected: int | None = None, exclude_quad=None) -> TubeFinding:
    """Find the tubes in a rack photo, in reading order.

    Parameters
    ----------
    pixels : ndarray of shape (H, W, 3), uint8 or uint16
        The upright photo, sRGB-encoded.
    expected : int, optional
        How many tubes the user expects; a different count found becomes a warning.
    exclude_quad : array-like of shape (4, 2), optional
        Corners (x, y) in pixels of the reference card, left out of the search.

    Returns
    -------
    TubeFinding
        Regions in full-resolution pixels, ``source="found"``. No tubes found is an
        empty ``regions`` with a warning, not an error.

    Raises
    ------
    TubevisionInputError
        ``pixels`` not an (H, W, 3) uint8/uint16 array, ``expected`` not a positive
        integer, or ``exclude_quad`` not four finite corners.

    Notes
    -----
    The method is described in the comment block above :data:`FIND_MAX_SIDE_PX`.
    Searching runs on a reduced copy (:func:`tubevision.image.reduced_copy`, longer
    side :data:`FIND_MAX_SIDE_PX`); only the samples along each tube's axis that
    place its liquid top and bottom are read at full resolution.
    """
    import cv2

    from .image import reduced_copy

    _validate_pixels(pixels)
    if expected is not None and (not isinstance(expected, (int, np.integer)) or isinstance(expected, bool)
                                 or expected < 1):
        raise TubevisionInputError(f"expected: number of tubes must be a positive integer, got {expected!r}")
    quad = _validate_quad(exclude_quad)
    # coarse to fine: a rack whose tubes come out wide on a small copy is searched there
    # (fast); narrow tubes (many in a row, or a distant rack) or none found: the full search
    coarse = None
    for side in (COARSE_MAX_SIDE_PX, FIND_MAX_SIDE_PX):
        small, scale = reduced_copy(pixels, max_side=side)
        hs, ws = small.shape[:2]
        valid = _search_mask((hs, ws), quad, scale)
        smallf = small.astype(np.float32)
        gray = smallf.mean(axis=2)
        roll = _estimate_roll_deg(gray, valid.astype(bool))
        M, rot, rvalid = _turned(smallf, valid, roll)
        if side == COARSE_MAX_SIDE_PX and _striped_backdrop(rot, rvalid):
            return TubeFinding(regions=(), expected=expected, warnings=(STRIPED_BACKDROP_WARNING,))
        cands = _candidates(rot, rvalid)
        if cands:
            # the tubes found lean together: the roll estimate was off (thin walls' pixel
            # steps pull edge directions toward the grid); turn by their lean and search again
            lean = float(np.degrees(np.arctan(np.median([c.b for c in cands]))))
            if abs(lean) > ROLL_RECHECK_DEG:
                M2, rot2, rvalid2 = _turned(smallf, valid, roll - lean)
                cands2 = _candidates(rot2, rvalid2)
                if len(cands2) > len(cands):
                    cands, M = cands2, M2
        if side != COARSE_MAX_SIDE_PX:
            # a lone wide tube of the quick search stands when the full one finds fewer
            if coarse is not None and len(cands) < len(coarse[0]):
                cands, M, scale = coarse
            break
        if max(pixels.shape[:2]) <= side:
            break
        wide = bool(cands) and float(np.median([c.w for c in cands])) >= COARSE_MIN_WIDTH_PX
        if wide and len(cands) >= COARSE_MIN_TUBES and (expected is None or len(cands) == expected):
            break
        coarse = (cands, M, scale) if wide else None
    Mi = cv2.invertAffineTransform(M)
    A = Mi * scale
    A[:, 2] += 0.5 * scale - 0.5
    found = [_refine_full(pixels, c, A, i) for i, c in enumerate(cands)]
    # reading order in the upright (rotated) frame, where rows are level
    up_boxes = [(int(c.a + c.b * c.top - c.w / 2), int(c.top), int(c.a + c.b * c.top + c.w / 2) + 1,
                 int(c.end + c.w / 2) + 1) for c in cands]
    regions = []
    for k, (i, r) in enumerate(reading_order(up_boxes)):
        g = found[i]
        x0, y0, x1, y1 = g["bbox"]
        wf = g["w_full"]
        c0 = int(round(g["axis_col"] - wf / 6))
        c1 = max(c0 + 1, int(round(g["axis_col"] + wf / 6)))
        centre = int(round(g["centre_row"]))
        ib = min(y1 - 1, int(round(g["inner_bottom"])))
        centre = min(centre, ib)
        lt = g["liquid_top"]
        if lt is not None and not (y0 <= lt < centre):
            lt = None
        regions.append(TubeRegion(index=k, row=r, bbox=(x0, y0, x1, y1), axis_col=g["axis_col"],
                                  inner_col0=max(x0, c0), inner_col1=min(x1, c1), liquid_top=lt,
                                  liquid_bottom=centre, bottom_top=centre, inner_bottom=ib,
                                  source="found", axis_angle_deg=g["angle"], outer_width=float(wf),
                                  axis_row=g["axis_row"]))
    warnings = []
    if not regions:
        if _tubes_on_their_side(pixels, quad):
            warnings.append(TUBES_ON_SIDE_WARNING)
        else:
            warnings.append("no tubes found in the photo; check framing and lighting, or give --layout")
    if expected is not None and len(regions) != expected:
        warnings.append(f"found {len(regions)} tubes but {expected} were expected")
    return TubeFinding(regions=tuple(regions), expected=expected, warnings=tuple(warnings))
