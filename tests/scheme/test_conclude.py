"""conclude(): step records of the group I scheme combined into calls per sample.

Kind 2 (synthetic cases with a known answer): hand-built records, not
photos. Each case's expected calls follow standard group I chemistry
(common practice; see tests/scheme/_group1.py): chloride precipitates all
three, hot water dissolves PbCl2 only, chromate gives yellow PbCrO4, ammonia
blackens Hg2Cl2 and dissolves AgCl, acid reprecipitates AgCl.
"""

from __future__ import annotations

import copy
import itertools
import json

import pytest

from tubevision.errors import TubevisionInputError
from tubevision.scheme import conclude, conclusion_text, validate_conclusion

from ._group1 import GROUP1, clear, photo_records, settled, WHITE, COLOURLESS

SUBSETS = [set(c) for r in range(4) for c in itertools.combinations(GROUP1, r)]


def _expected(ions: set[str]) -> dict[str, str]:
    return {ion: ("present" if ion in ions else "absent") for ion in GROUP1}


@pytest.mark.parametrize("ions", SUBSETS, ids=lambda s: "+".join(sorted(s)) or "none")
def test_every_subset_of_the_three_ions_is_called(ions):
    recs = photo_records({"K-7": ions})
    out = conclude(recs)
    validate_conclusion(out)
    assert out["schema"] == "tubevision.conclusion/1"
    assert out["scheme"] == "group1"
    assert out["samples"]["K-7"]["calls"] == _expected(ions)
    assert out["controls"]["control"]["passed"] is True
    assert out["controls"]["blank"]["passed"] is True
    assert len(out["samples"]["K-7"]["reasons"]) >= 3


def test_several_samples_on_one_rack():
    samples = {"K-7": {"Ag+"}, "K-8": {"Pb2+"}, "K-9": {"Hg2^2+"}, "K-10": set(), "K-11": {"Pb2+", "Ag+"},
               "K-12": set(GROUP1)}
    out = conclude(photo_records(samples))
    for name, ions in samples.items():
        assert out["samples"][name]["calls"] == _expected(ions), name


def test_pb_only_is_decided_without_the_ammonia_and_acid_steps():
    # PbCl2 dissolves entirely in hot water: no residue, so Ag+ and Hg2^2+ are absent
    # without the later steps (common practice).
    recs = photo_records({"K-8": {"Pb2+"}})
    assert [r["scheme"]["step"] for r in recs] == ["chloride-precipitation", "hot-water-extraction",
                                                   "chromate-test"]
    out = conclude(recs)
    assert out["samples"]["K-8"]["calls"] == {"Ag+": "absent", "Pb2+": "present", "Hg2^2+": "absent"}


def test_missing_step_leaves_its_analytes_inconclusive():
    recs = photo_records({"K-7": set(GROUP1)}, skip=("acidification",))
    out = conclude(recs)
    calls = out["samples"]["K-7"]["calls"]
    assert calls == {"Ag+": "inconclusive", "Pb2+": "present", "Hg2^2+": "present"}
    assert any("acidification missing" in r for r in out["samples"]["K-7"]["reasons"])


def test_only_the_first_step_gives_absent_for_a_negative_and_inconclusive_otherwise():
    recs = photo_records({"K-1": set(), "K-2": {"Ag+"}}, skip=("hot-water-extraction", "chromate-test",
                                                             "ammonia-treatment", "acidification"))
    out = conclude(recs)
    assert out["samples"]["K-1"]["calls"] == _expected(set())
    assert set(out["samples"]["K-2"]["calls"].values()) == {"inconclusive"}


