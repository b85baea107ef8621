"""Train and evaluate the state classifier (imports scikit-learn; not needed at run time).

Jobs, one command each (``python -m tubevision.classify.train --help``;
``tubevision train ...`` runs the same):

* ``build-and-fit``: the one command that rebuilds the shipped model from
  nothing — ``table`` then ``fit`` with the default seed (``TRAIN_SEED``);
  about 4 minutes on 2 cores.
* ``table``: render studio photos (:func:`tubevision.studio.random_scene`:
  random contents, exposure, white balance, tone, noise, blur, JPEG,
  backdrop, rack, light gradient, photo size) at every illuminant × camera
  combination except the held-out ones (:func:`held_out_combinations`), find
  and fit the card as ``analyze`` does, take the tubes from the truth geometry
  (:func:`truth_regions`: a perfect finder, so the classifier learns
  measurement features, not finder errors), measure, and write
  ``calibration/state_training.csv`` — one row per tube: features, truth
  labels, conditions, measured and true colours, and a ``split`` column
  (``valid`` = the held-out combinations). Its ``#`` header lines give the
  provenance (command, seed, held-out combinations, versions, features).
* ``fit``: fit the random forest on the ``train`` rows with a fixed seed,
  score it on the ``valid`` rows, and write the JSON model
  (``tubevision/data/model_state_v1.json``) with the score it recorded.
* ``labelled``: retrain on a lab's own photos. Beside each photo
  ``NAME.jpg`` sits ``NAME.labels.json``: ``{"T1": {"state": "cloudy",
  "colour": "white"}, ...}`` (``colour`` optional, the liquid's word; tube ids
  in reading order as in the record) and optionally ``NAME.layout.json``
  (tube boxes, the ``--layout`` form; without it the tubes are found).
  Reports a cross-validated confusion matrix (folds grouped by photo) with
  per-class precision and recall, the colour words' agreement with the
  labels, and writes a model for ``tubevision analyze --model FILE``.

References
----------
.. [1] F. Pedregosa et al., "Scikit-learn: machine learning in Python", JMLR
   12, 2825-2830, 2011 (RandomForestClassifier, StratifiedGroupKFold).
.. [2] C. J. van Rijsbergen, Information Retrieval, 2nd ed., Butterworths,
   1979 (F-measure; macro-F1 is its unweighted mean over classes).
.. [3] L. Breiman, "Random forests", Machine Learning 45, 5-32, 2001.
"""

from __future__ import annotations

import argparse
import csv
import datetime as _dt
import hashlib
import io
import json
import logging
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np

from ..errors import TubevisionInputError
from .calls import STATES
from .forest import StateModel, _Tree, forest_predict_proba, model_to_dict

__all__ = [
    "TRAINING_CSV",
    "FOREST_N_TREES",
    "FOREST_MAX_DEPTH",
    "FOREST_MIN_SAMPLES_LEAF",
    "FOREST_MAX_FEATURES",
    "TRAIN_SEED",
    "LABELS_SUFFIX",
    "Evaluation",
    "TrainingTable",
    "evaluate",
    "fit_state_model",
    "read_training_table",
    "write_training_table",
    "write_model",
    "rows_from_measurements",
    "labelled_pairs",
    "train_from_labelled_photos",
    "main",
]

log = logging.getLogger(__name__)

TRAINING_CSV = Path(__file__).resolve().parents[2] / "calibration" / "state_training.csv"
"""The shipped training table (in the source tree, not the installed package)."""

FOREST_N_TREES = 100
"""Trees in the forest: past about 50-100 the out-of-bag error of a forest
stops falling (Breiman 2001 [3]_, Fig. 2 shows the plateau), and 100 trees of
depth 12 keep the JSON under the 2 MB the shipped file may take."""

FOREST_MAX_DEPTH = 12
"""Depth limit per tree: keeps the file small and the leaves' class fractions
from being single samples. Chosen by 5-fold cross-validation grouped by
illuminant × camera combination on the ``train`` rows only (depth 8: macro-F1
0.929, 12: 0.941, 16 unlimited leaves: 0.944 at 1.5× the size; our check)."""

FOREST_MIN_SAMPLES_LEAF = 5
"""Smallest leaf, so that leaf probabilities are not all 0 or 1 and the JSON
stays near 1.6 MB with the faulty-geometry rows in the table (our choice; on
the held-out rows 5 scores as 2 and 3 do, within 0.01 macro-F1)."""

FOREST_MAX_FEATURES = 0.5
"""Fraction of the features tried at each split (scikit-learn's
``max_features``); half rather than the square root because many features are
near-duplicates (turbidity, its raw value, its sd), so that a split can still
find a pellet or colour feature (our choice; same grouped check: 0.942)."""

TRAIN_SEED = 20260502
"""Seed of every random choice in training (bootstrap, feature subsets)."""

PHOTO_SUFFIXES = (".jpg", ".jpeg", ".png", ".tif", ".tiff", ".heic", ".webp")
"""File endings taken as the photo beside a labels file."""

LABELS_SUFFIX = ".labels.json"
"""A photo ``rack.jpg`` is labelled by ``rack.labels.json`` beside it."""

_META_COLUMNS = ("photo", "tube", "state", "colour", "pellet_colour", "split")


@dataclass(frozen=True)
class Evaluation:
    """Scores of state calls against truth.

    ``confusion[i, j]`` counts tubes of true class ``classes[i]`` called
    ``classes[j]``; ``precision``/``recall``/``f1`` are per class (NaN where
    undefined); ``report`` is the printable text.
    """

    classes: tuple[str, ...]
    confusion: np.ndarray
    precision: np.ndarray
    recall: np.ndarray
    f1: np.ndarray
    macro_f1: float
    accuracy: float
    n: int
    report: str


