"""``report.html``: the evidence of one photo as a page a person reads at a glance.

One self-contained HTML5 file: the annotated photo embedded as a ``data:``
URI (RFC 2397), the stylesheet inlined, no script, and a
Content-Security-Policy that forbids loading anything from outside, so the
page reads the same offline, in an archive or printed.

Sections, top to bottom: a summary line, the annotated photo, the tube
table (swatch, state, CIELAB with its SD, turbidity, pellet, verdict), the
calibration quality with a chart of each card patch's residual ΔE00, the
warnings, the safety cautions and the provenance (hashes, device, software,
command line).

The numbers shown are the record's own (see :func:`._html.fmt_num`); the
tube table marks each with ``data-key`` (the ``tubes.csv`` column name) so
a program can read the table back. The page also carries the SHA-256 of the
``record.json`` text it was made from and of the embedded annotated image in
``<meta>`` elements, which :func:`tubevision.record.verify.verify` checks.
"""

from __future__ import annotations

import hashlib
import math
from typing import Any

from ..errors import TubevisionInputError
from ._html import (code, command_text, dl, esc, fmt_num, get, page, png_data_uri,
                    safety_section, swatch, verdict_badge, warnings_list)
from .table import tube_row

__all__ = ["render_report", "record_text_sha256", "META_RECORD_SHA256", "META_ANNOTATED_SHA256",
           "META_PHOTO_SHA256"]

META_RECORD_SHA256 = "tubevision-record-sha256"
"""``<meta>`` name: SHA-256 of the ``record.json`` text the report was made from."""
META_ANNOTATED_SHA256 = "tubevision-annotated-sha256"
"""``<meta>`` name: SHA-256 of the annotated PNG embedded in the report."""
META_PHOTO_SHA256 = "tubevision-photo-sha256"
"""``<meta>`` name: the photo's SHA-256 as the record gives it."""

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
"""First eight bytes of every PNG file (ISO/IEC 15948:2004, section 5.2)."""

CHART_WIDTH_PX = 640
"""Width of the residual chart's drawing area (our layout choice; it scales down on screen)."""
CHART_HEIGHT_PX = 180
"""Height of the residual chart's bar area (our layout choice)."""


def record_text_sha256(record: dict) -> str | None:
    """SHA-256 (hex) of the record as ``record.json`` holds it, or None if it cannot be serialised.

    Uses the lead's serialiser :func:`tubevision.record.build.to_json`, the
    one that writes ``record.json``, so the hash matches that file.
    """
    from .build import to_json

    try:
        return hashlib.sha256(to_json(record).encode("utf-8")).hexdigest()
    except (TypeError, ValueError):
        return None


_DASH = '<span class="missing">—</span>'
"""What a cell without a value shows."""


def _keyed(key: str, text: str, *, value: str | None = None) -> str:
    """A value in a span the table reader finds by ``data-key``."""
    dv = "" if value is None else f' data-value="{esc(value)}"'
    return f'<span data-key="{esc(key)}"{dv}>{esc(text)}</span>'


def _with_sd(row: dict[str, str], key: str, sd_key: str | None) -> str:
    if row[key] == "":
        return _DASH
    out = _keyed(key, row[key])
    if sd_key and row[sd_key] != "":
        out += f'<br><span class="small">± {_keyed(sd_key, row[sd_key])}</span>'
    return out