def test_spoiled_control_makes_the_step_inconclusive_and_is_flagged():
    # The chromate reagent is spoiled: the control (which holds lead) shows only a
    # clear yellow solution, no PbCrO4.
    from ._group1 import CHROMATE_YELLOW

    spoiled = clear(0, CHROMATE_YELLOW, "yellow")
    recs = photo_records({"K-7": {"Pb2+", "Ag+"}}, spoil={"chromate-test": spoiled})
    chromate = next(r for r in recs if r["scheme"]["step"] == "chromate-test")
    assert chromate["scheme"]["control_failures"], "the failed control must be in the record"
    sample = next(t for t in chromate["tubes"] if t["label"] == "K-7")
    assert sample["step_outcome"]["verdict"] == "inconclusive"
    out = conclude(recs)
    calls = out["samples"]["K-7"]["calls"]
    assert calls["Pb2+"] == "inconclusive"
    assert calls["Ag+"] == "present" and calls["Hg2^2+"] == "absent"
    assert out["controls"]["control"]["passed"] is False
    assert any("chromate-test" in f for f in out["controls"]["control"]["failures"])
    assert out["controls"]["blank"]["passed"] is True


def test_spoiled_step_is_inconclusive_even_if_a_record_says_otherwise():
    # A record edited by hand (sample verdict left positive) still counts as spoiled.
    recs = photo_records({"K-7": {"Pb2+"}})
    chromate = next(r for r in recs if r["scheme"]["step"] == "chromate-test")
    chromate["scheme"]["control_failures"] = [{"position": 1, "label": "control", "role": "control",
                                               "expected": "positive", "observed": "negative",
                                               "reason": "clear yellow solution"}]
    for t in chromate["tubes"]:
        if t["label"] == "K-7":
            t["step_outcome"]["verdict"] = "positive"
    out = conclude(recs)
    assert out["samples"]["K-7"]["calls"]["Pb2+"] == "inconclusive"
    assert out["controls"]["control"]["passed"] is False


def test_a_good_repeat_of_a_spoiled_step_decides_it():
    from ._group1 import CHROMATE_YELLOW

    bad = photo_records({"K-7": {"Pb2+"}}, spoil={"chromate-test": clear(0, CHROMATE_YELLOW, "yellow")})
    good = photo_records({"K-7": {"Pb2+"}})
    repeat = next(r for r in good if r["scheme"]["step"] == "chromate-test")
    out = conclude(bad + [repeat])
    assert out["samples"]["K-7"]["calls"]["Pb2+"] == "present"
    assert out["controls"]["control"]["passed"] is False  # the failure stays on record


def test_disagreeing_photos_of_one_step_are_inconclusive():
    a = photo_records({"K-7": {"Pb2+"}})
    b = photo_records({"K-7": set()})
    chloride_b = next(r for r in b if r["scheme"]["step"] == "chloride-precipitation")
    out = conclude(a + [chloride_b])
    assert set(out["samples"]["K-7"]["calls"].values()) == {"inconclusive"}
    assert any("disagree" in r for r in out["samples"]["K-7"]["reasons"])


def test_contradicting_steps_are_inconclusive():
    # No residue after hot water, yet a black residue after ammonia: the rules that
    # hold disagree for Hg2^2+.
    recs = photo_records({"K-7": {"Hg2^2+"}})
    hot = next(r for r in recs if r["scheme"]["step"] == "hot-water-extraction")
    t = next(t for t in hot["tubes"] if t["label"] == "K-7")
    t["step_outcome"]["verdict"] = "negative"
    out = conclude(recs)
    assert out["samples"]["K-7"]["calls"]["Hg2^2+"] == "inconclusive"
    assert any("disagree" in r for r in out["samples"]["K-7"]["reasons"])


def test_step_run_out_of_turn_is_warned():
    recs = photo_records({"K-7": set()})
    extra = photo_records({"K-7": {"Pb2+"}})
    chromate = next(r for r in extra if r["scheme"]["step"] == "chromate-test")
    out = conclude(recs + [chromate])
    assert any("chromate-test was run although chloride-precipitation was negative" in w
               for w in out["warnings"])


def test_records_of_different_schemes_are_refused():
    recs = photo_records({"K-7": set()})
    other = copy.deepcopy(recs[0])
    other["scheme"]["name"] = "anions"
    other["scheme"]["source"] = "anions"
    with pytest.raises(TubevisionInputError, match="different schemes"):
        conclude(recs + [other])


def test_record_without_scheme_is_refused():
    rec = photo_records({"K-7": set()})[0]
    rec.pop("scheme")
    with pytest.raises(TubevisionInputError, match=r"record 1 \(bench-chloride-precipitation.jpg\) has no scheme"):
        conclude([rec])
    with pytest.raises(TubevisionInputError, match="no records"):
        conclude([])


