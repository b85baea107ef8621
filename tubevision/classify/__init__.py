"""Stage 5, classify: state and colour words per tube, with a confidence.

* ``naming`` — colour words from CIELAB by one documented LCh table.
* ``forest`` — the state classifier's JSON format and its numpy evaluation.
* ``calls``  — :func:`classify_tube`, :func:`load_model`, the rule fallback.
* ``train``  — build the training table from studio photos, fit, evaluate,
  retrain on a lab's own labelled photos (imports scikit-learn; run as
  ``python -m tubevision.classify.train``).
"""

from .calls import STATES, TubeCall, classify_tube, load_model, rule_state
from .forest import StateModel
from .naming import COLOUR_NAME_TABLE, COLOUR_WORDS, colour_name, colour_name_candidates, colour_names

__all__ = [
    "STATES",
    "TubeCall",
    "StateModel",
    "classify_tube",
    "load_model",
    "rule_state",
    "COLOUR_NAME_TABLE",
    "COLOUR_WORDS",
    "colour_name",
    "colour_names",
    "colour_name_candidates",
]
