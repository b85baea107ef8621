"""Combining the step records of one scheme into calls per sample and analyte.

Each evidence record carries, for one photo at one step, every labelled
tube's ``step_outcome`` and a top-level ``scheme`` block
(:func:`~tubevision.scheme.scheme_block`). :func:`conclude` gathers the
verdicts by sample label and applies the scheme's ``[[calls]]`` rules: a
rule holds when every step it names has the verdict it names for that
sample; the rules that hold must agree, and when none holds (a step missing
or inconclusive) the call is ``inconclusive``. A step whose controls failed
counts as inconclusive for every sample in that photo.
"""

from __future__ import annotations

from typing import Any

from ..errors import TubevisionInputError
from ._load import Scheme, load_scheme, role_of

CONCLUSION_SCHEMA_ID = "tubevision.conclusion/1"
"""Value of the conclusion's ``schema`` key (contract)."""


def validate_conclusion(conclusion: dict) -> None:
    """Check a conclusion against ``tubevision/data/conclusion.schema.json``.

    Raises
    ------
    TubevisionInputError
        It does not conform; the message names the first failing path.
    """
    import json
    from importlib import resources

    import jsonschema

    schema = json.loads(resources.files("tubevision").joinpath("data", "conclusion.schema.json").read_text("utf-8"))
    errors = sorted(jsonschema.Draft202012Validator(schema).iter_errors(conclusion),
                    key=lambda e: list(map(str, e.absolute_path)))
    if errors:
        e = errors[0]
        where = "/".join(map(str, e.absolute_path)) or "(top level)"
        raise TubevisionInputError(f"conclusion {where}: {e.message}")


def _where(i: int, rec: dict) -> str:
    image = rec.get("image") if isinstance(rec.get("image"), dict) else {}
    return f"record {i + 1} ({image.get('file', '?')})"


def _scheme_of(records: list[dict]) -> tuple[Scheme, list[str]]:
    warnings: list[str] = []
    blocks = []
    for i, rec in enumerate(records):
        if not isinstance(rec, dict):
            raise TubevisionInputError(f"conclude: record {i + 1} is not a JSON object")
        blk = rec.get("scheme")
        if not isinstance(blk, dict) or not blk.get("name") or not blk.get("step"):
            raise TubevisionInputError(f"conclude: {_where(i, rec)} has no scheme step "
                                       "(analyse the photo with --scheme NAME --step STEP --labels ...)")
        blocks.append(blk)
    names = sorted({b["name"] for b in blocks})
    if len(names) > 1:
        raise TubevisionInputError(f"conclude: records of different schemes ({', '.join(names)}); "
                                   "conclude one scheme at a time")
    source = next((b.get("source") for b in blocks if b.get("source")), names[0])
    try:
        scheme = load_scheme(source)
    except TubevisionInputError as exc:
        raise TubevisionInputError(f"conclude: cannot load scheme {names[0]!r} the records name ({exc})") from None
    if scheme.name != names[0]:
        raise TubevisionInputError(f"conclude: the records name scheme {names[0]!r} but {source} holds "
                                   f"scheme {scheme.name!r}")
    shas = {b.get("sha256") for b in blocks if b.get("sha256")}
    if len(shas) > 1:
        warnings.append(f"the records were made with {len(shas)} different versions of scheme {scheme.name}")
    if shas and scheme.sha256 not in shas:
        warnings.append(f"scheme {scheme.name} ({source}) has changed since the records were made "
                        "(sha256 differs): the calls use the current rules")
    return scheme, warnings


