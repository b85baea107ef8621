"""State and colour words per tube: :func:`classify_tube` and :func:`load_model`.

The state (``clear``, ``cloudy``, ``settled``, ``empty``) comes from the
shipped random forest (:mod:`tubevision.classify.forest`) over the
measurement's ``features``; where no model loads, from the documented rules
of :func:`rule_state` (and the call says so in a warning). Colour words come
from the naming table (:mod:`tubevision.classify.naming`).

Confidence
----------
``TubeCall.confidence`` is the forest's probability for the chosen state,
lowered where the call should not be trusted and with a warning each time:

* features outside the range seen in training (``feature_min``/``feature_max``
  in the model file): multiplied by ``OUT_OF_RANGE_FACTOR`` and capped at
  ``OUT_OF_RANGE_MAX_CONFIDENCE``;
* two states close (top-two margin below ``CLOSE_MARGIN``): the warning names both;
* a missing feature (NaN): filled with the training median, capped likewise;
* the forest and the measure stage disagree about liquid: no liquid column
  measured but a state with liquid called (kept: the forest was trained on
  missed menisci too), or a column measured but ``empty`` called (the most
  probable state with liquid is taken instead, since the contract's empty
  means no liquid): capped likewise.

The colour words' own shares (:func:`~tubevision.classify.naming.colour_name_candidates`)
are kept in ``liquid_colour_candidates`` / ``pellet_colour_candidates``; a word
with less than ``COLOUR_MIN_SHARE`` of the blurred colour adds a warning naming
its neighbour.
"""

from __future__ import annotations

import functools
import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import TubevisionInputError
from .forest import StateModel, forest_predict_proba, read_model_file
from .naming import colour_name, colour_name_candidates

__all__ = [
    "STATES",
    "DEFAULT_MODEL_PATH",
    "CLOSE_MARGIN",
    "OUT_OF_RANGE_FACTOR",
    "OUT_OF_RANGE_MAX_CONFIDENCE",
    "OUT_OF_RANGE_TOLERANCE",
    "COLOUR_MIN_SHARE",
    "RULE_CLOUDY_TURBIDITY",
    "RULE_PELLET_MIN_HEIGHT_MM",
    "RULE_PELLET_MIN_CONTRAST_DE00",
    "RULES_CONFIDENCE",
    "TubeCall",
    "load_model",
    "classify_tube",
    "rule_state",
    "feature_vector",
]

log = logging.getLogger(__name__)

STATES = ("clear", "cloudy", "settled", "empty")
"""The contract's tube states."""

DEFAULT_MODEL_PATH = Path(__file__).resolve().parent.parent / "data" / "model_state_v1.json"
"""The shipped model (trained by ``python -m tubevision.classify.train``)."""

CLOSE_MARGIN = 0.25
"""Top-two probability margin below which the call names both states (our
choice: with a forest of vote fractions, a margin under 0.25 means about one
tree in eight decides)."""

OUT_OF_RANGE_TOLERANCE = 0.05
"""Slack, as a fraction of a feature's training span, before a value counts as
outside the training range (measurement noise at the edges; our choice)."""

LOW_CONFIDENCE = 0.6
"""Top state probability below which the call is warned as uncertain even when
no single rival is close (our choice: fewer than three trees in five agree;
on held-out studio lights most wrong calls fall below it, bench_classify)."""

OUT_OF_RANGE_FACTOR = 0.6
"""Confidence multiplier when any feature lies outside the training range (our choice)."""

OUT_OF_RANGE_MAX_CONFIDENCE = 0.5
"""Cap on the confidence of a call made outside the training range: a coin-flip
at best, since the forest extrapolates flat beyond its last split (our choice)."""

COLOUR_MIN_SHARE = 0.6
"""A colour word with less than this share of its blurred colour is borderline
and warned about (our choice)."""

RULE_CLOUDY_TURBIDITY = 0.4
"""Rule fallback only: turbidity above which the liquid is called cloudy.

Chosen on the studio table (``calibration/state_training.csv``): above the
95th percentile of the clear tubes' measured turbidity (0.32 there), so that
clear liquids are not called cloudy; faint clouds below it are missed, which
is why the rules never claim more than :data:`RULES_CONFIDENCE`."""

