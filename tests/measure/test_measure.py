"""Tests of tubevision.measure.

Kinds (tubevision STYLE §6): [published] published values / reference libraries,
[synthetic] rendered scenes with a known answer (tests/measure/_synth.py, invented),
[golden] regression values of our own code.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from tubevision.errors import TubevisionInputError
from tubevision.measure import FEATURE_NAMES, measure_tube, photo_quality
from tubevision.tubes import TubeRegion

from ._synth import SynthTube, render

MM_PER_PX = 0.1  # invented scale of the synthetic scenes


def _measure(tubes, **kw):
    img, regs = render(tubes, **kw)
    return img, regs, [measure_tube(img, r, correction=None, mm_per_px=MM_PER_PX) for r in regs]


# ----------------------------------------------------------------- turbidity

def test_turbidity_rises_monotonically_over_dilution_series():
    """[synthetic] A twofold dilution series of a scattering suspension on the banded
    backdrop gives strictly increasing τ, and the undiluted end is clearly turbid."""
    sigmas = [0.0, 0.0005, 0.001, 0.002, 0.004, 0.008, 0.016, 0.032]
    _, _, ms = _measure([SynthTube(scatter=s) for s in sigmas], banded=True)
    taus = [m.liquid.turbidity for m in ms]
    assert all(b > a for a, b in zip(taus, taus[1:])), taus
    assert taus[-1] > 1.0


def test_turbidity_zero_for_clean_water_and_for_clear_coloured_solution():
    """[synthetic] Clear water and a strongly coloured but clear solution both read
    τ = 0 within three sd: absorption alone does not count as turbidity."""
    _, _, ms = _measure([SynthTube(), SynthTube(absorb=(0.001, 0.01, 0.06))], banded=True, seed=3)
    for m in ms:
        liq = m.liquid
        assert liq.turbidity_method == "band-contrast"
        assert abs(liq.turbidity_raw) <= 3 * liq.turbidity_sd + 0.005, (liq.turbidity_raw, liq.turbidity_sd)
        assert liq.turbidity >= 0.0
        assert liq.turbidity_sd > 0


def test_turbidity_matches_the_veil_model():
    """[synthetic] With I = T·R + S (module docstring), τ = ln(1 + 2S/(T(R_L + R_D)));
    the scene's S and T on the axis are known, so τ is known. Within 10 %: the
    central third's chord differs from the axis chord by up to 6 %."""
    sigma, width = 0.004, 60
    _, _, (m,) = _measure([SynthTube(scatter=sigma, streak=False)], banded=True, width=width, noise=0.001)
    r_in = width / 2 - round(width * 0.06)
    L = 2 * r_in * 0.98   # mean chord over the central third (≈ 0.98 of the axis chord)
    T, S = math.exp(-sigma * L), 0.9 * (1 - math.exp(-sigma * L))
    expected = math.log(1 + 2 * S / (T * (0.85 + 0.04)))
    assert m.liquid.turbidity == pytest.approx(expected, rel=0.10)


def test_turbidity_plain_backdrop_rises_for_light_suspension():
    """[synthetic] On a plain backdrop the veil estimate still orders a light suspension."""
    _, _, ms = _measure([SynthTube(scatter=s) for s in (0.0, 0.004, 0.03)], banded=False)
    taus = [m.liquid.turbidity for m in ms]
    assert taus[0] <= taus[1] < taus[2]
    assert all(m.liquid.turbidity_method == "plain-veil" for m in ms)
    assert any("banded backdrop" in w for w in ms[0].warnings)


# ----------------------------------------------------------------- colour