def evaluate(y_true: Sequence[str], y_pred: Sequence[str], classes: Sequence[str] | None = None,
             *, title: str = "state") -> Evaluation:
    """Confusion matrix, per-class precision/recall/F1 and macro-F1.

    Parameters
    ----------
    y_true, y_pred : sequences of class names, same length.
    classes : order of rows/columns; default the contract's states present.

    Returns
    -------
    Evaluation

    Notes
    -----
    precision = TP / (TP + FP), recall = TP / (TP + FN), F1 their harmonic
    mean (van Rijsbergen 1979 [2]_); macro-F1 is the unweighted mean over the
    classes that occur in ``y_true`` (a class never seen cannot be scored).

    Examples
    --------
    >>> e = evaluate(["clear", "cloudy", "cloudy"], ["clear", "cloudy", "clear"])
    >>> e.confusion.tolist(), round(e.macro_f1, 4)
    ([[1, 0], [1, 1]], 0.6667)
    """
    y_true = [str(v) for v in y_true]
    y_pred = [str(v) for v in y_pred]
    if len(y_true) != len(y_pred):
        raise TubevisionInputError(f"evaluate: {len(y_true)} true labels but {len(y_pred)} predictions")
    if classes is None:
        seen = set(y_true) | set(y_pred)
        classes = [c for c in STATES if c in seen] + sorted(seen - set(STATES))
    classes = tuple(classes)
    index = {c: i for i, c in enumerate(classes)}
    k = len(classes)
    cm = np.zeros((k, k), dtype=np.int64)
    for t, p in zip(y_true, y_pred):
        if t in index and p in index:
            cm[index[t], index[p]] += 1
    tp = np.diag(cm).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        precision = tp / cm.sum(axis=0)
        recall = tp / cm.sum(axis=1)
        f1 = 2 * precision * recall / (precision + recall)
    f1 = np.where((cm.sum(axis=1) > 0) & ~np.isfinite(f1), 0.0, f1)
    present = cm.sum(axis=1) > 0
    macro = float(np.mean(f1[present])) if present.any() else float("nan")
    n = int(cm.sum())
    acc = float(tp.sum() / n) if n else float("nan")
    w = max([len(c) for c in classes] + [9])
    lines = [f"{title} confusion matrix (rows: truth, columns: called), n = {n}",
             " " * (w + 2) + " ".join(f"{c:>{w}}" for c in classes)]
    for i, c in enumerate(classes):
        lines.append(f"{c:>{w}}  " + " ".join(f"{v:>{w}d}" for v in cm[i]))
    lines.append("")
    lines.append(f"{'class':>{w}}  {'precision':>9} {'recall':>9} {'f1':>9} {'support':>9}")
    for i, c in enumerate(classes):
        lines.append(f"{c:>{w}}  {precision[i]:9.3f} {recall[i]:9.3f} {f1[i]:9.3f} {int(cm[i].sum()):9d}")
    lines.append(f"macro-F1 {macro:.4f}   accuracy {acc:.4f}")
    return Evaluation(classes, cm, precision, recall, f1, macro, acc, n, "\n".join(lines))


# ----------------------------------------------------------------------------- the table

@dataclass(frozen=True)
class TrainingTable:
    """A training table: features, labels, conditions and provenance.

    ``rows`` are dicts of column → string/float; ``feature_names`` the
    feature columns in order; ``header`` the provenance lines (without ``#``).
    """

    feature_names: tuple[str, ...]
    rows: tuple[dict[str, Any], ...]
    header: tuple[str, ...]
    sha256: str

    def X(self, split: str | None = None) -> np.ndarray:  # noqa: N802
        sel = [r for r in self.rows if split is None or r.get("split") == split]
        return np.array([[float(r[f]) for f in self.feature_names] for r in sel], dtype=np.float64).reshape(
            len(sel), len(self.feature_names))

    def column(self, name: str, split: str | None = None) -> list:
        return [r.get(name) for r in self.rows if split is None or r.get("split") == split]


def _sha256_bytes(b: bytes) -> str:
    return hashlib.sha256(b).hexdigest()


def write_training_table(path: str | Path, rows: Sequence[dict[str, Any]], feature_names: Sequence[str],
                         condition_names: Sequence[str], header: Sequence[str]) -> str:
    """Write the CSV with ``#`` provenance lines; returns its sha256."""
    buf = io.StringIO()
    for line in header:
        buf.write(f"# {line}\n")
    cols = list(_META_COLUMNS) + list(condition_names) + list(feature_names)
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in rows:
        out = {}
        for c in cols:
            v = r.get(c, "")
            if isinstance(v, float):
                v = "nan" if not np.isfinite(v) else repr(float(np.float32(v))) if c in feature_names else f"{v:.6g}"
            out[c] = "" if v is None else v
        w.writerow(out)
    data = buf.getvalue().encode("utf-8")
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    Path(path).write_bytes(data)
    return _sha256_bytes(data)


def read_training_table(path: str | Path = TRAINING_CSV) -> TrainingTable:
    """Read a training CSV written by :func:`write_training_table`.

    Feature columns are those named in the header line ``features: a b c``.

    Raises
    ------
    TubevisionInputError
        Missing file, no ``features:`` line, or a non-numeric feature value.
    """
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError:
        raise TubevisionInputError(f"training table {p}: not found or unreadable") from None
    text = data.decode("utf-8")
    header = [ln[1:].strip() for ln in text.splitlines() if ln.startswith("#")]
    feats = [h.split(":", 1)[1].split() for h in header if h.startswith("features:")]
    if not feats:
        raise TubevisionInputError(f"training table {p}: no '# features: ...' header line")
    names = tuple(feats[0])
    body = [ln for ln in text.splitlines() if not ln.startswith("#")]
    reader = csv.DictReader(body)
    rows = []
    for lineno, r in enumerate(reader, start=len(header) + 2):
        for f in names:
            if f not in r:
                raise TubevisionInputError(f"training table {p}: missing feature column {f}")
            try:
                r[f] = float(r[f])
            except (TypeError, ValueError):
                raise TubevisionInputError(f"training table {p} line {lineno}: {f} is not a number") from None
        if r.get("state") not in STATES:
            raise TubevisionInputError(f"training table {p} line {lineno}: unknown state {r.get('state')!r}")
        rows.append(r)
    return TrainingTable(names, tuple(rows), tuple(header), _sha256_bytes(data))


# ----------------------------------------------------------------------------- fitting

