"""The card's reference values: CGATS.17 text, nominal or measured.

The card's nominal values ship as ``tubevision/data/card_v1.cgats.txt`` (the
same file as ``calibration/card_v1.cgats.txt``); ``--card-ref`` gives the
values a spectrophotometer measured on the user's own print instead. Both
go through :func:`parse_cgats`. The reader is strict: it requires the
columns ``SAMPLE_ID LAB_L LAB_A LAB_B``, checks the declared field and set
counts, and that the sample ids are exactly the card's, and names the file
and line of any fault.

Values are CIELAB under D50 with the 2° observer, as ISO 13655 measures
print. :meth:`CardReference.lab_d65` adapts them to D65 with the Bradford
transform, the one named adaptation step (see :mod:`tubevision.colorimetry`).

References
----------
.. [1] ANSI CGATS.17-2009, Graphic technology - Exchange format for colour
   and process control data using XML or ASCII text.
.. [2] ISO 13655:2017, Graphic technology - Spectral measurement and
   colorimetric computation for graphic arts images.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import numpy as np

from ..colorimetry import WHITE_D50, WHITE_D65, adapt_bradford, lab_to_xyz, xyz_to_lab
from ..errors import TubevisionInputError
from .design import card_layout

__all__ = ["CardReference", "parse_cgats", "load_card_reference", "nominal_cgats_text",
           "NOMINAL_FILE"]

NOMINAL_FILE = "card_v1.cgats.txt"
"""Name of the nominal-values file in ``tubevision/data/`` and ``calibration/``."""

REQUIRED_FIELDS = ("SAMPLE_ID", "LAB_L", "LAB_A", "LAB_B")


@dataclass(frozen=True)
class CardReference:
    """Reference CIELAB of the card's patches.

    ``lab_d50`` is (N, 3), D50/2°, in the order of ``ids``; ``source`` says where the
    values came from; ``sha256`` is of the file's bytes.
    """

    ids: tuple[str, ...]
    lab_d50: np.ndarray
    source: str
    sha256: str
    illuminant: str = "D50"
    observer: str = "2"

    def lab_d65(self) -> np.ndarray:
        """The values adapted to D65 with the Bradford transform (ICC.1:2022 Annex E)."""
        xyz50 = lab_to_xyz(self.lab_d50, WHITE_D50)
        return xyz_to_lab(adapt_bradford(xyz50, WHITE_D50, WHITE_D65), WHITE_D65)

    def xyz_d65(self) -> np.ndarray:
        """CIE XYZ (D65, Y of white = 1) of the adapted values."""
        return lab_to_xyz(self.lab_d65(), WHITE_D65)


def _tokens(line: str) -> list[str]:
    out, cur, quoted = [], "", False
    for ch in line:
        if ch == '"':
            quoted = not quoted
            continue
        if ch.isspace() and not quoted:
            if cur:
                out.append(cur)
                cur = ""
            continue
        cur += ch
    if cur:
        out.append(cur)
    return out


def parse_cgats(text: str, *, where: str, expected_ids: tuple[str, ...] | None = None) -> CardReference:
    """Parse CGATS.17 text with ``SAMPLE_ID LAB_L LAB_A LAB_B`` columns.

    Parameters
    ----------
    text : the file's text.
    where : the file's name, for messages.
    expected_ids : the card's patch ids; the file must list exactly these.

    Raises
    ------
    TubevisionInputError
        ``card-ref file X line N: …`` for any fault.
    """
    lines = text.splitlines()

    def fail(lineno: int | None, what: str):
        at = f" line {lineno}" if lineno else ""
        raise TubevisionInputError(f"card-ref file {where}{at}: {what}")

    content = [(i + 1, ln.strip()) for i, ln in enumerate(lines)]
    content = [(n, ln) for n, ln in content if ln and not ln.startswith("#")]
    if not content:
        fail(None, "file is empty")
    fields: list[str] | None = None
    n_fields = n_sets = None
    rows: list[tuple[int, list[str]]] = []
    state = "header"
    format_line = None
    for n, ln in content[1:]:  # the first line is the file identifier (CGATS.17 §5.3)
        tok = _tokens(ln)
        key = tok[0].upper()
        if state == "header":
            if key == "BEGIN_DATA_FORMAT":
                state, fields, format_line = "format", [], n
            elif key == "BEGIN_DATA":
                fail(n, "BEGIN_DATA before BEGIN_DATA_FORMAT")
            elif key == "NUMBER_OF_FIELDS":
                n_fields = _count(tok, n, fail)
            elif key == "NUMBER_OF_SETS":
                n_sets = _count(tok, n, fail)
        elif state == "format":
            if key == "END_DATA_FORMAT":
                state = "between"
            else:
                fields.extend(t.upper() for t in tok)
        elif state == "between":
            if key == "BEGIN_DATA":
                state = "data"
            elif key == "NUMBER_OF_SETS":
                n_sets = _count(tok, n, fail)
            elif key == "NUMBER_OF_FIELDS":
                n_fields = _count(tok, n, fail)
        elif state == "data":
            if key == "END_DATA":
                state = "done"
            else:
                rows.append((n, tok))
    if fields is None:
        fail(None, "no BEGIN_DATA_FORMAT block")
    if state == "format":
        fail(format_line, "BEGIN_DATA_FORMAT without END_DATA_FORMAT")
    if state in ("header", "between"):
        fail(None, "no BEGIN_DATA block")
    if state == "data":
        fail(content[-1][0], "BEGIN_DATA without END_DATA")
    for f in REQUIRED_FIELDS:
        if f not in fields:
            fail(format_line, f"missing column {f}")
    if len(set(fields)) != len(fields):
        fail(format_line, "a column is named twice")
    if n_fields is not None and n_fields != len(fields):
        fail(format_line, f"NUMBER_OF_FIELDS is {n_fields} but the format lists {len(fields)} columns")
    if n_sets is not None and n_sets != len(rows):
        fail(None, f"NUMBER_OF_SETS is {n_sets} but the data block has {len(rows)} rows")
    col = {f: fields.index(f) for f in REQUIRED_FIELDS}
    ids: list[str] = []
    lab = []
    for n, tok in rows:
        if len(tok) != len(fields):
            fail(n, f"expected {len(fields)} values, found {len(tok)}")
        sid = tok[col["SAMPLE_ID"]]
        if sid in ids:
            fail(n, f"sample {sid} listed twice")
        try:
            v = [float(tok[col[f]]) for f in ("LAB_L", "LAB_A", "LAB_B")]
        except ValueError:
            fail(n, "LAB_L, LAB_A and LAB_B must be numbers")
        if not all(np.isfinite(v)) or not 0.0 <= v[0] <= 100.0 or abs(v[1]) > 200 or abs(v[2]) > 200:
            fail(n, f"value out of range for CIELAB: {v}")
        ids.append(sid)
        lab.append(v)
    if expected_ids is not None:
        missing = [i for i in expected_ids if i not in ids]
        unknown = [i for i in ids if i not in expected_ids]
        if unknown:
            n = rows[ids.index(unknown[0])][0]
            fail(n, f"sample {unknown[0]} is not a patch of this card")
        if missing:
            fail(None, f"missing samples {', '.join(missing[:5])}{'…' if len(missing) > 5 else ''}")
        order = [ids.index(i) for i in expected_ids]
        ids = list(expected_ids)
        lab = [lab[k] for k in order]
    return CardReference(tuple(ids), np.array(lab, dtype=np.float64), source=where,
                         sha256=hashlib.sha256(text.encode("utf-8")).hexdigest())


def _count(tok: list[str], n: int, fail) -> int:
    try:
        return int(tok[1])
    except (IndexError, ValueError):
        fail(n, f"{tok[0]} needs a whole number")


def nominal_cgats_text() -> str:
    """The card's nominal values as CGATS.17 text (what ``--card-ref`` reads)."""
    lay = card_layout()
    out = [
        "CGATS.17",
        'ORIGINATOR "tubevision"',
        f'DESCRIPTOR "tubevision reference card {lay.card_id} version {lay.version}: nominal values"',
        'KEYWORD "ILLUMINANT"',
        'ILLUMINANT "D50"',
        'KEYWORD "OBSERVER"',
        'OBSERVER "2"',
        '# Nominal CIELAB D50/2 of each patch: the design sRGB (IEC 61966-2-1) converted to',
        '# XYZ D65 and adapted to D50 with the Bradford transform (ICC.1:2022 Annex E).',
        '# A print differs by its printer and paper: measure your print (ISO 13655, M0 or M1)',
        '# and pass that file to --card-ref for the best calibration.',
        f"NUMBER_OF_FIELDS {len(REQUIRED_FIELDS)}",
        "BEGIN_DATA_FORMAT",
        " ".join(REQUIRED_FIELDS),
        "END_DATA_FORMAT",
        f"NUMBER_OF_SETS {len(lay.patches)}",
        "BEGIN_DATA",
    ]
    for p in lay.patches:
        L, a, b = p.lab_d50  # noqa: N806
        out.append(f"{p.id} {L:.2f} {a:.2f} {b:.2f}")
    out.append("END_DATA")
    return "\n".join(out) + "\n"


def load_card_reference(path: str | Path | None = None) -> CardReference:
    """Measured values from ``path`` (``--card-ref``), or the card's nominal values when None.

    Raises
    ------
    TubevisionInputError
        Missing or malformed file, or sample ids that are not the card's.
    """
    ids = card_layout().patch_ids
    if path is None:
        text = resources.files("tubevision").joinpath(f"data/{NOMINAL_FILE}").read_text("utf-8")
        ref = parse_cgats(text, where=f"nominal {NOMINAL_FILE}", expected_ids=ids)
        return ref
    p = Path(path)
    if not p.is_file():
        raise TubevisionInputError(f"card-ref file {p}: no such file")
    try:
        text = p.read_text("utf-8")
    except UnicodeDecodeError:
        raise TubevisionInputError(f"card-ref file {p}: not UTF-8 text") from None
    return parse_cgats(text, where=str(p), expected_ids=ids)
