"""Card stage: CIEDE2000, detection, fits, CGATS.17 reading, printing at true size."""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image

from tubevision.card import (card_layout, find_card, fit_card_correction, load_card_reference,
                             parse_cgats, render_card)
from tubevision.card.detect import CardDetection
from tubevision.card.fit import apply_card_correction, apply_tone_curves, expand_rgb
from tubevision.card.printing import write_card
from tubevision.card.reference import nominal_cgats_text
from tubevision.colorimetry import delta_e00, lab_to_xyz, xyz_to_lab
from tubevision.errors import TubevisionInputError

# Sharma, Wu & Dalal (2005), Color Res. Appl. 30(1):21-30, Table 1: pairs 1, 7, 14, 17, 20, 25, 26
# (values from memory of the published table; each is also checked against colour-science below).
SHARMA_PAIRS = [
    ((50.0, 2.6772, -79.7751), (50.0, 0.0, -82.7485), 2.0425),
    ((50.0, 0.0, 0.0), (50.0, -1.0, 2.0), 2.3669),
    ((50.0, 2.5, 0.0), (58.0, 24.0, 15.0), 19.4535),
    ((50.0, 2.5, 0.0), (73.0, 25.0, -18.0), 27.1492),
    ((50.0, 2.5, 0.0), (50.0, 3.1736, 0.5854), 1.0000),
    ((60.2574, -34.0099, 36.2677), (60.4626, -34.1751, 39.4387), 1.2644),
    ((63.0109, -31.0961, -5.8663), (62.8187, -29.7946, -4.0864), 1.2630),
]


@pytest.mark.parametrize("lab1, lab2, expected", SHARMA_PAIRS)
def test_ciede2000_published_pairs(lab1, lab2, expected):
    """Published values (Sharma et al. 2005 Table 1); tolerance 1e-4 from its four decimals."""
    assert float(delta_e00(lab1, lab2)) == pytest.approx(expected, abs=1e-4)
    colour = pytest.importorskip("colour")  # independent oracle
    assert float(colour.delta_E(lab1, lab2, method="CIE 2000")) == pytest.approx(expected, abs=1e-4)