def _fill_values(X: np.ndarray) -> np.ndarray:  # noqa: N803
    fill = np.nanmedian(np.where(np.isfinite(X), X, np.nan), axis=0) if len(X) else np.zeros(X.shape[1])
    return np.where(np.isfinite(fill), fill, 0.0)


def _impute(X: np.ndarray, fill: np.ndarray) -> np.ndarray:  # noqa: N803
    return np.where(np.isfinite(X), X, fill[None, :])


def fit_state_model(X: np.ndarray, y: Sequence[str], feature_names: Sequence[str], *,  # noqa: N803
                    seed: int = TRAIN_SEED, n_trees: int = FOREST_N_TREES, max_depth: int = FOREST_MAX_DEPTH,
                    min_samples_leaf: int = FOREST_MIN_SAMPLES_LEAF, max_features: float = FOREST_MAX_FEATURES,
                    meta: dict | None = None) -> StateModel:
    """Fit the random forest and export it to a :class:`StateModel` (no pickle).

    Parameters
    ----------
    X : ndarray (n, n_features) — features; NaN allowed (filled with medians).
    y : sequence of str — states.
    feature_names : names of the columns.
    seed, n_trees, max_depth, min_samples_leaf, max_features : forest settings (see the constants).
    meta : extra provenance to store.

    Returns
    -------
    StateModel whose :func:`forest_predict_proba` equals scikit-learn's
    ``predict_proba`` on the same (filled) input.
    """
    import sklearn
    from sklearn.ensemble import RandomForestClassifier

    X = np.asarray(X, dtype=np.float64)  # noqa: N806
    y = np.asarray([str(v) for v in y])
    if X.ndim != 2 or X.shape[0] != y.shape[0] or X.shape[1] != len(feature_names):
        raise TubevisionInputError(f"training data: X has shape {X.shape}, y {y.shape}, "
                                   f"{len(feature_names)} feature names")
    if len(set(y)) < 2:
        raise TubevisionInputError(f"training data: need at least two states, got {sorted(set(y))}")
    fill = _fill_values(X)
    Xf = _impute(X, fill)  # noqa: N806
    clf = RandomForestClassifier(n_estimators=n_trees, max_depth=max_depth, min_samples_leaf=min_samples_leaf,
                                 max_features=max_features, class_weight="balanced", random_state=seed, n_jobs=1)
    clf.fit(Xf, y)
    classes = tuple(str(c) for c in clf.classes_)
    trees = []
    for est in clf.estimators_:
        t = est.tree_
        val = np.asarray(t.value[:, 0, :], dtype=np.float64)
        val = val / np.maximum(val.sum(axis=1, keepdims=True), 1e-300)
        trees.append(_Tree(np.asarray(t.children_left, np.int64), np.asarray(t.children_right, np.int64),
                           np.asarray(t.feature, np.int64), np.asarray(t.threshold, np.float64), val))
    info = {"sklearn_version": sklearn.__version__, "estimator": "RandomForestClassifier",
            "params": {"n_estimators": n_trees, "max_depth": max_depth, "min_samples_leaf": min_samples_leaf,
                       "max_features": max_features, "class_weight": "balanced", "random_state": seed},
            "n_train": int(len(y)), "class_counts": {c: int(np.sum(y == c)) for c in classes}}
    info.update(meta or {})
    return StateModel(classes, tuple(feature_names), tuple(trees), np.nanmin(Xf, axis=0), np.nanmax(Xf, axis=0),
                      fill, info)


def predict_states(model: StateModel, X: np.ndarray) -> list[str]:  # noqa: N803
    """Most probable state per row (NaN features filled as at run time)."""
    P = forest_predict_proba(model, _impute(np.asarray(X, dtype=np.float64), model.feature_fill))  # noqa: N806
    return [model.classes[i] for i in np.argmax(P, axis=1)]


def write_model(model: StateModel, path: str | Path) -> None:
    """Write a model as JSON (``allow_nan=False``: a NaN would make the file invalid)."""
    d = model_to_dict(model)
    d["meta"] = {k: v for k, v in d["meta"].items() if k != "source"}
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    Path(path).write_text(json.dumps(d, allow_nan=False, separators=(",", ":")) + "\n", encoding="utf-8")


def _valid_selection(table: TrainingTable, geometry: str | None = "truth") -> tuple[np.ndarray, list]:
    """Features and states of the ``valid`` rows of one geometry (rows without a
    ``geometry`` column count as ``truth``; None takes every geometry)."""
    sel = [r for r in table.rows if r.get("split") == "valid"
           and (geometry is None or (r.get("geometry") or "truth") == geometry)]
    X = np.array([[float(r[f]) for f in table.feature_names] for r in sel], dtype=np.float64).reshape(  # noqa: N806
        len(sel), len(table.feature_names))
    return X, [r["state"] for r in sel]


def validation_score(model: StateModel, table: TrainingTable, geometry: str | None = "truth") -> Evaluation:
    """The model's score on the table's held-out rows (``geometry`` as in :func:`_valid_selection`)."""
    Xv, yv = _valid_selection(table, geometry)  # noqa: N806
    return evaluate(yv, predict_states(model, Xv), title=f"state (validation rows, geometry {geometry or 'all'})")


def fit_from_table(table: TrainingTable, *, seed: int = TRAIN_SEED, source: str = "") -> tuple[StateModel, Evaluation]:
    """Fit on all ``train`` rows, score on the ``valid`` rows, record the scores in the model.

    The recorded ``validation`` score is on the held-out rows measured with the
    true liquid geometry; ``validation_by_geometry`` adds the faulty ones.
    """
    Xt, yt = table.X("train"), table.column("state", "train")  # noqa: N806
    _, yv = _valid_selection(table)
    if not yt or not yv:
        raise TubevisionInputError("training table: needs rows with split=train and split=valid")
    model = fit_state_model(Xt, yt, table.feature_names, seed=seed)
    ev = validation_score(model, table)
    by_geometry = {}
    for g in GEOMETRIES[1:]:
        e = validation_score(model, table, g)
        if e.n:
            by_geometry[g] = {"macro_f1": round(e.macro_f1, 6), "accuracy": round(e.accuracy, 6), "n": e.n}
    meta = dict(model.meta)
    meta.update({
        "training_table": source or "calibration/state_training.csv",
        "training_sha256": table.sha256,
        "validation": {"split": "rows with split=valid (illuminant x camera combinations held out), geometry truth",
                       "macro_f1": round(ev.macro_f1, 6), "accuracy": round(ev.accuracy, 6), "n": ev.n},
        "validation_by_geometry": by_geometry,
        "trained_at": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
    })
    return StateModel(model.classes, model.feature_names, model.trees, model.feature_min, model.feature_max,
                      model.feature_fill, meta), ev


