"""Map a :class:`~tubevision.analysis.PhotoAnalysis` to the contract's record dict.

Floats are rounded here and only here; NaN and infinities become ``null``
on purpose, so the JSON stays valid (``json.dumps(..., allow_nan=False)``).
"""

from __future__ import annotations

import json
import math
import platform
from functools import lru_cache
from importlib import resources
from typing import Any

import numpy as np

from .. import __version__
from ..errors import TubevisionInputError

__all__ = ["RECORD_SCHEMA_ID", "build_record", "record_schema", "validate_record", "to_json",
           "settings_digest"]

RECORD_SCHEMA_ID = "tubevision.record/1"

LAB_DECIMALS = 2
"""CIELAB to 0.01: a tenth of the smallest difference a person sees (ΔE ≈ 1), common practice."""


def _num(v, nd: int = 4):
    if v is None:
        return None
    v = float(v)
    if not math.isfinite(v):
        return None
    return round(v, nd)


def _vec(v, nd: int = LAB_DECIMALS):
    if v is None:
        return None
    arr = np.asarray(v, dtype=float).ravel()
    if arr.size != 3 or not np.all(np.isfinite(arr)):
        return None
    return [round(float(x), nd) for x in arr]


def _versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    from importlib.metadata import PackageNotFoundError, version

    for dist in ("numpy", "scikit-image", "scikit-learn", "opencv-python-headless", "pillow"):
        try:
            out[dist] = version(dist)
        except PackageNotFoundError:
            pass
    return out


def settings_digest(analysis) -> str:
    """SHA-256 over the photo hash and the settings that change results.

    Two runs with the same digest would write the same record; a run with
    another digest writes alongside instead of over it.
    """
    import hashlib

    o = analysis.options
    key = {
        "photo": analysis.photo.meta.sha256, "card_ref": _file_hash(o.card_ref),
        "no_card": o.no_card, "layout": [list(b) for b in o.layout_boxes] if o.layout_boxes else None,
        "expected": o.expected_tubes, "scheme": o.scheme, "scheme_file": _file_hash(o.scheme),
        "step": o.step, "labels": o.labels, "model": _file_hash(o.model), "version": __version__,
    }
    curve = getattr(o, "turbidity_curve", None)
    if curve:  # only when given, so that digests of earlier runs stay the same
        key["turbidity_curve"] = _file_hash(curve)
    return hashlib.sha256(json.dumps(key, sort_keys=True).encode()).hexdigest()


def _file_hash(path) -> str | None:
    if not path:
        return None
    import hashlib
    from pathlib import Path

    p = Path(path)
    if not p.is_file():
        return None
    return hashlib.sha256(p.read_bytes()).hexdigest()


def _calibration(analysis) -> dict[str, Any]:
    corr = analysis.correction
    det = analysis.card_detection
    if analysis.calibration_status != "card":
        return {"status": "none",
                "method": getattr(corr, "method", "none: sRGB (IEC 61966-2-1) assumed"),
                "residual_de00": None, "mm_per_px": None}
    patches = []
    ids = list(getattr(det, "patch_ids", []))
    ok = np.asarray(getattr(det, "patch_ok", np.ones(len(ids), bool)), dtype=bool)
    res = np.asarray(getattr(corr, "residual_de00", []), dtype=float).ravel()
    used_ids = [pid for pid, flag in zip(ids, ok) if flag]
    res_by_id = dict(zip(getattr(corr, "patch_ids", used_ids), res)) if res.size else {}
    for pid, flag in zip(ids, ok):
        patches.append({"id": str(pid), "used": bool(flag), "residual_de00": _num(res_by_id.get(pid), 3)})
    ref = analysis.card_reference
    return {
        "status": "card",
        "method": corr.method,
        "residual_de00": {"mean": _num(corr.mean_de00, 3), "max": _num(corr.max_de00, 3)},
        "mm_per_px": _num(det.mm_per_px, 6),
        "loo_de00_median": _num(getattr(corr, "loo_de00_median", None), 3),
        "card_corners_px": (np.asarray(det.corners_px, float).round(1).tolist()
                            if getattr(det, "corners_px", None) is not None else None),
        "reference": {"source": getattr(ref, "source", None), "sha256": getattr(ref, "sha256", None),
                      "illuminant": "D50", "adapted_to": "D65 (Bradford)"} if ref is not None else None,
        "patches": patches,
    }