def test_colour_of_uniform_patch_equals_colour_science():
    """[published] The colour of a uniform sRGB patch measured through measure_tube
    (no card: plain sRGB, IEC 61966-2-1) equals colour-science's sRGB → XYZ → CIELAB
    (D65, 2°). Tolerance 0.05 ΔE: our D65 white is the four-decimal IEC value,
    colour-science derives it from chromaticity (differences ~1e-4 in XYZ)."""
    colour = pytest.importorskip("colour")
    code = np.array([182, 121, 64], np.uint8)
    img = np.broadcast_to(code, (200, 160, 3)).copy()
    region = TubeRegion(index=0, row=0, bbox=(40, 20, 100, 180), axis_col=69.5, inner_col0=60,
                        inner_col1=80, liquid_top=30, liquid_bottom=150, bottom_top=150,
                        inner_bottom=178, source="layout")
    m = measure_tube(img, region, correction=None, mm_per_px=None)
    white = colour.xy_to_XYZ(colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"])
    xyz = colour.sRGB_to_XYZ(code / 255.0)
    lab = colour.XYZ_to_Lab(xyz, colour.XYZ_to_xy(white))
    np.testing.assert_allclose(m.liquid.lab, lab, atol=0.05)
    assert m.liquid.lab_sd == pytest.approx((0, 0, 0), abs=1e-6)
    assert m.liquid.n_pixels > 1000
    assert not m.pellet.present


def test_colour_ignores_highlight_rack_bar_and_dark_bands():
    """[synthetic] A specular streak in the central third, a rack bar across the column
    and the backdrop's dark bands do not move the colour: within 0.5 ΔE00 of a clean
    render of the same liquid on a plain backdrop."""
    from tubevision.colorimetry import delta_e00

    liquid = SynthTube(absorb=(0.0005, 0.004, 0.03), streak=False)
    _, _, (ref,) = _measure([liquid], banded=False, noise=0.002)
    busy = SynthTube(absorb=(0.0005, 0.004, 0.03), streak=True)
    _, _, (m,) = _measure([busy], banded=True, noise=0.002, rack_rows=(300, 340))
    assert float(delta_e00(np.array(m.liquid.lab), np.array(ref.liquid.lab))) < 0.5
    assert m.liquid.n_pixels > 400


# ----------------------------------------------------------------- settled solid

@pytest.mark.parametrize("banded", [True, False])
def test_pellet_height_of_known_solid(banded):
    """[synthetic] A yellow solid 20 px = 2.0 mm high (scale 0.1 mm/px) is found with
    its height within 0.15 mm (1.5 px: the sub-row edge plus the bottom row) and its
    colour within 2 ΔE00 of the rendered reflectance."""
    from tubevision.colorimetry import delta_e00, linear_srgb_to_xyz, xyz_to_lab

    rgb = (0.8, 0.7, 0.1)
    _, _, (clear, solid) = _measure([SynthTube(), SynthTube(pellet_px=20, pellet_rgb=rgb)], banded=banded)
    assert not clear.pellet.present
    p = solid.pellet
    assert p.present
    assert p.height_mm == pytest.approx(2.0, abs=0.15)
    assert 0 < p.height_mm_sd < 0.5
    expect = xyz_to_lab(linear_srgb_to_xyz(np.array(rgb) * 0.97))
    assert float(delta_e00(np.array(p.lab), expect)) < 2.0
    # the liquid above it is still measured, and clear
    assert solid.liquid is not None and solid.liquid.turbidity < 0.05


def test_pellet_height_none_without_scale():
    """[synthetic] Without a card scale the solid is found but has no height in mm."""
    img, regs = render([SynthTube(pellet_px=15, pellet_rgb=(0.2, 0.2, 0.2))])
    m = measure_tube(img, regs[0], correction=None, mm_per_px=None)
    assert m.pellet.present and m.pellet.height_mm is None


# ----------------------------------------------------------------- empty, features

def test_empty_tube_has_no_liquid():
    """[synthetic] An empty tube (liquid_top None) gives liquid None and finite features."""
    _, _, (m,) = _measure([SynthTube(empty=True)])
    assert m.empty and m.liquid is None
    assert set(m.features) == set(FEATURE_NAMES)
    assert all(math.isfinite(v) for v in m.features.values())


def test_features_complete_and_finite():
    """[synthetic] Every tube kind yields exactly FEATURE_NAMES, all finite."""
    tubes = [SynthTube(), SynthTube(scatter=0.01), SynthTube(pellet_px=12, pellet_rgb=(0.5, 0.3, 0.1)),
             SynthTube(empty=True)]
    for banded in (True, False):
        _, _, ms = _measure(tubes, banded=banded)
        for m in ms:
            assert tuple(m.features) == FEATURE_NAMES
            assert all(math.isfinite(v) for v in m.features.values())
        assert ms[1].features["turbidity"] > ms[0].features["turbidity"]
        assert ms[2].features["pellet_present"] == 1.0 and ms[0].features["pellet_present"] == 0.0


# ----------------------------------------------------------------- quality

def test_quality_warns_on_blurred_photo():
    """[synthetic] A Gaussian blur of sd 6 px (motion/focus stand-in) triggers the blur
    warning on the photo and the tube; the sharp render triggers neither."""
    import cv2

    img, regs = render([SynthTube(), SynthTube(scatter=0.004)], banded=False)
    assert not any("blurred" in w for w in photo_quality(img, regs))
    blurred = cv2.GaussianBlur(img, (0, 0), 6)
    assert any("blurred" in w for w in photo_quality(blurred, regs))
    m = measure_tube(blurred, regs[0], correction=None, mm_per_px=None)
    assert any("blurred" in w for w in m.warnings)


def test_quality_warns_on_overexposed_photo():
    """[synthetic] Three stops over (linear × 8, clipped) triggers the clipping warnings."""
    from tubevision.colorimetry import linear_to_srgb, srgb_to_linear

    img, regs = render([SynthTube()], banded=False)
    assert not any("overexposed" in w for w in photo_quality(img, regs))
    over = np.round(linear_to_srgb(np.clip(srgb_to_linear(img / 255.0) * 8, 0, 1)) * 255).astype(np.uint8)
    assert any("overexposed" in w for w in photo_quality(over, regs))
    m = measure_tube(over, regs[0], correction=None, mm_per_px=None)
    assert any("clipped" in w for w in m.warnings)


def test_quality_warns_on_tiny_tubes():
    """[synthetic] Tubes 10 px wide get the 'too small' warnings."""
    img, regs = render([SynthTube()], width=10, height=80, band_px=6)
    assert any("px wide" in w for w in photo_quality(img, regs))
    m = measure_tube(img, regs[0], correction=None, mm_per_px=None)
    assert any("px wide" in w for w in m.warnings)


# ----------------------------------------------------------------- bad input

def test_bad_input_messages():
    """Bad pixels, a box outside the photo and a bad scale raise one-line input errors."""
    img, regs = render([SynthTube()])
    with pytest.raises(TubevisionInputError, match=r"\(H, W, 3\)"):
        measure_tube(img[..., 0], regs[0], correction=None, mm_per_px=None)
    with pytest.raises(TubevisionInputError, match="uint8 or uint16"):
        measure_tube(img.astype(np.float32), regs[0], correction=None, mm_per_px=None)
    far = TubeRegion(index=0, row=0, bbox=(0, 0, 10_000, 10), axis_col=5, inner_col0=3, inner_col1=6,
                     liquid_top=1, liquid_bottom=8, bottom_top=8, inner_bottom=9)
    with pytest.raises(TubevisionInputError, match="outside"):
        measure_tube(img, far, correction=None, mm_per_px=None)
    with pytest.raises(TubevisionInputError, match="mm_per_px"):
        measure_tube(img, regs[0], correction=None, mm_per_px=-1.0)


def test_uint16_photo_gives_same_colour():
    """[synthetic] A 16-bit copy (code × 257) measures the same colour within 0.01."""
    img, regs = render([SynthTube(absorb=(0.0, 0.003, 0.02))], banded=False)
    a = measure_tube(img, regs[0], correction=None, mm_per_px=None)
    b = measure_tube(img.astype(np.uint16) * 257, regs[0], correction=None, mm_per_px=None)
    np.testing.assert_allclose(a.liquid.lab, b.liquid.lab, atol=0.01)


def test_turbidity_curve_fills_standard_units():
    """[synthetic] With a fitted curve, the liquid carries its reading in the curve's unit."""
    from tubevision.turbidity import fit_turbidity_curve

    _, _, ms = _measure([SynthTube(scatter=s) for s in (0.0, 0.002, 0.008, 0.03)], banded=True)
    taus = [m.liquid.turbidity for m in ms]
    curve = fit_turbidity_curve(taus, [0, 0.5, 2, 4], unit="McFarland")
    img, regs = render([SynthTube(scatter=0.008)], banded=True)
    m = measure_tube(img, regs[0], correction=None, mm_per_px=None, turbidity_curve=curve)
    assert m.liquid.turbidity_standard_unit == "McFarland"
    assert m.liquid.turbidity_standard == pytest.approx(2.0, abs=0.3)
    assert 0 < m.liquid.turbidity_standard_sd < 0.3


def test_white_solid_found_through_dark_bands():
    """[synthetic] A white solid over a white backdrop is invisible on a plain backdrop,
    but the banded backdrop shows it in its dark rows: it is found, and its height
    (top inside a dark band) is within 0.15 mm."""
    _, _, (plain,) = _measure([SynthTube(pellet_px=20)], banded=False)
    assert not plain.pellet.present            # white on white: no contrast to see
    _, _, (m,) = _measure([SynthTube(pellet_px=20)], banded=True)
    assert m.pellet.present
    assert m.pellet.height_mm == pytest.approx(2.0, abs=0.15)


# ----------------------------------------------------------------- solid vs liquid (issue #6)

DEEP_YELLOW = (0.0005, 0.01, 0.08)   # chromate-like: blue absorbance ~4 over the chord


@pytest.mark.parametrize("banded", [True, False])
def test_deep_yellow_solution_is_not_a_solid(banded):
    """[synthetic] A deep yellow (chromate-like) solution darkens and colours the round
    bottom less than the column (shorter chord), but it is liquid: no settled solid. The
    same solution over a black solid 2 mm high does show the solid, at its height."""
    _, _, (liq, dark) = _measure([SynthTube(absorb=DEEP_YELLOW),
                                  SynthTube(absorb=DEEP_YELLOW, pellet_px=20, pellet_rgb=(0.03, 0.03, 0.03))],
                                 banded=banded)
    assert not liq.pellet.present
    assert liq.liquid is not None and liq.liquid.lab[2] > 40          # it is read as yellow
    assert dark.pellet.present
    assert dark.pellet.height_mm == pytest.approx(2.0, abs=0.2)


@pytest.mark.parametrize("banded", [True, False])
def test_white_cloud_is_not_a_solid(banded):
    """[synthetic] A uniform white suspension (cloudy, nothing settled) has no settled
    solid, at a faint and at a heavy cloud, while its turbidity is read."""
    _, _, ms = _measure([SynthTube(scatter=0.004), SynthTube(scatter=0.03)], banded=banded)
    for m in ms:
        assert not m.pellet.present, m.pellet
    assert ms[1].liquid.turbidity > ms[0].liquid.turbidity > 0


def test_white_rack_bar_is_left_out():
    """[synthetic] A white rack bar across a blue liquid on the banded backdrop (it matches
    the light bands beside the tube) is found by the hidden glass walls and left out: the
    colour stays within 1 ΔE00 of the same liquid without the bar, and the turbidity
    stays ~0 (the bar would otherwise read as light rows with no band contrast)."""
    from tubevision.colorimetry import delta_e00

    blue = SynthTube(absorb=(0.03, 0.01, 0.002), streak=False)
    _, _, (ref,) = _measure([blue], banded=True, noise=0.002)
    _, _, (m,) = _measure([blue], banded=True, noise=0.002, rack_rows=(280, 330), rack_value=0.8)
    assert float(delta_e00(np.array(m.liquid.lab), np.array(ref.liquid.lab))) < 1.0
    assert m.liquid.turbidity < 0.05


def test_turbidity_sd_matches_the_spread_over_repeat_photos():
    """[synthetic] The analytic turbidity sd (median standard errors through the formula,
    GUM §5.1) agrees within a factor of 2 with the spread of τ over twelve renders that
    differ only in sensor noise."""
    taus, sds = [], []
    for seed in range(12):
        _, _, (m,) = _measure([SynthTube(scatter=0.004, streak=False)], banded=True, seed=seed, noise=0.01)
        taus.append(m.liquid.turbidity_raw)
        sds.append(m.liquid.turbidity_sd)
    spread = float(np.std(taus, ddof=1))
    assert 0.5 < float(np.mean(sds)) / spread < 2.0, (np.mean(sds), spread)


def test_quality_warns_on_glare_over_most_of_a_tube():
    """[synthetic] Glare clipped over most of the central third gives the glare warning."""
    img, regs = render([SynthTube()], banded=False)
    r = regs[0]
    img[r.liquid_top:r.liquid_bottom, r.inner_col0:r.inner_col1 - 2] = 255
    m = measure_tube(img, r, correction=None, mm_per_px=None)
    assert any("glare" in w for w in m.warnings)


# ----------------------------------------------------------------- scale at the tube

def test_mm_per_px_at_matches_opencv_perspective():
    """[published] The local scale from the card's homography equals the distance, in
    card mm, between two photo points one pixel apart mapped back with OpenCV's
    ``perspectiveTransform`` (an independent implementation of the projective map)."""
    import cv2

    from tubevision.measure import mm_per_px_at

    mm = np.float32([[0, 0], [150, 0], [150, 100], [0, 100]])
    px = np.float32([[1000, 500], [1620, 520], [1600, 930], [990, 900]])     # a tilted card
    h = cv2.getPerspectiveTransform(mm, px)
    for pt in [(1300.0, 700.0), (600.0, 1400.0), (2500.0, 300.0)]:
        back = cv2.perspectiveTransform(np.float64([[pt, (pt[0], pt[1] + 1.0)]]), np.linalg.inv(h))[0]
        expect = float(np.hypot(*(back[1] - back[0])))
        assert mm_per_px_at(h, pt) == pytest.approx(expect, rel=1e-6)
    # away from the card the scale differs: why heights use the tube's own position
    assert mm_per_px_at(h, (600.0, 1400.0)) != pytest.approx(mm_per_px_at(h, (1300.0, 700.0)), rel=0.01)
    with pytest.raises(TubevisionInputError):
        mm_per_px_at(np.zeros((3, 3)), (0, 0))


@pytest.mark.parametrize("lens", [2.0, 3.0])
def test_round_bottom_lens_is_not_a_solid(lens):
    """[synthetic] A filled round bottom is a ball lens: it shows the bands behind inverted
    and rescaled, out of register with the backdrop beside the tube (geometric optics; a
    real tube does this, the studio does not). Clear water and a yellow solution there
    show band texture and are not read as solids; black and white solids, flat, still are."""
    tubes = [SynthTube(lens_bottom=lens), SynthTube(absorb=DEEP_YELLOW, lens_bottom=lens),
             SynthTube(pellet_px=20, pellet_rgb=(0.03, 0.03, 0.03), lens_bottom=lens),
             SynthTube(pellet_px=20, lens_bottom=lens)]
    _, _, (water, yellow, black, white) = _measure(tubes, banded=True)
    assert not water.pellet.present and not yellow.pellet.present
    assert black.pellet.present and black.pellet.height_mm == pytest.approx(2.0, abs=0.2)
    assert white.pellet.present

def test_no_solid_says_when_a_white_solid_could_hide_against_a_light_band():
    # a white solid reads like the liquid over a light band; only a dark row near the bottom
    # would show it (common practice: view a white precipitate against a dark background)
    from tubevision.measure import _no_solid

    dark = np.zeros(100, bool)
    assert _no_solid(~dark, dark, 90, 60.0, 0.1, True).light_solid_hidden          # all light
    dark[85] = True                                                                 # 0.5 mm up: seen
    assert not _no_solid(~dark, dark, 90, 60.0, 0.1, True).light_solid_hidden
    dark[:] = False
    dark[60] = True                                                                 # 3 mm up: too high
    assert _no_solid(~dark, dark, 90, 60.0, 0.1, True).light_solid_hidden
    plain = np.ones(100, bool)
    assert _no_solid(plain, ~plain, 90, 60.0, 0.1, False).light_solid_hidden       # plain backdrop


def test_no_solid_says_when_a_black_solid_could_hide_against_a_dark_band():
    # the mirror case: a black solid reads like a dark band; a light row near the bottom shows it
    from tubevision.measure import _no_solid

    dark = np.zeros(100, bool)
    dark[70:] = True                                                                # bottom 2 mm+ all dark
    m = _no_solid(~dark, dark, 90, 60.0, 0.1, True)
    assert m.dark_solid_hidden and not m.light_solid_hidden
    dark[88] = False                                                                # one light row 0.2 mm up
    assert not _no_solid(~dark, dark, 90, 60.0, 0.1, True).dark_solid_hidden
    none = np.zeros(100, bool)
    assert not _no_solid(~none, none, 90, 60.0, 0.1, True).dark_solid_hidden       # all light
    plain = np.ones(100, bool)
    assert not _no_solid(plain, ~plain, 90, 60.0, 0.1, False).dark_solid_hidden   # plain backdrop


def test_no_solid_band_edge_rows_show_neither_solid():
    # Rows at a band edge (neither light nor dark: the backdrop beside the tube changes within
    # the registration shift there) cannot show a solid of either shade; a zone of edge and
    # dark rows therefore hides a black solid (the bench case: a grey-black pellet over a
    # dark band whose top edge ran through the pellet was missed and called absent, because
    # the edge rows were counted as showing it), and edge and light rows hide a white one.
    from tubevision.measure import _no_solid

    light, dark = np.zeros(100, bool), np.zeros(100, bool)
    light[:80] = True                      # light band ... 8 mm up
    dark[86:] = True                       # edge rows 80-85, dark band from 0.4 mm below the zone top
    m = _no_solid(light, dark, 90, 60.0, 0.1, True)       # zone: rows 75-89 (1.5 mm at 0.1 mm/px)
    assert m.dark_solid_hidden is False                   # rows 75-79 are light: a black solid shows
    m = _no_solid(light, dark, 90, 60.0, 0.05, True)      # zone: rows 60-89 hold light rows too
    assert not m.dark_solid_hidden and not m.light_solid_hidden
    light[75:80] = False                                  # the light band ends 1.5 mm up: edge rows
    m = _no_solid(light, dark, 90, 60.0, 0.1, True)
    assert m.dark_solid_hidden and not m.light_solid_hidden
    # the mirror: edge and light rows only
    m = _no_solid(dark, light, 90, 60.0, 0.1, True)
    assert m.light_solid_hidden and not m.dark_solid_hidden
    # a rack bar in front of the bottom (rows neither light nor dark): neither solid shows
    hidden = np.zeros(100, bool)
    m = _no_solid(hidden, hidden, 90, 60.0, 0.1, True)
    assert m.light_solid_hidden and m.dark_solid_hidden