def _combine_step(entries: list[tuple[str | None, bool, str, str]]) -> tuple[str, str]:
    """One verdict for a sample at a step from every photo of it: (verdict, why).

    ``entries``: (verdict or None, controls failed?, where, meaning). Verdicts
    from photos whose controls failed do not count; the remaining decided
    verdicts must agree.
    """
    spoiled = [w for v, bad, w, _ in entries if bad]
    decided = {v for v, bad, _, _ in entries if not bad and v in ("positive", "negative")}
    if len(decided) == 1:
        v = decided.pop()
        note = f" (controls failed in {', '.join(spoiled)}; a repeat decided it)" if spoiled else ""
        return v, note
    if len(decided) > 1:
        return "inconclusive", "photos of this step disagree"
    if spoiled:
        return "inconclusive", f"controls failed in {', '.join(spoiled)}"
    meanings = [m for v, bad, _, m in entries if m]
    if not entries or all(v is None for v, _, _, _ in entries):
        return "inconclusive", "the sample was not judged in that photo"
    return "inconclusive", "; ".join(dict.fromkeys(meanings)) or "judged inconclusive"


def _failure_text(step: str, where: str, f: dict) -> str:
    """One control failure in words; a photo-caused one (``cause == "photo"``) says what to redo."""
    text = f"{step} ({where}): expected {f.get('expected')}, {f.get('reason')}"
    if f.get("cause") == "photo":
        text += f" ({f.get('advice') or 'photograph again with the other band behind the tube bottoms'})"
    return text