def _warp(card_px_per_mm=4.0, angle_deg=0.0, tilt=0.0, frame=(1200, 1600), cover=()):
    """Place render_card into a grey frame with a rotation and a perspective tilt."""
    import cv2

    dpi = card_px_per_mm * 25.4
    art = render_card(dpi)
    h, w = art.shape[:2]
    fh, fw = frame
    src = np.float32([[0, 0], [w, 0], [w, h], [0, h]])
    c = np.float32([fw / 2, fh / 2])
    a = np.radians(angle_deg)
    rot = np.float32([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    dst = (src - [w / 2, h / 2]) @ rot.T + c
    dst[1] += [0, tilt * h]
    dst[2] -= [0, tilt * h]
    hmat = cv2.getPerspectiveTransform(src, np.float32(dst))
    out = cv2.warpPerspective(art, hmat, (fw, fh), borderValue=(150, 150, 150))
    for x0, y0, x1, y1 in cover:
        out[y0:y1, x0:x1] = 90
    return out, hmat, dpi


def test_detection_recovers_scale_and_all_patches():
    img, _, dpi = _warp(card_px_per_mm=4.0, angle_deg=12.0)
    det = find_card(img)
    assert det, getattr(det, "reason", "")
    assert det.mm_per_px == pytest.approx(25.4 / dpi, rel=0.01)
    assert det.patch_ok.all()
    # a printed sRGB patch photographed by a perfect sRGB camera reads back its nominal value
    nominal = np.array([p.nominal_srgb for p in card_layout().patches])
    from tubevision.colorimetry import srgb_to_linear

    assert np.abs(det.patch_rgb_linear - srgb_to_linear(nominal)).max() < 0.01


def test_detection_tilted_small_and_two_markers_hidden():
    ppm = 3.0  # card fills about 4.5 % of the frame
    img, hmat, _ = _warp(card_px_per_mm=ppm, angle_deg=-25.0, tilt=0.12, frame=(1500, 2000))
    lay = card_layout()
    # cover two markers
    covers = []
    for mk in lay.markers[:2]:
        pts = np.c_[np.array(mk.corners_mm) * ppm, np.ones(4)] @ hmat.T
        xy = pts[:, :2] / pts[:, 2:]
        x0, y0 = np.floor(xy.min(0)).astype(int) - 2
        x1, y1 = np.ceil(xy.max(0)).astype(int) + 2
        covers.append((x0, y0, x1, y1))
    for x0, y0, x1, y1 in covers:
        img[y0:y1, x0:x1] = 90
    det = find_card(img)
    assert det, getattr(det, "reason", "")
    assert len(det.marker_ids) == len(lay.markers) - 2
    assert any("not seen" in w for w in det.warnings)


def test_small_card_in_a_12_megapixel_frame_tilted_30_degrees():
    # issue: the card must be found filling as little as 3 % of the frame, tilted up to 30°
    fh, fw = 3024, 4032
    ppm = float(np.sqrt(0.03 * fh * fw / (150.0 * 100.0)))  # card area = 3 % of the frame
    img, hmat, dpi = _warp(card_px_per_mm=ppm, angle_deg=30.0, tilt=0.08, frame=(fh, fw))
    det = find_card(img)
    assert det, getattr(det, "reason", "")
    assert len(det.marker_ids) == len(card_layout().markers)
    # true scale at the card's centre: 1 / sqrt|det J| of the mm → px map there
    h_mm = hmat @ np.diag([ppm, ppm, 1.0])

    def px(x, y):
        v = h_mm @ np.array([x, y, 1.0])
        return v[:2] / v[2]

    c, dx, dy = px(75, 50), px(76, 50) - px(75, 50), px(75, 51) - px(75, 50)
    truth = 1.0 / np.sqrt(abs(dx[0] * dy[1] - dx[1] * dy[0]))
    assert det.mm_per_px == pytest.approx(truth, rel=0.01)
    assert det.patch_ok.sum() >= 30


def test_no_card_is_a_value_not_an_error():
    det = find_card(np.full((300, 400, 3), 200, np.uint8))
    assert not det and "markers" in det.reason


def _synthetic_detection(rgb):
    lay = card_layout()
    return CardDetection(np.eye(3), np.zeros((4, 2)), (), lay.patch_ids, rgb,
                         np.ones(len(rgb), bool), 0.1)


def test_fit_recovers_a_known_matrix_and_is_exposure_invariant():
    ref = load_card_reference()
    xyz = ref.xyz_d65()
    m_true = np.array([[0.6, 0.3, 0.1], [0.25, 0.7, 0.05], [0.02, 0.1, 0.9]])
    rgb = xyz @ np.linalg.inv(m_true).T  # camera = exact linear transform of XYZ
    corr = fit_card_correction(_synthetic_detection(rgb), ref, method="matrix")
    assert corr.max_de00 < 0.05
    out = apply_card_correction(corr, rgb)
    assert np.abs(out - xyz).max() < 1e-3
    rp = fit_card_correction(_synthetic_detection(rgb), ref, method="root-polynomial-2")
    # Finlayson et al. 2015: root-polynomial terms are degree one, so halving the light halves XYZ
    a = expand_rgb(rgb * 0.5, "root-polynomial-2")
    b = expand_rgb(rgb, "root-polynomial-2") * 0.5
    assert np.allclose(a, b)
    assert np.allclose(apply_card_correction(rp, rgb * 0.5), apply_card_correction(rp, rgb) * 0.5)


def test_auto_choice_reports_candidates_and_residuals():
    ref = load_card_reference()
    xyz = ref.xyz_d65()
    rgb = np.clip(xyz @ np.linalg.inv(np.array([[0.6, 0.3, 0.1], [0.25, 0.7, 0.05], [0.02, 0.1, 0.9]])).T,
                  0, None) ** 1.1  # a mild non-linearity the matrix cannot follow
    corr = fit_card_correction(_synthetic_detection(rgb), ref)
    plain = {"matrix", "root-polynomial-2", "root-polynomial-3"}
    assert set(corr.candidates) == plain | {"ramp-tone+" + m for m in plain}
    assert corr.loo_de00_median == pytest.approx(min(corr.candidates.values()), abs=0.06)
    assert len(corr.residual_de00) == len(ref.ids)


def test_ramp_tone_curves_undo_a_per_channel_tone_curve():
    # A phone-like camera: a linear transform of XYZ, then a different power-law tone
    # curve per channel (after white balance). No matrix can undo that; curves read off
    # the neutral ramp can, and leave-one-out must prefer them.
    ref = load_card_reference()
    xyz = ref.xyz_d65()
    m_true = np.array([[0.6, 0.3, 0.1], [0.25, 0.7, 0.05], [0.02, 0.1, 0.9]])
    lin = np.clip(xyz @ np.linalg.inv(m_true).T, 1e-4, None)
    rgb = np.stack([lin[:, 0] ** 0.8, lin[:, 1] ** 0.7, lin[:, 2] ** 0.9], axis=1)
    corr = fit_card_correction(_synthetic_detection(rgb), ref)
    assert corr.method.startswith("ramp-tone+")
    assert corr.candidates[corr.method] < 0.5 * corr.candidates["matrix"]
    lab = xyz_to_lab(np.clip(apply_card_correction(corr, rgb), 1e-6, None))
    assert np.median(delta_e00(lab, ref.lab_d65())) < 0.5
    # the curves are monotone and map the ramp onto its reference luminance
    lay = card_layout()
    neutral = [k for k, p in enumerate(lay.patches) if p.neutral]
    y = apply_tone_curves(corr.tone, rgb[neutral])
    assert np.allclose(y, xyz[neutral, 1:2], rtol=1e-6)
    ramp = apply_tone_curves(corr.tone, np.linspace(0.001, 1.5, 200)[:, None].repeat(3, axis=1))
    assert np.all(np.diff(ramp, axis=0) > 0)


def test_nominal_reference_round_trips_and_adapts_to_d65():
    ref = load_card_reference()
    lab65 = np.array([p.lab_d65 for p in card_layout().patches])
    assert np.abs(ref.lab_d65() - lab65).max() < 0.02  # file rounds to 0.01
    colour = pytest.importorskip("colour")  # oracle for the Bradford adaptation
    xyz50 = lab_to_xyz(ref.lab_d50, np.array([0.96422, 1.0, 0.82521]))
    expected = colour.adaptation.chromatic_adaptation_VonKries(
        xyz50, np.array([0.96422, 1.0, 0.82521]), np.array([0.95047, 1.0, 1.08883]), transform="Bradford")
    assert np.abs(xyz_to_lab(expected) - ref.lab_d65()).max() < 1e-6


def test_calibration_and_package_copies_are_identical():
    from importlib import resources
    from pathlib import Path

    shipped = resources.files("tubevision").joinpath("data/card_v1.cgats.txt").read_text("utf-8")
    here = Path(__file__).resolve().parents[2] / "calibration" / "card_v1.cgats.txt"
    assert here.read_text("utf-8") == shipped == nominal_cgats_text()


@pytest.mark.parametrize(
    "mutate, match",
    [
        (lambda t: t.replace("SAMPLE_ID LAB_L LAB_A LAB_B", "SAMPLE_ID LAB_L LAB_A"), "missing column LAB_B"),
        (lambda t: t.replace("NUMBER_OF_SETS 32", "NUMBER_OF_SETS 31"), "NUMBER_OF_SETS"),
        (lambda t: t.replace("\nA3 ", "\nZ9 "), "Z9 is not a patch"),
        (lambda t: t.replace("END_DATA\n", ""), "without END_DATA"),
        (lambda t: "\n".join(ln if not ln.startswith("A2 ") else "A2 abc 0 0" for ln in t.splitlines()),
         "must be numbers"),
    ],
)
def test_malformed_cgats_names_file_and_problem(tmp_path, mutate, match):
    bad = tmp_path / "print.txt"
    bad.write_text(mutate(nominal_cgats_text()))
    with pytest.raises(TubevisionInputError, match=match) as info:
        load_card_reference(bad)
    assert str(bad) in str(info.value)


def test_measured_values_are_read(tmp_path):
    text = nominal_cgats_text().replace("\nA1 ", "\nA1 ", 1)
    lines = [ln if not ln.startswith("A1 ") else "A1 93.00 0.50 -1.00" for ln in text.splitlines()]
    p = tmp_path / "measured.txt"
    p.write_text("\n".join(lines) + "\n")
    ref = parse_cgats(p.read_text(), where=str(p), expected_ids=card_layout().patch_ids)
    assert ref.lab_d50[0].tolist() == [93.0, 0.5, -1.0]


@pytest.mark.parametrize("ext", ["png", "pdf"])
def test_card_file_has_true_physical_size(tmp_path, ext):
    out = tmp_path / f"card.{ext}"
    written = write_card(out, dpi=200)
    assert out.exists() and (tmp_path / "card.cgats.txt").exists() and len(written) == 2
    w_mm, h_mm = card_layout().size_mm
    if ext == "png":
        im = Image.open(out)
        dpi = im.info["dpi"][0]
        assert im.size[0] / dpi * 25.4 == pytest.approx(w_mm, abs=0.2)
        assert im.size[1] / dpi * 25.4 == pytest.approx(h_mm, abs=0.2)
    else:
        import re

        box = re.search(rb"/MediaBox \[\s*([\d.]+) ([\d.]+) ([\d.]+) ([\d.]+)", out.read_bytes())
        width_pt, height_pt = float(box.group(3)), float(box.group(4))
        assert width_pt / 72 * 25.4 == pytest.approx(w_mm, abs=0.2)
        assert height_pt / 72 * 25.4 == pytest.approx(h_mm, abs=0.2)
    with pytest.raises(TubevisionInputError, match="already exists"):
        write_card(out, dpi=200)
