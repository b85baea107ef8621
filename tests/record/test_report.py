"""report.html: one photo's evidence for a person, and readable back by a program (issue 9).

Kinds of test (STYLE.md §6):

* *Synthetic data with a known answer*: hand-made records (``_records.py``)
  whose every value is fixed; the report must show those values, agree with
  ``tubes.csv`` and escape hostile text.
* *Reference library as oracle*: the swatch colours are checked against
  colour-science 0.4.7 (``colour.Lab_to_XYZ`` then ``colour.XYZ_to_sRGB``),
  an implementation independent of ours.
"""

from __future__ import annotations

import base64
import csv
import hashlib
import io
import re

import numpy as np
import pytest

from tubevision.errors import TubevisionInputError
from tubevision.record.build import to_json
from tubevision.record.report import (META_ANNOTATED_SHA256, META_RECORD_SHA256, render_report,
                                      residual_chart_svg)
from tubevision.record.table import tubes_csv

from ._htmltable import read_text, read_tube_table
from ._records import PHOTO_SHA256, make_record, small_png

HOSTILE = '<script>alert("x")</script><img src=x onerror=alert(1)> & \'quoted\''


def _meta(tags, name):
    return next((a.get("content") for t, a in tags if t == "meta" and a.get("name") == name), None)


def test_table_agrees_with_record_and_csv_on_every_tube():
    rec = make_record()
    html_text = render_report(rec, small_png())
    table = read_tube_table(html_text).rows
    rows = list(csv.DictReader(io.StringIO(tubes_csv(rec), newline="")))
    assert [r["id"] for r in table] == [t["id"] for t in rec["tubes"]] == [r["id"] for r in rows]
    shared = ["id", "row", "state", "confidence", "L", "a", "b", "L_sd", "a_sd", "b_sd", "colour_name",
              "turbidity", "turbidity_sd", "pellet_present", "pellet_height_mm", "pellet_height_mm_sd",
              "pellet_colour_name", "label", "role", "verdict", "verdict_confidence"]
    for shown, row, tube in zip(table, rows, rec["tubes"]):
        for key in shared:
            assert shown.get(key, "") == row[key], (tube["id"], key)
        # and the numbers are the record's own, not re-rounded
        if tube["liquid"]["lab"] is not None:
            assert [float(shown[k]) for k in ("L", "a", "b")] == tube["liquid"]["lab"]
            assert float(shown["turbidity"]) == tube["liquid"]["turbidity"]
        assert float(shown["confidence"]) == tube["confidence"]
        if tube["pellet"]["present"]:
            assert float(shown["pellet_height_mm"]) == tube["pellet"]["height_mm"]


def test_swatches_match_colour_science_srgb_of_the_lab_values():
    """Oracle: colour-science 0.4.7 ``Lab_to_XYZ`` (D65, 2°) then ``XYZ_to_sRGB`` (IEC 61966-2-1).

    Tolerance one 8-bit code value: both sides round to 0..255, and the two
    libraries' D65 white points differ in the fifth decimal.
    """
    import colour

    rec = make_record()
    html_text = render_report(rec, small_png())
    styles = re.findall(r'class="swatch" role="img" style="background:#([0-9a-f]{6})"', html_text)
    labs = []
    for t in rec["tubes"]:
        if t["liquid"]["lab"] is not None:
            labs.append(t["liquid"]["lab"])
        if t["pellet"]["present"]:
            labs.append(t["pellet"]["lab"])
    # table order: per tube, liquid swatch then pellet swatch
    assert len(styles) == len(labs)
    d65 = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"]
    for hx, lab in zip(styles, labs):
        xyz = colour.Lab_to_XYZ(np.array(lab), d65)
        want = np.clip(colour.XYZ_to_sRGB(xyz, d65), 0, 1) * 255
        got = np.array([int(hx[i:i + 2], 16) for i in (0, 2, 4)])
        assert np.all(np.abs(got - want) <= 1.0), (lab, hx, want)