# ----------------------------------------------------------------------------- measurements → rows

def rows_from_measurements(measurements: Iterable, feature_names: Sequence[str], *, photo: str,
                           truths: Sequence[dict] | None = None, extra: dict | None = None) -> list[dict]:
    """One training row per measured tube: features plus labels (from ``truths``) and ``extra`` columns."""
    rows = []
    for i, m in enumerate(measurements):
        feats = getattr(m, "features", {}) or {}
        r = {"photo": photo, "tube": f"T{getattr(m, 'index', i) + 1}"}
        for f in feature_names:
            v = feats.get(f)
            r[f] = float(v) if v is not None else float("nan")
        if truths is not None:
            t = truths[i]
            r["state"] = t.get("state")
            r["colour"] = t.get("colour") or ""
            r["pellet_colour"] = t.get("pellet_colour") or ""
        r.update(extra or {})
        rows.append(r)
    return rows


# ----------------------------------------------------------------------------- the studio table

STUDIO_ILLUMINANTS = ("A", "D50", "D65", "FL2", "FL11", "LED-B3", "LED-RGB1",
                      "planck-2700", "planck-4000", "planck-6500")
"""Illuminants of the studio table: the studio's CIE/LED tables and three
Planckian lamps (tungsten, warm and daylight-white LED-like), as
:func:`tubevision.studio.random_scene` draws them."""

STUDIO_SENSORS = ("nikon5100-npl", "sigma-sdmerill-npl", "phone-a", "phone-b", "phone-c")
"""Camera sensitivities of the studio table (every studio sensor except the
ideal colour-matching one, which no real camera has)."""

STUDIO_SIZES = ((1344, 1008), (1632, 1224), (2016, 1512))
"""Photo sizes drawn for the table (px): tubes from about 40 to 70 px wide.
Kept below a phone's 12 MP so the table builds in minutes; measure's features
are scale-free ratios or mm where it matters (our choice)."""

TABLE_CONTENTS_WEIGHTS = {"empty": 3, "water": 2}
"""Extra weight (draws per photo slot) of contents keys in the table; every
other studio contents key gets 1. Empty tubes are one key of nineteen, so
they get three shares to be seen often enough (our choice)."""

TABLE_TRAIN_PHOTOS = 400
"""Photos rendered at the training illuminant × camera combinations."""

TABLE_VALID_PHOTOS = 120
"""Photos rendered at the held-out combinations (the ``valid`` rows)."""

BENCH_SEED_OFFSET = 7_000_000
"""bench/bench_classify.py renders with ``seed + BENCH_SEED_OFFSET``, so its
photos are never the table's (same held-out combinations, new scenes)."""


def held_out_combinations() -> tuple[tuple[str, str], ...]:
    """The illuminant × camera combinations never used for training.

    One combination per illuminant, cycling through the sensors (a Latin
    pattern: illuminant i is held out with sensor ``i mod 5``), so every
    illuminant and every sensor is still seen in training with other partners,
    and every held-out photo shows a pairing the forest never saw (10 of 50).
    """
    return tuple((ill, STUDIO_SENSORS[i % len(STUDIO_SENSORS)]) for i, ill in enumerate(STUDIO_ILLUMINANTS))


def training_combinations() -> tuple[tuple[str, str], ...]:
    """Every studio illuminant × camera combination that is not held out."""
    held = set(held_out_combinations())
    return tuple((i, s) for i in STUDIO_ILLUMINANTS for s in STUDIO_SENSORS if (i, s) not in held)


def _table_contents() -> tuple[str, ...]:
    from ..studio.materials import CONTENTS

    out = []
    for key in CONTENTS:
        out.extend([key] * TABLE_CONTENTS_WEIGHTS.get(key, 1))
    return tuple(out)


def studio_scene(k: int, split: str, seed: int):
    """The k-th studio scene of a split (``train``, ``valid`` or ``bench``): (SceneSpec, render seed).

    Combinations cycle in a fixed order, everything else comes from
    :func:`tubevision.studio.random_scene` with ``default_rng((seed, split, k))``.
    """
    from ..studio import random_scene

    combos = training_combinations() if split == "train" else held_out_combinations()
    ill, sen = combos[k % len(combos)]
    tag = {"train": 0, "valid": 1, "bench": 2}[split]
    rng = np.random.default_rng([int(seed) % 2**32, tag, k])
    w, h = STUDIO_SIZES[int(rng.integers(len(STUDIO_SIZES)))]
    spec = random_scene(rng, n_tubes=(3, 10), illuminants=(ill,), sensors=(sen,), contents=_table_contents(),
                        width_px=w, height_px=h)
    return spec, int(rng.integers(2**31 - 1))


GEOMETRIES = ("truth", "no-meniscus", "box-top")
"""How a tube's liquid top is given to the measure stage in the studio table:

* ``truth`` — the true row just below the meniscus (a perfect finder);
* ``no-meniscus`` — none, as when the finder misses the meniscus of a full
  tube (the measure stage then reads the tube as without liquid);
* ``box-top`` — the top of the tube's box, as ``tubes_from_layout`` gives it
  for ``--layout`` boxes (air and rim are then read with the liquid).

The last two are the ways the liquid top goes wrong in use; training on them
(labelled with the true state) teaches the forest what such measurements
look like, so that it is unsure (and says so) rather than confidently
calling a full tube empty."""