RULE_PELLET_MIN_HEIGHT_MM = 1.0
"""Rule fallback only: a settled solid lower than this (mm) is not counted (our
choice: the glass's own round bottom and its reflections read as up to about
1.2 mm of "solid" in the studio table's clear tubes at their 90th percentile)."""

RULE_PELLET_MIN_CONTRAST_DE00 = 20.0
"""Rule fallback only: a settled solid must differ from the liquid above it by at
least this CIEDE2000 difference (CIE 142:2001). Far above a noticeable
difference (ΔE00 ≈ 1-2, common practice), because the empty round bottom
itself differs from the column by 10-25 in the studio table; real deposits
there differ by 21-69 (25th-95th percentile). Without a measured contrast
(0) the rule keeps the pellet."""

RULES_CONFIDENCE = 0.5
"""Confidence given to any rule-based call: the rules were not validated the
way the model was, so they never claim more than even odds (our choice)."""


@dataclass(frozen=True)
class TubeCall:
    """What the classifier says about one tube.

    Attributes
    ----------
    state : str — one of :data:`STATES`.
    confidence : float in [0, 1] — see the module docstring.
    liquid_colour_name : str or None — contract word, None for an empty tube.
    pellet_colour_name : str or None — contract word, None without a pellet.
    warnings : tuple of str — one line each.
    state_probabilities : dict state → probability (empty for rule calls).
    liquid_colour_candidates, pellet_colour_candidates : tuple of (word, share).
    method : ``"model"`` or ``"rules"``.
    """

    state: str
    confidence: float
    liquid_colour_name: str | None
    pellet_colour_name: str | None
    warnings: tuple[str, ...] = ()
    state_probabilities: dict[str, float] = field(default_factory=dict)
    liquid_colour_candidates: tuple[tuple[str, float], ...] = ()
    pellet_colour_candidates: tuple[tuple[str, float], ...] = ()
    method: str = "model"


@functools.lru_cache(maxsize=1)
def _shipped_model() -> StateModel | None:
    try:
        return read_model_file(DEFAULT_MODEL_PATH)
    except TubevisionInputError as exc:
        log.warning("shipped state model did not load (%s); using the rule-based fallback", exc)
        return None


def load_model(path: str | Path | None = None) -> StateModel | None:
    """Load a state model from JSON parameters (never pickle).

    Parameters
    ----------
    path : path of a model file written by :mod:`tubevision.classify.train`
        (``tubevision analyze --model FILE``), or None for the shipped model.

    Returns
    -------
    StateModel, or None when ``path`` is None and the shipped model is missing
    or unreadable (then :func:`classify_tube` uses the rules and warns).

    Raises
    ------
    TubevisionInputError
        ``path`` was given and is missing, not JSON, or not a valid model.
    """
    if path is None:
        return _shipped_model()
    return read_model_file(path)


def feature_vector(measurement, model: StateModel) -> tuple[np.ndarray, list[str], list[str]]:
    """The model's feature row for one measurement, plus what is missing or out of range.

    Returns
    -------
    x : ndarray of shape (n_features,) — NaN filled with the training median.
    missing : list of feature names absent or NaN.
    out_of_range : list of "name=value (range lo..hi)" strings.
    """
    feats = getattr(measurement, "features", None) or {}
    x = np.empty(len(model.feature_names))
    missing, outside = [], []
    for j, name in enumerate(model.feature_names):
        v = feats.get(name)
        try:
            v = float(v) if v is not None else float("nan")
        except (TypeError, ValueError):
            v = float("nan")
        if not np.isfinite(v):
            missing.append(name)
            v = float(model.feature_fill[j])
        lo, hi = float(model.feature_min[j]), float(model.feature_max[j])
        slack = OUT_OF_RANGE_TOLERANCE * max(hi - lo, 1e-12)
        if v < lo - slack or v > hi + slack:
            outside.append(f"{name}={v:.4g} (trained {lo:.4g}..{hi:.4g})")
        x[j] = v
    return x, missing, outside


