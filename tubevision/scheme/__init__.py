"""Test schemes: expected outcomes per step, controls, and calls per sample.

A scheme is data (``tubevision/data/schemes/*.toml``, described by
``tubevision/data/scheme.schema.json``): the analytes, the steps with the
reagent, the fraction photographed and the appearance expected when an
analyte is present and when absent, the words that give a tube its role,
known trouble signs, and the rules that combine step verdicts into calls.

* :func:`load_scheme` reads a built-in scheme or a user's file.
* :func:`parse_labels` reads ``--labels``.
* :func:`judge_step` judges one photo at one step beside its positive
  control and blank (:class:`StepJudgement`).
* :func:`scheme_block` is the record's top-level ``scheme`` block.
* :func:`conclude` combines records of several steps into calls.
"""

from ._conclude import CONCLUSION_SCHEMA_ID, conclude, conclusion_text, validate_conclusion
from ._judge import (
    ControlFailure,
    StepJudgement,
    TubeObservation,
    TubeOutcome,
    judge_step,
    observation_from,
    observation_from_record,
    scheme_block,
)
from ._load import (
    Scheme,
    Step,
    builtin_schemes,
    check_step,
    load_scheme,
    parse_labels,
    parse_scheme,
    role_of,
    step_names,
)

__all__ = [
    "CONCLUSION_SCHEMA_ID",
    "ControlFailure",
    "Scheme",
    "Step",
    "StepJudgement",
    "TubeObservation",
    "TubeOutcome",
    "builtin_schemes",
    "check_step",
    "conclude",
    "conclusion_text",
    "judge_step",
    "load_scheme",
    "observation_from",
    "observation_from_record",
    "parse_labels",
    "parse_scheme",
    "role_of",
    "scheme_block",
    "step_names",
    "validate_conclusion",
]