def test_hostile_text_is_escaped_everywhere():
    rec = make_record(warnings=[HOSTILE])
    rec["tubes"][0]["label"] = HOSTILE
    rec["tubes"][0]["step_outcome"]["evidence"] = HOSTILE
    rec["image"]["file"] = 'rack"><script>x()</script>.jpg'
    rec["provenance"]["command"] = ["tubevision", "analyze", HOSTILE]
    html_text = render_report(rec, small_png())
    assert "<script" not in html_text.lower()
    assert "<img src=x" not in html_text and "&lt;img src=x onerror=alert(1)&gt;" in html_text
    tags = [t for t, _ in read_text(html_text).tags]
    assert "script" not in tags and tags.count("img") == 1  # the one embedded annotated image
    assert read_tube_table(html_text).rows[0]["label"] == HOSTILE  # shown as text, unchanged
    assert HOSTILE in read_text(html_text).text


def test_safety_cautions_are_shown():
    text = read_text(render_report(make_record(), small_png())).text.lower()
    for word in ("mercury", "lead", "chromate", "chromium(vi)", "strong acids", "ammonia",
                 "safety data sheet", "local rules", "licensed practice"):
        assert word in text, word


def test_provenance_shows_hashes_device_software_and_command():
    rec = make_record()
    png = small_png()
    html_text = render_report(rec, png)
    text = read_text(html_text).text
    for needle in (PHOTO_SHA256, "2026-05-04T10:31:00", "ExampleCam Z 10", "tubevision 0.1.0",
                   "d" * 64, "c" * 64, "card-batch-3.cgats.txt", "2026-05-04T10:40:12+00:00",
                   "tubevision analyze bench-k7.jpg --scheme group1 --step chloride-precipitation "
                   "--labels 1=K-7,2=control", "group1 — step chloride-precipitation"):
        assert needle in text, needle
    tags = read_text(html_text).tags
    assert _meta(tags, META_RECORD_SHA256) == hashlib.sha256(to_json(rec).encode()).hexdigest()
    assert _meta(tags, META_ANNOTATED_SHA256) == hashlib.sha256(png).hexdigest()


