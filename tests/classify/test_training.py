"""The shipped state model and retraining on labelled photos.

Kinds: (1) the shipped model against its own recorded provenance — it must
load from JSON (never pickle), come from the shipped training table (sha256)
and reproduce the validation score written into it when the training ran;
(2) end to end on a tiny labelled folder: labels files → measure → grouped
cross-validation → confusion matrix with precision/recall → a model file that
``analyze`` uses (``AnalysisOptions.model``, the CLI's ``--model``).
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest

from tubevision.classify import load_model
from tubevision.classify.calls import DEFAULT_MODEL_PATH, rule_state
from tubevision.classify.train import (
    TRAINING_CSV,
    evaluate,
    held_out_combinations,
    main,
    read_training_table,
    training_combinations,
    validation_score,
)

needs_table = pytest.mark.skipif(not TRAINING_CSV.is_file(), reason="calibration/state_training.csv not in this tree")


def test_held_out_combinations_are_never_trained_on():
    held, train = set(held_out_combinations()), set(training_combinations())
    assert held and train and not held & train
    # every illuminant and every camera is still seen in training, with other partners
    assert {i for i, _ in held} <= {i for i, _ in train}
    assert {s for _, s in held} <= {s for _, s in train}


def test_shipped_model_is_json_not_pickle_and_small():
    raw = DEFAULT_MODEL_PATH.read_bytes()
    assert raw[:1] == b"{" and len(raw) < 2_000_000
    d = json.loads(raw)
    assert d["format"] == "tubevision.state-model/1" and d["kind"] == "random_forest"
    model = load_model()
    assert model is not None and set(model.classes) == {"clear", "cloudy", "settled", "empty"}


@needs_table
def test_shipped_model_reproduces_its_recorded_validation_score():
    """Kind 1: re-score the shipped model on the table's held-out rows; it must equal what training recorded."""
    model = load_model()
    table = read_training_table(TRAINING_CSV)
    assert model.meta["training_sha256"] == table.sha256, "model was not trained on the shipped table: re-run " \
        "python -m tubevision.classify.train build-and-fit"
    assert tuple(model.feature_names) == table.feature_names
    ev = validation_score(model, table)  # held-out rows, true liquid geometry
    rec = model.meta["validation"]
    assert ev.n == rec["n"]
    assert ev.macro_f1 == pytest.approx(rec["macro_f1"], abs=1e-6)
    assert ev.accuracy == pytest.approx(rec["accuracy"], abs=1e-6)
    # valid rows are exactly the held-out illuminant x camera combinations, train rows never are
    held = set(held_out_combinations())
    for r in table.rows:
        assert ((r["illuminant"], r["sensor"]) in held) == (r["split"] == "valid")
    for g, e in model.meta.get("validation_by_geometry", {}).items():
        assert validation_score(model, table, g).macro_f1 == pytest.approx(e["macro_f1"], abs=1e-6)


@needs_table
def test_shipped_model_features_are_what_measure_produces():
    """The model must not ask for a feature the measure stage no longer writes (else re-run training)."""
    from tubevision.measure import FEATURE_NAMES

    assert set(load_model().feature_names) <= set(FEATURE_NAMES)


@needs_table
def test_rule_fallback_is_sane_on_the_studio_table():
    """The rules, used when no model loads, must not call most clear tubes settled/cloudy/empty."""
    from tubevision.measure import LiquidMeasurement, PelletMeasurement, TubeMeasurement

    table = read_training_table(TRAINING_CSV)
    truth, called = [], []
    for r in table.rows:
        if r.get("geometry", "truth") != "truth":
            continue
        empty = r["liq_L"] in ("", "nan")
        liq = None if empty else LiquidMeasurement(lab=(float(r["liq_L"]), float(r["liq_a"]), float(r["liq_b"])),
                                                   lab_sd=(0.0, 0.0, 0.0), n_pixels=100,
                                                   turbidity=r["turbidity"], turbidity_sd=0.0, clipped_fraction=0.0)
        pel = PelletMeasurement(present=r["pellet_present"] > 0.5, height_mm=r["pellet_height_mm"],
                                contrast_de00=r["pellet_contrast_de00"])
        m = TubeMeasurement(0, empty, liq, pel, {k: r[k] for k in table.feature_names})
        truth.append(r["state"])
        called.append(rule_state(m)[0])
    ev = evaluate(truth, called)
    recall = dict(zip(ev.classes, ev.recall))
    assert recall["clear"] >= 0.7 and recall["empty"] >= 0.9
    assert ev.accuracy >= 0.6