def _tube_table(record: dict) -> str:
    image = record.get("image") if isinstance(record.get("image"), dict) else None
    head = ("<tr><th>Tube</th><th>Label</th><th>Row</th><th>Liquid colour</th><th>State</th>"
            "<th>Confidence</th><th>L*</th><th>a*</th><th>b*</th><th>Turbidity</th>"
            "<th>Pellet</th><th>Pellet height (mm)</th><th>Pellet colour</th>"
            "<th>Verdict, meaning and evidence</th></tr>")
    rows = []
    for tube in record["tubes"]:
        if not isinstance(tube, dict):
            raise TubevisionInputError("record: every entry of 'tubes' must be an object")
        r = tube_row(tube, image)
        liquid_name = r["colour_name"]
        liquid = (swatch(get(tube, "liquid", "lab"), f"liquid of {r['id']}") + " "
                  + (_keyed("colour_name", liquid_name) if liquid_name else _DASH))
        present = get(tube, "pellet", "present")
        pellet = _keyed("pellet_present", "yes" if present else ("no" if present is not None else "—"),
                        value=r["pellet_present"])
        pellet_colour = ""
        if present:
            pname = r["pellet_colour_name"]
            pellet_colour = (swatch(get(tube, "pellet", "lab"), f"pellet of {r['id']}") + " "
                             + (_keyed("pellet_colour_name", pname) if pname else ""))
        verdict = get(tube, "step_outcome", "verdict")
        verdict_cell = (f'<span data-key="verdict" data-value="{esc(r["verdict"])}">'
                        f"{verdict_badge(verdict)}</span>") if verdict else _DASH
        meaning = get(tube, "step_outcome", "meaning")
        evidence = get(tube, "step_outcome", "evidence")
        why = ""
        extra = []
        if r["role"]:
            extra.append("role " + _keyed("role", r["role"]))
        if r["verdict_confidence"]:
            extra.append("confidence " + _keyed("verdict_confidence", r["verdict_confidence"]))
        if extra:
            why += f'<div class="small">{", ".join(extra)}</div>'
        if meaning:
            why += f"<div>{esc(meaning)}</div>"
        if evidence:
            why += f'<div class="small">{esc(evidence)}</div>'
        label = tube.get("label")
        height = _with_sd(r, "pellet_height_mm", "pellet_height_mm_sd")
        cells = [
            f'<th scope="row">{_keyed("id", r["id"])}</th>',
            f"<td>{_keyed('label', str(label)) if label is not None else ''}</td>",
            f'<td class="num">{_keyed("row", r["row"])}</td>',
            f"<td>{liquid}</td>",
            f"<td>{_keyed('state', r['state'])}</td>",
            f'<td class="num">{_keyed("confidence", r["confidence"])}</td>',
            f'<td class="num">{_with_sd(r, "L", "L_sd")}</td>',
            f'<td class="num">{_with_sd(r, "a", "a_sd")}</td>',
            f'<td class="num">{_with_sd(r, "b", "b_sd")}</td>',
            f'<td class="num">{_with_sd(r, "turbidity", "turbidity_sd")}</td>',
            f"<td>{pellet}</td>",
            f'<td class="num">{height if present else ""}</td>',
            f"<td>{pellet_colour}</td>",
            f'<td class="why">{verdict_cell}{why}</td>',
        ]
        rows.append(f'<tr data-tube="{esc(r["id"])}">' + "".join(cells) + "</tr>")
    if not rows:
        body = '<tr><td colspan="14" class="missing">No tubes were found in this photo.</td></tr>'
    else:
        body = "".join(rows)
    return (
        '<section id="tubes-section"><h2>Tubes</h2>'
        '<p class="small">CIELAB (D65, 2° observer) of the liquid column, '
        "± one standard deviation over its pixels; rows count from 0, top first, as in the record. "
        "Swatches show the measured colour on screen (sRGB) and are only a guide.</p>"
        f'<div class="scroll"><table id="tubes"><thead>{head}</thead><tbody>{body}</tbody></table></div>'
        "</section>"
    )