def truth_regions(truth: dict, geometry: str = "truth") -> tuple:
    """TubeRegions from a studio truth: its boxes and its liquid geometry.

    With ``geometry="truth"`` the liquid top (just below the meniscus), the
    start of the round bottom, the inside bottom and the inner glass columns
    come from the truth: the measurement of a correctly found tube. The other
    :data:`GEOMETRIES` replace the liquid top as described there.
    """
    if geometry not in GEOMETRIES:
        raise TubevisionInputError(f"geometry {geometry!r}: one of {', '.join(GEOMETRIES)}")
    from ..tubes import TubeRegion

    out = []
    for k, t in enumerate(truth["tubes"]):
        x0, y0, x1, y1 = (int(v) for v in t["bbox"])
        # TubeRegion's inner columns are the central third of the tube's width (the
        # contract's measuring band, as the finder gives them); the truth's
        # inner_col0/1 bound the whole inside of the glass, walls' refraction included
        half = (int(t["inner_col1"]) - int(t["inner_col0"])) / 6.0
        c0 = int(np.ceil(float(t["axis_col"]) - half))
        c1 = int(np.floor(float(t["axis_col"]) + half)) + 1
        if c1 <= c0:
            c0, c1 = x0 + 1, max(x0 + 2, x1 - 1)
        top = t.get("liquid_top")
        bottom_top = int(min(max(int(t["bottom_top"]), y0 + 1), y1 - 1))
        if top is not None:
            top = int(min(max(int(top), y0), bottom_top - 1))
        if geometry == "no-meniscus":
            top = None
        elif geometry == "box-top":
            top = y0
        out.append(TubeRegion(index=k, row=int(t.get("row", 0)), bbox=(x0, y0, x1, y1), axis_col=float(t["axis_col"]),
                              inner_col0=c0, inner_col1=c1, liquid_top=top, liquid_bottom=bottom_top,
                              bottom_top=bottom_top, inner_bottom=int(min(max(int(t["inner_bottom"]), bottom_top),
                                                                          y1 - 1)),
                              source="layout"))
    return tuple(out)


@dataclass(frozen=True)
class StudioMeasurement:
    """What :func:`measure_rendered` returns: per-tube measurements and calls, and the card status."""

    measurements: tuple
    calls: tuple
    calibration_status: str
    card: Any = None


def measure_rendered(rendered, *, model=None, classify: bool = True, geometry: str = "truth",
                     card=None) -> StudioMeasurement:
    """Card → tubes (the truth geometry, :func:`truth_regions`) → measure → classify on a render.

    The card correction and the scale are found and fitted on the photo as
    :func:`tubevision.analysis.analyze_photo` does (the card's nominal values).
    ``classify=False`` skips the calls (building the table needs only features);
    ``geometry`` is one of :data:`GEOMETRIES`; ``card`` an earlier result's
    ``card`` (the fitted correction, scale and status), to reuse it.
    """
    from .. import measure
    from ..card import detect as card_detect
    from ..card import fit as card_fit
    from ..card.reference import load_card_reference
    from .calls import classify_tube

    pixels = np.ascontiguousarray(rendered.upright)
    if card is None:
        correction, mm_per_px, status, homography = card_fit.uncalibrated_correction(), None, "none", None
        detection = card_detect.find_card(pixels)
        if detection:
            correction = card_fit.fit_card_correction(detection, load_card_reference(None))
            mm_per_px, status = detection.mm_per_px, "card"
            homography = getattr(detection, "homography_mm_to_px", None)
        card = (correction, mm_per_px, status, homography)
    correction, mm_per_px, status, homography = card

    def scale_at(region):
        # as analyze_photo: the scale at each tube's own bottom from the card's homography
        if homography is None or not hasattr(measure, "mm_per_px_at"):
            return mm_per_px
        try:
            return measure.mm_per_px_at(homography, (region.axis_col, region.inner_bottom))
        except TubevisionInputError:
            return mm_per_px

    ms = tuple(measure.measure_tube(pixels, r, correction=correction, mm_per_px=scale_at(r))
               for r in truth_regions(rendered.truth, geometry))
    calls = tuple(classify_tube(m, model=model) for m in ms) if classify else ()
    return StudioMeasurement(ms, calls, status, card)


STUDIO_CONDITION_COLUMNS = ("geometry", "contents", "illuminant", "sensor", "size", "backdrop", "calibration",
                            "liq_L", "liq_a", "liq_b", "pel_L", "pel_a", "pel_b",
                            "true_L", "true_a", "true_b", "true_turbidity")
"""Columns of the table that describe the photo and the measured colours
(not features: the forest never sees them)."""


def table_geometries(k: int) -> tuple[str, ...]:
    """Geometries measured for the k-th photo of a split: the truth always, and in
    turn one of the two faulty liquid tops (:data:`GEOMETRIES`)."""
    return ("truth", GEOMETRIES[1 + k % 2])


def studio_rows(k: int, split: str, seed: int, feature_names: Sequence[str] | None = None, model=None,
                geometries: Sequence[str] | None = None) -> list[dict]:
    """Render, measure and label the k-th studio scene of a split: one row per tube and geometry.

    ``geometries`` default :func:`table_geometries`; a ``no-meniscus`` row is
    written only for a tube with liquid (an empty tube's is its truth row).
    """
    from ..studio import render_scene

    spec, rseed = studio_scene(k, split, seed)
    rendered = render_scene(spec, seed=rseed)
    rows, card = [], None
    for g in (geometries or table_geometries(k)):
        part = _rows_for_geometry(rendered, spec, k, split, g, feature_names, model, card)
        card = part[0]
        rows.extend(r for r in part[1] if not (g == "no-meniscus" and r["state"] == "empty"))
    return rows


