"""The JSON state model: exact export of scikit-learn's forest, safe loading, confidence rules.

Kinds: (1) reference library as oracle — scikit-learn's own ``predict_proba``
is the independent check of our numpy evaluation; (2) synthetic feature
tables with a known answer; bad-input tests for the model file.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from tubevision.classify import TubeCall, classify_tube, load_model
from tubevision.classify.calls import OUT_OF_RANGE_MAX_CONFIDENCE, RULES_CONFIDENCE
from tubevision.classify.forest import forest_predict_proba, model_from_dict, model_to_dict
from tubevision.classify.train import (FOREST_MAX_DEPTH, FOREST_MAX_FEATURES, FOREST_MIN_SAMPLES_LEAF, fit_state_model,
                                       write_model)
from tubevision.errors import TubevisionInputError
from tubevision.measure import LiquidMeasurement, PelletMeasurement, TubeMeasurement

NAMES = ("turbidity", "pellet_height_mm", "col_L")


def _toy_table(n=400, seed=3):
    """Synthetic features with a known rule: τ > 0.3 cloudy, else pellet > 1 mm settled, else clear.

    Labels near τ = 0.3 are noisy (logistic, width 0.03), as a person's would be,
    so that the forest's votes split there.
    """
    rng = np.random.default_rng(seed)  # seed 3: the rule is learnable for any seed
    tau = rng.uniform(0, 1, n)
    h = rng.choice([0.0, 0.0, 2.0, 2.5], n) * rng.uniform(0.8, 1.2, n)
    L = rng.uniform(60, 100, n)  # noqa: N806
    cloudy = rng.uniform(size=n) < 1 / (1 + np.exp(-(tau - 0.3) / 0.03))
    y = np.where(cloudy, "cloudy", np.where(h > 1.0, "settled", "clear"))
    return np.column_stack([tau, h, L]), y


@pytest.fixture(scope="module")
def toy_model():
    X, y = _toy_table()  # noqa: N806
    return fit_state_model(X, y, NAMES, seed=11, n_trees=15)


def _measurement(tau=0.0, h=0.0, L=95.0, *, empty=False, lab=(95.0, -0.5, 2.0)):  # noqa: N803
    liquid = None if empty else LiquidMeasurement(lab=lab, lab_sd=(0.5, 0.3, 0.3), n_pixels=500,
                                                   turbidity=tau, turbidity_sd=0.01, clipped_fraction=0.0)
    pellet = PelletMeasurement(present=h > 0, height_mm=h if h > 0 else None,
                               lab=(90.0, 0.0, 1.0) if h > 0 else None, lab_sd=(1.0, 0.5, 0.5) if h > 0 else None)
    return TubeMeasurement(index=0, empty=empty, liquid=liquid, pellet=pellet,
                           features={"turbidity": tau, "pellet_height_mm": h, "col_L": L})


def test_numpy_forest_equals_sklearn_predict_proba(toy_model):
    """Oracle (kind 1): scikit-learn's ``predict_proba`` on the same data, seed and settings.

    Our numpy walk of the exported ``tree_`` arrays must agree to rounding of
    the stored leaf fractions (6 decimals), also after a JSON round trip.
    """
    from sklearn.ensemble import RandomForestClassifier

    X, y = _toy_table()  # noqa: N806
    clf = RandomForestClassifier(n_estimators=15, max_depth=FOREST_MAX_DEPTH, min_samples_leaf=FOREST_MIN_SAMPLES_LEAF,
                                 max_features=FOREST_MAX_FEATURES, class_weight="balanced", random_state=11,
                                 n_jobs=1).fit(X, y)
    Xq, _ = _toy_table(200, seed=99)  # noqa: N806
    ours = forest_predict_proba(toy_model, Xq)
    np.testing.assert_allclose(ours, clf.predict_proba(Xq), atol=1e-9)
    again = model_from_dict(json.loads(json.dumps(model_to_dict(toy_model))))
    np.testing.assert_allclose(forest_predict_proba(again, Xq), clf.predict_proba(Xq), atol=1e-5)
    assert list(toy_model.classes) == list(clf.classes_)


def test_classify_known_states(toy_model):
    """Synthetic (kind 2): far from the rule's boundaries the calls are right and confident."""
    assert classify_tube(_measurement(tau=0.8), model=toy_model).state == "cloudy"
    settled = classify_tube(_measurement(tau=0.05, h=2.5), model=toy_model)
    assert settled.state == "settled" and settled.confidence > 0.8
    assert settled.pellet_colour_name == "white"
    clear = classify_tube(_measurement(tau=0.05, h=0.0), model=toy_model)
    assert clear.state == "clear" and clear.liquid_colour_name == "colourless" and not clear.warnings
    assert isinstance(clear, TubeCall) and clear.method == "model"


def test_cloudy_low_chroma_liquid_is_white_not_colourless(toy_model):
    call = classify_tube(_measurement(tau=0.8, lab=(88.0, 0.0, 2.0)), model=toy_model)
    assert (call.state, call.liquid_colour_name) == ("cloudy", "white")