def _finite(v: Any) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def residual_chart_svg(patches: list[dict], *, mean_de00: float | None = None) -> str:
    """Inline SVG bar chart of each card patch's residual ΔE00 after the fit.

    Parameters
    ----------
    patches : list of dict — ``{"id", "residual_de00", "used"}`` as the record's
        ``calibration.patches``; patches without a finite residual are drawn as gaps.
    mean_de00 : float or None — the record's mean residual, drawn as a dashed line.

    Returns
    -------
    str — an ``<svg>`` element (W3C SVG 1.1), all text escaped.
    """
    values = [_finite(p.get("residual_de00")) if isinstance(p, dict) else None for p in patches]
    top = max([v for v in values if v is not None] + [mean_de00 or 0.0, 1.0])
    top = float(math.ceil(top))
    n = max(len(patches), 1)
    left, bottom, pad_top = 40, 48, 10
    width, height = CHART_WIDTH_PX, CHART_HEIGHT_PX
    slot = (width - left - 10) / n
    bar_w = max(2.0, slot * 0.7)

    def y_of(v: float) -> float:
        return pad_top + height * (1.0 - v / top)

    parts = [f'<svg class="chart" xmlns="http://www.w3.org/2000/svg" role="img" '
             f'viewBox="0 0 {width} {height + pad_top + bottom}" width="{width}" '
             f'height="{height + pad_top + bottom}" aria-labelledby="chart-title">',
             '<title id="chart-title">Residual ΔE00 of each card patch after calibration</title>']
    step = 1.0 if top <= 6 else float(math.ceil(top / 6))
    tick = 0.0
    while tick <= top + 1e-9:
        y = y_of(tick)
        parts.append(f'<line x1="{left}" y1="{y:.1f}" x2="{width - 10}" y2="{y:.1f}" stroke="#ddd"/>')
        parts.append(f'<text x="{left - 6}" y="{y + 4:.1f}" text-anchor="end">{tick:g}</text>')
        tick += step
    parts.append(f'<text x="12" y="{pad_top + height / 2:.1f}" text-anchor="middle" '
                 f'transform="rotate(-90 12 {pad_top + height / 2:.1f})">ΔE00</text>')
    label_every = max(1, math.ceil(n / 24))
    for i, (p, v) in enumerate(zip(patches, values)):
        pid = str(p.get("id", i)) if isinstance(p, dict) else str(i)
        used = bool(p.get("used", True)) if isinstance(p, dict) else True
        x = left + i * slot + (slot - bar_w) / 2
        tip = f"{pid}: " + (f"ΔE00 {v:g}" if v is not None else "no residual") + \
              ("" if used else " (not used in the fit)")
        if v is not None:
            y = y_of(v)
            style = 'fill="#4a4a4a"' if used else 'fill="none" stroke="#8a4b00" stroke-dasharray="3 2"'
            parts.append(f'<rect x="{x:.1f}" y="{y:.1f}" width="{bar_w:.1f}" '
                         f'height="{pad_top + height - y:.1f}" {style}><title>{esc(tip)}</title></rect>')
        if i % label_every == 0:
            lx, ly = x + bar_w / 2, pad_top + height + 8
            parts.append(f'<text x="{lx:.1f}" y="{ly:.1f}" text-anchor="end" '
                         f'transform="rotate(-60 {lx:.1f} {ly:.1f})">{esc(pid)}</text>')
    parts.append(f'<line x1="{left}" y1="{pad_top + height}" x2="{width - 10}" '
                 f'y2="{pad_top + height}" stroke="#333"/>')
    if mean_de00 is not None:
        y = y_of(mean_de00)
        parts.append(f'<line x1="{left}" y1="{y:.1f}" x2="{width - 10}" y2="{y:.1f}" '
                     f'stroke="#0b5a8a" stroke-dasharray="6 3"/>')
    parts.append("</svg>")
    return "".join(parts)


