"""Judging one photo against one step: verdict per labelled tube, control checks.

The scheme file says what a positive and a negative look like; this module
measures each labelled tube against those appearances and against the
positive control and the blank photographed beside it.

Rules (no chemistry here; every appearance comes from the scheme file):

1. A tube whose state confidence is under the scheme's ``min_confidence`` is
   inconclusive (a blank excepted when its measurements alone show it clear with nothing
   settled, :func:`_measured_clear`), and so is one whose state word the measured
   turbidity contradicts (:func:`_state_clash`: "cloudy" with no scattered light, "clear"
   plainly scattering).
2. It is positive if it matches the step's positive appearance and not the
   negative one, negative the other way round; matching both or neither, or
   lacking a reference a threshold needs (no blank labelled…), is
   inconclusive.
3. Where the step names a ``compare`` quantity and both a positive control
   and a blank are labelled, a sample's position between the blank (0) and
   the control (1) must agree with its verdict: inside the scheme's
   ``between_band`` or on the wrong side of it, the sample is inconclusive.
4. The positive control must come out positive and the blank negative (and a
   standard must show the step's ``standard`` appearance). Otherwise the step
   is flagged in :attr:`StepJudgement.control_failures` and every sample's
   verdict for the step becomes inconclusive.

Colour differences are CIEDE2000 (:func:`tubevision.colorimetry.delta_e00`,
Sharma, Wu & Dalal 2005) between CIELAB D65/2° colours.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from ..colorimetry import delta_e00
from ..errors import TubevisionInputError
from ._load import Condition, Scheme, Step, role_of, scheme_summary

TURBIDITY_MIN_STANDARD = 1e-6
"""Smallest standard turbidity (record units) a ratio is taken against; below it
the ratio is undefined. Reason: guards a division by a zero turbidity."""

CONTROL_SEPARATION_MIN_DE00 = 2.0
"""Least CIEDE2000 between the positive control and the blank for a colour
position between them to mean anything. Reason: about twice the just-noticeable
difference of 1 ΔE00 (common practice in colour tolerancing)."""

TURBIDITY_SEPARATION_MIN = 0.02
"""Least turbidity difference (record units) between control and blank for a
turbidity position between them to mean anything. Reason: of the order of the
noise of the turbidity measure on one tube (set beside the measure stage's
turbidity_sd; revise with it)."""

VERDICTS = ("positive", "negative", "inconclusive")


@dataclass(frozen=True)
class TubeObservation:
    """What the scheme sees of one tube (built from measure + classify outputs).

    Attributes
    ----------
    index : int — 0-based position in reading order.
    state : str — ``clear|cloudy|settled|empty``.
    confidence : float — state confidence in [0, 1].
    liquid_lab : (L*, a*, b*) or None — CIELAB D65/2° of the liquid, L* in [0, 100]; None when empty.
    liquid_colour_name : str or None — contract colour word of the liquid.
    turbidity : float or None — record turbidity units (README), ≥ 0.
    pellet_present : bool
    pellet_height_mm : float or None — None when absent or no mm scale.
    pellet_lab : (L*, a*, b*) or None
    pellet_colour_name : str or None
    turbidity_sd : float or None — standard uncertainty of ``turbidity``, if known.
    light_solid_hidden : bool — no solid found, but the bottom showed only the light
        backdrop, where a white solid would not show (measure stage).
    dark_solid_hidden : bool — no solid found, but the bottom showed only a dark band,
        where a black solid would not show (measure stage).
    pellet_seen_over_light, pellet_seen_over_dark : bool — a solid was found, and rows of it
        in front of a light (dark) band were confirmed opaque there: that band does not hide
        it (measure stage's ``seen_over_light``/``seen_over_dark``).
    """

    index: int
    state: str
    confidence: float
    liquid_lab: tuple[float, float, float] | None
    liquid_colour_name: str | None
    turbidity: float | None
    pellet_present: bool
    pellet_height_mm: float | None
    pellet_lab: tuple[float, float, float] | None
    pellet_colour_name: str | None
    turbidity_sd: float | None = None
    light_solid_hidden: bool = False
    dark_solid_hidden: bool = False
    pellet_seen_over_light: bool = False
    pellet_seen_over_dark: bool = False


def _lab_or_none(v) -> tuple[float, float, float] | None:
    if v is None:
        return None
    a = np.asarray(v, dtype=float).reshape(-1)
    if a.size != 3 or not np.all(np.isfinite(a)):
        return None
    return (float(a[0]), float(a[1]), float(a[2]))


def _num_or_none(v) -> float | None:
    if v is None:
        return None
    f = float(v)
    return f if math.isfinite(f) else None


def observation_from(measurement: Any, call: Any) -> TubeObservation:
    """The :class:`TubeObservation` of one tube from the measure and classify outputs.

    Reads only the documented attributes (docs/design.md): ``measurement.index,
    .empty, .liquid.lab, .liquid.turbidity[, .turbidity_sd], .pellet.present,
    .pellet.height_mm, .pellet.lab`` and ``call.state, .confidence,
    .liquid_colour_name, .pellet_colour_name``.
    """
    liq = getattr(measurement, "liquid", None)
    pel = getattr(measurement, "pellet", None)
    present = bool(getattr(pel, "present", False))
    return TubeObservation(
        index=int(measurement.index),
        state=str(call.state),
        confidence=float(call.confidence),
        liquid_lab=_lab_or_none(getattr(liq, "lab", None)) if liq is not None else None,
        liquid_colour_name=getattr(call, "liquid_colour_name", None) if liq is not None else None,
        turbidity=_num_or_none(getattr(liq, "turbidity", None)) if liq is not None else None,
        pellet_present=present,
        pellet_height_mm=_num_or_none(getattr(pel, "height_mm", None)) if present else None,
        pellet_lab=_lab_or_none(getattr(pel, "lab", None)) if present else None,
        pellet_colour_name=getattr(call, "pellet_colour_name", None) if present else None,
        turbidity_sd=_num_or_none(getattr(liq, "turbidity_sd", None)) if liq is not None else None,
        light_solid_hidden=bool(getattr(pel, "light_solid_hidden", False)) and not present,
        dark_solid_hidden=bool(getattr(pel, "dark_solid_hidden", False)) and not present,
        pellet_seen_over_light=bool(getattr(pel, "seen_over_light", False)) and present,
        pellet_seen_over_dark=bool(getattr(pel, "seen_over_dark", False)) and present,
    )


def observation_from_record(tube: dict) -> TubeObservation:
    """The :class:`TubeObservation` of one tube of an evidence record (contract keys)."""
    liq = tube.get("liquid") or {}
    pel = tube.get("pellet") or {}
    present = bool(pel.get("present", False))
    return TubeObservation(
        index=int(tube["index"]), state=tube["state"], confidence=float(tube["confidence"]),
        liquid_lab=_lab_or_none(liq.get("lab")), liquid_colour_name=liq.get("colour_name"),
        turbidity=_num_or_none(liq.get("turbidity")), pellet_present=present,
        pellet_height_mm=_num_or_none(pel.get("height_mm")) if present else None,
        pellet_lab=_lab_or_none(pel.get("lab")) if present else None,
        pellet_colour_name=pel.get("colour_name") if present else None,
        turbidity_sd=_num_or_none(liq.get("turbidity_sd")),
        light_solid_hidden=bool(pel.get("light_solid_hidden", False)) and not present,
        dark_solid_hidden=bool(pel.get("dark_solid_hidden", False)) and not present,
        pellet_seen_over_light=bool(pel.get("seen_over_light", False)) and present,
        pellet_seen_over_dark=bool(pel.get("seen_over_dark", False)) and present,
    )


@dataclass(frozen=True)
class ControlFailure:
    """A control, blank or standard that did not show what the step expects of it."""

    position: int
    label: str
    role: str
    expected: str
    observed: str
    reason: str
    cause: str = "reagent or technique"
    """What most likely went wrong: ``"reagent or technique"``, or ``"photo"`` when the
    control's expected solid could not have shown against the band behind its bottom."""
    advice: str = ""
    """For ``cause == "photo"``: what to do (which band to put behind the bottoms)."""

    def __str__(self) -> str:
        advice = (f"{self.advice} before suspecting the reagent" if self.cause == "photo"
                  else "check the reagent and the technique")
        return (f"{self.role} {self.label!r} (T{self.position}) did not show the expected "
                f"{self.expected} ({self.reason}): {advice}")

    def as_dict(self) -> dict:
        return {"position": self.position, "label": self.label, "role": self.role,
                "expected": self.expected, "observed": self.observed, "reason": self.reason,
                "cause": self.cause, **({"advice": self.advice} if self.advice else {})}


@dataclass(frozen=True)
class TubeOutcome:
    """The judgement of one labelled tube."""

    index: int
    position: int
    label: str
    role: str
    verdict: str
    meaning: str
    evidence: str
    confidence: float
    quantities: dict = field(default_factory=dict, compare=False)
    warnings: tuple[str, ...] = ()

    def as_dict(self) -> dict:
        """The record's ``step_outcome`` (contract keys plus ``role``, ``confidence``, ``quantities``)."""
        return {"verdict": self.verdict, "meaning": self.meaning, "evidence": self.evidence,
                "role": self.role, "confidence": _round(self.confidence),
                "quantities": {k: _round(v) for k, v in self.quantities.items()},
                "warnings": list(self.warnings)}


def _round(v, nd: int = 4):
    # Record form: finite floats rounded, NaN to null (json allow_nan=False).
    if v is None or isinstance(v, (bool, str)):
        return v
    f = float(v)
    return round(f, nd) if math.isfinite(f) else None


@dataclass(frozen=True)
class StepJudgement:
    """The judgement of one photo at one step of a scheme."""

    scheme_name: str
    scheme_source: str
    scheme_file: str
    scheme_sha256: str
    step: str
    outcomes: tuple[TubeOutcome, ...]
    control_failures: tuple[ControlFailure, ...] = ()
    warnings: tuple[str, ...] = ()
    step_info: dict = field(default_factory=dict, compare=False)
    retake_positions: tuple[int, ...] = ()
    """1-based positions of labelled tubes whose bottoms showed only the band that would hide
    the solid this step looks for (light for a white solid, dark for a black one): photograph
    again with the other band behind them."""
    retake_shift_bands: float = 1.0
    """How far to move the rack against the backdrop for that photo, in band widths: 1, or
    0.5 when most of those tubes' bottoms stood at a band edge (neither shade behind them:
    both hidden-solid flags), where a whole band's move puts them at the next edge."""

    @property
    def failed(self) -> bool:
        """True when a control failed: the analysis's exit status becomes 1."""
        return bool(self.control_failures)

    def outcome_for(self, index: int) -> dict | None:
        """The record's ``step_outcome`` of the tube at 0-based ``index``; None if unlabelled."""
        for o in self.outcomes:
            if o.index == index:
                return o.as_dict()
        return None

    def record_block(self) -> dict:
        """The record's top-level ``scheme`` block (see :func:`scheme_block`)."""
        return scheme_block(self)


def scheme_block(judgement: StepJudgement) -> dict:
    """The record's top-level ``"scheme"`` block for one judged photo.

    ``{"name", "source", "file", "sha256", "step", "control_failures": [ {position,
    label, role, expected, observed, reason} ], "roles": {"1": "control", ...},
    "warnings": [...], "step_info": {title, reagent, fraction, source, reactions,
    hazards, safety}}``. ``source`` is the built-in name or path the scheme
    was loaded from, so that :func:`conclude` can load it again; ``step_info``
    is for the report (what was done, from which text, with which cautions).
    """
    return {
        "name": judgement.scheme_name,
        "source": judgement.scheme_source,
        "file": judgement.scheme_file,
        "sha256": judgement.scheme_sha256,
        "step": judgement.step,
        "control_failures": [f.as_dict() for f in judgement.control_failures],
        "roles": {str(o.position): o.role for o in judgement.outcomes},
        "warnings": list(judgement.warnings),
        "step_info": dict(judgement.step_info),
    }


# --------------------------------------------------------------------------
# condition evaluation


@dataclass
class _Refs:
    control: TubeObservation | None
    blank: TubeObservation | None
    standard: TubeObservation | None


def _quantities(obs: TubeObservation, refs: _Refs) -> dict[str, float | None]:
    q: dict[str, float | None] = {"confidence": obs.confidence, "turbidity": obs.turbidity,
                                  "pellet_height_mm": obs.pellet_height_mm,
                                  "pellet_lightness": obs.pellet_lab[0] if obs.pellet_lab is not None else None}

    def de(a, b):
        if a is None or b is None:
            return None
        return float(delta_e00(np.asarray(a, float), np.asarray(b, float)))

    b, c, s = refs.blank, refs.control, refs.standard
    q["turbidity_above_blank"] = (obs.turbidity - b.turbidity
                                  if b is not None and obs.turbidity is not None and b.turbidity is not None
                                  else None)
    q["turbidity_ratio_to_standard"] = (obs.turbidity / s.turbidity
                                        if s is not None and obs.turbidity is not None and s.turbidity is not None
                                        and s.turbidity > TURBIDITY_MIN_STANDARD else None)
    q["liquid_de00_to_blank"] = de(obs.liquid_lab, b.liquid_lab if b else None)
    q["liquid_de00_to_control"] = de(obs.liquid_lab, c.liquid_lab if c else None)
    q["pellet_de00_to_control"] = de(obs.pellet_lab, c.pellet_lab if c else None)
    return q


_THRESHOLDS = (
    # (condition field, quantity, comparison, wording, the reference it needs)
    ("min_turbidity_above_blank", "turbidity_above_blank", ">=", "turbidity above blank", "blank"),
    ("max_turbidity_above_blank", "turbidity_above_blank", "<=", "turbidity above blank", "blank"),
    ("min_liquid_de00_to_blank", "liquid_de00_to_blank", ">=", "liquid ΔE00 to blank", "blank"),
    ("max_liquid_de00_to_blank", "liquid_de00_to_blank", "<=", "liquid ΔE00 to blank", "blank"),
    ("max_liquid_de00_to_control", "liquid_de00_to_control", "<=", "liquid ΔE00 to control", "control"),
    ("min_turbidity_ratio_to_standard", "turbidity_ratio_to_standard", ">=", "turbidity / standard", "standard"),
    ("max_turbidity_ratio_to_standard", "turbidity_ratio_to_standard", "<=", "turbidity / standard", "standard"),
    ("min_pellet_height_mm", "pellet_height_mm", ">=", "pellet height mm", None),
    ("min_pellet_lightness", "pellet_lightness", ">=", "pellet L*", None),
    ("max_pellet_lightness", "pellet_lightness", "<=", "pellet L*", None),
)


def _holds(cond: Condition, obs: TubeObservation, q: dict) -> tuple[bool | None, list[str]]:
    """Whether ``cond`` holds for the tube: True, False, or None (a needed value is missing).

    Returns the verdict and the reasons it does not hold (or cannot be told).
    """
    unmet: list[str] = []
    unknown: list[str] = []
    if cond.states and obs.state not in cond.states:
        unmet.append(f"state {obs.state}, not {'/'.join(cond.states)}")
    if cond.pellet == "present" and not obs.pellet_present:
        unmet.append("no pellet")
    if cond.pellet == "absent" and obs.pellet_present:
        unmet.append("a pellet is present")
    if cond.pellet_colours and obs.pellet_present and obs.pellet_colour_name not in cond.pellet_colours:
        unmet.append(f"pellet {obs.pellet_colour_name}, not {'/'.join(cond.pellet_colours)}")
    if cond.liquid_colours and obs.liquid_colour_name not in cond.liquid_colours:
        unmet.append(f"liquid {obs.liquid_colour_name}, not {'/'.join(cond.liquid_colours)}")
    for fld, key, op, words, ref in _THRESHOLDS:
        limit = getattr(cond, fld)
        if limit is None:
            continue
        v = q.get(key)
        if v is None:
            if key in ("pellet_height_mm", "pellet_lightness") and not obs.pellet_present:
                unmet.append("no pellet")
            else:
                unknown.append(f"{words} unknown" + (f" (no {ref} labelled or measured)" if ref else ""))
            continue
        ok = v >= limit if op == ">=" else v <= limit
        if not ok:
            unmet.append(f"{words} {v:.3g}, needs {op} {limit:g}")
    if cond.any_of:
        results = [_holds(c, obs, q) for c in cond.any_of]
        if not any(r is True for r, _ in results):
            reasons = "; or ".join(", ".join(w) for _, w in results)
            if any(r is None for r, _ in results):
                unknown.append(f"none of the alternatives can be shown ({reasons})")
            else:
                unmet.append(f"none of the alternatives ({reasons})")
    if unmet:
        return False, unmet
    if unknown:
        return None, unknown
    return True, []


CLOUDY_MIN_TURBIDITY = 0.03
"""Turbidity (record units) below which, by the measurement, a liquid scatters no light: a
"cloudy" state word is then contradicted. Reason: between clear liquids' 95th percentile
(~0.01) and the faintest cloud of the studio dilution series (~0.07) in
bench/bench_measure.py (our threshold; revise with the measure stage)."""

CLEAR_MAX_TURBIDITY = 0.05
"""Turbidity (record units) above which, by the measurement, a liquid scatters light: a
"clear" state word is then contradicted. Reason: the largest turbidity above the blank the
bundled schemes accept for a liquid that "stays clear" (``max_turbidity_above_blank``)."""


def _state_clash(obs: TubeObservation) -> str:
    """Why the state word disagrees with the measured turbidity, or "" when it does not.

    The state word comes from a learned classifier; the turbidity is a physical measure of
    scattered light (measure stage). A liquid called cloudy that scatters nothing, or called
    clear that plainly scatters, is a misreading either way, so neither appearance is
    judged from it (a clear water control read "cloudy" passed a spoiled reagent). Only
    where no solid is present (a settled solid under clear liquid is a cloudy slip's usual
    truth, and the solid still speaks for itself) and the turbidity is measured; two
    standard uncertainties of margin when it has one."""
    if obs.turbidity is None or obs.pellet_present:
        return ""
    sd = 2.0 * (obs.turbidity_sd or 0.0)
    if obs.state == "cloudy" and obs.turbidity + sd < CLOUDY_MIN_TURBIDITY:
        return (f"state cloudy, but the measured turbidity {obs.turbidity:.3f} shows no scattered light "
                f"(below {CLOUDY_MIN_TURBIDITY:g})")
    if obs.state == "clear" and obs.turbidity - sd > CLEAR_MAX_TURBIDITY:
        return (f"state clear, but the measured turbidity {obs.turbidity:.3f} shows scattered light "
                f"(above {CLEAR_MAX_TURBIDITY:g})")
    return ""


def _measured_clear(obs: TubeObservation) -> bool:
    """Whether the measurements alone show a clear liquid with nothing settled, as the word
    "clear" says: no solid found and the turbidity below :data:`CLOUDY_MIN_TURBIDITY` by two
    standard uncertainties. A blank's check is one-sided (a contaminated reagent shows as a
    solid or a cloud), and these are the physical tests of both; so a blank that the
    classifier calls clear with a confidence just under the scheme's ``min_confidence`` is
    still judged when they agree and its bottom did not stand where the step's solid, of the
    control's shade, could hide (:func:`judge_step`; in the bench, clear water blanks at
    0.48-0.50 lost whole steps with "check the reagent"). Samples stay under the confidence
    rule."""
    if obs.state != "clear" or obs.pellet_present or obs.turbidity is None:
        return False
    return obs.turbidity + 2.0 * (obs.turbidity_sd or 0.0) < CLOUDY_MIN_TURBIDITY


def _pattern_verdict(step: Step, obs: TubeObservation, q: dict, min_conf: float) -> tuple[str, str]:
    """Verdict from the step's appearances and the confidence alone, with its reason."""
    if obs.confidence < min_conf:
        return "inconclusive", f"state confidence {obs.confidence:.2f} below {min_conf:.2f}"
    clash = _state_clash(obs)
    if clash:
        return "inconclusive", clash
    pos, why_pos = _holds(step.positive.condition, obs, q)
    neg, why_neg = _holds(step.negative.condition, obs, q)
    if pos is True and neg is True:
        return "inconclusive", "matches both the expected positive and the expected negative"
    if pos is True:
        return "positive", ""
    if neg is True:
        return "negative", ""
    if pos is None or neg is None:
        why = why_pos if pos is None else why_neg
        return "inconclusive", "cannot be told: " + "; ".join(why)
    return "inconclusive", ("matches neither expected appearance (positive: " + "; ".join(why_pos)
                            + " | negative: " + "; ".join(why_neg) + ")")


def _position(step: Step, obs: TubeObservation, q: dict, refs: _Refs) -> float | None:
    """Where the tube lies between the blank (0) and the positive control (1), or None.

    ``liquid``: d_B / (d_B + d_C) with CIEDE2000 distances of the liquid
    colour to the blank and the control; ``turbidity``: (T - T_B) / (T_C - T_B).
    Our own measure of "between control and blank" (no published source).
    """
    c, b = refs.control, refs.blank
    if step.compare is None or c is None or b is None:
        return None
    if step.compare == "liquid":
        if c.liquid_lab is None or b.liquid_lab is None or obs.liquid_lab is None:
            return None
        sep = float(delta_e00(np.asarray(c.liquid_lab), np.asarray(b.liquid_lab)))
        d_b, d_c = q["liquid_de00_to_blank"], q["liquid_de00_to_control"]
        if sep < CONTROL_SEPARATION_MIN_DE00 or d_b is None or d_c is None or d_b + d_c <= 0:
            return None
        return d_b / (d_b + d_c)
    if step.compare == "turbidity":
        if c.turbidity is None or b.turbidity is None or obs.turbidity is None:
            return None
        span = c.turbidity - b.turbidity
        if span < TURBIDITY_SEPARATION_MIN:
            return None
        return (obs.turbidity - b.turbidity) / span
    return None


def _evidence(obs: TubeObservation, q: dict) -> str:
    parts = [f"state {obs.state} (confidence {obs.confidence:.2f})"]
    if obs.liquid_colour_name is not None:
        parts.append(f"liquid {obs.liquid_colour_name}")
    if obs.pellet_present:
        h = f" {obs.pellet_height_mm:.1f} mm" if obs.pellet_height_mm is not None else ""
        parts.append(f"pellet {obs.pellet_colour_name}{h}")
    else:
        parts.append("no pellet")
    if obs.turbidity is not None:
        t = f"turbidity {obs.turbidity:.3f}"
        if q.get("turbidity_above_blank") is not None:
            t += f" ({q['turbidity_above_blank']:+.3f} vs blank)"
        if q.get("turbidity_ratio_to_standard") is not None:
            t += f" ({q['turbidity_ratio_to_standard']:.2f}x standard)"
        parts.append(t)
    for key, words in (("liquid_de00_to_control", "ΔE00 to control"), ("liquid_de00_to_blank", "ΔE00 to blank"),
                       ("pellet_de00_to_control", "pellet ΔE00 to control")):
        if q.get(key) is not None:
            parts.append(f"{words} {q[key]:.1f}")
    if q.get("position_blank_to_control") is not None:
        parts.append(f"position blank→control {q['position_blank_to_control']:.2f}")
    return "; ".join(parts)


def _diagnose(scheme: Scheme, step: Step, role: str, obs: TubeObservation, q: dict) -> list[str]:
    out = []
    for d in tuple(scheme.diagnostics) + tuple(step.diagnostics):
        if role in d.applies_to and _holds(d.when, obs, q)[0] is True:
            out.append(d.text)
    return out


LIGHT_SOLID_MIN_L = 60.0
"""L* above which a settled solid counts as light (white, pale yellow): one that reads
like the light backdrop behind it (our threshold; the backdrop's light bands are L* ≈ 90)."""


LIGHT_SOLID_WORDS = frozenset({"white", "yellow", "pink"})
"""Colour words of solids that read like the light backdrop behind them (their L* is
usually above :data:`LIGHT_SOLID_MIN_L`; common practice — white and pale yellow or pink
precipitates are the ones a bench chemist holds against a dark card to see)."""


DARK_SOLID_MAX_L = 40.0
"""L* below which a settled solid counts as dark (black, grey-black): one that reads like a
dark band behind it (our threshold; the backdrop's dark bands are L* ≈ 25-35)."""
DARK_SOLID_WORDS = frozenset({"black", "grey"})
"""Colour words of solids that read like a dark band behind them (common practice: a black
or grey-black precipitate is looked at against a white card)."""

_HIDING = {
    # kind: (words, test on a scheme's lightness bounds, test on a measured L*, band to use)
    "light": (LIGHT_SOLID_WORDS, lambda c: (c.min_pellet_lightness or 0.0) >= LIGHT_SOLID_MIN_L,
              lambda L: L >= LIGHT_SOLID_MIN_L, "dark"),
    "dark": (DARK_SOLID_WORDS, lambda c: c.max_pellet_lightness is not None and c.max_pellet_lightness <= DARK_SOLID_MAX_L,
             lambda L: L <= DARK_SOLID_MAX_L, "light"),
}


def _expects_solid(cond: Condition, kind: str) -> bool:
    """Whether an expected appearance includes a ``kind`` ("light"/"dark") settled solid."""
    words, bound, _, _ = _HIDING[kind]
    if cond.pellet != "absent" and (set(cond.pellet_colours) & words or bound(cond)):
        return True
    return any(_expects_solid(c, kind) for c in cond.any_of)


def _hidden(obs: TubeObservation, kind: str) -> bool:
    return not obs.pellet_present and (obs.light_solid_hidden if kind == "light" else obs.dark_solid_hidden)


def _control_solid_is(obs_list, roles, kind: str) -> bool:
    """Whether a positive control in the photo shows a ``kind`` ("light"/"dark") settled solid
    that the band of that shade could hide: one not confirmed opaque in front of such a band
    in this photo. A control's light solid confirmed opaque in front of a light band (a
    yellow one shows its colour there; a white one does not) shows that this step's solid is
    seen against that band, so a sample's bottom in front of one hides nothing."""
    is_kind = _HIDING[kind][2]
    for pos, role in roles.items():
        o = obs_list[pos - 1]
        if role == "control" and o.pellet_present and o.pellet_lab is not None and is_kind(o.pellet_lab[0]):
            # a dark solid in front of a dark band differs from it only by the little light
            # the band sends back (near the camera's flare): not relied on for another tube
            if not (kind == "light" and o.pellet_seen_over_light):
                return True
    return False


def _retake_matters(st: Step, kind: str, obs_list, roles, prelim) -> bool:
    """Whether a photo with the other band behind the bottoms could change this step's
    judgement for a ``kind`` ("light"/"dark") solid: the step looks for such a solid, and
    either a positive control shows one (so a sample's or the blank's solid would look like
    it), or a control failed because such a solid could not have shown, or no control is
    labelled to say which shade the step's solid has. A step whose positive names both
    shades (a light solid that may darken to grey) but whose control shows a light one
    gains nothing from moving a dark solid's band, and moving it would put the control's
    own light solid in front of a light band."""
    if not _expects_solid(st.positive.condition, kind):
        return False
    controls = [pos for pos, role in roles.items() if role == "control"]
    if not controls or _control_solid_is(obs_list, roles, kind):
        return True
    return any(_hidden(obs_list[pos - 1], kind) and prelim[pos][0] != "positive" for pos in controls)


def _band_advice(kind: str) -> str:
    return f"photograph again with a {_HIDING[kind][3]} band behind the tube bottoms"


def judge_step(scheme: Scheme, step: str, observations: Sequence[TubeObservation],
               labels: dict[int, str]) -> StepJudgement:
    """Judge every labelled tube of one photo against one step of a scheme.

    Parameters
    ----------
    scheme : Scheme — from :func:`load_scheme`.
    step : str — the step's name.
    observations : sequence of TubeObservation — every tube in reading order.
    labels : dict — 1-based position → label (:func:`parse_labels`);
        unlabelled tubes are ignored.

    Returns
    -------
    StepJudgement
        One :class:`TubeOutcome` per labelled tube; ``control_failures``
        non-empty when the positive control, blank or standard did not
        behave (then every sample is inconclusive and the analysis exits 1).

    Raises
    ------
    TubevisionInputError
        Unknown step, or a label at a position with no tube.
    """
    st = scheme.step(step)
    obs_list = list(observations)
    for pos in labels:
        if not 1 <= pos <= len(obs_list):
            raise TubevisionInputError(f"--labels: position {pos} given but only {len(obs_list)} tubes found")
    roles = {pos: role_of(scheme, lab) for pos, lab in labels.items()}
    by_role: dict[str, list[int]] = {}
    for pos in sorted(roles):
        if roles[pos] is not None:
            by_role.setdefault(roles[pos], []).append(pos)

    def first(role: str) -> TubeObservation | None:
        ps = by_role.get(role)
        return obs_list[ps[0] - 1] if ps else None

    refs = _Refs(control=first("control"), blank=first("blank"), standard=first("standard"))
    warnings: list[str] = []
    where = f"{scheme.name} step {st.name}"
    for need in st.needs:
        if need not in by_role:
            warnings.append(f"{where}: no {need} labelled; thresholds against the {need} cannot be applied "
                            f"and such tubes stay inconclusive")
    if "control" not in by_role and "standard" not in by_role:
        warnings.append(f"{where}: no positive control labelled: the reagent and technique are unchecked")
    if "blank" not in by_role and "standard" not in by_role:
        warnings.append(f"{where}: no blank labelled: a contaminated reagent would go unnoticed")
    if "sample" not in by_role:
        warnings.append(f"{where}: no sample labelled")

    # First pass: every labelled tube by the appearances alone; controls checked.
    failures: list[ControlFailure] = []
    prelim: dict[int, tuple[str, str, dict, list[str]]] = {}
    for pos in sorted(roles):
        role = roles[pos]
        if role is None:
            continue
        obs = obs_list[pos - 1]
        q = _quantities(obs, refs)
        pv = _position(st, obs, q, refs)
        q["position_blank_to_control"] = pv
        verdict, why = _pattern_verdict(st, obs, q, scheme.min_confidence)
        if (role == "blank" and obs.confidence < scheme.min_confidence and _measured_clear(obs)
                and not any(_hidden(obs, k) and _expects_solid(st.positive.condition, k)
                            and ("control" not in by_role or _control_solid_is(obs_list, roles, k))
                            for k in _HIDING)):
            # the blank guards against a solid or a cloud; the measurements test both
            v2, _ = _pattern_verdict(st, obs, q, 0.0)
            if v2 == "negative":
                verdict, why = v2, ""
        diag = _diagnose(scheme, st, role, obs, q)
        prelim[pos] = (verdict, why, q, diag)
        label = labels[pos]
        if role == "control" and verdict != "positive":
            kind = next((k for k in _HIDING if _hidden(obs, k) and _expects_solid(st.positive.condition, k)), None)
            if verdict == "negative" and kind is not None:
                # Not evidence against the reagent: the photo could not have shown the solid.
                behind = "the light backdrop" if kind == "light" else "a dark band"
                failures.append(ControlFailure(
                    pos, label, role, "positive", verdict,
                    f"no solid seen, but its bottom showed only {behind}, where the expected "
                    f"{kind} solid would not show", cause="photo", advice=_band_advice(kind)))
            else:
                failures.append(ControlFailure(pos, label, role, "positive", verdict,
                                               why or f"it shows the negative instead: {st.negative.meaning}"))
        elif role == "blank" and verdict != "negative":
            failures.append(ControlFailure(pos, label, role, "negative", verdict,
                                           why or f"it shows the positive instead: {st.positive.meaning}"))
        elif role == "standard" and st.standard is not None:
            ok, why_s = _holds(st.standard.condition, obs, q)
            if ok is not True:
                failures.append(ControlFailure(pos, label, role, "standard appearance",
                                               "not shown", "; ".join(why_s)))

    outcomes: list[TubeOutcome] = []
    lo, hi = scheme.between_band
    for pos in sorted(prelim):
        verdict, why, q, diag = prelim[pos]
        role = roles[pos]
        obs = obs_list[pos - 1]
        label = labels[pos]
        if role == "sample":
            pv = q.get("position_blank_to_control")
            if verdict in ("positive", "negative") and pv is not None:
                if lo <= pv <= hi:
                    verdict, why = "inconclusive", f"between the blank and the positive control (position {pv:.2f})"
                elif verdict == "positive" and pv < lo:
                    verdict, why = "inconclusive", (f"matches the expected positive but lies nearer the blank "
                                                    f"(position {pv:.2f})")
                elif verdict == "negative" and pv > hi:
                    verdict, why = "inconclusive", (f"matches the expected negative but lies nearer the positive "
                                                    f"control (position {pv:.2f})")
            if verdict == "negative" and _hidden(obs, "light") and _control_solid_is(obs_list, roles, "light"):
                verdict, why = "inconclusive", ("no solid seen, but this tube's bottom showed only the light "
                                                "backdrop, where a light solid like the positive control's "
                                                "would not show (place a dark band behind the bottoms)")
            elif verdict == "negative" and _hidden(obs, "dark") and _control_solid_is(obs_list, roles, "dark"):
                verdict, why = "inconclusive", ("no solid seen, but this tube's bottom showed only a dark band, "
                                                "where a dark solid like the positive control's would not show "
                                                "(place a light band behind the bottoms)")
            if failures and verdict != "inconclusive":
                why = f"{verdict} by appearance, but the controls failed at this step"
                verdict = "inconclusive"
            elif failures:
                why = f"{why}; and the controls failed at this step"
        if verdict == "positive":
            meaning = st.positive.meaning
        elif verdict == "negative":
            meaning = st.negative.meaning
        else:
            meaning = f"inconclusive: {why}"
        if role in ("control", "blank", "standard"):
            failed = [f for f in failures if f.position == pos]
            role_words = {"control": "positive control", "blank": "blank", "standard": "standard"}[role]
            if failed:
                meaning = f"{role_words} FAILED: expected {failed[0].expected}, {failed[0].reason}"
            elif role == "standard" and st.standard is not None:
                meaning = f"{role_words} as expected: {st.standard.meaning}"
            else:
                meaning = f"{role_words} as expected: {meaning}"
        for d in diag:
            warnings.append(f"{where}: T{pos} ({label}): {d}")
        outcomes.append(TubeOutcome(index=pos - 1, position=pos,
                                    label=label, role=role, verdict=verdict, meaning=meaning,
                                    evidence=_evidence(obs, q), confidence=obs.confidence,
                                    quantities=q, warnings=tuple(diag)))
    retake: set[int] = set()
    for kind in _HIDING:
        if not _retake_matters(st, kind, obs_list, roles, prelim):
            continue
        hidden = [pos for pos in sorted(prelim) if _hidden(obs_list[pos - 1], kind)]
        if hidden:
            retake.update(hidden)
            warnings.append(f"{where}: " + ", ".join(f"T{p}" for p in hidden)
                            + (" has its bottom" if len(hidden) == 1 else " have their bottoms")
                            + f" in front of a {'light' if kind == 'light' else 'dark'} band only, where the "
                              f"{kind} solid this step looks for would not show: move the rack so a "
                              f"{_HIDING[kind][3]} band is behind the bottoms and photograph again")
    at_edge = [pos for pos in retake if obs_list[pos - 1].light_solid_hidden and obs_list[pos - 1].dark_solid_hidden]
    shift_bands = 0.5 if retake and 2 * len(at_edge) > len(retake) else 1.0
    if shift_bands == 0.5:
        warnings.append(f"{where}: " + ", ".join(f"T{p}" for p in sorted(at_edge))
                        + (" has its bottom" if len(at_edge) == 1 else " have their bottoms")
                        + " at a band's edge, in front of neither shade: move the rack by half a band")
    for f in failures:
        warnings.append(f"{where}: {f}")
    summary = scheme_summary(scheme)
    return StepJudgement(scheme_name=scheme.name, scheme_source=summary["source"], scheme_file=summary["file"],
                         scheme_sha256=scheme.sha256, step=st.name, outcomes=tuple(outcomes),
                         control_failures=tuple(failures), warnings=tuple(dict.fromkeys(warnings)),
                         retake_positions=tuple(sorted(retake)), retake_shift_bands=shift_bands,
                         step_info={"title": st.title, "reagent": st.reagent, "fraction": st.fraction,
                                    "source": st.source, "reactions": list(st.reactions),
                                    "hazards": list(st.hazards), "safety": " ".join(scheme.safety.split())})


def judgement_counts(judgement: StepJudgement) -> dict[str, int]:
    """How many samples got each verdict (for summaries)."""
    out = {v: 0 for v in VERDICTS}
    for o in judgement.outcomes:
        if o.role == "sample":
            out[o.verdict] += 1
    return out

