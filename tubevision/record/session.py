"""The session report: one page for the photos of several steps of a scheme.

It shows the conclusion per labelled sample (the calls ``tubevision
conclude`` made, with their reasons) and, under each sample, the chain of
evidence that led there: for every photo (file and SHA-256) the step it
recorded and each tube that carried the sample's label, with the tube's
state, verdict, meaning and evidence. Controls, warnings, the photos'
provenance and the safety cautions follow. Like :mod:`.report`, the page is
self-contained HTML with every text escaped.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from ..errors import TubevisionInputError
from ._html import (code, command_text, esc, fmt_num, get, page, safety_section, swatch, verdict_badge,
                    warnings_list)
from .report import record_text_sha256
from .write import atomic_write_text

__all__ = ["render_session_report", "evidence_chain", "write_session_report"]

NO_CALLS = '<tr><td colspan="2" class="missing">no calls</td></tr>'
"""What a sample without calls shows."""
MISSING = '<span class="missing">—</span>'
"""What an empty cell shows."""

_CALL_CLASSES = {"present": "c-present", "absent": "c-absent", "inconclusive": "c-inconclusive"}
"""CSS class per contract call word (the word itself is always shown too)."""


def _check(records: Any, conclusion: Any) -> None:
    if not isinstance(records, (list, tuple)) or not records:
        raise TubevisionInputError("session report: give at least one evidence record")
    for i, rec in enumerate(records, 1):
        if not isinstance(rec, dict) or not isinstance(rec.get("tubes"), list):
            raise TubevisionInputError(
                f"session report: record {i} is not an evidence record with a 'tubes' list")
    if not isinstance(conclusion, dict) or not isinstance(conclusion.get("samples", {}), dict):
        raise TubevisionInputError("session report: the conclusion must be an object with a 'samples' object")


def evidence_chain(records: list[dict], label: str) -> list[dict[str, Any]]:
    """Every tube labelled ``label`` across the records, in record order.

    Parameters
    ----------
    records : list of dict — evidence records, one per photo (step).
    label : str — the sample or control label as the records give it.

    Returns
    -------
    list of dict — ``{"photo", "photo_sha256", "step", "tube", "state", "verdict",
    "meaning", "evidence", "record_index"}``, one per matching tube.
    """
    chain = []
    for k, rec in enumerate(records):
        for tube in rec.get("tubes") or []:
            if isinstance(tube, dict) and tube.get("label") == label:
                chain.append({
                    "record_index": k,
                    "photo": get(rec, "image", "file"), "photo_sha256": get(rec, "image", "sha256"),
                    "step": get(rec, "scheme", "step"), "tube": tube.get("id"),
                    "state": tube.get("state"), "confidence": tube.get("confidence"),
                    "liquid_lab": get(tube, "liquid", "lab"),
                    "colour_name": get(tube, "liquid", "colour_name"),
                    "pellet": get(tube, "pellet", "present"),
                    "pellet_colour_name": get(tube, "pellet", "colour_name"),
                    "verdict": get(tube, "step_outcome", "verdict"),
                    "meaning": get(tube, "step_outcome", "meaning"),
                    "evidence": get(tube, "step_outcome", "evidence"),
                })
    return chain


def _chain_table(chain: list[dict[str, Any]], label: str) -> str:
    if not chain:
        return f'<p class="missing">No photo has a tube labelled {esc(label)}.</p>'
    rows = []
    for c in chain:
        obs = esc(c["state"] or "")
        if c["colour_name"]:
            obs = f'{swatch(c["liquid_lab"], "liquid")} {esc(c["colour_name"])}, {obs}'
        if c["pellet"]:
            obs += ", solid" + (f" ({esc(c['pellet_colour_name'])})" if c["pellet_colour_name"] else "")
        why = (f"<div>{esc(c['meaning'])}</div>" if c["meaning"] else "") + \
            (f'<div class="small">{esc(c["evidence"])}</div>' if c["evidence"] else "")
        rows.append(
            f'<tr data-photo-sha256="{esc(c["photo_sha256"])}" data-tube="{esc(c["tube"])}">'
            f'<td>{esc(c["step"]) or MISSING}</td>'
            f'<td>{esc(c["photo"])}<br><code class="small">{esc(c["photo_sha256"])}</code></td>'
            f'<td>{esc(c["tube"])}</td><td>{obs}</td>'
            f'<td class="num">{esc(fmt_num(c["confidence"]))}</td>'
            f"<td>{verdict_badge(c['verdict'])}{why}</td></tr>")
    return ('<div class="scroll"><table class="chain"><thead><tr><th>Step</th><th>Photo (SHA-256)</th>'
            "<th>Tube</th><th>Observed</th><th>Confidence</th><th>Verdict and evidence</th></tr></thead>"
            f"<tbody>{''.join(rows)}</tbody></table></div>")


def _samples(records: list[dict], conclusion: dict) -> str:
    samples = conclusion.get("samples") or {}
    if not samples:
        return ('<section id="samples"><h2>Samples</h2>'
                '<p class="missing">The conclusion names no samples.</p></section>')
    out = ['<section id="samples"><h2>Samples</h2>']
    for label, sample in samples.items():
        sample = sample if isinstance(sample, dict) else {}
        calls = sample.get("calls") if isinstance(sample.get("calls"), dict) else {}
        call_cells = "".join(
            f'<tr><th scope="row">{esc(ion)}</th><td><span class="{_CALL_CLASSES.get(str(call), "")}" '
            f'data-ion="{esc(ion)}">{esc(call)}</span></td></tr>' for ion, call in calls.items())
        reasons = sample.get("reasons") if isinstance(sample.get("reasons"), list) else []
        out.append(f'<article class="sample" data-sample="{esc(label)}"><h3>{esc(label)}</h3>')
        out.append('<table class="calls"><thead><tr><th>Ion</th><th>Call</th></tr></thead>'
                   f"<tbody>{call_cells or NO_CALLS}</tbody></table>")
        if reasons:
            out.append("<ul class=\"reasons\">" + "".join(f"<li>{esc(r)}</li>" for r in reasons) + "</ul>")
        steps = get(conclusion, "steps", label)
        if isinstance(steps, dict) and steps:
            out.append('<p class="step-verdicts">Step verdicts, all photos combined: ' + "; ".join(
                f"{esc(st)} {verdict_badge(v)}" for st, v in steps.items()) + "</p>")
        out.append("<h4>Evidence chain</h4>" + _chain_table(evidence_chain(records, str(label)), str(label)))
        out.append("</article>")
    out.append("</section>")
    return "".join(out)


def _calls_of(sample: Any) -> dict[str, Any]:
    """A sample's calls as ion → call, tolerant of a malformed entry."""
    calls = sample.get("calls") if isinstance(sample, dict) else None
    return {str(k): v for k, v in calls.items()} if isinstance(calls, dict) else {}


