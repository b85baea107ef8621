"""The state classifier as inspectable JSON: a random forest evaluated by numpy.

A scikit-learn ``RandomForestClassifier`` is fitted at training time
(:mod:`tubevision.classify.train`); each tree's ``tree_`` arrays
(``children_left``, ``children_right``, ``feature``, ``threshold`` and the
leaf class fractions) are written to JSON with the class names, feature
names, the per-feature training range, the scikit-learn version, the sha256
of the training table and the validation score it recorded. At run time
:func:`forest_predict_proba` walks those arrays with numpy: no pickle, no
scikit-learn import, nothing in the file can run code.

Why a random forest: the features (turbidity, pellet height and contrast,
colour spreads) interact non-linearly (a pellet under a cloudy liquid is
``cloudy``, under a clear one ``settled``), have very different scales and
long tails, and are partly redundant. Averaged fully-grown-but-depth-limited
trees handle all three without scaling, give class probabilities as vote
fractions, and export exactly (Breiman 2001 [1]_; Pedregosa et al. 2011 [2]_).
Logistic regression would need hand-made interaction terms; gradient boosting
exports as easily but its raw scores are less directly probabilities.

References
----------
.. [1] L. Breiman, "Random forests", Machine Learning 45, 5-32, 2001.
   DOI 10.1023/A:1010933404324.
.. [2] F. Pedregosa et al., "Scikit-learn: machine learning in Python",
   Journal of Machine Learning Research 12, 2825-2830, 2011 (the ``tree_``
   array layout: ``children_left[i] == -1`` marks a leaf; a sample goes left
   when ``x[feature[i]] <= threshold[i]``).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import TubevisionInputError

__all__ = ["MODEL_FORMAT", "StateModel", "model_from_dict", "model_to_dict", "read_model_file",
           "forest_predict_proba"]

MODEL_FORMAT = "tubevision.state-model/1"
"""Format tag of the JSON model file (ours)."""


@dataclass(frozen=True)
class _Tree:
    left: np.ndarray  # int32 (n_nodes,), -1 at leaves
    right: np.ndarray  # int32 (n_nodes,)
    feature: np.ndarray  # int32 (n_nodes,), -2 at leaves
    threshold: np.ndarray  # float64 (n_nodes,)
    value: np.ndarray  # float64 (n_nodes, n_classes), class fractions at leaves (rows sum to 1)


@dataclass(frozen=True)
class StateModel:
    """A loaded state classifier.

    Attributes
    ----------
    classes : tuple of str — state names, in the order of the probability columns.
    feature_names : tuple of str — the measurement features, in column order.
    trees : tuple of _Tree — the forest.
    feature_min, feature_max : ndarray (n_features,) — range seen in training.
    feature_fill : ndarray (n_features,) — value used for a missing (NaN)
        feature: the training median (common practice for tree models).
    meta : dict — provenance: sklearn version, training sha256, validation
        score, seed, source path, ...
    """

    classes: tuple[str, ...]
    feature_names: tuple[str, ...]
    trees: tuple[_Tree, ...]
    feature_min: np.ndarray
    feature_max: np.ndarray
    feature_fill: np.ndarray
    meta: dict[str, Any] = field(default_factory=dict)


_PACKED: dict[int, tuple] = {}
"""Forests packed into flat arrays, by ``id(model.trees)`` (models are immutable)."""


def _packed(model: StateModel) -> tuple:
    key = id(model.trees)
    hit = _PACKED.get(key)
    if hit is not None and hit[0] is model.trees:
        return hit[1]
    sizes = [len(t.left) for t in model.trees]
    offsets = np.concatenate([[0], np.cumsum(sizes)[:-1]]).astype(np.int64)
    left = np.concatenate([np.where(t.left >= 0, t.left + o, -1) for t, o in zip(model.trees, offsets)])
    right = np.concatenate([np.where(t.right >= 0, t.right + o, -1) for t, o in zip(model.trees, offsets)])
    feature = np.concatenate([np.maximum(t.feature, 0) for t in model.trees]).astype(np.int64)
    threshold = np.concatenate([t.threshold for t in model.trees])
    value = np.concatenate([t.value for t in model.trees])
    packed = (offsets, left.astype(np.int64), right.astype(np.int64), feature, threshold, value)
    _PACKED.clear()
    _PACKED[key] = (model.trees, packed)
    return packed


def forest_predict_proba(model: StateModel, X: np.ndarray) -> np.ndarray:  # noqa: N803
    """Mean leaf class fractions over the forest (scikit-learn's ``predict_proba``).

    All trees are walked together, one level per step, over the forest packed into flat
    arrays (the same decisions as walking each tree alone).

    Parameters
    ----------
    model : StateModel
    X : ndarray of shape (n, n_features) — finite feature values in the
        order of ``model.feature_names`` (fill NaN before calling).

    Returns
    -------
    ndarray of shape (n, n_classes) — probabilities, rows sum to 1.
    """
    X = np.asarray(X, dtype=np.float64)  # noqa: N806
    # scikit-learn compares float32-cast features with float64 thresholds
    # (sklearn/tree/_tree.pyx, DTYPE = float32); do the same, so results match.
    Xf = X.astype(np.float32).astype(np.float64)  # noqa: N806
    n = Xf.shape[0]
    offsets, left, right, feature, threshold, value = _packed(model)
    node = np.repeat(offsets[:, None], n, axis=1)          # (trees, n)
    sample = np.broadcast_to(np.arange(n)[None, :], node.shape)
    while True:
        inner = left[node] >= 0
        if not inner.any():
            break
        go_left = Xf[sample, feature[node]] <= threshold[node]
        node = np.where(inner, np.where(go_left, left[node], right[node]), node)
    return value[node].mean(axis=0)


def _leaf_values(t: _Tree) -> list:
    """Leaf class fractions to 6 decimals; inner nodes' rows written as zeros (never
    read: :func:`forest_predict_proba` stops at leaves), which halves the file."""
    v = np.round(t.value, 6)
    v[t.left >= 0] = 0.0
    return [[int(x) if x == 0 else float(x) for x in row] for row in v]


def model_to_dict(model: StateModel) -> dict[str, Any]:
    """The JSON-ready form of a model (inverse of :func:`model_from_dict`)."""
    return {
        "format": MODEL_FORMAT,
        "kind": "random_forest",
        "classes": list(model.classes),
        "feature_names": list(model.feature_names),
        "feature_range": {name: {"min": float(lo), "max": float(hi), "fill": float(fill)}
                          for name, lo, hi, fill in zip(model.feature_names, model.feature_min,
                                                        model.feature_max, model.feature_fill)},
        "meta": model.meta,
        "trees": [
            {"children_left": t.left.tolist(), "children_right": t.right.tolist(),
             "feature": t.feature.tolist(), "threshold": [float(v) for v in t.threshold],
             "value": _leaf_values(t)}
            for t in model.trees
        ],
    }


def _bad(where: str, what: str) -> TubevisionInputError:
    return TubevisionInputError(f"model file {where}: {what}")


def model_from_dict(d: Any, where: str = "<dict>") -> StateModel:
    """Check and load a model dict read from JSON.

    Raises
    ------
    TubevisionInputError
        The dict is not a tubevision state model or its arrays do not fit together.
    """
    if not isinstance(d, dict) or d.get("format") != MODEL_FORMAT:
        raise _bad(where, f"not a tubevision state model (expected \"format\": \"{MODEL_FORMAT}\")")
    if d.get("kind") != "random_forest":
        raise _bad(where, f"unknown model kind {d.get('kind')!r} (expected random_forest)")
    try:
        classes = tuple(str(c) for c in d["classes"])
        names = tuple(str(f) for f in d["feature_names"])
        rng = d["feature_range"]
        fmin = np.array([float(rng[f]["min"]) for f in names])
        fmax = np.array([float(rng[f]["max"]) for f in names])
        fill = np.array([float(rng[f]["fill"]) for f in names])
        trees = []
        for k, t in enumerate(d["trees"]):
            left = np.asarray(t["children_left"], dtype=np.int64)
            right = np.asarray(t["children_right"], dtype=np.int64)
            feat = np.asarray(t["feature"], dtype=np.int64)
            thr = np.asarray(t["threshold"], dtype=np.float64)
            val = np.asarray(t["value"], dtype=np.float64)
            m = left.shape[0]
            if not (left.ndim == right.ndim == feat.ndim == thr.ndim == 1 and m >= 1
                    and right.shape[0] == feat.shape[0] == thr.shape[0] == m
                    and val.shape == (m, len(classes))):
                raise _bad(where, f"tree {k}: arrays have inconsistent lengths")
            inner = left >= 0
            if (np.any(left[inner] >= m) or np.any(right[inner] >= m) or np.any(right[inner] < 0)
                    or np.any(left[inner] <= np.flatnonzero(inner))
                    or np.any(right[inner] <= np.flatnonzero(inner))
                    or np.any(feat[inner] < 0) or np.any(feat[inner] >= len(names))):
                raise _bad(where, f"tree {k}: child or feature index out of range")
            if not np.all(np.isfinite(thr[inner])) or not np.all(np.isfinite(val)):
                raise _bad(where, f"tree {k}: non-finite threshold or value")
            trees.append(_Tree(left, right, feat, thr, val))
    except TubevisionInputError:
        raise
    except (KeyError, TypeError, ValueError) as exc:
        raise _bad(where, f"missing or malformed field ({exc.__class__.__name__}: {exc})") from None
    if not trees:
        raise _bad(where, "has no trees")
    if len(set(classes)) != len(classes) or not classes:
        raise _bad(where, "class names must be distinct and non-empty")
    if not (np.all(np.isfinite(fmin)) and np.all(np.isfinite(fmax)) and np.all(np.isfinite(fill))):
        raise _bad(where, "feature_range values must be finite")
    meta = d.get("meta") or {}
    if not isinstance(meta, dict):
        raise _bad(where, "meta must be an object")
    return StateModel(classes, names, tuple(trees), fmin, fmax, fill, dict(meta, source=where))


def read_model_file(path: str | Path) -> StateModel:
    """Read a JSON model file (never pickle).

    Raises
    ------
    TubevisionInputError
        Missing, unreadable, not JSON, or not a valid model.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise TubevisionInputError(f"model file {p}: not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise TubevisionInputError(f"model file {p}: cannot be read as UTF-8 text ({exc.__class__.__name__})") from None
    try:
        d = json.loads(text, parse_constant=lambda c: math.nan)
    except json.JSONDecodeError as exc:
        raise TubevisionInputError(f"model file {p}: not valid JSON (line {exc.lineno}: {exc.msg})") from None
    return model_from_dict(d, str(p))
