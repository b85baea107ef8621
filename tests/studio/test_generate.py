"""Random scenes, the demo scene and the camera pipeline.

Kinds: (2) synthetic scenes with a known answer.
"""

import numpy as np
import pytest

from tubevision.colorimetry import delta_e00, srgb_to_lab
from tubevision.errors import TubevisionInputError
from tubevision.studio import CameraSpec, SceneSpec, TubeSpec, demo_scene, random_scene, render_scene
from tubevision.studio.camera import colour_matrix


def test_random_scenes_are_reproducible_and_valid():
    # seeds 0-5 of numpy's default PCG64 generator; the assertions hold for any seed
    for seed in range(6):
        a = random_scene(np.random.default_rng(seed), n_tubes=(1, 24))
        b = random_scene(np.random.default_rng(seed), n_tubes=(1, 24))
        assert a == b
        r = render_scene(a.with_(width_px=320, height_px=240), seed=seed)
        assert len(r.truth["tubes"]) == len(a.tubes)
        assert r.upright.shape == (240, 320, 3)
        idx = [(t["row"], t["axis_col"]) for t in r.truth["tubes"]]
        assert idx == sorted(idx)   # reading order: rows top to bottom, then left to right


def test_random_scene_bad_range():
    with pytest.raises(TubevisionInputError, match="n_tubes"):
        random_scene(np.random.default_rng(0), n_tubes=(0, 30))


def test_demo_scene_is_the_chloride_step_with_control_and_blank():
    spec = demo_scene()
    labels = [t.label for t in spec.tubes]
    assert labels[:2] == ["control", "blank"] and len(labels) == 6
    r = render_scene(spec.with_(width_px=504, height_px=378), seed=0)
    states = [t["state"] for t in r.truth["tubes"]]
    assert states[0] == "settled" and states[1] == "clear"
    assert r.truth["tubes"][0]["pellet"]["colour_name"] == "white"


@pytest.mark.parametrize("sensor", ["nikon5100-npl", "sigma-sdmerill-npl", "phone-a", "ideal-cmf"])
def test_colour_matrix_keeps_white_and_fits_ideal_camera_exactly(sensor):
    """The fitted matrix maps raw white to sRGB white (its constraint); for the colorimetric
    camera it is the exact XYZ→sRGB map (IEC 61966-2-1), so the fit residual there is ~0."""
    m = colour_matrix(sensor)
    np.testing.assert_allclose(m @ np.ones(3), np.ones(3), atol=1e-9)
    if sensor == "ideal-cmf":
        from tubevision.colorimetry import M_XYZ_TO_SRGB
        from tubevision.studio.spectra import illuminant_spd, object_xyz

        xyz_w = object_xyz(np.ones(81), illuminant_spd("D65"))
        np.testing.assert_allclose(m, M_XYZ_TO_SRGB @ np.diag(xyz_w), atol=2e-3)


def test_phone_camera_renders_grey_patches_near_design_under_d65():
    """Kind 2: a phone-like sensor with its fitted matrix, true white balance, no tone curve or
    saturation, shows the grey steps of the plain target within 3 ΔE00 of their design (the
    sensor is not colorimetric, and exposure/vignetting are off)."""
    cam = CameraSpec(sensor="nikon5100-npl", exposure_ev=0.0, white_balance="true", tone=0.0, saturation=1.0,
                     full_well_e=None, blur_px=0.0, vignetting=0.0, jpeg_quality=None, perspective=0.0)
    spec = SceneSpec(tubes=(TubeSpec(),), camera=cam, card="plain", width_px=480, height_px=360)
    for ill in ("D65", "A", "FL11"):
        r = render_scene(spec.with_(illuminant=ill), seed=0)
        for p in r.truth["card"]["patches"]:
            cx, cy = (int(round(v)) for v in p["centre_px"])
            px = r.upright[cy - 2:cy + 3, cx - 2:cx + 3].reshape(-1, 3) / 255.0
            assert float(delta_e00(srgb_to_lab(px).mean(axis=0), np.array(p["lab_d65"]))) < 3.0, (ill, p["id"])


def test_noise_grows_with_smaller_full_well():
    """Kind 2: Poisson-Gaussian noise — a smaller full well gives a noisier flat backdrop."""
    base = SceneSpec(tubes=(TubeSpec(),), card="none", rack=False, width_px=320, height_px=240)
    sds = []
    for fw in (20000.0, 2000.0):
        cam = CameraSpec(full_well_e=fw, blur_px=0.0, vignetting=0.0, jpeg_quality=None, perspective=0.0)
        img = render_scene(base.with_(camera=cam), seed=9).upright.astype(float)
        sds.append(img[5:60, 5:60, 1].std())
    assert sds[1] > 2 * sds[0]
