"""tubes.csv: the record's numbers, one row per tube (issue 9).

Kinds of test (see STYLE.md §6): these are all *synthetic data with a known
answer*: the hand-made records in ``_records.py`` fix every value, and the
CSV must give those values back exactly. The file format is checked against
RFC 4180 through Python's ``csv`` reader (an independent parser).
"""

from __future__ import annotations

import csv
import io

import pytest

from tubevision.errors import TubevisionInputError
from tubevision.record.table import TUBES_CSV_COLUMNS, tubes_csv

from ._records import make_record


def _rows(text: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text, newline="")))


def _num(cell: str):
    return None if cell == "" else float(cell)


def test_every_tube_row_carries_the_record_values_exactly():
    rec = make_record()
    rows = _rows(tubes_csv(rec))
    assert len(rows) == len(rec["tubes"])
    for row, tube in zip(rows, rec["tubes"]):
        assert row["id"] == tube["id"] and int(row["index"]) == tube["index"] and int(row["row"]) == tube["row"]
        assert [int(row[k]) for k in ("bbox_x0", "bbox_y0", "bbox_x1", "bbox_y1")] == tube["bbox"]
        assert row["state"] == tube["state"]
        assert float(row["confidence"]) == tube["confidence"]
        lab = tube["liquid"]["lab"] or [None] * 3
        sd = tube["liquid"]["lab_sd"] or [None] * 3
        assert [_num(row[k]) for k in ("L", "a", "b")] == lab
        assert [_num(row[k]) for k in ("L_sd", "a_sd", "b_sd")] == sd
        assert (row["colour_name"] or None) == tube["liquid"]["colour_name"]
        assert _num(row["turbidity"]) == tube["liquid"]["turbidity"]
        assert row["pellet_present"] == ("true" if tube["pellet"]["present"] else "false")
        assert _num(row["pellet_height_mm"]) == tube["pellet"]["height_mm"]
        plab = tube["pellet"]["lab"] or [None] * 3
        assert [_num(row[k]) for k in ("pellet_L", "pellet_a", "pellet_b")] == plab
        assert (row["pellet_colour_name"] or None) == tube["pellet"]["colour_name"]
        assert (row["label"] or None) == tube["label"]
        outcome = tube["step_outcome"] or {}
        assert (row["verdict"] or None) == outcome.get("verdict")
        assert (row["role"] or None) == outcome.get("role")
        assert _num(row["verdict_confidence"]) == outcome.get("confidence")
        assert row["photo_sha256"] == rec["image"]["sha256"]


def test_hand_made_records_follow_the_record_schema():
    """The fixtures are contract records: the lead's JSON Schema accepts them."""
    from tubevision.record.build import validate_record

    validate_record(make_record())


def test_header_and_line_ends_follow_rfc4180():
    text = tubes_csv(make_record())
    header = text.split("\r\n", 1)[0]
    assert header.split(",") == list(TUBES_CSV_COLUMNS)
    assert text.endswith("\r\n") and "\n" not in text.replace("\r\n", "")


def test_label_with_comma_quote_and_newline_round_trips():
    rec = make_record()
    rec["tubes"][0]["label"] = 'K-7, "rinse"\nsecond line'
    rows = _rows(tubes_csv(rec))
    assert rows[0]["label"] == rec["tubes"][0]["label"]


def test_formula_like_text_is_neutralised_but_numbers_keep_their_sign():
    """OWASP "CSV Injection" (common practice): text starting with = + - @ gets an apostrophe."""
    rec = make_record()
    rec["tubes"][0]["label"] = '=HYPERLINK("http://example.invalid","x")'
    rec["tubes"][1]["label"] = "-sample K-9"
    rows = _rows(tubes_csv(rec))
    assert rows[0]["label"] == "'" + rec["tubes"][0]["label"]
    assert rows[1]["label"] == "'-sample K-9"
    assert rows[1]["a"] == "-3.75"


def test_missing_optional_keys_give_empty_cells():
    rec = make_record()
    tube = rec["tubes"][0]
    for k in ("turbidity_sd", "n_pixels"):
        tube["liquid"].pop(k)
    tube["pellet"].pop("height_mm_sd")
    del tube["warnings"]
    rec.pop("image")
    row = _rows(tubes_csv(rec))[0]
    assert row["turbidity_sd"] == "" and row["pellet_height_mm_sd"] == "" and row["photo_file"] == ""
    assert float(row["turbidity"]) == tube["liquid"]["turbidity"]


def test_no_tubes_gives_the_header_only():
    assert _rows(tubes_csv(make_record(tubes=[]))) == []


@pytest.mark.parametrize("bad", [None, {}, {"tubes": "T1"}, {"tubes": [1]}])
def test_bad_record_is_refused_with_a_message(bad):
    with pytest.raises(TubevisionInputError, match="record: "):
        tubes_csv(bad)
