"""Rendered photos and their truth.

Kinds: (2) synthetic scenes with a known answer; (1) published values where named.
Small photos (≤ 480 × 360) keep each test to about a second.
"""

import numpy as np
import pytest

from tubevision.colorimetry import delta_e00, srgb_to_lab
from tubevision.errors import TubevisionInputError
from tubevision.studio import CameraSpec, SceneSpec, TubeSpec, render_scene, save_rendered, suite

SMALL = dict(width_px=480, height_px=360)


def _ideal_scene(**kw):
    base = dict(tubes=(TubeSpec("yellow-solution", fill_mm=55.0), TubeSpec("water"),
                       TubeSpec("brown-precipitate", fill_mm=50.0, pellet_mm=8.0)),
                camera=CameraSpec.ideal(), rack=False, card="plain", specular=0.0, **SMALL)
    base.update(kw)
    return SceneSpec(**base)


@pytest.mark.parametrize("angle", [0.0, 7.0])
def test_neutral_patch_through_ideal_camera_matches_design(angle):
    """Kind 2: a grey patch of the plain target through a colorimetric camera (CIE 1931 CMFs as
    sensitivities, D65, no noise, linear) is within 0.5 ΔE00 of its spectral design value.
    The 8-bit output (IEC 61966-2-1 encoding) limits the agreement to ~0.2 ΔE00."""
    r = render_scene(_ideal_scene(card_angle_deg=angle), seed=3)
    img = r.upright
    for p in r.truth["card"]["patches"]:
        cx, cy = (int(round(v)) for v in p["centre_px"])
        px = img[cy - 2:cy + 3, cx - 2:cx + 3].reshape(-1, 3).astype(float) / 255.0
        lab = srgb_to_lab(px).mean(axis=0)
        assert float(delta_e00(lab, np.array(p["lab_d65"]))) < 0.5, p["id"]


def test_liquid_truth_matches_ideal_render():
    """Kind 2: the truth Lab of each liquid column is what a colorimetric camera sees over the
    central third of the inner width (plain backdrop): within 1.0 ΔE00."""
    from tubevision.colorimetry import linear_srgb_to_xyz, srgb_to_linear, xyz_to_lab

    r = render_scene(_ideal_scene(), seed=3)
    img = r.upright.astype(float) / 255.0
    for t in r.truth["tubes"]:
        if t["liquid"] is None:
            continue
        c0, c1 = t["inner_col0"], t["inner_col1"]
        third = (c1 - c0) / 3.0
        cols = slice(int(np.ceil(c0 + third)), int(np.floor(c1 - third)))
        rows = slice(t["liquid_top"] + 2, t["occluded_rows"] and t["occluded_rows"][0] or t["liquid_bottom"] - 2)
        rows = slice(rows.start, min(rows.stop, t["bottom_top"]) - 1)
        lin = srgb_to_linear(img[rows, cols].reshape(-1, 3)).mean(axis=0)
        lab = xyz_to_lab(linear_srgb_to_xyz(lin))
        assert float(delta_e00(lab, np.array(t["liquid"]["lab"]))) < 1.0, t["contents"]


def test_truth_boxes_are_where_the_tubes_are():
    """Kind 2: inside each truth box the glass differs from the backdrop; just outside it the
    backdrop is untouched (plain backdrop, no rack, no perspective)."""
    spec = _ideal_scene(card="none", camera=CameraSpec.ideal().with_(blur_px=0.0))
    img = render_scene(spec, seed=5).upright.astype(int)
    back = np.median(img[5:20, 5:20].reshape(-1, 3), axis=0)
    r = render_scene(spec, seed=5)
    for t in r.truth["tubes"]:
        x0, y0, x1, y1 = t["bbox"]
        inside = img[y0:y1, x0:x1]
        assert np.abs(inside - back).max(axis=2).mean() > 3
        for strip in (img[y0:y1, x0 - 4:x0 - 1], img[y0:y1, x1 + 1:x1 + 4], img[y0 - 4:y0 - 1, x0:x1],
                      img[y1 + 1:y1 + 4, x0:x1]):
            assert np.abs(strip - back).max() <= 1
        # the walls sit on the box edges: the first/last columns inside are darker than the backdrop
        mid = (y0 + y1) // 2
        assert img[mid, x0:x0 + 3].mean() < back.mean() - 5
        assert img[mid, x1 - 3:x1].mean() < back.mean() - 5


def test_truth_rows_and_pellet():
    """Kind 2: rows ordered rim < meniscus < liquid_top < liquid_bottom ≤ inner_bottom < box end,
    and the pellet's truth height is the spec's."""
    r = render_scene(_ideal_scene(), seed=1)
    mm_per_px = r.truth["mm_per_px"]
    for t in r.truth["tubes"]:
        x0, y0, x1, y1 = t["bbox"]
        assert y0 <= t["rim_row"] < t["meniscus_row"] < t["liquid_top"] < t["liquid_bottom"] <= t["inner_bottom"] < y1
        assert x0 < t["inner_col0"] < t["axis_col"] < t["inner_col1"] < x1
    pel = r.truth["tubes"][2]
    assert pel["state"] == "settled" and pel["pellet"]["height_mm"] == 8.0
    assert (pel["inner_bottom"] - pel["pellet"]["top_row"]) * mm_per_px == pytest.approx(8.0, abs=2 * mm_per_px)
    assert [t["state"] for t in r.truth["tubes"]] == ["clear", "clear", "settled"]