def test_out_of_range_features_lower_confidence_and_warn(toy_model):
    """Synthetic (kind 2): turbidity 25 (trained 0..1) is far outside the training range."""
    inside = classify_tube(_measurement(tau=0.9), model=toy_model)
    outside = classify_tube(_measurement(tau=25.0), model=toy_model)
    assert outside.confidence <= OUT_OF_RANGE_MAX_CONFIDENCE < inside.confidence
    assert any("outside the training range" in w and "turbidity" in w for w in outside.warnings)
    assert not any("outside the training range" in w for w in inside.warnings)


def test_close_classes_warn(toy_model):
    """Synthetic (kind 2): across the noisy clear/cloudy boundary some calls are close; those name both."""
    from tubevision.classify.calls import CLOSE_MARGIN

    calls = [classify_tube(_measurement(tau=t), model=toy_model) for t in np.linspace(0.1, 0.6, 101)]
    assert {calls[0].state, calls[-1].state} == {"clear", "cloudy"}
    close = 0
    for c in calls:
        p = sorted(c.state_probabilities.values(), reverse=True)
        warned = any("close between" in w for w in c.warnings)
        assert warned is (p[0] - p[1] < CLOSE_MARGIN)
        close += warned
    assert close >= 1


def test_missing_feature_is_filled_and_warned(toy_model):
    m = _measurement(tau=0.8)
    m = TubeMeasurement(m.index, m.empty, m.liquid, m.pellet, {"turbidity": 0.8, "col_L": 95.0})
    call = classify_tube(m, model=toy_model)
    assert call.confidence <= OUT_OF_RANGE_MAX_CONFIDENCE
    assert any("pellet_height_mm" in w for w in call.warnings)


def test_rules_fallback_is_explicit(monkeypatch):
    """Edge: with no model loadable the call comes from the rules and says so."""
    from tubevision.classify import calls

    monkeypatch.setattr(calls, "DEFAULT_MODEL_PATH", calls.DEFAULT_MODEL_PATH.with_name("no-such-model.json"))
    calls._shipped_model.cache_clear()
    try:
        assert load_model() is None
        c = classify_tube(_measurement(tau=2.0))
        assert c.method == "rules" and c.state == "cloudy" and c.confidence == RULES_CONFIDENCE
        assert any("no state model loaded" in w for w in c.warnings)
        e = classify_tube(_measurement(empty=True))
        assert e.state == "empty" and e.liquid_colour_name is None
    finally:
        calls._shipped_model.cache_clear()


def test_empty_tube_without_liquid(toy_model):
    c = classify_tube(_measurement(empty=True), model=toy_model)
    assert c.state == "empty" and c.liquid_colour_name is None


def test_model_file_round_trip(tmp_path, toy_model):
    p = tmp_path / "m.json"
    write_model(toy_model, p)
    m = load_model(p)
    Xq, _ = _toy_table(50, seed=5)  # noqa: N806
    np.testing.assert_allclose(forest_predict_proba(m, Xq), forest_predict_proba(toy_model, Xq), atol=1e-5)
    assert m.meta["sklearn_version"]


@pytest.mark.parametrize(
    ("text", "match"),
    [("{not json", "not valid JSON"),
     ('{"format": "other"}', "not a tubevision state model"),
     ('{"format": "tubevision.state-model/1", "kind": "random_forest"}', "missing or malformed"),
     ("\x80\x81", "UTF-8")],
)
def test_bad_model_file(tmp_path, text, match):
    p = tmp_path / "bad.json"
    p.write_bytes(text.encode("latin-1") if "\x80" in text else text.encode())
    with pytest.raises(TubevisionInputError, match=match):
        load_model(p)


def test_bad_model_arrays(tmp_path, toy_model):
    d = model_to_dict(toy_model)
    d["trees"][0]["children_left"][0] = 10**6
    p = tmp_path / "bad.json"
    p.write_text(json.dumps(d))
    with pytest.raises(TubevisionInputError, match="out of range"):
        load_model(p)
    with pytest.raises(TubevisionInputError, match="not found"):
        load_model(tmp_path / "missing.json")


def test_low_confidence_calls_always_warn(toy_model):
    """Synthetic (kind 2): across the clear/cloudy/settled corner every call whose top vote
    share is under LOW_CONFIDENCE carries a warning, and a confident call carries none."""
    from tubevision.classify.calls import CLOSE_MARGIN, LOW_CONFIDENCE

    low = 0
    for t in np.linspace(0.15, 0.45, 31):
        for h in (0.0, 0.9, 1.0, 1.1, 2.0):
            c = classify_tube(_measurement(tau=float(t), h=float(h)), model=toy_model)
            p = sorted(c.state_probabilities.values(), reverse=True)
            state_warned = any("close between" in w or "state uncertain" in w for w in c.warnings)
            assert state_warned is (p[0] < LOW_CONFIDENCE or p[0] - p[1] < CLOSE_MARGIN)
            low += p[0] < LOW_CONFIDENCE
    assert low >= 1
