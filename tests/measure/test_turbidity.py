"""Tests of tubevision.turbidity (standards curve). Kinds as in test_measure.py."""

from __future__ import annotations

import numpy as np
import pytest

from tubevision.errors import TubevisionInputError
from tubevision.turbidity import (curve_from_json, curve_to_json, fit_turbidity_curve, load_curve,
                                  save_curve, to_standard_units)

# McFarland levels 0 (blank), 0.5, 1, 2, 3, 4 (McFarland 1907; table in tubevision.turbidity);
# the τ readings are invented, increasing like a photographed series would.
LEVELS = [0.0, 0.5, 1.0, 2.0, 3.0, 4.0]
TAUS = [0.0, 0.11, 0.2, 0.43, 0.61, 0.8]


def test_curve_reproduces_its_standards():
    """[synthetic] A fitted curve returns each standard's value at its reading (1e-9)."""
    c = fit_turbidity_curve(TAUS, LEVELS, unit="McFarland")
    np.testing.assert_allclose(c(np.array(TAUS)), LEVELS, atol=1e-9)
    for t, v in zip(TAUS, LEVELS):
        assert to_standard_units(c, t) == (pytest.approx(v, abs=1e-9), None)


def test_curve_is_monotone_between_and_pools_inversions():
    """[synthetic] The curve never decreases, even when one reading is out of order
    (isotonic pooling, Ayer et al. 1955)."""
    taus = [0.0, 0.11, 0.25, 0.2, 0.61, 0.8]   # 3rd and 4th swapped by noise
    c = fit_turbidity_curve(taus, LEVELS, unit="McFarland")
    grid = np.linspace(0, 0.8, 400)
    assert np.all(np.diff(c(grid)) >= -1e-12)


def test_outside_range_is_none_with_warning():
    """[synthetic] No extrapolation: readings beyond the standards give None and a warning."""
    c = fit_turbidity_curve(TAUS, LEVELS, unit="McFarland")
    value, warning = to_standard_units(c, 1.5)
    assert value is None and "outside" in warning and "McFarland" in warning


def test_json_round_trip(tmp_path):
    """[synthetic] Save and load give the same curve and the same readings."""
    c = fit_turbidity_curve(TAUS, LEVELS, unit="NTU", source="invented bench series K-7")
    assert curve_from_json(curve_to_json(c)) == c
    p = tmp_path / "curve.json"
    save_curve(c, p)
    d = load_curve(p)
    np.testing.assert_allclose(d(np.linspace(0, 0.8, 9)), c(np.linspace(0, 0.8, 9)))


def test_bad_input():
    """Bad standards and bad files raise one-line input errors."""
    with pytest.raises(TubevisionInputError, match="readings but"):
        fit_turbidity_curve([0, 1], [0, 1, 2], unit="NTU")
    with pytest.raises(TubevisionInputError, match="at least 3"):
        fit_turbidity_curve([0, 1, 1], [0, 1, 1], unit="NTU")
    with pytest.raises(TubevisionInputError, match="fall"):
        fit_turbidity_curve([0, 1, 2], [3, 2, 1], unit="NTU")
    with pytest.raises(TubevisionInputError, match="not valid JSON"):
        curve_from_json("{")
    with pytest.raises(TubevisionInputError, match="schema"):
        curve_from_json('{"schema": "other"}')
    with pytest.raises(TubevisionInputError, match="not found"):
        load_curve("/nonexistent/curve.json")


def test_curve_from_measured_standards_reproduces_them():
    """[synthetic] Rendered standards (a scattering suspension at five strengths on the
    banded backdrop, tests/measure/_synth.py) measured by the measure stage and fitted with
    curve_from_measurements give back each standard's value at its own reading, and a
    reading between two standards lands between their values."""
    from tubevision.measure import measure_tube
    from tubevision.turbidity import curve_from_measurements

    from ._synth import SynthTube, render

    img, regs = render([SynthTube(scatter=s) for s in (0.0, 0.002, 0.004, 0.008, 0.016)], banded=True)
    ms = [measure_tube(img, r, correction=None, mm_per_px=None) for r in regs]
    values = [0.0, 0.5, 1.0, 2.0, 4.0]
    c = curve_from_measurements(ms, values, unit="McFarland", source="invented series")
    got = [to_standard_units(c, m.liquid.turbidity)[0] for m in ms]
    np.testing.assert_allclose(got, values, atol=1e-9)
    assert c.residual_rms == pytest.approx(0.0, abs=1e-12)
    mid = 0.5 * (ms[2].liquid.turbidity + ms[3].liquid.turbidity)
    assert 1.0 < to_standard_units(c, mid)[0] < 2.0


def test_curve_from_measurements_refuses_mixed_backdrops():
    """Standards read partly on the banded and partly on a plain backdrop are not one scale."""
    from tubevision.measure import measure_tube
    from tubevision.turbidity import curve_from_measurements

    from ._synth import SynthTube, render

    a, ra = render([SynthTube(), SynthTube(scatter=0.004)], banded=True)
    b, rb = render([SynthTube(scatter=0.016)], banded=False)
    ms = [measure_tube(a, r, correction=None, mm_per_px=None) for r in ra] + \
        [measure_tube(b, rb[0], correction=None, mm_per_px=None)]
    with pytest.raises(TubevisionInputError, match="backdrop"):
        curve_from_measurements(ms, [0, 1, 2], unit="NTU")
    with pytest.raises(TubevisionInputError, match="values"):
        curve_from_measurements(ms, [0, 1], unit="NTU")


def test_standard_units_sd_follows_the_slope_and_the_residual():
    """[synthetic] On a straight curve of slope 4 a reading's sd becomes 4× in the unit; a
    curve that pooled an inversion carries its residual into every converted sd; outside
    the range there is no sd."""
    from tubevision.turbidity import standard_units_sd

    c = fit_turbidity_curve([0.0, 0.25, 0.5, 1.0], [0.0, 1.0, 2.0, 4.0], unit="NTU")
    assert standard_units_sd(c, 0.5, 0.01) == pytest.approx(0.04, rel=1e-6)
    pooled = fit_turbidity_curve([0.0, 0.2, 0.3, 0.6], [0.0, 2.0, 1.0, 4.0], unit="NTU")
    assert pooled.residual_rms > 0
    assert standard_units_sd(pooled, 0.4, 1e-6) >= pooled.residual_rms
    assert standard_units_sd(c, 5.0, 0.01) is None
