"""``tubes.csv``: one row per tube, the record's own numbers, for spreadsheets and scripts.

The table repeats what ``record.json`` says, never a re-computed or
re-rounded value: numbers are written with Python's shortest round-trip
``repr``, so ``float(cell) == record value`` exactly. Missing values
(an empty tube's colour, a tube without a pellet) are empty cells.

Notes
-----
Format: RFC 4180 ("Common Format and MIME Type for Comma-Separated Values
(CSV) Files", 2005): comma-separated, a header row, fields with commas,
quotes or line breaks quoted, CRLF line ends. UTF-8 without a byte-order mark.

Text cells that a spreadsheet would run as a formula (starting with ``=``,
``+``, ``-``, ``@``, tab or carriage return) get a leading apostrophe,
following OWASP, "CSV Injection" (common practice). Only free text is
touched (labels, evidence, file names); numeric cells keep their sign.
"""

from __future__ import annotations

import csv
import io
from typing import Any

from ..errors import TubevisionInputError
from ._html import fmt_num, get

__all__ = ["TUBES_CSV_COLUMNS", "tubes_csv", "tube_row"]

TUBES_CSV_COLUMNS: tuple[str, ...] = (
    "id", "index", "row",
    "bbox_x0", "bbox_y0", "bbox_x1", "bbox_y1",
    "state", "confidence",
    "L", "a", "b", "L_sd", "a_sd", "b_sd",
    "colour_name", "turbidity", "turbidity_sd",
    "pellet_present", "pellet_height_mm", "pellet_height_mm_sd",
    "pellet_L", "pellet_a", "pellet_b", "pellet_colour_name",
    "label", "role", "verdict", "verdict_confidence", "meaning", "evidence",
    "photo_file", "photo_sha256",
)
"""Columns of ``tubes.csv``, in order. ``L, a, b`` are the liquid's CIELAB
(D65, 2°) and ``*_sd`` their standard deviations, as the record's
``liquid.lab`` / ``liquid.lab_sd``; ``bbox_*`` is the record's half-open
pixel box; ``role`` and ``verdict_confidence`` come from the scheme's
``step_outcome`` where it gives them; the photo columns let tables of
several photos be stacked."""

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
"""Leading characters that make spreadsheets evaluate a cell (OWASP, CSV Injection)."""


def _text(v: Any) -> str:
    if v is None:
        return ""
    s = str(v)
    return "'" + s if s.startswith(_FORMULA_START) else s


def _triple(v: Any) -> list[Any]:
    if isinstance(v, (list, tuple)) and len(v) == 3:
        return list(v)
    return [None, None, None]


def tube_row(tube: dict, image: dict | None = None) -> dict[str, str]:
    """One tube of a record as a CSV row (column name → cell text).

    Parameters
    ----------
    tube : dict — one entry of the record's ``tubes`` list (contract form).
    image : dict or None — the record's ``image`` block, for the photo columns.

    Returns
    -------
    dict — keys :data:`TUBES_CSV_COLUMNS`, values as written to the file.
    """
    bbox = tube.get("bbox") if isinstance(tube.get("bbox"), (list, tuple)) else None
    bbox = list(bbox) if bbox is not None and len(bbox) == 4 else [None] * 4
    lab = _triple(get(tube, "liquid", "lab"))
    sd = _triple(get(tube, "liquid", "lab_sd"))
    plab = _triple(get(tube, "pellet", "lab"))
    numbers = {
        "index": tube.get("index"), "row": tube.get("row"),
        "bbox_x0": bbox[0], "bbox_y0": bbox[1], "bbox_x1": bbox[2], "bbox_y1": bbox[3],
        "confidence": tube.get("confidence"),
        "L": lab[0], "a": lab[1], "b": lab[2], "L_sd": sd[0], "a_sd": sd[1], "b_sd": sd[2],
        "turbidity": get(tube, "liquid", "turbidity"),
        "turbidity_sd": get(tube, "liquid", "turbidity_sd"),
        "pellet_present": get(tube, "pellet", "present"),
        "pellet_height_mm": get(tube, "pellet", "height_mm"),
        "pellet_height_mm_sd": get(tube, "pellet", "height_mm_sd"),
        "pellet_L": plab[0], "pellet_a": plab[1], "pellet_b": plab[2],
        "verdict_confidence": get(tube, "step_outcome", "confidence"),
    }
    texts = {
        "id": tube.get("id"), "state": tube.get("state"),
        "colour_name": get(tube, "liquid", "colour_name"),
        "pellet_colour_name": get(tube, "pellet", "colour_name"),
        "label": tube.get("label"),
        "role": get(tube, "step_outcome", "role"),
        "verdict": get(tube, "step_outcome", "verdict"),
        "meaning": get(tube, "step_outcome", "meaning"),
        "evidence": get(tube, "step_outcome", "evidence"),
        "photo_file": get(image, "file"), "photo_sha256": get(image, "sha256"),
    }
    row = {k: fmt_num(v) for k, v in numbers.items()}
    row.update({k: _text(v) for k, v in texts.items()})
    return {k: row[k] for k in TUBES_CSV_COLUMNS}


def tubes_csv(record: dict) -> str:
    """``tubes.csv`` of one evidence record: a header and one row per tube.

    Parameters
    ----------
    record : dict — an evidence record (``tubevision.record/1``).

    Returns
    -------
    str — RFC 4180 CSV text (CRLF line ends); columns :data:`TUBES_CSV_COLUMNS`.

    Raises
    ------
    TubevisionInputError
        ``record`` is not a dict with a ``tubes`` list.

    Examples
    --------
    >>> rec = {"image": {"file": "k7.jpg", "sha256": "ab"}, "tubes": [
    ...     {"id": "T1", "index": 0, "row": 0, "bbox": [1, 2, 3, 4], "state": "clear",
    ...      "confidence": 0.9, "liquid": {"lab": [95.0, -0.5, 12.25],
    ...      "lab_sd": [0.4, 0.1, 0.2], "colour_name": "yellow", "turbidity": 0.01},
    ...      "pellet": {"present": False}, "label": "=sample K-7", "step_outcome": None}]}
    >>> lines = tubes_csv(rec).splitlines()
    >>> lines[1].split(",")[:12]
    ['T1', '0', '0', '1', '2', '3', '4', 'clear', '0.9', '95.0', '-0.5', '12.25']
    >>> lines[1].split(",")[TUBES_CSV_COLUMNS.index("label")]
    "'=sample K-7"
    """
    if not isinstance(record, dict) or not isinstance(record.get("tubes"), list):
        raise TubevisionInputError("record: expected an evidence record with a 'tubes' list")
    image = record.get("image") if isinstance(record.get("image"), dict) else None
    buf = io.StringIO(newline="")
    w = csv.DictWriter(buf, fieldnames=list(TUBES_CSV_COLUMNS), lineterminator="\r\n")
    w.writeheader()
    for tube in record["tubes"]:
        if not isinstance(tube, dict):
            raise TubevisionInputError("record: every entry of 'tubes' must be an object")
        w.writerow(tube_row(tube, image))
    return buf.getvalue()
