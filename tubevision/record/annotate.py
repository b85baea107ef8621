"""The annotated image: what the tool looked at, drawn over the photo.

A pure function of the photo's pixels and its record; writing the PNG is
separate. The drawing is made on a reduced copy (longer side
:data:`ANNOTATED_MAX_SIDE_PX`) so a 12-megapixel photo does not cost a
12-megapixel PNG encode; the record's coordinates stay in full-resolution
pixels and are scaled here.
"""

from __future__ import annotations

import numpy as np

__all__ = ["ANNOTATED_MAX_SIDE_PX", "LEGEND", "STATE_COLOURS", "annotate", "encode_png"]

ANNOTATED_MAX_SIDE_PX = 2000
"""Longer side of the annotated image: enough to read every tube's id on a
screen, small enough to encode in well under a second (reason)."""

STATE_COLOURS = {  # RGB, chosen for contrast on light backdrops (our own choice)
    "clear": (0, 150, 255),
    "cloudy": (255, 140, 0),
    "settled": (200, 0, 200),
    "empty": (120, 120, 120),
}
_LIQUID = (0, 200, 80)
_BOTTOM = (230, 30, 30)
_CARD = (255, 220, 0)

LEGEND = tuple((state, rgb) for state, rgb in STATE_COLOURS.items()) + (
    ("liquid column measured", _LIQUID), ("bottom region (settled solid)", _BOTTOM), ("card", _CARD))
"""What each colour of the annotated image marks, for a caption or legend."""


def annotate(pixels: np.ndarray, record: dict, *, max_side: int = ANNOTATED_MAX_SIDE_PX) -> np.ndarray:
    """Draw each tube's box, id, liquid column and bottom region, and the card outline.

    Parameters
    ----------
    pixels : ndarray (H, W, 3) uint8 or uint16 — the upright photo, sRGB-encoded.
    record : the photo's evidence record (``tubevision.record/1``).

    Returns
    -------
    ndarray (h, w, 3) uint8 — a new array; ``pixels`` is not changed.
    """
    import cv2

    from ..image import reduced_copy

    small, scale = reduced_copy(pixels, max_side=max_side)
    canvas = np.ascontiguousarray(small)
    s = 1.0 / scale
    thick = max(1, int(round(max(canvas.shape[:2]) / 700)))
    font = max(0.4, max(canvas.shape[:2]) / 2200)

    def pt(x, y):
        return int(round(x * s)), int(round(y * s))

    corners = (record.get("calibration") or {}).get("card_corners_px")
    if corners:
        quad = np.array([pt(x, y) for x, y in corners], dtype=np.int32)
        cv2.polylines(canvas, [quad], True, _CARD, thick + 1, cv2.LINE_AA)
        cv2.putText(canvas, "card", (int(quad[:, 0].min()), int(quad[:, 1].min()) - 4),
                    cv2.FONT_HERSHEY_SIMPLEX, font, _CARD, thick, cv2.LINE_AA)
    for tube in record.get("tubes", []):
        x0, y0, x1, y1 = tube["bbox"]
        colour = STATE_COLOURS.get(tube.get("state"), (255, 255, 255))
        # cv2.rectangle treats both corners as inclusive: the box's end is x1 - 1, y1 - 1.
        cv2.rectangle(canvas, pt(x0, y0), pt(x1 - 1, y1 - 1), colour, thick, cv2.LINE_AA)
        g = tube.get("geometry") or {}
        c0, c1 = g.get("inner_cols", (x0, x1))
        if g.get("liquid_top") is not None:
            cv2.rectangle(canvas, pt(c0, g["liquid_top"]), pt(c1 - 1, g["liquid_bottom"] - 1),
                          _LIQUID, max(1, thick - 1), cv2.LINE_AA)
        if "bottom_top" in g:
            cv2.rectangle(canvas, pt(c0, g["bottom_top"]), pt(c1 - 1, g["inner_bottom"]),
                          _BOTTOM, max(1, thick - 1), cv2.LINE_AA)
        label = tube["id"]
        org = pt(x0, y0)
        org = (org[0], max(12, org[1] - 6))
        cv2.putText(canvas, label, org, cv2.FONT_HERSHEY_SIMPLEX, font, (0, 0, 0), thick + 2, cv2.LINE_AA)
        cv2.putText(canvas, label, org, cv2.FONT_HERSHEY_SIMPLEX, font, colour, thick, cv2.LINE_AA)
    return canvas


def encode_png(rgb: np.ndarray) -> bytes:
    """PNG bytes of an (H, W, 3) uint8 RGB array."""
    import cv2

    ok, buf = cv2.imencode(".png", np.ascontiguousarray(rgb[:, :, ::-1]))
    if not ok:  # pragma: no cover - cv2 encodes any uint8 array
        raise RuntimeError("PNG encoding failed")
    return buf.tobytes()
