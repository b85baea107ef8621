"""Session report: the conclusion per sample with its evidence chain back to each photo (issue 9).

Kinds of test (STYLE.md §6): *synthetic data with a known answer*: two
hand-made records of an invented water-treatment QC bench (two steps of the
group I scheme) and a hand-made conclusion; the page must trace every call
back to each photo (file, SHA-256) and tube (id, verdict, evidence).
"""

from __future__ import annotations

import hashlib
from html.parser import HTMLParser

import pytest

from tubevision.errors import TubevisionInputError
from tubevision.record.session import evidence_chain, render_session_report

from ._htmltable import read_text
from ._records import PHOTO_BYTES, PHOTO_SHA256, make_record

SHA2 = hashlib.sha256(PHOTO_BYTES[::-1]).hexdigest()


def _records():
    r1 = make_record()
    r2 = make_record(scheme={"name": "group1", "step": "hot-water-extraction"},
                     image={"file": "bench-k7-hot.jpg", "sha256": SHA2, "width": 4032, "height": 3024,
                            "captured_at": "2026-05-04T11:02:00"})
    r2["tubes"][0]["step_outcome"] = {"verdict": "negative", "meaning": "the solid did not dissolve",
                                      "evidence": "pellet 2.0 mm after hot water"}
    return [r1, r2]


CONCLUSION = {
    "schema": "tubevision.conclusion/1", "scheme": "group1",
    "samples": {"K-7": {"calls": {"Ag+": "present", "Pb2+": "absent", "Hg2^2+": "inconclusive"},
                        "reasons": ["white solid after chloride; it stayed in hot water"]}},
    "controls": {"control": {"passed": False, "failures": ["expected a white solid at chloride-precipitation"]}},
    "steps": {"K-7": {"chloride-precipitation": "positive", "hot-water-extraction": "negative"}},
    "scheme_sha256": "e" * 64,
    "warnings": ["step ammonia-treatment not photographed"],
}