def test_same_seed_same_photo_other_seed_differs():
    spec = SceneSpec(tubes=(TubeSpec("white-cloud"), TubeSpec("blue-solution")), backdrop="hbands", **SMALL)
    a, b, c = (render_scene(spec, seed=s) for s in (11, 11, 12))
    assert np.array_equal(a.pixels, b.pixels) and a.truth == b.truth
    assert not np.array_equal(a.pixels, c.pixels)


@pytest.mark.parametrize("tag", [3, 6, 8])
@pytest.mark.parametrize("ext", [".jpg", ".png"])
def test_exif_orientation_round_trip(tmp_path, tag, ext):
    """Kind 2: the file written carries the tag, and the tool's loader shows the upright photo
    the truth describes (EXIF 2.32 Table 4 orientations)."""
    from tubevision.image import load_photo

    spec = SceneSpec(tubes=(TubeSpec("red-solution"),), exif_orientation=tag, width_px=320, height_px=240)
    r = render_scene(spec, seed=2)
    path = save_rendered(r, tmp_path / f"p{ext}")
    photo = load_photo(path)
    assert photo.pixels.shape[:2] == (240, 320)
    assert np.array_equal(photo.pixels, r.upright)
    assert (tmp_path / "p.truth.json").exists()
    # independent oracle: Pillow's ImageOps.exif_transpose reads the tag and turns the image
    from PIL import Image, ImageOps

    with Image.open(path) as im:
        assert im.getexif().get(0x0112) == tag
        assert np.array_equal(np.asarray(ImageOps.exif_transpose(im).convert("RGB")), r.upright)
    if tag in (6, 8):
        assert r.pixels.shape[:2] == (320, 240)


def test_suite_renders_the_grid_in_order():
    photos = list(suite({"illuminant": ["D65", "A"], "contents": ["water", ("milky", "empty")]},
                        seed=4, base=SceneSpec(tubes=(TubeSpec(), TubeSpec()), width_px=200, height_px=150)))
    pts = [p.truth["conditions"]["grid"] for p in photos]
    assert pts == [{"illuminant": "D65", "contents": "water"}, {"illuminant": "D65", "contents": ["milky", "empty"]},
                   {"illuminant": "A", "contents": "water"}, {"illuminant": "A", "contents": ["milky", "empty"]}]
    assert [t["state"] for t in photos[1].truth["tubes"]] == ["cloudy", "empty"]
    assert photos[1].truth["tubes"][1]["liquid"] is None


def test_bad_specs_raise_one_line_messages():
    with pytest.raises(TubevisionInputError, match="give 1-24"):
        render_scene(SceneSpec(tubes=tuple(TubeSpec() for _ in range(25))), seed=0)
    with pytest.raises(TubevisionInputError, match="fill_mm"):
        render_scene(SceneSpec(tubes=(TubeSpec(fill_mm=2.0),)), seed=0)
    with pytest.raises(TubevisionInputError, match="backdrop"):
        render_scene(SceneSpec(backdrop="tartan"), seed=0)
    with pytest.raises(TubevisionInputError, match="white_balance"):
        CameraSpec(white_balance="magic")
    with pytest.raises(TubevisionInputError, match="exif_orientation"):
        render_scene(SceneSpec(exif_orientation=5), seed=0)


@pytest.mark.parametrize("angle", [0.0, -6.0])
def test_card_corners_are_where_the_card_is(angle):
    """Kind 2: the plain target has a 2 mm black frame; 1 mm inside each truth corner the photo
    is dark, 2 mm outside it the light backdrop shows; mm_per_px matches the corner spacing."""
    spec = _ideal_scene(card_angle_deg=angle, camera=CameraSpec.ideal().with_(perspective=0.02))
    r = render_scene(spec, seed=8)
    card = r.truth["card"]
    q = np.array(card["corners_px"])
    centre = q.mean(axis=0)
    mmpp = r.truth["mm_per_px"]
    img = r.upright.astype(float).mean(axis=2)
    for c in q:
        u = (centre - c) / np.linalg.norm(centre - c)
        x_in, y_in = c + u * (1.0 / mmpp) * np.sqrt(2)
        x_out, y_out = c - u * (2.0 / mmpp) * np.sqrt(2)
        assert img[int(y_in), int(x_in)] < 60
        assert img[int(y_out), int(x_out)] > 180
    width_mm = np.linalg.norm(q[1] - q[0]) * mmpp
    assert width_mm == pytest.approx(card["size_mm"][0], rel=0.05)


def test_light_gradient_brightens_one_side():
    """Kind 2: a +20 % left→right light gradient makes the right of the backdrop brighter
    in linear light by about that much (ideal camera, so the photo is linear in light)."""
    from tubevision.colorimetry import srgb_to_linear

    spec = _ideal_scene(card="none", light_gradient=(0.2, 0.0), backdrop="plain")
    img = srgb_to_linear(render_scene(spec, seed=0).upright.astype(float) / 255.0)
    left, right = img[5:40, 5:25, 1].mean(), img[5:40, -25:-5, 1].mean()
    assert right / left == pytest.approx(1.1 / 0.9, rel=0.03)
