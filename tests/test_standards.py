"""Turbidity standards end to end: photo of a series → curve file → readings in its unit.

The series is a studio render (invented data) of a white suspension at five known
turbidities on the banded backdrop, standing in for a McFarland series (whose make-up is
in tubevision.turbidity's docstring).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from tubevision.cli import main
from tubevision.studio import SceneSpec, TubeSpec, render_scene, save_rendered
from tubevision.turbidity import load_curve

TAUS = (0.0, 0.5, 1.0, 2.0, 4.0)
VALUES = (0.0, 0.5, 1.0, 2.0, 4.0)


@pytest.fixture(scope="module")
def series(tmp_path_factory):
    folder = tmp_path_factory.mktemp("standards")
    tubes = tuple(TubeSpec("white-cloud", fill_mm=50.0, turbidity=t) if t > 0 else TubeSpec("water", fill_mm=50.0)
                  for t in TAUS)
    spec = SceneSpec(tubes=tubes, backdrop="hbands", width_px=1344, height_px=1008)
    rendered = render_scene(spec, seed=31)
    photo = save_rendered(rendered, folder / "standards.jpg")
    return folder, photo, rendered.truth


def test_standards_curve_reproduces_its_standards(series, capsys):
    folder, photo, truth = series
    curve_path = folder / "curve.json"
    values = ",".join(f"{k + 1}={v}" for k, v in enumerate(VALUES))
    code = main(["standards", str(photo), "--values", values, "--unit", "McFarland", "--out", str(curve_path)])
    assert code in (0, 1), capsys.readouterr().err
    curve = load_curve(curve_path)
    assert curve.unit == "McFarland"
    # the fitted curve passes through its (monotone) standards
    got = np.array([float(curve(r)) for r in curve.standards_reading])
    assert np.allclose(got, VALUES, atol=0.05)
    assert curve.reading_range[0] == pytest.approx(min(curve.standards_reading))
    # readings rise with the standards' turbidity (measure stage's monotonicity)
    assert np.all(np.diff(curve.standards_reading) > 0)

    # analyse with the curve: each tube's reading comes back in McFarland units
    out = folder / "out"
    code = main(["analyze", str(photo), "--out", str(out), "--turbidity-curve", str(curve_path)])
    assert code in (0, 1)
    rec = json.loads(next(out.glob("*/record.json")).read_text())
    assert rec["provenance"]["turbidity_curve"]["sha256"]
    std = [t["liquid"].get("turbidity_standard") for t in rec["tubes"]]
    assert [t["liquid"].get("turbidity_standard_unit") for t in rec["tubes"]][0] == "McFarland"
    assert np.allclose(std, VALUES, atol=0.1)


def test_bad_values_exit_2_and_write_no_curve(series, capsys):
    folder, photo, _ = series
    target = folder / "never.json"
    assert main(["standards", str(photo), "--values", "1=a", "--unit", "NTU", "--out", str(target)]) == 2
    assert "--values" in capsys.readouterr().err
    assert main(["standards", str(photo), "--values", "9=1,10=2,11=3", "--unit", "NTU", "--out", str(target)]) == 2
    assert "position" in capsys.readouterr().err
    assert not target.exists()