def rule_state(measurement) -> tuple[str, list[str]]:
    """The documented rule-based state, used when no model loads.

    Rules, in order:

    1. no liquid (``measurement.empty`` or ``liquid is None``) → ``empty``;
    2. liquid turbidity > :data:`RULE_CLOUDY_TURBIDITY` → ``cloudy``;
    3. a pellet present, at least :data:`RULE_PELLET_MIN_HEIGHT_MM` high (or
       of unknown height: no mm scale) and differing from the liquid by at
       least :data:`RULE_PELLET_MIN_CONTRAST_DE00` → ``settled``;
    4. otherwise ``clear``.

    Returns
    -------
    (state, reasons) — reasons are short strings for the evidence.
    """
    liq = getattr(measurement, "liquid", None)
    if getattr(measurement, "empty", False) or liq is None:
        return "empty", ["no liquid column found"]
    turb = float(getattr(liq, "turbidity", float("nan")))
    if np.isfinite(turb) and turb > RULE_CLOUDY_TURBIDITY:
        return "cloudy", [f"turbidity {turb:.3g} > {RULE_CLOUDY_TURBIDITY}"]
    pel = getattr(measurement, "pellet", None)
    if pel is not None and getattr(pel, "present", False):
        h = getattr(pel, "height_mm", None)
        contrast = float(getattr(pel, "contrast_de00", 0.0) or 0.0)
        tall = h is None or not np.isfinite(h) or h >= RULE_PELLET_MIN_HEIGHT_MM
        distinct = not np.isfinite(contrast) or contrast <= 0.0 or contrast >= RULE_PELLET_MIN_CONTRAST_DE00
        if tall and distinct:
            return "settled", ["settled solid present"]
    return "clear", [f"turbidity {turb:.3g} ≤ {RULE_CLOUDY_TURBIDITY}, no settled solid"]


def _colour(lab, lab_sd, *, solid: bool, what: str, warnings: list[str]):
    if lab is None:
        return None, ()
    lab = np.asarray(lab, dtype=np.float64)
    if lab.shape != (3,) or not np.all(np.isfinite(lab)):
        warnings.append(f"{what} colour not measurable: no colour word")
        return None, ()
    sd = None
    if lab_sd is not None:
        s = np.asarray(lab_sd, dtype=np.float64).reshape(-1)
        if s.shape == (3,) and np.all(np.isfinite(s)) and np.all(s >= 0):
            sd = s
    word = colour_name(lab, solid=solid)
    cands = tuple(colour_name_candidates(lab, solid=solid, lab_sd=sd))
    share = dict(cands).get(word, 0.0)
    if share < COLOUR_MIN_SHARE:
        others = [w for w, _ in cands if w != word][:2]
        if others:
            warnings.append(f"{what} colour is borderline: {word} ({share:.0%}) or {' / '.join(others)}")
    return word, cands


