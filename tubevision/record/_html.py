"""Shared pieces of the HTML reports: escaping, number formatting, swatches, cautions.

Private to ``tubevision.record``: :mod:`.report` (one photo) and
:mod:`.session` (several steps) both build on it, so the two pages look
alike and say the same safety cautions.

Every piece of text that comes from a record (labels, file names, warnings,
evidence) passes through :func:`esc` (``html.escape`` with ``quote=True``),
so a hostile label cannot inject markup.
"""

from __future__ import annotations

import base64
import html
import math
import shlex
from functools import lru_cache
from importlib import resources
from typing import Any

__all__: list[str] = []  # private module

REPORT_CSS_FILE = "data/report_style.css"
"""The stylesheet inlined into every report (package data, our own design)."""

CONTENT_SECURITY_POLICY = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
"""Content-Security-Policy of the reports: nothing may load from outside the
file and no script may run, so a report stays self-contained and offline.
Directive syntax from W3C, "Content Security Policy Level 3" (Working Draft)."""

SAFETY_CAUTIONS: tuple[tuple[str, str], ...] = (
    ("Heavy-metal ions (including mercury and lead)",
     "Salts of mercury, lead, silver and similar metals are toxic, and some accumulate in the body "
     "or the environment. Wear the protection your local rules require, keep the solids and "
     "solutions out of drains, and collect them as hazardous waste as your site's procedures and "
     "the safety data sheets direct."),
    ("Chromate and dichromate (chromium(VI))",
     "Chromium(VI) compounds are carcinogenic, toxic and sensitising. Handle, store and dispose of "
     "them only as the safety data sheet, your local rules and licensed practice allow."),
    ("Strong acids",
     "Concentrated or hot acids cause severe burns and may give off corrosive fumes. Follow the "
     "safety data sheet and your laboratory's rules for eye, skin and fume protection."),
    ("Ammonia",
     "Ammonia solution is corrosive and its vapour irritates eyes and lungs; use ventilation as "
     "your local rules require. Do not let ammoniacal silver solutions stand or dry out; dispose "
     "of them promptly as the safety data sheets and your site's procedures direct."),
)
"""Cautions every report carries (heading, text). They defer to local rules,
safety data sheets and licensed practice; they replace none of them
(common practice of laboratory safety, worded for this tool)."""

SAFETY_PREAMBLE = ("This tool reads photos; it does not make bench work safe. The notes below are "
                   "reminders only: local rules, the safety data sheets of the chemicals you use and "
                   "licensed practice take precedence.")


def esc(text: Any) -> str:
    """HTML-escape any value's text (``None`` becomes an empty string)."""
    if text is None:
        return ""
    return html.escape(str(text), quote=True)


def fmt_num(v: Any) -> str:
    """A record number as text, exactly as the record holds it.

    ``None`` and non-finite values give ``""``; floats use Python's shortest
    round-trip ``repr`` so the report and the CSV show the record's own
    value, not a re-rounded one; booleans give ``true``/``false`` as JSON does.
    """
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ""
    return str(v)


def get(d: Any, *keys: Any, default: Any = None) -> Any:
    """``d[k0][k1]…`` tolerant of missing keys, ``None`` and wrong types."""
    cur = d
    for k in keys:
        if isinstance(cur, dict):
            cur = cur.get(k)
        elif isinstance(cur, (list, tuple)) and isinstance(k, int) and -len(cur) <= k < len(cur):
            cur = cur[k]
        else:
            return default
        if cur is None:
            return default
    return cur


def lab_hex(lab: Any) -> str | None:
    """``#rrggbb`` of a CIELAB D65/2° triple for display, or ``None``.

    Goes through :func:`tubevision.colorimetry.lab_to_srgb` (IEC 61966-2-1
    encoding, out-of-gamut values clipped for display only).
    """
    if not isinstance(lab, (list, tuple)) or len(lab) != 3:
        return None
    try:
        vals = [float(v) for v in lab]
    except (TypeError, ValueError):
        return None
    if not all(math.isfinite(v) for v in vals):
        return None
    import numpy as np

    from ..colorimetry import lab_to_srgb

    rgb = lab_to_srgb(np.array(vals, dtype=np.float64))
    r, g, b = (int(round(float(c) * 255.0)) for c in rgb)
    return f"#{r:02x}{g:02x}{b:02x}"