def _tube(analysis, i: int) -> dict[str, Any]:
    region = analysis.finding.regions[i]
    m = analysis.measurements[i]
    call = analysis.calls[i]
    liq = m.liquid
    empty = call.state == "empty" or liq is None
    liquid = {
        "lab": None if empty else _vec(liq.lab),
        "lab_sd": None if empty else _vec(liq.lab_sd),
        "colour_name": None if empty else call.liquid_colour_name,
        "turbidity": None if empty else _num(max(0.0, float(liq.turbidity)), 4),
    }
    if not empty:
        liquid["turbidity_sd"] = _num(getattr(liq, "turbidity_sd", None), 4)
        liquid["n_pixels"] = int(getattr(liq, "n_pixels", 0))
        liquid["clipped_fraction"] = _num(getattr(liq, "clipped_fraction", None), 4)
        for extra in ("turbidity_standard", "turbidity_standard_sd", "turbidity_standard_unit"):
            if getattr(liq, extra, None) is not None:
                liquid[extra] = getattr(liq, extra)
    p = m.pellet
    pellet = {
        "present": bool(p.present),
        "height_mm": _num(p.height_mm, 2) if p.present else None,
        "lab": _vec(p.lab) if p.present else None,
        "colour_name": call.pellet_colour_name if p.present else None,
    }
    if not p.present and getattr(p, "light_solid_hidden", False):
        pellet["light_solid_hidden"] = True
    if not p.present and getattr(p, "dark_solid_hidden", False):
        pellet["dark_solid_hidden"] = True
    if p.present:
        pellet["height_mm_sd"] = _num(getattr(p, "height_mm_sd", None), 2)
        pellet["lab_sd"] = _vec(getattr(p, "lab_sd", None))
        # rows of the solid confirmed opaque in front of a light / a dark band: a step judged
        # again from the record (conclude) then reads the solid as the photo showed it
        for key in ("seen_over_light", "seen_over_dark"):
            if getattr(p, key, False):
                pellet[key] = True
    outcome = None
    if analysis.judgement is not None:
        outcome = analysis.judgement.outcome_for(i) if hasattr(analysis.judgement, "outcome_for") else None
    return {
        "id": f"T{region.index + 1}",
        "index": region.index,
        "row": region.row,
        "bbox": [int(v) for v in region.bbox],
        "state": call.state,
        "confidence": _num(min(1.0, max(0.0, call.confidence)), 3),
        "liquid": liquid,
        "pellet": pellet,
        "label": analysis.labels.get(i + 1),
        "step_outcome": outcome,
        "geometry": {
            "axis_col": _num(region.axis_col, 1),
            "inner_cols": [int(region.inner_col0), int(region.inner_col1)],
            "liquid_top": None if region.liquid_top is None else int(region.liquid_top),
            "liquid_bottom": int(region.liquid_bottom),
            "bottom_top": int(region.bottom_top),
            "inner_bottom": int(region.inner_bottom),
            "source": region.source,
        },
        "warnings": list(dict.fromkeys(list(m.warnings) + list(call.warnings))),
    }


def build_record(analysis) -> dict[str, Any]:
    """The evidence record of one analysed photo, as the contract gives it.

    Parameters
    ----------
    analysis : tubevision.analysis.PhotoAnalysis

    Returns
    -------
    dict — JSON-ready, validated against ``record.schema.json``.
    """
    meta = analysis.photo.meta
    o = analysis.options
    record: dict[str, Any] = {
        "schema": RECORD_SCHEMA_ID,
        "software": {"name": "tubevision", "version": __version__, "dependencies": _versions()},
        "image": {"file": meta.file, "sha256": meta.sha256, "width": meta.width, "height": meta.height,
                  "captured_at": meta.captured_at, "format": meta.format, "bit_depth": meta.bit_depth,
                  "exif_orientation": meta.exif_orientation, "icc_profile": meta.icc_profile},
        "calibration": _calibration(analysis),
        "colour_space": {"name": "CIELAB", "illuminant": "D65", "observer": "2"},
        "tubes": [_tube(analysis, i) for i in range(len(analysis.finding.regions))],
        "warnings": list(analysis.warnings),
    }
    scheme_block = None
    if analysis.judgement is not None and hasattr(analysis.judgement, "record_block"):
        scheme_block = analysis.judgement.record_block()
    record["scheme"] = scheme_block
    record["provenance"] = {
        "command": list(o.command),
        "ran_at": analysis.ran_at,
        "settings_sha256": settings_digest(analysis),
        "card_ref": {"file": o.card_ref, "sha256": _file_hash(o.card_ref)} if o.card_ref else None,
        "scheme": ({"name": o.scheme, "sha256": _file_hash(o.scheme)} if o.scheme else None),
        "layout": {"file": o.layout_file, "sha256": _file_hash(o.layout_file)} if o.layout_file else None,
        "model": {"file": o.model, "sha256": _file_hash(o.model)} if o.model else None,
        "turbidity_curve": ({"file": o.turbidity_curve, "sha256": _file_hash(o.turbidity_curve)}
                            if getattr(o, "turbidity_curve", None) else None),
        "device": {"make": meta.camera_make, "model": meta.camera_model},
    }
    try:
        validate_record(record)
    except TubevisionInputError as exc:  # our own record failing its schema is a bug
        raise RuntimeError(str(exc)) from None
    return record


@lru_cache(maxsize=1)
def record_schema() -> dict:
    """The record's JSON Schema, shipped as ``tubevision/data/record.schema.json``."""
    text = resources.files("tubevision").joinpath("data/record.schema.json").read_text("utf-8")
    return json.loads(text)


@lru_cache(maxsize=1)
def _record_validator():
    import jsonschema

    return jsonschema.Draft202012Validator(record_schema())


def validate_record(record: dict, where: str = "record") -> None:
    """Check a record against the shipped JSON Schema.

    Raises
    ------
    TubevisionInputError
        The record does not conform; the message names the first failing path.
    """
    errors = sorted(_record_validator().iter_errors(record), key=lambda e: list(e.absolute_path))
    if errors:
        e = errors[0]
        path = "/".join(str(p) for p in e.absolute_path) or "(top)"
        raise TubevisionInputError(f"{where}: does not match {RECORD_SCHEMA_ID} at {path}: {e.message}")


def to_json(record: dict) -> str:
    """Serialise a record; refuses NaN rather than writing invalid JSON."""
    return json.dumps(record, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