def classify_tube(measurement, *, model: StateModel | None = None) -> TubeCall:
    """State, confidence and colour words for one measured tube.

    Parameters
    ----------
    measurement : tubevision.measure.TubeMeasurement
    model : StateModel or None — from :func:`load_model`; None uses the
        shipped model, or the rules (with a warning) if it does not load.

    Returns
    -------
    TubeCall

    Notes
    -----
    The liquid is named as a liquid (so it may be ``colourless``) unless the
    call is ``cloudy``: a suspension shows the colour of its solid, so it is
    then named as a solid ("cloudy white", never "cloudy colourless").
    The pellet is always named as a solid.
    """
    warnings: list[str] = []
    if model is None:
        model = _shipped_model()
    liq = getattr(measurement, "liquid", None)
    probs: dict[str, float] = {}
    if model is None:
        state, reasons = rule_state(measurement)
        confidence = RULES_CONFIDENCE
        method = "rules"
        warnings.append("no state model loaded: state from the documented rules (" + "; ".join(reasons) + ")")
    else:
        method = "model"
        x, missing, outside = feature_vector(measurement, model)
        p = forest_predict_proba(model, x[None, :])[0]
        order = np.argsort(-p, kind="stable")
        state = model.classes[order[0]]
        probs = {c: round(float(v), 4) for c, v in zip(model.classes, p)}
        confidence = float(p[order[0]])
        if len(order) > 1:
            margin = float(p[order[0]] - p[order[1]])
            if margin < CLOSE_MARGIN:
                warnings.append(f"state is close between {state} ({p[order[0]]:.2f}) and "
                                f"{model.classes[order[1]]} ({p[order[1]]:.2f})")
        if confidence < LOW_CONFIDENCE and not any(w.startswith("state is close") for w in warnings):
            warnings.append(f"state uncertain: {state} has only {confidence:.2f} of the forest's votes")
        if outside:
            confidence = min(confidence * OUT_OF_RANGE_FACTOR, OUT_OF_RANGE_MAX_CONFIDENCE)
            warnings.append("features outside the training range, state less certain: " + ", ".join(outside[:3])
                            + (f" and {len(outside) - 3} more" if len(outside) > 3 else ""))
        if missing:
            confidence = min(confidence * OUT_OF_RANGE_FACTOR, OUT_OF_RANGE_MAX_CONFIDENCE)
            warnings.append("features missing, filled with training medians: " + ", ".join(missing[:3])
                            + (f" and {len(missing) - 3} more" if len(missing) > 3 else ""))
        # The measure stage reports no liquid both for a tube with no meniscus and for a
        # column it could not read (glare, bands, a hidden tube); the forest was trained on
        # both and is kept, but the call says that no liquid colour backs it.
        if liq is None and state != "empty" and "empty" not in model.classes:
            warnings.append(f"no liquid measured and this model knows no empty tubes: called empty, not {state}")
            state, confidence = "empty", min(confidence, OUT_OF_RANGE_MAX_CONFIDENCE)
        elif liq is None and state != "empty":
            warnings.append(f"no liquid column measured but the model says {state}: no liquid colour word")
            confidence = min(confidence, OUT_OF_RANGE_MAX_CONFIDENCE)
        elif liq is not None and state == "empty":
            # The contract's empty means no liquid; the measure stage read a liquid column,
            # so the most probable state with liquid is called (in training, empty tubes
            # never had a column: this happens only off the training distribution, e.g.
            # layout boxes whose liquid top is the box top).
            nonempty = [i for i in order if model.classes[i] != "empty"]
            if nonempty:
                alt = model.classes[nonempty[0]]
                warnings.append(f"the model said empty ({p[order[0]]:.2f}) but a liquid column was measured: "
                                f"called {alt} ({p[nonempty[0]]:.2f})")
                state = alt
                confidence = min(float(p[nonempty[0]]), OUT_OF_RANGE_MAX_CONFIDENCE)
            else:
                warnings.append("the model said empty but a liquid column was measured")
                confidence = min(confidence, OUT_OF_RANGE_MAX_CONFIDENCE)

    liquid_word, liquid_cands = None, ()
    if liq is not None and state != "empty":
        liquid_word, liquid_cands = _colour(getattr(liq, "lab", None), getattr(liq, "lab_sd", None),
                                            solid=(state == "cloudy"), what="liquid", warnings=warnings)
    pel = getattr(measurement, "pellet", None)
    pellet_word, pellet_cands = None, ()
    if pel is not None and getattr(pel, "present", False):
        pellet_word, pellet_cands = _colour(getattr(pel, "lab", None), getattr(pel, "lab_sd", None),
                                            solid=True, what="pellet", warnings=warnings)
    return TubeCall(
        state=state, confidence=float(min(1.0, max(0.0, confidence))),
        liquid_colour_name=liquid_word, pellet_colour_name=pellet_word,
        warnings=tuple(warnings), state_probabilities=probs,
        liquid_colour_candidates=liquid_cands, pellet_colour_candidates=pellet_cands, method=method,
    )