def test_unknown_step_in_record_is_refused():
    rec = photo_records({"K-7": set()})[0]
    rec["scheme"]["step"] = "flame-test"
    with pytest.raises(TubevisionInputError, match="has no step 'flame-test'"):
        conclude([rec])


def test_changed_scheme_file_is_warned():
    recs = photo_records({"K-7": set()})
    for r in recs:
        r["scheme"]["sha256"] = "f" * 64
    out = conclude(recs)
    assert any("has changed since the records were made" in w for w in out["warnings"])


def test_hand_written_records_without_judge_step():
    # Plain dicts as a reader of the contract would write them (roles from labels).
    def rec(step, verdicts):
        tubes = []
        for i, (label, v) in enumerate(verdicts):
            tubes.append({"index": i, "label": label,
                          "step_outcome": {"verdict": v, "meaning": "m", "evidence": "e"}})
        return {"image": {"file": f"{step}.jpg"}, "tubes": tubes,
                "scheme": {"name": "group1", "step": step, "control_failures": []}}

    recs = [rec("chloride-precipitation", [("Control", "positive"), ("sample K-3", "positive"), ("Blank", "negative")]),
            rec("hot-water-extraction", [("Control", "positive"), ("sample K-3", "positive"), ("Blank", "negative")]),
            rec("chromate-test", [("Control", "positive"), ("sample K-3", "negative"), ("Blank", "negative")]),
            rec("ammonia-treatment", [("Control", "positive"), ("sample K-3", "positive"), ("Blank", "negative")]),
            rec("acidification", [("Control", "positive"), ("sample K-3", "negative"), ("Blank", "negative")])]
    out = conclude(recs)
    assert out["samples"]["sample K-3"]["calls"] == {"Ag+": "absent", "Pb2+": "absent", "Hg2^2+": "present"}
    assert set(out["controls"]) == {"Control", "Blank"}


def test_conclusion_is_json_and_has_a_text_form():
    out = conclude(photo_records({"K-7": {"Ag+"}}))
    validate_conclusion(out)
    text = json.dumps(out, allow_nan=False)
    assert "tubevision.conclusion/1" in text
    summary = conclusion_text(out)
    assert "sample K-7: Ag+ present, Pb2+ absent, Hg2^2+ absent" in summary


def test_inconclusive_step_reason_carries_the_photo_meaning():
    recs = photo_records({"K-7": {"Ag+"}})
    acid = next(r for r in recs if r["scheme"]["step"] == "acidification")
    t = next(t for t in acid["tubes"] if t["label"] == "K-7")
    t["step_outcome"]["verdict"] = "inconclusive"
    t["step_outcome"]["meaning"] = "inconclusive: state confidence 0.31 below 0.50"
    out = conclude(recs)
    assert out["samples"]["K-7"]["calls"]["Ag+"] == "inconclusive"
    assert any("acidification inconclusive (inconclusive: state confidence 0.31" in r
               for r in out["samples"]["K-7"]["reasons"])


def test_conclusion_schema_rejects_a_bad_call():
    out = conclude(photo_records({"K-7": {"Ag+"}}))
    out["samples"]["K-7"]["calls"]["Ag+"] = "maybe"
    with pytest.raises(TubevisionInputError, match="conclusion samples/K-7/calls/Ag\\+: 'maybe' is not one of"):
        validate_conclusion(out)


def test_control_hidden_by_the_light_backdrop_says_to_photograph_again():
    # The chloride step's control reads clear with its bottom in front of a light band only
    # (measure: light_solid_hidden): the control did not pass, and the conclusion's failure
    # text says to photograph again with a dark band behind the bottoms.
    import dataclasses

    hidden = dataclasses.replace(clear(0), light_solid_hidden=True)
    recs = photo_records({"K-7": {"Ag+"}}, spoil={"chloride-precipitation": hidden})
    out = conclude(recs)
    assert out["controls"]["control"]["passed"] is False
    assert any("photograph again with a dark band" in f for f in out["controls"]["control"]["failures"])
    assert out["samples"]["K-7"]["calls"]["Pb2+"] != "absent"