def _overview(conclusion: dict) -> str:
    """Samples × ions matrix of calls, for reading the session at a glance."""
    samples = conclusion.get("samples") or {}
    ions: list[str] = []
    for sample in samples.values():
        ions += [i for i in _calls_of(sample) if i not in ions]
    if not samples or not ions:
        return ""
    head = "<tr><th>Sample</th>" + "".join(f"<th>{esc(i)}</th>" for i in ions) + "</tr>"
    rows = []
    for label, sample in samples.items():
        calls = _calls_of(sample)
        cells = "".join(f'<td><span class="{_CALL_CLASSES.get(str(calls.get(i)), "")}">'
                        f'{esc(calls.get(i, ""))}</span></td>' for i in ions)
        rows.append(f'<tr><th scope="row">{esc(label)}</th>{cells}</tr>')
    return ('<section id="overview"><h2>Calls at a glance</h2><div class="scroll"><table id="calls">'
            f"<thead>{head}</thead><tbody>{''.join(rows)}</tbody></table></div></section>")


def _controls(records: list[dict], conclusion: dict) -> str:
    controls = conclusion.get("controls") if isinstance(conclusion.get("controls"), dict) else {}
    if not controls:
        return ""
    out = ['<section id="controls"><h2>Controls</h2>']
    for label, c in controls.items():
        c = c if isinstance(c, dict) else {}
        passed = c.get("passed")
        word = "passed" if passed else ("failed" if passed is False else "not judged")
        cls = "ok" if passed else "notice"
        role = f" ({esc(c['role'])})" if c.get("role") and c.get("role") != label else ""
        out.append(f'<article class="control" data-control="{esc(label)}"><h3>{esc(label)}{role}: '
                   f'<span class="{cls}">{word}</span></h3>')
        fails = c.get("failures") if isinstance(c.get("failures"), list) else []
        if fails:
            out.append("<ul class=\"warnings\">" + "".join(f"<li>{esc(x)}</li>" for x in fails) + "</ul>")
        out.append(_chain_table(evidence_chain(records, str(label)), str(label)) + "</article>")
    out.append("</section>")
    return "".join(out)


