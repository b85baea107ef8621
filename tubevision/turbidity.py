"""Turbidity standards: turn the measure stage's τ into a standards' unit.

:mod:`tubevision.measure` reports turbidity as τ, a dimensionless veil depth
(see its module docstring). To report in the unit of a series of turbidity
standards (McFarland units, or formazin NTU), photograph the standards in the
same tubes on the same backdrop, read τ for each, and fit a monotone curve
τ → value with :func:`fit_turbidity_curve`. Later readings go through
:func:`to_standard_units`; a reading outside the range the standards span
gives None and a warning (no extrapolation). Curves are stored as JSON
(:func:`curve_to_json` / :func:`curve_from_json`, :func:`save_curve` /
:func:`load_curve`) — never pickled.

The fit
-------
Isotonic (non-decreasing) least-squares regression of value on reading
(pool-adjacent-violators algorithm, [1]_, via scikit-learn's
``IsotonicRegression``) removes any inversion caused by reading noise; the
pooled points are then joined by a monotone piecewise-cubic Hermite
interpolant (Fritsch & Carlson [2]_, via scipy's ``PchipInterpolator``), so
the curve is smooth, passes through the (pooled) standards and never
decreases.

Worked example: the McFarland series
------------------------------------
McFarland [3]_ made turbidity standards from barium sulfate precipitated by
mixing 1 % barium chloride with 1 % sulfuric acid. The 0.5 McFarland
standard used in antimicrobial susceptibility testing is 0.05 mL of
1.175 % w/v BaCl₂·2H₂O in 9.95 mL of 1 % v/v H₂SO₄ [4]_ (recipe confirmed
in several secondary sources; the w/v and v/v qualifiers and CLSI's
acceptance range, absorbance 0.08–0.13 at 625 nm in a 1 cm cell, are from
memory of CLSI M07 [4]_). The commonly reproduced table of the series
(secondary source, absorbance at 600 nm) is:

==========  ==========  ==========  ========================
McFarland   BaCl₂ (mL)  H₂SO₄ (mL)  ≈ cells (10⁸ CFU/mL)
==========  ==========  ==========  ========================
0.5         0.05        9.95        1.5
1           0.1         9.9         3.0
2           0.2         9.8         6.0
3           0.3         9.7         9.0
4           0.4         9.6         12.0
==========  ==========  ==========  ========================

Photograph tubes 0.5, 1, 2, 3, 4 (and a blank of 1 % H₂SO₄ as 0), read τ
for each, then ``fit_turbidity_curve(taus, [0, 0.5, 1, 2, 3, 4],
unit="McFarland")``. Barium sulfate standards settle: mix before each photo.
Sulfuric acid is corrosive; prepare and handle standards following local
rules and the safety data sheets.

References
----------
.. [1] M. Ayer, H. D. Brunk, G. M. Ewing, W. T. Reid, E. Silverman, "An
   empirical distribution function for sampling with incomplete
   information", Ann. Math. Statist. 26(4), 641-647, 1955.
.. [2] F. N. Fritsch, R. E. Carlson, "Monotone piecewise cubic
   interpolation", SIAM J. Numer. Anal. 17(2), 238-246, 1980.
   DOI 10.1137/0717021.
.. [3] J. McFarland, "The nephelometer: an instrument for estimating the
   number of bacteria in suspensions used for calculating the opsonic index
   and for vaccines", JAMA 49(14), 1176-1178, 1907.
   DOI 10.1001/jama.1907.25320140022001f.
.. [4] CLSI M07, Methods for Dilution Antimicrobial Susceptibility Tests for
   Bacteria That Grow Aerobically, Clinical and Laboratory Standards
   Institute (Appendix: preparation of the 0.5 McFarland standard).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import TubevisionInputError

__all__ = [
    "TurbidityCurve",
    "CURVE_SCHEMA",
    "fit_turbidity_curve",
    "curve_from_measurements",
    "to_standard_units",
    "standard_units_sd",
    "curve_to_json",
    "curve_from_json",
    "save_curve",
    "load_curve",
]

CURVE_SCHEMA = "tubevision.turbidity-curve/1"
"""Schema name written into every stored curve."""

MIN_STANDARDS = 3
"""Fewest distinct standards a curve needs (two points fix only a line; common practice
for a calibration curve is at least three levels)."""

RANGE_TOLERANCE_FRACTION = 0.02
"""Readings this fraction of the calibrated span beyond either end still count as inside
(reading noise at the end standards; chosen)."""


@dataclass(frozen=True)
class TurbidityCurve:
    """A fitted monotone map from τ (measure stage) to a standards' unit.

    ``standards_reading``/``standards_value`` the photographed standards; ``knots_reading``/
    ``knots_value`` the isotonic-pooled points the PCHIP interpolant passes through;
    ``reading_range`` the valid τ range; ``unit`` e.g. ``"McFarland"`` or ``"NTU"``.
    """

    unit: str
    standards_reading: tuple[float, ...]
    standards_value: tuple[float, ...]
    knots_reading: tuple[float, ...]
    knots_value: tuple[float, ...]
    reading_range: tuple[float, float]
    method: str = "isotonic+pchip"
    source: str = ""
    residual_rms: float = 0.0
    """Root-mean-square of the standards' values about the curve (in ``unit``): 0 when the
    readings rise with the values, > 0 where isotonic pooling had to merge inversions."""

    def __call__(self, reading):
        """Value in ``unit`` for τ ``reading`` (scalar or array), no range check."""
        kr, kv = np.asarray(self.knots_reading), np.asarray(self.knots_value)
        if kr.size == 1:
            return np.full_like(np.asarray(reading, float), kv[0])
        from scipy.interpolate import PchipInterpolator

        return PchipInterpolator(kr, kv, extrapolate=True)(reading)


def fit_turbidity_curve(readings, values, *, unit: str, source: str = "") -> TurbidityCurve:
    """Fit a monotone curve from τ readings of standards to their known values.

    Parameters
    ----------
    readings : sequence of float
        τ of each standard (dimensionless, ≥ 0), as measured by the measure stage.
    values : sequence of float
        The standards' known values in ``unit`` (e.g. McFarland 0, 0.5, 1, 2, 3, 4).
    unit : str, keyword-only
        Unit name of ``values``.
    source : str, keyword-only
        Free text: which standards, when, which photos.

    Returns
    -------
    TurbidityCurve

    Raises
    ------
    TubevisionInputError
        Lengths differ, non-finite numbers, fewer than :data:`MIN_STANDARDS`
        distinct readings, or values that fall as readings rise overall.

    References
    ----------
    Isotonic regression [1]_ and monotone cubic interpolation [2]_ of the module docstring.

    Examples
    --------
    >>> c = fit_turbidity_curve([0.0, 0.2, 0.5, 1.1], [0, 0.5, 1, 2], unit="McFarland")
    >>> round(float(c(0.5)), 6), c.reading_range
    (1.0, (0.0, 1.1))
    """
    r = np.asarray(readings, dtype=float).ravel()
    v = np.asarray(values, dtype=float).ravel()
    if r.size != v.size:
        raise TubevisionInputError(f"turbidity standards: {r.size} readings but {v.size} values")
    if not (np.isfinite(r).all() and np.isfinite(v).all()):
        raise TubevisionInputError("turbidity standards: readings and values must be finite numbers")
    if not unit or not isinstance(unit, str):
        raise TubevisionInputError("turbidity standards: give the unit of the values (e.g. McFarland, NTU)")
    if np.unique(r).size < MIN_STANDARDS:
        raise TubevisionInputError(f"turbidity standards: need at least {MIN_STANDARDS} distinct readings, "
                                   f"got {np.unique(r).size}")
    if np.corrcoef(r, v)[0, 1] <= 0:
        raise TubevisionInputError("turbidity standards: values fall as readings rise; check the pairing")
    from sklearn.isotonic import IsotonicRegression

    iso = IsotonicRegression(increasing=True, out_of_bounds="clip").fit(r, v)
    kr = np.unique(r)
    kv = iso.predict(kr)
    rms = float(np.sqrt(np.mean((iso.predict(r) - v) ** 2)))
    return TurbidityCurve(unit=unit, standards_reading=tuple(float(x) for x in r),
                          standards_value=tuple(float(x) for x in v),
                          knots_reading=tuple(float(x) for x in kr), knots_value=tuple(float(x) for x in kv),
                          reading_range=(float(kr[0]), float(kr[-1])), source=source, residual_rms=rms)


def curve_from_measurements(measurements, values, *, unit: str, source: str = "") -> TurbidityCurve:
    """Fit a curve to photographed standards, straight from the measure stage's results.

    Parameters
    ----------
    measurements : sequence of tubevision.measure.TubeMeasurement
        One per standard, in the same order as ``values`` (e.g. the tubes of one photo of
        the series, :func:`tubevision.measure.measure_tube`).
    values : sequence of float
        The standards' known values in ``unit``.
    unit : str, keyword-only
        e.g. ``"McFarland"`` or ``"NTU"``.
    source : str, keyword-only
        Free text stored with the curve.

    Returns
    -------
    TurbidityCurve — as :func:`fit_turbidity_curve` on the tubes' τ.

    Raises
    ------
    TubevisionInputError
        Lengths differ, a standard read as empty (no liquid), mixed turbidity methods
        (banded and plain backdrop readings are not on one scale), or the errors of
        :func:`fit_turbidity_curve`.
    """
    ms = list(measurements)
    vs = list(values)
    if len(ms) != len(vs):
        raise TubevisionInputError(f"turbidity standards: {len(ms)} tubes but {len(vs)} values")
    readings, methods = [], set()
    for m, _ in zip(ms, vs):
        if m.liquid is None:
            raise TubevisionInputError(f"turbidity standards: tube T{m.index + 1} reads as empty")
        readings.append(float(m.liquid.turbidity))
        methods.add(m.liquid.turbidity_method)
    if len(methods) > 1:
        raise TubevisionInputError("turbidity standards: some tubes were read on the banded backdrop and "
                                   "some on a plain one; photograph the series on one backdrop")
    return fit_turbidity_curve(readings, vs, unit=unit, source=source)


def standard_units_sd(curve: TurbidityCurve, reading: float, reading_sd: float) -> float | None:
    """Standard uncertainty of a reading converted to the curve's unit.

    The reading's sd goes through the curve's local slope (first-order propagation,
    JCGM 100:2008 GUM §5.1.2, slope by a central difference over ±sd, which also covers
    the curve's curvature), combined in quadrature with the curve's ``residual_rms``.
    None outside the calibrated range (as :func:`to_standard_units`).

    Examples
    --------
    >>> c = fit_turbidity_curve([0.0, 1.0, 2.0], [0.0, 2.0, 4.0], unit="NTU")
    >>> round(standard_units_sd(c, 1.0, 0.05), 6)
    0.1
    """
    if to_standard_units(curve, reading)[0] is None or not math.isfinite(reading_sd):
        return None
    lo, hi = curve.reading_range
    h = max(abs(float(reading_sd)), 1e-9)
    a, b = max(lo, reading - h), min(hi, reading + h)
    if b <= a:
        slope = 0.0
    else:
        slope = float(curve(b) - curve(a)) / (b - a)
    return float(math.hypot(slope * reading_sd, curve.residual_rms))


def to_standard_units(curve: TurbidityCurve, reading: float) -> tuple[float | None, str | None]:
    """τ → the standards' unit, or (None, warning) outside the calibrated range.

    Examples
    --------
    >>> c = fit_turbidity_curve([0.0, 0.2, 0.5, 1.1], [0, 0.5, 1, 2], unit="McFarland")
    >>> to_standard_units(c, 3.0)[0] is None
    True
    """
    lo, hi = curve.reading_range
    tol = RANGE_TOLERANCE_FRACTION * (hi - lo)
    if reading is None or not math.isfinite(reading):
        return None, "no turbidity reading to convert"
    if reading < lo - tol or reading > hi + tol:
        return None, (f"turbidity reading {reading:.3g} is outside the standards' range "
                      f"{lo:.3g}–{hi:.3g}; not converted to {curve.unit}")
    value = float(curve(min(max(reading, lo), hi)))
    return value, None


def curve_to_json(curve: TurbidityCurve) -> str:
    """The curve as JSON text (schema :data:`CURVE_SCHEMA`)."""
    doc = {
        "schema": CURVE_SCHEMA, "unit": curve.unit, "method": curve.method, "source": curve.source,
        "standards": [{"reading": a, "value": b} for a, b in zip(curve.standards_reading, curve.standards_value)],
        "knots": {"reading": list(curve.knots_reading), "value": list(curve.knots_value)},
        "valid_reading_range": list(curve.reading_range),
        "residual_rms": curve.residual_rms,
    }
    return json.dumps(doc, indent=2, allow_nan=False)


def curve_from_json(text: str, where: str = "turbidity curve") -> TurbidityCurve:
    """Read a curve written by :func:`curve_to_json`.

    Raises
    ------
    TubevisionInputError
        Not JSON, wrong schema, or knots that are not increasing readings with
        non-decreasing values.
    """
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise TubevisionInputError(f"{where} line {exc.lineno}: not valid JSON ({exc.msg})") from None
    if not isinstance(doc, dict) or doc.get("schema") != CURVE_SCHEMA:
        raise TubevisionInputError(f"{where}: expected schema {CURVE_SCHEMA!r}")
    try:
        kr = [float(x) for x in doc["knots"]["reading"]]
        kv = [float(x) for x in doc["knots"]["value"]]
        st = [(float(s["reading"]), float(s["value"])) for s in doc["standards"]]
        lo, hi = (float(x) for x in doc["valid_reading_range"])
        unit = str(doc["unit"])
    except (KeyError, TypeError, ValueError):
        raise TubevisionInputError(f"{where}: missing or malformed knots, standards, unit or range") from None
    if len(kr) != len(kv) or len(kr) < 1 or np.any(np.diff(kr) <= 0) or np.any(np.diff(kv) < 0):
        raise TubevisionInputError(f"{where}: knots must be increasing readings with non-decreasing values")
    return TurbidityCurve(unit=unit, standards_reading=tuple(a for a, _ in st),
                          standards_value=tuple(b for _, b in st), knots_reading=tuple(kr),
                          knots_value=tuple(kv), reading_range=(lo, hi),
                          method=str(doc.get("method", "isotonic+pchip")), source=str(doc.get("source", "")),
                          residual_rms=float(doc.get("residual_rms", 0.0) or 0.0))


def save_curve(curve: TurbidityCurve, path) -> None:
    """Write the curve's JSON to ``path``."""
    Path(path).write_text(curve_to_json(curve) + "\n", encoding="utf-8")


def load_curve(path) -> TurbidityCurve:
    """Read a curve from ``path``; a missing file is a :class:`TubevisionInputError`."""
    p = Path(path)
    if not p.is_file():
        raise TubevisionInputError(f"turbidity curve file {p} not found")
    return curve_from_json(p.read_text(encoding="utf-8"), where=str(p))