def swatch(lab: Any, what: str) -> str:
    """An inline colour swatch for a Lab triple, with its text alternative."""
    hx = lab_hex(lab)
    if hx is None:
        return '<span class="swatch none" role="img" aria-label="no colour measured"></span>'
    label = f"{what}: displayed as sRGB {hx}"
    return (f'<span class="swatch" role="img" style="background:{hx}" '
            f'title="{esc(label)}" aria-label="{esc(label)}"></span>')


@lru_cache(maxsize=1)
def css() -> str:
    """The report stylesheet (package data)."""
    return resources.files("tubevision").joinpath(REPORT_CSS_FILE).read_text("utf-8")


def png_data_uri(png: bytes) -> str:
    """A ``data:`` URI of PNG bytes (RFC 2397)."""
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def command_text(cmd: Any) -> str:
    """A command line as a person would type it (POSIX shell quoting)."""
    if isinstance(cmd, (list, tuple)):
        return shlex.join(str(c) for c in cmd)
    return "" if cmd is None else str(cmd)


def page(title: str, body: str, *, meta: dict[str, str] | None = None) -> str:
    """A whole self-contained HTML5 page around ``body`` (already escaped HTML)."""
    metas = "".join(f'<meta name="{esc(k)}" content="{esc(v)}">\n' for k, v in (meta or {}).items())
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f'<meta http-equiv="Content-Security-Policy" content="{esc(CONTENT_SECURITY_POLICY)}">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"{metas}<title>{esc(title)}</title>\n<style>\n{css()}</style>\n</head>\n"
        f"<body>\n{body}\n</body>\n</html>\n"
    )


def dl(rows: list[tuple[str, Any]], *, cls: str = "facts", raw: bool = False) -> str:
    """A definition list of (term, value); values escaped unless ``raw``."""
    items = []
    for term, value in rows:
        shown = value if raw else esc(value)
        if shown in ("", None):
            shown = '<span class="missing">not recorded</span>'
        items.append(f"<dt>{esc(term)}</dt><dd>{shown}</dd>")
    return f'<dl class="{cls}">' + "".join(items) + "</dl>"


def code(text: Any) -> str:
    """Escaped text in a ``<code>`` element, or empty for missing values."""
    return "" if text in (None, "") else f"<code>{esc(text)}</code>"


def safety_section() -> str:
    """The safety cautions as an HTML section."""
    items = "".join(f"<li><strong>{esc(h)}.</strong> {esc(t)}</li>" for h, t in SAFETY_CAUTIONS)
    return (f'<section id="safety" class="safety"><h2>Safety</h2><p>{esc(SAFETY_PREAMBLE)}</p>'
            f"<ul>{items}</ul></section>")


def warnings_list(items: list[tuple[str, str]]) -> str:
    """Warnings as a list of (where, text); a line saying none when empty."""
    if not items:
        return '<p class="ok">No warnings.</p>'
    lis = "".join(f"<li><span class=\"where\">{esc(w)}</span> {esc(t)}</li>" for w, t in items)
    return f'<ul class="warnings">{lis}</ul>'


VERDICT_CLASSES = {"positive": "v-pos", "negative": "v-neg", "inconclusive": "v-inc"}
"""CSS class per contract verdict word (the word itself is always shown too)."""


def verdict_badge(verdict: Any) -> str:
    """A verdict word in a styled span; empty for no verdict."""
    if verdict in (None, ""):
        return ""
    cls = VERDICT_CLASSES.get(str(verdict), "v-other")
    return f'<span class="badge {cls}">{esc(verdict)}</span>'