# ----------------------------------------------------------------------------- retraining, end to end

def _labelled_folder(tmp_path, n_photos=4):
    from tubevision.studio import SceneSpec, TubeSpec, render_scene, save_rendered

    tmp_path.mkdir(parents=True, exist_ok=True)
    contents = (("water", "milky", "empty", "water"), ("milky", "water", "empty", "milky"))
    for k in range(n_photos):
        spec = SceneSpec(tubes=tuple(TubeSpec(c) for c in contents[k % 2]), width_px=480, height_px=360,
                         backdrop="hbands", illuminant=("D65", "A")[k % 2])
        ph = render_scene(spec, seed=100 + k)
        save_rendered(ph, tmp_path / f"rack{k}.png", truth=False)
        labels = {f"T{i + 1}": {"state": t["state"], "colour": (t.get("liquid") or {}).get("colour_name")}
                  for i, t in enumerate(ph.truth["tubes"])}
        (tmp_path / f"rack{k}.labels.json").write_text(json.dumps(labels))
        (tmp_path / f"rack{k}.layout.json").write_text(json.dumps({"tubes": [{"bbox": t["bbox"]}
                                                                            for t in ph.truth["tubes"]]}))
    return tmp_path


def test_retrain_on_labelled_photos_end_to_end(tmp_path, capsys):
    folder = _labelled_folder(tmp_path / "lab")
    out = tmp_path / "lab-model.json"
    rc = main(["labelled", str(folder), "--out", str(out), "--folds", "2", "--seed", "3"])
    text = capsys.readouterr().out
    assert rc == 0
    assert "2-fold cross-validation by photo" in text and "confusion matrix" in text
    assert "precision" in text and "recall" in text
    assert "n = 16" in text  # 4 photos x 4 labelled tubes, every one scored once
    for state in ("clear", "cloudy", "empty"):
        assert any(line.split()[:1] == [state] for line in text.splitlines())
    # learned something on photos it did not see: the milky suspension is told from water and
    # empty glass (with layout boxes the liquid top is the box top, so water and empty glass
    # look alike; three classes, chance about 0.4)
    cv_accuracy = float(re.search(r"macro-F1 [0-9.]+ +accuracy ([0-9.]+)", text).group(1))
    cloudy_recall = float(re.search(r"^ *cloudy +[0-9.na]+ +([0-9.]+)", text, re.M).group(1))
    assert cloudy_recall >= 0.8 and cv_accuracy >= 0.5
    model = load_model(out)
    assert set(model.classes) == {"clear", "cloudy", "empty"} and model.meta["validation"]["n"] == 16

    # the retrained model is what analyze uses with --model
    from tubevision.analysis import AnalysisOptions, analyze_photo
    from tubevision.image import load_photo
    from tubevision.tubes import parse_layout

    boxes = parse_layout((folder / "rack0.layout.json").read_text())
    a = analyze_photo(load_photo(folder / "rack0.png"),
                      AnalysisOptions(model=str(out), layout_boxes=tuple(tuple(b) for b in boxes)))
    assert all(c.method == "model" and set(c.state_probabilities) == set(model.classes) for c in a.calls)
    labels = json.loads((folder / "rack0.labels.json").read_text())
    called = [c.state for c in a.calls]
    assert np.mean([c == labels[f"T{i + 1}"]["state"] for i, c in enumerate(called)]) >= 0.75


def test_labelled_folder_errors(tmp_path, capsys):
    """Bad input: one-line error and status 2."""
    assert main(["labelled", str(tmp_path / "nowhere")]) == 2
    (tmp_path / "a.labels.json").write_text('{"T1": {"state": "fizzy"}}')
    assert main(["labelled", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 2 and "error:" in err