def _calibration(record: dict) -> str:
    cal = record.get("calibration") if isinstance(record.get("calibration"), dict) else {}
    status = cal.get("status")
    out = ['<section id="calibration"><h2>Calibration</h2>']
    if status != "card":
        out.append('<p class="notice">Not calibrated against the reference card: colours assume a '
                   "plain sRGB camera (IEC 61966-2-1) and lengths in millimetres are not available. "
                   "Treat colour values as approximate.</p>")
    mean = _finite(get(cal, "residual_de00", "mean"))
    rows = [
        ("Status", status),
        ("Method", cal.get("method")),
        ("Residual ΔE00 over the card, mean", fmt_num(get(cal, "residual_de00", "mean"))),
        ("Residual ΔE00 over the card, max", fmt_num(get(cal, "residual_de00", "max"))),
        ("Leave-one-out ΔE00, median", fmt_num(cal.get("loo_de00_median"))),
        ("Scale (mm per pixel)", fmt_num(cal.get("mm_per_px"))),
    ]
    ref = cal.get("reference") if isinstance(cal.get("reference"), dict) else None
    if ref:
        rows.append(("Reference values", f"{ref.get('source') or ''} "
                     f"({ref.get('illuminant') or '?'} → {ref.get('adapted_to') or '?'})".strip()))
    out.append(dl([r for r in rows if r[1] not in (None, "") or r[0] == "Status"]))
    patches = cal.get("patches")
    if isinstance(patches, list) and patches:
        pats = [p for p in patches if isinstance(p, dict)]
        out.append("<figure>" + residual_chart_svg(pats, mean_de00=mean) +
                   '<figcaption>CIEDE2000 difference (CIE 015:2018; Sharma, Wu and Dalal 2005) between '
                   "each patch's reference value and its colour after correction. Filled bars: patches "
                   "used in the fit; dashed outlines: patches left out"
                   + (f"; dashed line: mean {mean:g}" if mean is not None else "")
                   + ".</figcaption></figure>")
        trs = "".join(
            f'<tr><td>{esc(p.get("id"))}</td><td class="num">{esc(fmt_num(p.get("residual_de00")))}</td>'
            f'<td>{"yes" if p.get("used", True) else "no"}</td></tr>' for p in pats)
        out.append("<details><summary>Residuals as numbers</summary>"
                   '<table id="patches"><thead><tr><th>Patch</th><th>ΔE00</th><th>Used</th></tr></thead>'
                   f"<tbody>{trs}</tbody></table></details>")
    elif status == "card":
        out.append('<p class="missing">Per-patch residuals are not in this record.</p>')
    out.append("</section>")
    return "".join(out)


def _legend() -> str:
    """The annotated image's colours in words, a swatch each (from the drawing's own table,
    :data:`tubevision.record.annotate.LEGEND`): the box colours by state, then the rest."""
    from .annotate import LEGEND, STATE_COLOURS

    def item(name, rgb):
        r, g, b = rgb
        return (f'<span class="swatch" role="img" aria-label="{esc(name)}" '
                f'style="background:#{r:02x}{g:02x}{b:02x}"></span> {esc(name)}')

    states = ", ".join(item(n, c) for n, c in LEGEND if n in STATE_COLOURS)
    rest = ", ".join(item(n, c) for n, c in LEGEND if n not in STATE_COLOURS)
    return f"box colour by state: {states}; outlined: {rest}"


def _all_warnings(record: dict) -> list[tuple[str, str]]:
    items: list[tuple[str, str]] = []
    for w in record.get("warnings") or []:
        items.append(("Photo:", str(w)))
    photo_level = {str(w) for w in record.get("warnings") or []}
    for w in get(record, "scheme", "warnings", default=[]) or []:
        if str(w) not in photo_level:      # the photo's warnings gather the step's already
            items.append(("Scheme:", str(w)))
    for tube in record.get("tubes") or []:
        if isinstance(tube, dict):
            tw = list(tube.get("warnings") or [])
            tw += list(get(tube, "step_outcome", "warnings", default=[]) or [])
            for w in dict.fromkeys(str(x) for x in tw):
                items.append((f"{tube.get('id', '?')}:", w))
    return items


def _control_failures(record: dict) -> list[str]:
    """One line per failed control, blank or standard, from the record's ``scheme`` block."""
    lines = []
    for c in get(record, "scheme", "control_failures", default=[]) or []:
        if isinstance(c, dict):
            who = " ".join(str(v) for v in (c.get("role"), repr(c.get("label")) if c.get("label") else None,
                                            f"(T{c['position']})" if c.get("position") is not None else None)
                           if v)
            lines.append(f"{who or 'a control'}: expected {c.get('expected') or '?'}, observed "
                         f"{c.get('observed') or '?'}" + (f"; {c['reason']}" if c.get("reason") else ""))
        else:
            lines.append(str(c))
    return lines