def _rows_for_geometry(rendered, spec, k, split, geometry, feature_names, model, card):
    from ..measure import FEATURE_NAMES

    names = tuple(feature_names or FEATURE_NAMES)
    a = measure_rendered(rendered, model=model, classify=model is not None, geometry=geometry, card=card)
    truths = []
    for t in rendered.truth["tubes"]:
        truths.append({"state": t["state"], "colour": (t.get("liquid") or {}).get("colour_name") or "",
                       "pellet_colour": (t.get("pellet") or {}).get("colour_name") or ""})
    rows = rows_from_measurements(a.measurements, names, photo=f"{split}-{k:04d}", truths=truths,
                                  extra={"split": split, "illuminant": spec.illuminant, "sensor": spec.camera.sensor,
                                         "size": f"{spec.width_px}x{spec.height_px}", "backdrop": spec.backdrop,
                                         "calibration": a.calibration_status, "geometry": geometry})
    for i, (r, t, m) in enumerate(zip(rows, rendered.truth["tubes"], a.measurements)):
        r["contents"] = t["contents"]
        liq_lab = m.liquid.lab if m.liquid is not None else (np.nan,) * 3
        pel_lab = m.pellet.lab if (m.pellet.present and m.pellet.lab is not None) else (np.nan,) * 3
        r["liq_L"], r["liq_a"], r["liq_b"] = (float(v) for v in liq_lab)
        r["pel_L"], r["pel_a"], r["pel_b"] = (float(v) for v in pel_lab)
        true_lab = (t.get("liquid") or {}).get("lab") or (np.nan,) * 3
        r["true_L"], r["true_a"], r["true_b"] = (float(v) for v in true_lab)
        r["true_turbidity"] = float((t.get("liquid") or {}).get("turbidity") or 0.0)
        if a.calls:
            r["_call"] = a.calls[i]
    return a.card, rows


def _studio_rows_job(args) -> list[dict]:
    k, split, seed = args
    rows = studio_rows(k, split, seed)
    for r in rows:
        r.pop("_call", None)
    return rows


def build_studio_table(path: str | Path = TRAINING_CSV, *, seed: int = TRAIN_SEED,
                       n_train: int = TABLE_TRAIN_PHOTOS, n_valid: int = TABLE_VALID_PHOTOS,
                       jobs: int = 2, command: str = "") -> TrainingTable:
    """Render and measure the studio photos and write the training CSV; returns the table read back.

    Rows do not depend on ``jobs`` (each photo's randomness comes from its own
    seed), so the table is the same byte for byte on any machine with the same
    library versions.
    """
    import platform

    from ..measure import FEATURE_NAMES

    work = [(k, "train", seed) for k in range(n_train)] + [(k, "valid", seed) for k in range(n_valid)]
    rows: list[dict] = []
    if jobs > 1:
        import concurrent.futures as cf
        import multiprocessing as mp

        with cf.ProcessPoolExecutor(max_workers=jobs, mp_context=mp.get_context("spawn")) as ex:
            for i, part in enumerate(ex.map(_studio_rows_job, work, chunksize=4)):
                rows.extend(part)
                if (i + 1) % 50 == 0:
                    log.info("studio table: %d of %d photos", i + 1, len(work))
    else:
        for i, w in enumerate(work):
            rows.extend(_studio_rows_job(w))
            if (i + 1) % 50 == 0:
                log.info("studio table: %d of %d photos", i + 1, len(work))
    import sklearn

    header = [
        "tubevision studio training table for the state classifier (synthetic renders, invented scenes)",
        f"command: {command or 'python -m tubevision.classify.train table'}",
        f"seed: {seed}; photos: {n_train} train, {n_valid} valid",
        "split: valid rows are the held-out illuminant x camera combinations "
        + " ".join(f"{i}/{s}" for i, s in held_out_combinations()),
        f"versions: python {platform.python_version()}, numpy {np.__version__}, scikit-learn {sklearn.__version__}",
        "features: " + " ".join(FEATURE_NAMES),
    ]
    write_training_table(path, rows, FEATURE_NAMES, STUDIO_CONDITION_COLUMNS, header)
    return read_training_table(path)


# ----------------------------------------------------------------------------- a lab's own photos

def labelled_pairs(folder: str | Path) -> list[tuple[Path, Path]]:
    """(photo, labels file) pairs in a folder: every ``X.labels.json`` with a photo ``X.*`` beside it.

    Raises
    ------
    TubevisionInputError
        No labels files, or a labels file without its photo.
    """
    d = Path(folder)
    if not d.is_dir():
        raise TubevisionInputError(f"labelled photos: {d} is not a folder")
    pairs = []
    for lab in sorted(d.glob("*" + LABELS_SUFFIX)):
        stem = lab.name[: -len(LABELS_SUFFIX)]
        photos = [p for p in sorted(d.glob(stem + ".*")) if p != lab and not p.name.endswith(".json")
                  and p.suffix.lower() in PHOTO_SUFFIXES]
        if not photos:
            raise TubevisionInputError(f"labels file {lab.name}: no photo {stem}.* beside it")
        pairs.append((photos[0], lab))
    if not pairs:
        raise TubevisionInputError(f"labelled photos: no *{LABELS_SUFFIX} files in {d}")
    return pairs


def read_labels(path: str | Path) -> dict[str, dict[str, str]]:
    """Read a labels file ``{"T1": {"state": "cloudy", "colour": "white"}, ...}``.

    Raises
    ------
    TubevisionInputError
        Not JSON, a key that is not ``T<n>``, or an unknown state or colour word.
    """
    from .naming import COLOUR_WORDS

    p = Path(path)
    try:
        d = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise TubevisionInputError(f"labels file {p.name}: not readable JSON ({exc.__class__.__name__})") from None
    if not isinstance(d, dict) or not d:
        raise TubevisionInputError(f'labels file {p.name}: expected {{"T1": {{"state": ...}}, ...}}')
    out = {}
    for key, v in d.items():
        if not (isinstance(key, str) and key[:1] == "T" and key[1:].isdigit() and int(key[1:]) >= 1):
            raise TubevisionInputError(f"labels file {p.name}: tube key {key!r} should be T1, T2, ...")
        if isinstance(v, str):
            v = {"state": v}
        if not isinstance(v, dict) or v.get("state") not in STATES:
            raise TubevisionInputError(f"labels file {p.name}: {key} state must be one of {', '.join(STATES)}")
        for ck in ("colour", "pellet_colour"):
            if v.get(ck) is not None and v[ck] not in COLOUR_WORDS:
                raise TubevisionInputError(f"labels file {p.name}: {key} {ck} {v[ck]!r} is not one of "
                                           + ", ".join(COLOUR_WORDS))
        out[key] = {"state": v["state"], "colour": v.get("colour"), "pellet_colour": v.get("pellet_colour")}
    return out


