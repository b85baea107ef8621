"""Tests of tubevision.tubes.

Kinds (tubevision STYLE §6): [synthetic] drawn scenes with a known answer
(tests/tubes/_scene.py, invented scenes; truth boxes come from the same
geometry that drew them), [published] values from a published or external
source, [golden] regression values of our own code.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from tubevision.errors import TubevisionInputError
from tubevision.tubes import (TubeFinding, TubeRegion, bbox_to_slices, find_tubes, parse_layout,
                              reading_order, tubes_from_layout)

from ._scene import Scene, render_scene

IOU_MIN = 0.85          # the task's mean box IoU target, held per tube here
LIQUID_TOP_TOL_PX = 3.0  # ≈ 1 mm at the drawn scale (a 16 mm tube drawn 34 px wide → 0.47 mm/px)


def _iou(a, b):
    x0, y0, x1, y1 = max(a[0], b[0]), max(a[1], b[1]), min(a[2], b[2]), min(a[3], b[3])
    inter = max(0, x1 - x0) * max(0, y1 - y0)
    return inter / ((a[2] - a[0]) * (a[3] - a[1]) + (b[2] - b[0]) * (b[3] - b[1]) - inter)


def _match(finding: TubeFinding, truth: dict):
    """Pairs (truth tube, region) in reading order; asserts one region per truth tube."""
    tubes = truth["tubes"]
    assert len(finding.regions) == len(tubes), [r.bbox for r in finding.regions]
    pairs = []
    for t in tubes:
        best = max(finding.regions, key=lambda r: _iou(r.bbox, t["bbox"]))
        pairs.append((t, best))
    return pairs


def _check(scene: Scene, *, iou_min=IOU_MIN, lt_tol=LIQUID_TOP_TOL_PX):
    img, truth = render_scene(scene)
    finding = find_tubes(img, exclude_quad=truth["card_quad"])
    pairs = _match(finding, truth)
    for t, r in pairs:
        assert _iou(r.bbox, t["bbox"]) >= iou_min, (r.bbox, t["bbox"])
        if t["liquid_top"] is None:
            assert r.liquid_top is None, (r.bbox, r.liquid_top)
        else:
            assert r.liquid_top is not None, r.bbox
            assert abs(r.liquid_top - t["liquid_top"]) <= lt_tol, (r.liquid_top, t["liquid_top"])
        x0, y0, x1, y1 = r.bbox
        assert x0 <= r.inner_col0 < r.inner_col1 <= x1
        assert y0 <= r.bottom_top <= r.inner_bottom < y1
        assert r.source == "found"
    return img, truth, finding


# ----------------------------------------------------------------- hard cases

def test_colourless_empty_coloured_and_pellet_on_plain_backdrop():
    """[synthetic] Colourless water, a blue solution, an empty tube and a pellet, behind
    a rack bar: every tube found, boxes within IoU 0.85, liquid tops within 3 px, the
    empty tube has no liquid top."""
    _check(Scene(contents=("colourless", "blue", "empty", "pellet")))


def test_all_colourless_water_twelve_tubes():
    """[synthetic] Twelve tubes of colourless water: only the glass edges show them."""
    _check(Scene(contents=("colourless",) * 12, size=(1000, 500), tube_w=26, tube_h=170))


def test_rolled_camera():
    """[synthetic] Camera roll of −8°: boxes cover the leaning tubes."""
    img, truth, finding = _check(Scene(contents=("colourless", "blue", "empty", "pellet", "cloudy", "red"),
                                       roll_deg=-8, size=(800, 480)))
    for t, r in _match(finding, truth):
        (ax0, ay0), (ax1, ay1) = t["axis"]
        lean = np.degrees(np.arctan2(ax1 - ax0, ay1 - ay0))
        assert abs(r.axis_angle_deg - lean) < 1.5


def test_one_empty_tube():
    """[synthetic] A single empty tube with no rack."""
    _check(Scene(contents=("empty",), size=(400, 400), tube_w=50, tube_h=300, rack=False))


# ----------------------------------------------------------------- edges and warnings

def test_no_tubes_gives_empty_finding_and_warning():
    """[synthetic] A plain backdrop (with noise) has no tubes: empty result, a warning."""
    rng = np.random.default_rng(5)  # seed fixes the noise
    img = np.clip(200 + rng.normal(0, 3, (300, 400, 3)), 0, 255).astype(np.uint8)
    f = find_tubes(img, expected=3)
    assert f.regions == ()
    assert any("no tubes" in w for w in f.warnings)
    assert any("found 0 tubes but 3 were expected" in w for w in f.warnings)


def test_expected_count_mismatch_names_both_counts():
    img, _ = render_scene(Scene(contents=("blue", "red")))
    f = find_tubes(img, expected=5)
    assert len(f.regions) == 2
    assert f.expected == 5
    assert "found 2 tubes but 5 were expected" in f.warnings


def test_expected_count_match_has_no_warning():
    img, _ = render_scene(Scene(contents=("blue", "red")))
    assert find_tubes(img, expected=2).warnings == ()


def test_card_quad_is_left_out():
    """[synthetic] The card's patches have vertical edges; inside exclude_quad they are
    not taken for tubes."""
    _check(Scene(contents=("blue", "empty", "colourless"), card=True, size=(700, 480)))


@pytest.mark.parametrize("bad, msg", [
    (np.zeros((10, 10), np.uint8), r"\(H, W, 3\)"),
    (np.zeros((10, 10, 3), np.float32), "uint8 or uint16"),
    ([[1, 2, 3]], r"\(H, W, 3\)"),
])
def test_bad_pixels_raise(bad, msg):
    with pytest.raises(TubevisionInputError, match=msg):
        find_tubes(bad)


def test_bad_expected_and_quad_raise():
    img = np.full((50, 50, 3), 200, np.uint8)
    with pytest.raises(TubevisionInputError, match="positive integer"):
        find_tubes(img, expected=0)
    with pytest.raises(TubevisionInputError, match="4 finite"):
        find_tubes(img, exclude_quad=[[0, 0], [1, 1]])


# ----------------------------------------------------------------- layout files

def test_layout_roundtrip_and_reading_order():
    text = json.dumps({"tubes": [{"bbox": [300, 10, 340, 200]}, {"bbox": [10, 12, 50, 201]},
                                 {"bbox": [10, 250, 50, 440]}]})
    boxes = parse_layout(text, "rack.json")
    img = np.full((460, 400, 3), 220, np.uint8)
    f = tubes_from_layout(img, boxes)
    assert [r.bbox for r in f.regions] == [(10, 12, 50, 201), (300, 10, 340, 200), (10, 250, 50, 440)]
    assert [r.row for r in f.regions] == [0, 0, 1]
    assert [r.id for r in f.regions] == ["T1", "T2", "T3"]
    assert all(r.source == "layout" for r in f.regions)


@pytest.mark.parametrize("text, msg", [
    ("{", "rack.json line 1: not valid JSON"),
    ("[]", "rack.json: expected"),
    ('{"tubes": [{"bbox": [1, 2, 3]}]}', r"rack.json: tubes\[0\].bbox must be four numbers"),
    ('{"tubes": [{"bbox": [1, 2, 3, "4"]}]}', r"tubes\[0\].bbox must be four numbers"),
    ('{"tubes": [{"bbox": [5, 2, 3, 9]}]}', "x0 < x1"),
    ('{"tubes": [7]}', r"tubes\[0\].bbox"),
])
def test_layout_errors_name_file_and_fault(text, msg):
    with pytest.raises(TubevisionInputError, match=msg):
        parse_layout(text, "rack.json")


def test_layout_box_outside_photo_is_an_error():
    img = np.full((100, 100, 3), 220, np.uint8)
    with pytest.raises(TubevisionInputError, match="outside the 100x100 photo"):
        tubes_from_layout(img, [(0, 0, 50, 101)])


def test_bbox_to_slices_half_open():
    a = np.arange(100).reshape(10, 10)
    rows, cols = bbox_to_slices((2, 3, 5, 7))
    assert a[rows, cols].shape == (4, 3)


def test_reading_order_two_rows():
    boxes = [(200, 300, 240, 500), (10, 0, 50, 200), (10, 302, 50, 498), (100, 5, 140, 205)]
    assert reading_order(boxes) == [(1, 0), (3, 0), (2, 1), (0, 1)]


def test_region_is_frozen():
    r = TubeRegion(index=0, row=0, bbox=(0, 0, 10, 40), axis_col=4.5, inner_col0=3, inner_col1=7,
                   liquid_top=10, liquid_bottom=35, bottom_top=35, inner_bottom=39)
    with pytest.raises(AttributeError):
        r.index = 2