def _controls_notice(record: dict) -> str:
    fails = _control_failures(record)
    if not fails:
        return ""
    lis = "".join(f"<li>{esc(x)}</li>" for x in fails)
    return (f'<section id="control-failures" class="notice"><h2>Control failed</h2><p>The verdicts of this '
            f"photo cannot be relied on until this is resolved: check the reagents and the technique.</p>"
            f"<ul>{lis}</ul></section>")


def _hash_line(name: Any, digest: Any) -> str:
    if not name and not digest:
        return ""
    return f"{esc(name or '')} " + (f"<br>SHA-256 {code(digest)}" if digest else "")


def _provenance(record: dict, annotated_sha: str | None, record_sha: str | None) -> str:
    img = record.get("image") if isinstance(record.get("image"), dict) else {}
    prov = record.get("provenance") if isinstance(record.get("provenance"), dict) else {}
    sw = record.get("software") if isinstance(record.get("software"), dict) else {}
    deps = sw.get("dependencies")
    dep_text = ", ".join(f"{k} {v}" for k, v in deps.items()) if isinstance(deps, dict) else ""
    device = " ".join(str(v) for v in (get(prov, "device", "make"), get(prov, "device", "model")) if v)
    size = (f"{img.get('width')} × {img.get('height')} px" if img.get("width") and img.get("height") else "")
    scheme = record.get("scheme") if isinstance(record.get("scheme"), dict) else None
    scheme_file = (get(prov, "scheme", "file") or get(prov, "scheme", "name")
                   or get(scheme, "file") or get(scheme, "source"))
    scheme_sha = get(prov, "scheme", "sha256") or get(scheme, "sha256")
    rows: list[tuple[str, str]] = [
        ("Photo", esc(img.get("file"))),
        ("Photo SHA-256", code(img.get("sha256"))),
        ("Photo size", esc(size)),
        ("Photo format", esc(" ".join(str(v) for v in (img.get("format"),
                                                        f"{img.get('bit_depth')}-bit" if img.get("bit_depth")
                                                        else None) if v))),
        ("Captured at", esc(img.get("captured_at"))),
        ("Camera", esc(device)),
        ("Software", esc(" ".join(str(v) for v in (sw.get("name"), sw.get("version")) if v))),
        ("Libraries", esc(dep_text)),
        ("Scheme", esc(" — step ".join(str(v) for v in (get(scheme, "name"), get(scheme, "step")) if v))),
        ("Scheme file", _hash_line(scheme_file, scheme_sha)),
        ("Card reference", _hash_line(get(prov, "card_ref", "file"), get(prov, "card_ref", "sha256"))),
        ("Layout file", _hash_line(get(prov, "layout", "file"), get(prov, "layout", "sha256"))),
        ("Model file", _hash_line(get(prov, "model", "file"), get(prov, "model", "sha256"))),
        ("Command line", code(command_text(prov.get("command")))),
        ("Analysed at", esc(prov.get("ran_at"))),
        ("Settings digest", code(prov.get("settings_sha256"))),
        ("record.json SHA-256", code(record_sha)),
        ("Annotated image SHA-256", code(annotated_sha)),
    ]
    optional = {"Photo format", "Libraries", "Scheme file", "Layout file", "Model file",
                "Settings digest", "Card reference", "Annotated image SHA-256"}
    rows = [r for r in rows if r[1] or r[0] not in optional]
    return f'<section id="provenance"><h2>Provenance</h2>{dl(rows, raw=True)}</section>'