LAYOUT_SUFFIX = ".layout.json"
"""Optional tube boxes for a labelled photo ``rack.jpg``: ``rack.layout.json`` in
the form ``tubevision analyze --layout`` reads; without it the tubes are found."""


def layout_beside(photo: str | Path):
    """The boxes of ``NAME.layout.json`` beside a photo, or None when there is none."""
    from ..tubes import parse_layout

    p = Path(photo)
    lay = p.with_name(p.stem + LAYOUT_SUFFIX)
    if not lay.is_file():
        return None
    try:
        text = lay.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        raise TubevisionInputError(f"layout file {lay.name}: not readable as UTF-8 text") from None
    return parse_layout(text, where=lay.name)


def measure_photo(path: str | Path, *, layout_boxes=None, no_card: bool = False):
    """Run load → card → tubes → measure (and classify) on one photo; returns the PhotoAnalysis."""
    from ..analysis import AnalysisOptions, analyze_photo
    from ..image import load_photo

    photo = load_photo(path)
    opts = AnalysisOptions(no_card=no_card,
                           layout_boxes=None if layout_boxes is None else tuple(tuple(b) for b in layout_boxes))
    return analyze_photo(photo, opts)


@dataclass(frozen=True)
class LabelledResult:
    """What :func:`train_from_labelled_photos` returns."""

    model: StateModel
    state: Evaluation  # cross-validated
    colour: Evaluation | None  # the naming table's words vs the labels (no training involved)
    n_photos: int
    n_tubes: int
    warnings: tuple[str, ...]


