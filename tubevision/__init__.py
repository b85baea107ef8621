"""tubevision: calibrated, quantified evidence per tube from a photo of a test-tube rack.

Stages, in the order data flows through them:

* ``image``    — load: decode a photo upright, with its metadata and hash.
* ``card``     — find the reference card, fit the colour correction and the mm scale.
* ``tubes``    — find each tube and its liquid column and bottom region.
* ``measure``  — colour (CIELAB), turbidity and settled solid per tube, with uncertainty.
* ``classify`` — state and colour words per tube, with a confidence.
* ``scheme``   — judge each tube against the expected outcome of a test-scheme step.
* ``record``   — the evidence record (JSON), annotated image, report and archive.
* ``cli``      — the command line, a thin layer over :func:`analyze_photo`.

``studio`` renders synthetic rack photos with ground truth for the demo,
the tests and the benchmarks.
"""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__", "analyze_photo", "AnalysisOptions", "PhotoAnalysis"]


def __getattr__(name: str):
    # Lazy, so that ``tubevision --help`` starts without importing numpy & co.
    if name in ("analyze_photo", "AnalysisOptions", "PhotoAnalysis"):
        from . import analysis

        return getattr(analysis, name)
    raise AttributeError(f"module 'tubevision' has no attribute {name!r}")
