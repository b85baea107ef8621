"""Stage 3, tubes: where each tube is, and which parts of it to measure.

Boxes follow the contract: ``[x0, y0, x1, y1]`` in pixels of the upright
photo, x0/y0 inclusive, x1/y1 exclusive. Inside the code arrays are indexed
``[row, col]``; :func:`bbox_to_slices` is the one conversion.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field

import numpy as np

from .errors import TubevisionInputError

__all__ = [
    "TubeRegion",
    "TubeFinding",
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
    axis. ``source`` is ``"found"`` or ``"layout"``.
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
    is the box's top until a finder that sees the meniscus supplies it.
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
    regions = tuple(
        _geometry_in_box(pixels, boxes[i], index=k, row=r, source="layout")
        for k, (i, r) in enumerate(reading_order(boxes))
    )
    warnings = () if regions else ("layout lists no tubes",)
    return TubeFinding(regions=regions, expected=len(boxes), warnings=warnings)


def find_tubes(pixels: np.ndarray, *, expected: int | None = None, exclude_quad=None) -> TubeFinding:
    """Find the tubes in a photo. (Automatic finding arrives with the tubes stage's finder.)"""
    raise NotImplementedError("automatic tube finding is not built yet; pass --layout")