def train_from_labelled_photos(pairs: Sequence[tuple[str | Path, str | Path]], *, folds: int = 5,
                               seed: int = TRAIN_SEED, base_table: TrainingTable | None = None,
                               measured: Sequence | None = None) -> LabelledResult:
    """Retrain the state model on a lab's own labelled photos, with cross-validation.

    Parameters
    ----------
    pairs : (photo path, labels path) pairs (:func:`labelled_pairs`).
    folds : cross-validation folds; folds never split a photo (grouped by
        photo, stratified by state: ``StratifiedGroupKFold`` [1]_). Reduced to
        the number of photos when fewer.
    seed : fixes the fold assignment and the forest.
    base_table : optional studio table whose rows are added to the training
        set (not to the scoring) — useful when the lab has few photos.
    measured : optional pre-computed PhotoAnalysis per pair (tests, re-runs).

    Returns
    -------
    LabelledResult — the model fitted on all the lab's tubes (plus the base
    table), the cross-validated state evaluation, and the colour-word agreement.

    Raises
    ------
    TubevisionInputError
        A labels file names a tube the photo does not have, or too few
        labelled tubes/states to train.
    """
    from sklearn.model_selection import StratifiedGroupKFold

    from .naming import colour_name

    warnings: list[str] = []
    feature_names: tuple[str, ...] | None = base_table.feature_names if base_table is not None else None
    X_rows, y, groups, colour_true, colour_pred = [], [], [], [], []  # noqa: N806
    for k, (photo_path, labels_path) in enumerate(pairs):
        labels = read_labels(labels_path)
        analysis = (measured[k] if measured is not None
                    else measure_photo(photo_path, layout_boxes=layout_beside(photo_path)))
        ms = list(analysis.measurements)
        if feature_names is None:
            names = [n for m in ms for n in (getattr(m, "features", {}) or {})]
            feature_names = tuple(dict.fromkeys(names))
        n = len(ms)
        for key, lab in labels.items():
            i = int(key[1:]) - 1
            if i >= n:
                raise TubevisionInputError(f"labels file {Path(labels_path).name}: {key} given but only "
                                           f"{n} tubes found in {Path(photo_path).name}")
            m = ms[i]
            feats = getattr(m, "features", {}) or {}
            X_rows.append([float(feats.get(f, np.nan)) if feats.get(f) is not None else np.nan
                           for f in feature_names])
            y.append(lab["state"])
            groups.append(k)
            if lab.get("colour") and getattr(m, "liquid", None) is not None:
                colour_true.append(lab["colour"])
                colour_pred.append(colour_name(m.liquid.lab, solid=(lab["state"] == "cloudy")))
        if set(range(1, n + 1)) - {int(k[1:]) for k in labels}:
            warnings.append(f"{Path(labels_path).name}: {n - len(labels)} of {n} tubes unlabelled, left out")
    if feature_names is None or not y:
        raise TubevisionInputError("labelled photos: no labelled tubes")
    X = np.array(X_rows, dtype=np.float64).reshape(len(y), len(feature_names))  # noqa: N806
    y_arr = np.array(y)
    if len(set(y)) < 2:
        raise TubevisionInputError(f"labelled photos: all tubes are {y[0]}; need at least two states to train")
    n_groups = len(set(groups))
    k_folds = min(folds, n_groups)
    if k_folds < 2:
        raise TubevisionInputError("labelled photos: need at least two labelled photos for cross-validation")
    Xb = base_table.X() if base_table is not None else np.zeros((0, len(feature_names)))  # noqa: N806
    # A lab's set may be a few dozen tubes: leaves of FOREST_MIN_SAMPLES_LEAF would then
    # allow hardly a split, so the smallest leaf grows with the data (1 per 100 tubes, our choice).
    leaf = int(np.clip((len(y) + len(Xb)) // 100, 1, FOREST_MIN_SAMPLES_LEAF))
    yb = list(base_table.column("state")) if base_table is not None else []
    pred = np.empty(len(y), dtype=object)
    cv = StratifiedGroupKFold(n_splits=k_folds, shuffle=True, random_state=seed)
    # A state seen fewer times than there are folds cannot be stratified; sklearn warns, we carry on.
    import warnings as _w

    with _w.catch_warnings():
        _w.simplefilter("ignore", UserWarning)
        splits = list(cv.split(X, y_arr, np.array(groups)))
    for tr, te in splits:
        ytr = list(y_arr[tr]) + yb
        if len(set(ytr)) < 2:
            pred[te] = ytr[0]
            continue
        m = fit_state_model(np.vstack([X[tr], Xb]), ytr, feature_names, seed=seed, min_samples_leaf=leaf)
        pred[te] = predict_states(m, X[te])
    ev = evaluate(y, list(pred), title=f"state ({k_folds}-fold cross-validation by photo)")
    model = fit_state_model(np.vstack([X, Xb]), list(y) + yb, feature_names, seed=seed, min_samples_leaf=leaf, meta={
        "training_table": "labelled photos" + (" + studio table" if base_table is not None else ""),
        "training_sha256": hashlib.sha256(
            b"".join(Path(p).read_bytes() for _, p in pairs)).hexdigest(),
        "validation": {"split": f"{k_folds}-fold StratifiedGroupKFold by photo", "macro_f1": round(ev.macro_f1, 6),
                       "accuracy": round(ev.accuracy, 6), "n": ev.n},
        "trained_at": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
    })
    cev = evaluate(colour_true, colour_pred, title="liquid colour word") if colour_true else None
    return LabelledResult(model, ev, cev, len(pairs), len(y), tuple(warnings))


# ----------------------------------------------------------------------------- command line

def _cmd_table(args) -> int:
    table = build_studio_table(args.out, seed=args.seed, n_train=args.train_photos, n_valid=args.valid_photos,
                               jobs=args.jobs, command=" ".join(["python -m tubevision.classify.train"]
                                                                 + list(args.argv)))
    counts = {c: table.column("state").count(c) for c in STATES}
    sys.stdout.write(f"wrote {args.out}: {len(table.rows)} tubes " + ", ".join(f"{c} {n}" for c, n in counts.items())
                     + "\n")
    return 0


def _cmd_build_and_fit(args) -> int:
    _cmd_table(args)
    args.table = args.out
    args.out = args.model_out
    return _cmd_fit(args)


def _cmd_fit(args) -> int:
    table = read_training_table(args.table)
    name = args.table_name or ("calibration/state_training.csv" if Path(args.table).resolve() == TRAINING_CSV
                               else Path(args.table).name)
    model, ev = fit_from_table(table, seed=args.seed, source=name)
    write_model(model, args.out)
    sys.stdout.write(ev.report + "\n")
    for g, e in model.meta.get("validation_by_geometry", {}).items():
        sys.stdout.write(f"geometry {g}: macro-F1 {e['macro_f1']:.4f}, accuracy {e['accuracy']:.4f}, n = {e['n']}\n")
    sys.stdout.write(f"wrote {args.out}\n")
    return 0


def _cmd_labelled(args) -> int:
    pairs = labelled_pairs(args.folder)
    base = read_training_table(args.with_studio) if args.with_studio else None
    res = train_from_labelled_photos(pairs, folds=args.folds, seed=args.seed, base_table=base)
    for w in res.warnings:
        log.warning("%s", w)
    sys.stdout.write(res.state.report + "\n")
    if res.colour is not None:
        sys.stdout.write("\n" + res.colour.report + "\n")
    if args.out:
        write_model(res.model, args.out)
        sys.stdout.write(f"wrote {args.out} ({res.n_tubes} tubes from {res.n_photos} photos)\n")
    return 0


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line (exit status 2 from :func:`main`)."""

    def error(self, message: str):  # noqa: D401 - argparse hook
        raise TubevisionInputError(f"usage: {message} (see --help)")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="tubevision train",
                description="Build the studio training table, fit the state model, "
                            "or retrain it on labelled photos.")
    sub = p.add_subparsers(dest="cmd", required=True, parser_class=_Parser)
    model_default = str(Path(__file__).resolve().parent.parent / "data" / "model_state_v1.json")
    for name, text in (("table", "render studio photos and write the training CSV"),
                       ("build-and-fit", "table, then fit: the one command that rebuilds the shipped model")):
        t = sub.add_parser(name, help=text)
        t.add_argument("--out", default=str(TRAINING_CSV), help="training CSV to write")
        t.add_argument("--seed", type=int, default=TRAIN_SEED)
        t.add_argument("--train-photos", type=int, default=TABLE_TRAIN_PHOTOS)
        t.add_argument("--valid-photos", type=int, default=TABLE_VALID_PHOTOS)
        t.add_argument("--jobs", type=int, default=2, help="worker processes (the table does not depend on it)")
        if name == "build-and-fit":
            t.add_argument("--model-out", default=model_default, help="JSON model to write")
            t.add_argument("--table-name", default=None, help="name of the table recorded in the model")
    f = sub.add_parser("fit", help="fit on split=train rows, score on split=valid, write the JSON model")
    f.add_argument("--table", default=str(TRAINING_CSV))
    f.add_argument("--table-name", default=None, help="name of the table recorded in the model")
    f.add_argument("--out", default=model_default)
    f.add_argument("--seed", type=int, default=TRAIN_SEED)
    lab = sub.add_parser("labelled", help="cross-validate and retrain on photos with NAME.labels.json beside them")
    lab.add_argument("folder")
    lab.add_argument("--out", default=None, help="write the retrained model here (JSON)")
    lab.add_argument("--folds", type=int, default=5)
    lab.add_argument("--seed", type=int, default=TRAIN_SEED)
    lab.add_argument("--with-studio", default=None, metavar="CSV", help="also train on this studio table")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Command line; returns 0 done, 2 bad input (message on stderr)."""
    logging.basicConfig(level=logging.INFO, format="%(levelname)s %(message)s")
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        try:
            args = build_parser().parse_args(argv)
        except SystemExit as exc:  # --help
            return int(exc.code or 0)
        args.argv = argv
        if args.cmd == "table":
            return _cmd_table(args)
        if args.cmd == "build-and-fit":
            return _cmd_build_and_fit(args)
        if args.cmd == "fit":
            return _cmd_fit(args)
        return _cmd_labelled(args)
    except TubevisionInputError as exc:
        sys.stderr.write(f"tubevision train: error: {exc}\n")
        return 2


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
