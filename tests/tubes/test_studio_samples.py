"""Tube finding on the studio's sample photos (sample_images/, renders with truth beside).

Kinds (tubevision STYLE §6): [synthetic] studio renders (tubevision.studio, invented
scenes) read from their JPEG files through :func:`tubevision.image.load_photo`, so the
EXIF orientation is applied as for a user's photo; the truth JSON beside each photo comes
from the renderer's geometry, not from the finder.

What a user cares about: every tube found once, no false tube in the record, boxes from
rim to bottom (IoU ≥ 0.85, the issue's mean-IoU target held per tube), the liquid top
within the issue's 1 mm on average, empty tubes without a liquid top, reading order.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from tubevision.image import load_photo
from tubevision.tubes import find_tubes

SAMPLES = Path(__file__).resolve().parents[2] / "sample_images"
IOU_MIN = 0.85
LIQUID_TOP_MEAN_MM = 1.0      # issue 5 target
LIQUID_TOP_MAX_MM = 3.0       # per tube: a meniscus hidden in a dark band of the printed backdrop
                              # is placed inside the band and its edge margins (4 mm + 2 × 0.05
                              # widths), at most about half of that, 2.8 mm, away


def _iou(a, b) -> float:
    x0, y0, x1, y1 = max(a[0], b[0]), max(a[1], b[1]), min(a[2], b[2]), min(a[3], b[3])
    inter = max(0, x1 - x0) * max(0, y1 - y0)
    return inter / ((a[2] - a[0]) * (a[3] - a[1]) + (b[2] - b[0]) * (b[3] - b[1]) - inter)


def _load(stem: str):
    photo = load_photo(SAMPLES / f"{stem}.jpg")
    truth = json.loads((SAMPLES / f"{stem}.truth.json").read_text(encoding="utf-8"))
    quad = truth["card"]["corners_px"] if truth.get("card") else None
    return photo, truth, find_tubes(photo.pixels, exclude_quad=quad)


def _pairs(finding, truth):
    """Each found region with its best truth tube; every region must match one (no false
    tube) and every truth tube must be matched once."""
    pairs = []
    for r in finding.regions:
        ious = [_iou(r.bbox, t["bbox"]) for t in truth["tubes"]]
        k = int(np.argmax(ious))
        assert ious[k] >= 0.5, f"false tube {r.bbox}"
        pairs.append((truth["tubes"][k], r, ious[k]))
    assert sorted(t["index"] for t, _, _ in pairs) == list(range(len(truth["tubes"]))), \
        [r.bbox for r in finding.regions]
    return pairs


@pytest.mark.parametrize("stem", ["mixed-plain-d65", "turbidity-series-hbands", "demo-chloride-step",
                                  "two-rows-fl11", "rotated-exif6-led"])
def test_sample_tubes_found_once_with_tight_boxes_and_liquid_tops(stem):
    """[synthetic] Plain and banded backdrops, the demo render (banded, card beside), two
    rack rows, a photo stored turned with EXIF orientation 6: every tube once, boxes
    IoU ≥ 0.85 in upright pixels, liquid tops within 1 mm on average (≤ 3 mm each) where
    the finder gives one, none for the empty tube."""
    photo, truth, finding = _load(stem)
    assert (photo.pixels.shape[1], photo.pixels.shape[0]) == tuple(truth["size"])   # upright
    pairs = _pairs(finding, truth)
    errs = []
    for t, r, v in pairs:
        assert v >= IOU_MIN, (t["index"], r.bbox, t["bbox"])
        if t["liquid_top"] is None:
            assert r.liquid_top is None, (t["index"], r.liquid_top)
        elif r.liquid_top is not None:
            errs.append(abs(r.liquid_top - t["liquid_top"]) * truth["mm_per_px"])
    if errs:
        assert max(errs) <= LIQUID_TOP_MAX_MM, errs
        assert float(np.mean(errs)) <= LIQUID_TOP_MEAN_MM, errs
    assert finding.warnings == ()


@pytest.mark.parametrize("stem", ["mixed-plain-d65", "turbidity-series-hbands", "two-rows-fl11"])
def test_liquid_top_found_for_every_filled_tube(stem):
    """[synthetic] Colourless water included: on these photos no filled tube is taken
    for an empty one."""
    _, truth, finding = _load(stem)
    for t, r, _ in _pairs(finding, truth):
        if t["liquid_top"] is not None:
            assert r.liquid_top is not None, (t["index"], t["contents"])


def test_two_rows_reading_order():
    """[synthetic] Two rack rows: rows top to bottom, left to right within a row, as the
    truth (reading order by construction of the scene) numbers them."""
    _, truth, finding = _load("two-rows-fl11")
    got = [max(range(len(truth["tubes"])), key=lambda k: _iou(r.bbox, truth["tubes"][k]["bbox"]))
           for r in finding.regions]
    assert got == list(range(len(truth["tubes"])))
    assert [r.row for r in finding.regions] == [t["row"] for t in truth["tubes"]]
    assert [r.index for r in finding.regions] == list(range(len(finding.regions)))


def test_vertical_bands_give_no_false_tube():
    """[synthetic] A backdrop of dark vertical bands makes pairs of vertical edges at any
    width; none of them may be reported as a tube (a false tube pollutes the record)."""
    _, truth, finding = _load("vbands-warm")
    for r in finding.regions:
        assert max(_iou(r.bbox, t["bbox"]) for t in truth["tubes"]) >= 0.5, f"false tube {r.bbox}"


def test_vertical_bands_are_named_in_a_warning():
    """[synthetic] Against vertical bands the finder says why it reports no tubes and what to
    do (turn the backdrop, or give --layout); the other samples' backdrops (plain, horizontal
    bands) are not taken for stripes."""
    from tubevision.tubes import STRIPED_BACKDROP_WARNING

    _, _, finding = _load("vbands-warm")
    assert STRIPED_BACKDROP_WARNING in finding.warnings
    assert "--layout" in STRIPED_BACKDROP_WARNING
    for stem in ("mixed-plain-d65", "two-rows-fl11", "turbidity-series-hbands", "demo-chloride-step"):
        _, truth, finding = _load(stem)
        assert STRIPED_BACKDROP_WARNING not in finding.warnings, stem
        assert finding.regions, stem


@pytest.mark.xfail(strict=True, reason="known shortfall: tubes in front of dark vertical bands are not "
                                       "found (their walls vanish against the dark bands)")
def test_vertical_bands_tubes_found():
    """[synthetic] The tubes in front of vertical bands are all found."""
    _, truth, finding = _load("vbands-warm")
    _pairs(finding, truth)


def test_masks_outline_edge_and_specular_streaks():
    """[synthetic] The masks of each found tube: the outline fills its box as a round-bottom
    capsule does, the glass-edge margin lies along the outline and leaves the central third
    alone, the studio's strong specular streak (tubevision.studio.scene.SPECULAR_STREAKS:
    at d/R = -0.62) is marked in most rows above the bottom, and the central third, where
    colour is measured, is not taken for a highlight."""
    from tubevision.studio.scene import SPECULAR_STREAKS
    from tubevision.tubes import tube_masks

    photo, truth, finding = _load("mixed-plain-d65")
    strong = max(SPECULAR_STREAKS, key=lambda s: s[2])[0]
    for t, r, _ in _pairs(finding, truth):
        m = tube_masks(photo.pixels, r)
        x0, y0, x1, y1 = r.bbox
        assert m.outline.shape == (y1 - y0, x1 - x0)
        fill = m.outline.mean()
        assert 0.85 <= fill <= 0.99, fill                     # capsule in its box (lean allowed)
        assert not (m.glass_edge & ~m.outline).any()
        mid = (r.liquid_bottom + y0) // 2 - y0
        assert not m.glass_edge[mid, r.inner_col0 - x0:r.inner_col1 - x0].any()
        assert m.glass_edge[mid].any()
        rad = 0.5 * r.outer_width
        u = (np.arange(x0, x1) - r.axis_col) / rad
        body = m.specular[: r.bottom_top - y0]
        at_streak = body[:, np.abs(u - strong) <= 0.2].any(axis=1)
        assert at_streak.mean() >= 0.5, (t["index"], at_streak.mean())
        assert body[:, np.abs(u) < 1 / 3].mean() < 0.02, t["index"]


@pytest.mark.parametrize("stem", ["mixed-plain-d65", "turbidity-series-hbands", "two-rows-fl11",
                                  "rotated-exif6-led"])
def test_layout_boxes_get_the_meniscus(stem):
    """[synthetic] The truth boxes given by hand (``--layout``): each filled tube's liquid
    top is the meniscus the renderer drew, within 1.5 mm (not the box's top, where the
    measure stage would read air); in the empty tube no meniscus is invented (its liquid
    top stays the box's top, the whole column read as before)."""
    from tubevision.tubes import tubes_from_layout

    photo = load_photo(SAMPLES / f"{stem}.jpg")
    truth = json.loads((SAMPLES / f"{stem}.truth.json").read_text(encoding="utf-8"))
    finding = tubes_from_layout(photo.pixels, [tuple(t["bbox"]) for t in truth["tubes"]])
    by_box = {tuple(t["bbox"]): t for t in truth["tubes"]}
    assert len(finding.regions) == len(truth["tubes"])
    for r in finding.regions:
        t = by_box[r.bbox]
        if t["liquid_top"] is None:
            assert r.liquid_top == r.bbox[1], (t["index"], r.liquid_top)
        else:
            assert abs(r.liquid_top - t["liquid_top"]) * truth["mm_per_px"] <= 1.5, \
                (t["index"], r.liquid_top, t["liquid_top"])


def test_a_photo_on_its_side_says_so():
    """[synthetic] A rack photo whose orientation tag was lost shows the tubes on their side:
    no tubes are reported (the later stages read tubes upright), and the warning says to turn
    the photo rather than that there are no tubes."""
    from tubevision.tubes import TUBES_ON_SIDE_WARNING

    photo, truth, _ = _load("mixed-plain-d65")
    h, w = photo.pixels.shape[:2]
    turned = np.ascontiguousarray(np.rot90(photo.pixels))          # a quarter turn, counter-clockwise
    quad = np.asarray(truth["card"]["corners_px"], float)
    quad = np.stack([quad[:, 1], w - 1 - quad[:, 0]], axis=1)      # (x, y) -> (y, W - 1 - x)
    finding = find_tubes(turned, exclude_quad=quad)
    assert finding.regions == ()
    assert finding.warnings == (TUBES_ON_SIDE_WARNING,)