class _ChainReader(HTMLParser):
    """Rows of the evidence chain tables: (sample or control, photo sha, tube, verdict text)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.rows, self._owner, self._row, self._cells, self._cell = [], None, None, [], None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "article":
            self._owner = a.get("data-sample") or a.get("data-control")
        if tag == "tr" and "data-tube" in a:
            self._row = (self._owner, a["data-photo-sha256"], a["data-tube"])
            self._cells = []
        if self._row and tag == "td":
            self._cell = []

    def handle_endtag(self, tag):
        if self._row and tag == "td":
            self._cells.append(" ".join("".join(self._cell).split()))
            self._cell = None
        if self._row and tag == "tr":
            self.rows.append((*self._row, self._cells))
            self._row = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def test_each_sample_traces_back_to_every_photo_and_tube():
    recs = _records()
    page = render_session_report(recs, CONCLUSION)
    reader = _ChainReader()
    reader.feed(page)
    k7 = [r for r in reader.rows if r[0] == "K-7"]
    assert [(r[1], r[2]) for r in k7] == [(PHOTO_SHA256, "T1"), (SHA2, "T1")]
    steps = [r[3][0] for r in k7]
    assert steps == ["chloride-precipitation", "hot-water-extraction"]
    assert "bench-k7.jpg" in k7[0][3][1] and PHOTO_SHA256 in k7[0][3][1]
    assert "positive" in k7[0][3][5] and "turbidity 0.4213 >= 0.15" in k7[0][3][5]
    assert "negative" in k7[1][3][5] and "pellet 2.0 mm after hot water" in k7[1][3][5]
    controls = [r for r in reader.rows if r[0] == "control"]
    assert [(r[1], r[2]) for r in controls] == [(PHOTO_SHA256, "T2"), (SHA2, "T2")]


def test_calls_reasons_controls_and_warnings_are_shown():
    text = read_text(render_session_report(_records(), CONCLUSION)).text
    for needle in ("Ag+ present", "Pb2+ absent", "Hg2^2+ inconclusive",
                   "white solid after chloride; it stayed in hot water", "control: failed",
                   "expected a white solid at chloride-precipitation",
                   "Conclusion: step ammonia-treatment not photographed",
                   "bench-k7.jpg T2: meniscus glare on 4 % of the column",
                   "Step verdicts, all photos combined: chloride-precipitation positive",
                   "hot-water-extraction negative", "scheme SHA-256 " + "e" * 64):
        assert needle in text, needle


def test_session_report_carries_safety_cautions_and_provenance():
    text = read_text(render_session_report(_records(), CONCLUSION)).text.lower()
    for word in ("mercury", "lead", "chromium(vi)", "strong acids", "ammonia", "safety data sheet",
                 "licensed practice", SHA2, "examplecam z 10", "2026-05-04t11:02:00"):
        assert word in text, word


def test_evidence_chain_lists_only_the_labelled_tubes():
    chain = evidence_chain(_records(), "control")
    assert [(c["photo"], c["tube"], c["verdict"]) for c in chain] == [
        ("bench-k7.jpg", "T2", "negative"), ("bench-k7-hot.jpg", "T2", "negative")]
    assert evidence_chain(_records(), "nobody") == []


def test_hostile_sample_label_and_reasons_are_escaped():
    recs = _records()
    bad = '<script>alert(1)</script>"K-7'
    for r in recs:
        r["tubes"][0]["label"] = bad
    concl = {"scheme": "<b>g</b>", "samples": {bad: {"calls": {"<i>Ag+</i>": "present"},
                                                      "reasons": ["<img src=x onerror=alert(1)>"]}}}
    page = render_session_report(recs, concl)
    assert "<script" not in page and "<img" not in page and "<b>g</b>" not in page
    text = read_text(page).text
    assert bad in text and "<img src=x onerror=alert(1)>" in text
    reader = _ChainReader()
    reader.feed(page)
    assert [r[0] for r in reader.rows if r[2] == "T1"] == [bad, bad]


def test_sample_without_tubes_says_so():
    concl = {"samples": {"K-11": {"calls": {}, "reasons": []}}}
    text = read_text(render_session_report(_records(), concl)).text
    assert "No photo has a tube labelled K-11." in text and "no calls" in text


@pytest.mark.parametrize("records, conclusion, match", [
    ([], {"samples": {}}, "at least one evidence record"),
    ([{"tubes": None}], {"samples": {}}, "record 1 is not an evidence record"),
    ([make_record()], {"samples": []}, "'samples' object"),
    ([make_record()], None, "'samples' object"),
])
def test_bad_input_is_refused_with_a_message(records, conclusion, match):
    with pytest.raises(TubevisionInputError, match=match):
        render_session_report(records, conclusion)


def test_photo_list_gives_each_records_json_hash():
    from tubevision.record.build import to_json

    recs = _records()
    text = read_text(render_session_report(recs, CONCLUSION)).text
    for r in recs:
        assert hashlib.sha256(to_json(r).encode("utf-8")).hexdigest() in text


def test_writer_refuses_an_existing_file(tmp_path):
    from tubevision.record.session import write_session_report

    target = tmp_path / "session.html"
    write_session_report(target, _records(), CONCLUSION)
    first = target.read_text()
    with pytest.raises(TubevisionInputError, match="already exists"):
        write_session_report(target, _records(), {"samples": {}})
    assert target.read_text() == first
    write_session_report(target, _records(), {"samples": {}}, overwrite=True)
    assert target.read_text() != first


def test_overview_matrix_gives_every_call():
    page = render_session_report(_records(), CONCLUSION)
    table = page.split('<table id="calls">', 1)[1].split("</table>", 1)[0]
    text = read_text(table).text
    assert text == "Sample Ag+ Pb2+ Hg2^2+ K-7 present absent inconclusive"