def test_report_is_self_contained():
    png = small_png()
    html_text = render_report(make_record(), png)
    tags = read_text(html_text).tags
    for tag, attrs in tags:
        for key in ("src", "href", "srcset", "data", "action"):
            val = attrs.get(key)
            assert val is None or val.startswith(("data:", "#")), (tag, key, val)
        assert tag not in ("link", "script", "iframe", "object", "embed")
    csp = next(a["content"] for t, a in tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy")
    assert "default-src 'none'" in csp
    assert "url(" not in html_text.split("<style>", 1)[1].split("</style>", 1)[0]  # no fetched CSS
    img = next(a["src"] for t, a in tags if t == "img")
    assert base64.b64decode(img.split(",", 1)[1]) == png


def test_residual_chart_has_one_bar_per_patch_and_marks_unused_ones():
    rec = make_record()
    patches = rec["calibration"]["patches"]
    svg = residual_chart_svg(patches, mean_de00=0.91)
    rects = re.findall(r"<rect [^>]*>", svg)
    assert len(rects) == len(patches)
    dashed = [r for r in rects if "stroke-dasharray" in r]
    assert len(dashed) == sum(not p["used"] for p in patches) == 1
    # bar heights are proportional to the residuals (same scale for all bars)
    heights = [float(re.search(r'height="([0-9.]+)"', r).group(1)) for r in rects]
    ratio = np.array(heights) / np.array([p["residual_de00"] for p in patches])
    assert np.ptp(ratio) < 0.01 * ratio.mean() + 0.2


def test_uncalibrated_record_says_so():
    rec = make_record(calibration={"status": "none", "method": "none: sRGB (IEC 61966-2-1) assumed",
                                   "residual_de00": None, "mm_per_px": None})
    text = read_text(render_report(rec, small_png())).text
    assert "Not calibrated against the reference card" in text
    assert "<svg" not in render_report(rec, small_png())


def test_contract_minimum_without_optional_keys_renders():
    rec = make_record()
    for key in ("provenance", "scheme"):
        rec.pop(key)
    rec["calibration"].pop("patches")
    rec["software"].pop("dependencies")
    for t in rec["tubes"]:
        t.pop("warnings", None)
        t["liquid"].pop("turbidity_sd", None)
    html_text = render_report(rec, None)
    assert len(read_tube_table(html_text).rows) == 3
    assert "Per-patch residuals are not in this record" in read_text(html_text).text
    assert "<img" not in html_text


def test_warnings_from_photo_and_tubes_are_listed():
    text = read_text(render_report(make_record(), small_png())).text
    assert "Photo: card partly shaded" in text
    assert "T2: meniscus glare on 4 % of the column" in text
    assert "T1: pellet partly hidden by the rack clip" in text  # from the step outcome


def test_failed_control_is_shown_prominently():
    rec = make_record(scheme={"name": "group1", "step": "chloride-precipitation", "warnings": ["w1"],
                              "control_failures": [{"position": 2, "label": "control", "role": "control",
                                                    "expected": "white solid", "observed": "clear",
                                                    "reason": "turbidity 0.0125 < 0.15"}]})
    html_text = render_report(rec, None)
    text = read_text(html_text).text
    assert "Control failed" in text and "Controls 1 failed" in text
    assert "control 'control' (T2): expected white solid, observed clear; turbidity 0.0125 < 0.15" in text
    assert "Scheme: w1" in text
    assert html_text.index('id="control-failures"') < html_text.index('id="tubes"')
    assert "Control failed" not in read_text(render_report(make_record(), None)).text


def test_no_tubes_renders_a_clear_line():
    text = read_text(render_report(make_record(tubes=[]), small_png())).text
    assert "No tubes were found in this photo." in text


def test_bad_input_is_refused_with_a_message():
    with pytest.raises(TubevisionInputError, match="record: expected an evidence record"):
        render_report({"tubes": None}, small_png())
    with pytest.raises(TubevisionInputError, match="annotated image: expected PNG bytes"):
        render_report(make_record(), b"\xff\xd8 not a png")


def test_any_printable_label_round_trips_through_report_and_csv():
    """Property test (hypothesis, derandomized so the examples are fixed): the label the
    report shows and the CSV holds is the record's label, whatever characters it uses."""
    from hypothesis import given, settings
    from hypothesis import strategies as st

    labels = st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc")), min_size=1, max_size=40)

    @settings(derandomize=True, max_examples=60, deadline=None)
    @given(labels)
    def check(label):
        rec = make_record()
        rec["tubes"][0]["label"] = label
        shown = read_tube_table(render_report(rec, None)).rows[0]["label"]
        assert shown == label
        cell = next(csv.DictReader(io.StringIO(tubes_csv(rec), newline="")))["label"]
        assert cell == (("'" + label) if label[0] in "=+-@" else label)

    check()


def test_each_warning_once_and_the_image_colours_explained():
    """[synthetic] A step's warning that the photo's warnings already gather is listed once;
    the annotated photo's caption names what every colour of the drawing marks (the drawing's
    own table, tubevision.record.annotate.LEGEND)."""
    from tubevision.record.annotate import LEGEND

    step = "group1 step chloride-precipitation: T2 has its bottom in front of a light band only"
    rec = make_record(warnings=["card partly shaded", step],
                      scheme={"name": "group1", "step": "chloride-precipitation", "warnings": [step]})
    text = read_text(render_report(rec, small_png())).text
    assert text.count(step) == 1
    for name, _ in LEGEND:
        assert name in text, name