def conclude(records: list[dict]) -> dict[str, Any]:
    """Combine the records of several steps of one scheme into calls per labelled sample.

    Parameters
    ----------
    records : list of dict
        Evidence records (``tubevision.record/1``), each made with
        ``--scheme/--step/--labels``: a top-level ``scheme`` block (name,
        source, sha256, step, control_failures, roles) and per tube ``label``
        and ``step_outcome``.

    Returns
    -------
    dict
        The contract's conclusion (``tubevision.conclusion/1``): ``scheme``,
        ``samples`` (label → ``calls`` per analyte and ``reasons``),
        ``controls`` (label → ``passed``, ``failures``), ``warnings``; plus
        ``steps`` (label → step → verdict) and ``scheme_sha256``.

    Raises
    ------
    TubevisionInputError
        No records, a record without a scheme step, records of different
        schemes, or a step the scheme does not have.
    """
    if not records:
        raise TubevisionInputError("conclude: no records given")
    scheme, warnings = _scheme_of(records)
    step_names = [s.name for s in scheme.steps]

    sample_steps: dict[str, dict[str, list[tuple[str | None, bool, str, str]]]] = {}
    controls: dict[str, dict[str, Any]] = {}
    for i, rec in enumerate(records):
        where = _where(i, rec)
        blk = rec["scheme"]
        step = blk["step"]
        if step not in step_names:
            raise TubevisionInputError(f"conclude: {where}: scheme {scheme.name} has no step {step!r}")
        failures = [f for f in (blk.get("control_failures") or []) if isinstance(f, dict)]
        failed_positions = {f.get("position") for f in failures}
        roles = blk.get("roles") if isinstance(blk.get("roles"), dict) else {}
        for w in blk.get("warnings") or []:
            warnings.append(f"{where}: {w}")
        for tube in rec.get("tubes") or []:
            label = tube.get("label")
            if not label:
                continue
            pos = int(tube.get("index", 0)) + 1
            outcome = tube.get("step_outcome") if isinstance(tube.get("step_outcome"), dict) else None
            role = roles.get(str(pos)) or (outcome or {}).get("role") or role_of(scheme, label)
            if role == "sample":
                verdict = outcome.get("verdict") if outcome else None
                meaning = str(outcome.get("meaning", "")) if outcome else ""
                sample_steps.setdefault(label, {}).setdefault(step, []).append(
                    (verdict, bool(failures), where, meaning))
            elif role in ("control", "blank", "standard"):
                c = controls.setdefault(label, {"role": role, "passed": True, "failures": [], "steps": []})
                c["steps"].append(step)
                if pos in failed_positions:
                    c["passed"] = False
                    for f in failures:
                        if f.get("position") == pos:
                            c["failures"].append(_failure_text(step, where, f))
        # A failure naming a tube with no label of its own still counts.
        for f in failures:
            lab = f.get("label") or f"T{f.get('position')}"
            if lab not in controls:
                controls[lab] = {"role": f.get("role"), "passed": False, "steps": [step],
                                 "failures": [_failure_text(step, where, f)]}

    samples: dict[str, Any] = {}
    verdict_table: dict[str, dict[str, str]] = {}
    for label in sorted(sample_steps):
        per_step = sample_steps[label]
        verdicts: dict[str, str] = {}
        step_why: dict[str, str] = {}
        for step in step_names:
            if step in per_step:
                verdicts[step], step_why[step] = _combine_step(per_step[step])
        verdict_table[label] = dict(verdicts)
        for st in scheme.steps:
            if st.name not in verdicts:
                continue
            for dep, need in st.requires:
                got = verdicts.get(dep)
                if got in ("positive", "negative") and got != need:
                    warnings.append(f"sample {label!r}: step {st.name} was run although {dep} was {got} "
                                    f"(it runs only when {dep} is {need})")
        calls: dict[str, str] = {}
        reasons: list[str] = []
        for ac in scheme.calls:
            holding = [r for r in ac.rules if all(verdicts.get(s) == v for s, v in r.when)]
            outcomes = {r.call for r in holding}
            if len(outcomes) == 1:
                calls[ac.analyte] = outcomes.pop()
                r = holding[0]
                steps_txt = ", ".join(f"{s} {v}" for s, v in r.when)
                reasons.append(f"{ac.analyte} {calls[ac.analyte]}: {r.reason} ({steps_txt})")
            elif len(outcomes) > 1:
                calls[ac.analyte] = "inconclusive"
                reasons.append(f"{ac.analyte} inconclusive: the steps disagree ("
                               + "; ".join(f"{r.call}: {r.reason}" for r in holding) + ")")
            else:
                calls[ac.analyte] = "inconclusive"
                gaps = []
                for s in ac.steps:
                    if s not in verdicts:
                        gaps.append(f"step {s} missing")
                    elif verdicts[s] == "inconclusive":
                        gaps.append(f"step {s} inconclusive ({step_why.get(s) or 'judged inconclusive'})")
                reasons.append(f"{ac.analyte} inconclusive: " + ("; ".join(gaps) if gaps
                                                                  else "no rule of the scheme fits these verdicts"))
        for s, why in step_why.items():
            if why and verdicts[s] != "inconclusive":
                reasons.append(f"step {s} {verdicts[s]}{why}")
        samples[label] = {"calls": calls, "reasons": reasons}

    if not samples:
        warnings.append("no labelled samples in the records")
    out_controls = {lab: {"passed": c["passed"], "failures": c["failures"], "role": c["role"],
                          "steps": list(dict.fromkeys(c["steps"]))} for lab, c in controls.items()}
    return {
        "schema": CONCLUSION_SCHEMA_ID,
        "scheme": scheme.name,
        "scheme_sha256": scheme.sha256,
        "samples": samples,
        "controls": out_controls,
        "steps": verdict_table,
        "warnings": list(dict.fromkeys(warnings)),
    }


def conclusion_text(conclusion: dict) -> str:
    """A plain-text summary of a conclusion, for the terminal."""
    lines = [f"scheme {conclusion.get('scheme')}"]
    for label, s in conclusion.get("samples", {}).items():
        calls = ", ".join(f"{a} {c}" for a, c in s.get("calls", {}).items())
        lines.append(f"sample {label}: {calls}")
        lines.extend(f"  - {r}" for r in s.get("reasons", []))
    for label, c in conclusion.get("controls", {}).items():
        lines.append(f"{c.get('role', 'control')} {label}: {'passed' if c.get('passed') else 'FAILED'}")
        lines.extend(f"  - {f}" for f in c.get("failures", []))
    lines.extend(f"warning: {w}" for w in conclusion.get("warnings", []))
    return "\n".join(lines) + "\n"