def _summary(record: dict) -> str:
    tubes = [t for t in record["tubes"] if isinstance(t, dict)]
    verdicts: dict[str, int] = {}
    for t in tubes:
        v = get(t, "step_outcome", "verdict")
        if v:
            verdicts[str(v)] = verdicts.get(str(v), 0) + 1
    cal = record.get("calibration") if isinstance(record.get("calibration"), dict) else {}
    cal_text = "card" if cal.get("status") == "card" else "none (uncalibrated)"
    mean, mx = get(cal, "residual_de00", "mean"), get(cal, "residual_de00", "max")
    if mean is not None:
        cal_text += f", ΔE00 mean {fmt_num(mean)} / max {fmt_num(mx)}"
    items = [("Tubes", str(len(tubes))), ("Calibration", cal_text),
             ("Warnings", str(len(_all_warnings(record))))]
    fails = _control_failures(record)
    if fails:
        items.append(("Controls", f"{len(fails)} failed"))
    if verdicts:
        items.append(("Verdicts", ", ".join(f"{n} {v}" for v, n in sorted(verdicts.items()))))
    return '<div class="summary">' + "".join(
        f'<div><span class="k">{esc(k)}</span>{esc(v)}</div>' for k, v in items) + "</div>"


def render_report(record: dict, annotated_png: bytes | None) -> str:
    """The HTML report of one photo's evidence record.

    Parameters
    ----------
    record : dict — an evidence record (``tubevision.record/1``); optional keys
        (``provenance``, ``scheme``, ``calibration.patches``, tube ``warnings``…)
        may be missing.
    annotated_png : bytes or None — the annotated image as PNG, embedded as a
        ``data:`` URI; ``None`` leaves the image out.

    Returns
    -------
    str — a complete, self-contained HTML5 document (UTF-8 text).

    Raises
    ------
    TubevisionInputError
        ``record`` has no ``tubes`` list, or ``annotated_png`` is not PNG data.
    """
    if not isinstance(record, dict) or not isinstance(record.get("tubes"), list):
        raise TubevisionInputError("record: expected an evidence record with a 'tubes' list")
    if annotated_png is not None:
        if (not isinstance(annotated_png, (bytes, bytearray))
                or not bytes(annotated_png).startswith(PNG_SIGNATURE)):
            raise TubevisionInputError("annotated image: expected PNG bytes")
        annotated_png = bytes(annotated_png)
    img = record.get("image") if isinstance(record.get("image"), dict) else {}
    annotated_sha = hashlib.sha256(annotated_png).hexdigest() if annotated_png else None
    record_sha = record_text_sha256(record)
    scheme = record.get("scheme") if isinstance(record.get("scheme"), dict) else None
    photo = img.get("file") or "photo"
    title = f"Tube evidence — {photo}"
    sub = []
    if scheme and scheme.get("name"):
        step = f", step {scheme.get('step')}" if scheme.get("step") else ""
        sub.append(f"scheme {scheme.get('name')}{step}")
    ran = get(record, "provenance", "ran_at")
    if ran:
        sub.append(f"analysed {ran}")
    body = [f"<header><h1>{esc(title)}</h1>",
            f'<p class="subtitle">{esc("; ".join(sub))}</p></header>' if sub else "</header>",
            _summary(record), _controls_notice(record)]
    if annotated_png:
        body.append('<section id="photo"><h2>Annotated photo</h2><figure>'
                    f'<img src="{png_data_uri(annotated_png)}" alt="{esc("Annotated photo " + str(photo))}">'
                    f"<figcaption>Boxes and ids mark the tubes as the tool found them ({_legend()}); "
                    "see the table for the measurements.</figcaption>"
                    "</figure></section>")
    body.append(_tube_table(record))
    body.append(_calibration(record))
    body.append(f'<section id="warnings"><h2>Warnings</h2>{warnings_list(_all_warnings(record))}</section>')
    body.append(safety_section())
    body.append(_provenance(record, annotated_sha, record_sha))
    sw = record.get("software") if isinstance(record.get("software"), dict) else {}
    body.append(f"<footer>Made by {esc(sw.get('name') or 'tubevision')} {esc(sw.get('version') or '')} "
                "from the evidence record; record.json holds the full data.</footer>")
    meta = {k: v for k, v in ((META_RECORD_SHA256, record_sha), (META_ANNOTATED_SHA256, annotated_sha),
                              (META_PHOTO_SHA256, img.get("sha256"))) if v}
    meta["generator"] = f"{sw.get('name') or 'tubevision'} {sw.get('version') or ''}".strip()
    return page(title, "\n".join(body), meta=meta)