def _photos(records: list[dict]) -> str:
    rows = []
    for k, rec in enumerate(records, 1):
        cal = get(rec, "calibration", "status")
        mean = get(rec, "calibration", "residual_de00", "mean")
        cal_text = "card" + (f", ΔE00 mean {fmt_num(mean)}" if mean is not None else "") if cal == "card" \
            else "uncalibrated"
        device = " ".join(str(v) for v in (get(rec, "provenance", "device", "make"),
                                           get(rec, "provenance", "device", "model")) if v)
        rows.append(
            f"<tr><td>{k}</td><td>{esc(get(rec, 'scheme', 'step'))}</td>"
            f"<td>{esc(get(rec, 'image', 'file'))}<br>{code(get(rec, 'image', 'sha256'))}</td>"
            f"<td>{esc(get(rec, 'image', 'captured_at'))}</td><td>{esc(device)}</td>"
            f"<td>{esc(get(rec, 'provenance', 'ran_at'))}</td><td>{esc(cal_text)}</td>"
            f'<td class="num">{len(rec.get("tubes") or [])}</td>'
            f"<td>{code(record_text_sha256(rec))}</td>"
            f"<td>{code(command_text(get(rec, 'provenance', 'command')))}</td></tr>")
    return ('<section id="photos"><h2>Photos and provenance</h2><div class="scroll"><table id="photo-list">'
            "<thead><tr><th>#</th><th>Step</th><th>Photo (SHA-256)</th><th>Captured</th><th>Camera</th>"
            "<th>Analysed</th><th>Calibration</th><th>Tubes</th><th>record.json SHA-256</th>"
            "<th>Command line</th></tr></thead>"
            f"<tbody>{''.join(rows)}</tbody></table></div></section>")


def _session_warnings(records: list[dict], conclusion: dict) -> list[tuple[str, str]]:
    items = [("Conclusion:", str(w)) for w in conclusion.get("warnings") or []]
    for rec in records:
        photo = get(rec, "image", "file") or "photo"
        items += [(f"{photo}:", str(w)) for w in rec.get("warnings") or []]
        for tube in rec.get("tubes") or []:
            if isinstance(tube, dict):
                items += [(f"{photo} {tube.get('id', '?')}:", str(w)) for w in tube.get("warnings") or []]
    return items


def render_session_report(records: list[dict], conclusion: dict) -> str:
    """The HTML report of a session: conclusion per sample with its evidence chain.

    Parameters
    ----------
    records : list of dict — the evidence records of the session's photos, in step order.
    conclusion : dict — what :func:`tubevision.scheme.conclude` returns (``tubevision.conclusion/1``).

    Returns
    -------
    str — a complete, self-contained HTML5 document.

    Raises
    ------
    TubevisionInputError
        No records, a record without a ``tubes`` list, or a conclusion without ``samples``.
    """
    _check(records, conclusion)
    records = list(records)
    scheme = conclusion.get("scheme") or get(records[0], "scheme", "name") or "scheme"
    title = f"Session evidence — {scheme}"
    steps = [str(s) for s in dict.fromkeys(get(r, "scheme", "step") for r in records) if s]
    body = [f"<header><h1>{esc(title)}</h1>",
            f'<p class="subtitle">{len(records)} photo(s)'
            + (f"; steps: {esc(', '.join(steps))}" if steps else "")
            + (f"; scheme SHA-256 {code(conclusion.get('scheme_sha256'))}" if conclusion.get("scheme_sha256")
               else "") + "</p></header>",
            '<p class="small">Calls are the tool\'s reading of the photos against the scheme; '
            "a person confirms them before they enter a notebook.</p>",
            _overview(conclusion), _samples(records, conclusion), _controls(records, conclusion),
            f'<section id="warnings"><h2>Warnings</h2>{warnings_list(_session_warnings(records, conclusion))}'
            "</section>",
            safety_section(), _photos(records)]
    sw = records[0].get("software") if isinstance(records[0].get("software"), dict) else {}
    body.append(f"<footer>Made by {esc(sw.get('name') or 'tubevision')} {esc(sw.get('version') or '')} "
                "from the evidence records listed above.</footer>")
    return page(title, "\n".join(body), meta={"generator": "tubevision"})


def write_session_report(path: str | os.PathLike, records: list[dict], conclusion: dict, *,
                         overwrite: bool = False) -> Path:
    """Render :func:`render_session_report` and write it atomically to ``path``.

    Raises
    ------
    TubevisionInputError
        ``path`` exists and ``overwrite`` is False, its folder is missing, or the
        records or conclusion are malformed.
    """
    return atomic_write_text(path, render_session_report(records, conclusion), overwrite=overwrite)
