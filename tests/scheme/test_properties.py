"""Properties that hold for any observations (hypothesis, derandomized: fixed examples).

Kind 2: invariants of the judging rules themselves, over every built-in scheme
and step: verdicts stay in the contract's vocabulary, nothing raises on odd
numbers (NaN, huge values), and a failed control always leaves every sample
inconclusive.
"""

from __future__ import annotations

import json
import math

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tubevision.scheme import TubeObservation, builtin_schemes, judge_step, load_scheme, parse_labels

STATES = ["clear", "cloudy", "settled", "empty"]
WORDS = ["colourless", "white", "grey", "black", "yellow", "orange", "red", "pink", "brown", "violet", "blue",
         "green", None]
SCHEMES = {n: load_scheme(n) for n in builtin_schemes()}
PAIRS = [(n, s.name) for n, sc in SCHEMES.items() for s in sc.steps]

finite = st.floats(min_value=-5, max_value=120, allow_nan=False)
odd = st.one_of(finite, st.just(float("nan")), st.just(1e9), st.none())


@st.composite
def observation(draw, index):
    state = draw(st.sampled_from(STATES))
    lab = draw(st.one_of(st.none(), st.tuples(st.floats(0, 100), st.floats(-80, 80), st.floats(-80, 80))))
    pellet = draw(st.booleans())
    p_lab = draw(st.tuples(st.floats(0, 100), st.floats(-80, 80), st.floats(-80, 80))) if pellet else None
    turb = draw(odd)
    if turb is not None and not math.isfinite(turb):
        turb = None  # observation_from maps NaN to None
    return TubeObservation(index, state, draw(st.floats(0, 1)), lab, draw(st.sampled_from(WORDS)),
                           turb, pellet, draw(st.one_of(st.none(), st.floats(0, 30))) if pellet else None,
                           p_lab, draw(st.sampled_from(WORDS[:-1])) if pellet else None)


@settings(max_examples=150, derandomize=True, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(pair=st.sampled_from(PAIRS), data=st.data())
def test_judging_is_total_and_controls_gate_the_samples(pair, data):
    name, step = pair
    n = data.draw(st.integers(1, 5))
    obs = [data.draw(observation(i)) for i in range(n)]
    words = ["control", "blank", "standard", "K-1", "K-2"]
    labels = {i + 1: data.draw(st.sampled_from(words)) for i in range(n) if data.draw(st.booleans())}
    j = judge_step(SCHEMES[name], step, obs, labels)
    assert {o.position for o in j.outcomes} == set(labels)
    for o in j.outcomes:
        assert o.verdict in ("positive", "negative", "inconclusive")
        json.dumps(o.as_dict(), allow_nan=False)  # record-ready: no NaN
        if j.control_failures and o.role == "sample":
            assert o.verdict == "inconclusive"
    json.dumps(j.record_block(), allow_nan=False)


@settings(max_examples=100, derandomize=True, deadline=None)
@given(st.dictionaries(st.integers(1, 12), st.text(alphabet="abcK-7 AB", min_size=1).map(str.strip)
                       .filter(lambda s: s and "," not in s and "=" not in s), max_size=12))
def test_labels_round_trip(d):
    text = ",".join(f"{k}={v}" for k, v in d.items())
    assert parse_labels(text, 12) == d
