"""judge_step(): verdicts per tube beside the positive control and the blank.

Kind 2 (synthetic cases with a known answer): hand-built observations whose
expected verdicts follow the chemistry written in the scheme files (standard
chemistry, common practice). ΔE00 evidence is checked against colour-science
as an independent oracle.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from tubevision.errors import TubevisionInputError
from tubevision.scheme import (TubeObservation, judge_step, load_scheme, observation_from,
                               observation_from_record, parse_labels)

from ._group1 import BLACK, CHROMATE_YELLOW, COLOURLESS, WHITE, YELLOW, clear, cloudy, record_for, settled

G1 = load_scheme("group1")
LABELS3 = parse_labels("1=control,2=unknown A,3=blank", 3)


def _verdicts(j):
    return {o.label: o.verdict for o in j.outcomes}


def test_chloride_step_positive_sample_with_good_controls():
    obs = [settled(0, *WHITE), settled(1, *WHITE, height_mm=0.9), clear(2)]
    j = judge_step(G1, "chloride-precipitation", obs, LABELS3)
    assert _verdicts(j) == {"control": "positive", "unknown A": "positive", "blank": "negative"}
    assert not j.control_failures
    sample = j.outcome_for(1)
    assert sample["meaning"] == "white precipitate: Ag+, Pb2+ or Hg2^2+ may be present"
    assert "pellet white 0.9 mm" in sample["evidence"]
    assert sample["quantities"]["pellet_height_mm"] == pytest.approx(0.9)
    assert j.outcome_for(0)["meaning"].startswith("positive control as expected")
    info = j.record_block()["step_info"]
    assert info["fraction"] == "precipitate" and info["reagent"].startswith("6 M HCl")
    assert any("corrosive" in h for h in info["hazards"]) and "safety data sheet" in info["safety"]


def test_chloride_step_negative_sample():
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), clear(1), clear(2)], LABELS3)
    assert _verdicts(j)["unknown A"] == "negative"
    assert "absent" in j.outcome_for(1)["meaning"]


def test_no_solid_seen_where_a_light_one_could_hide_is_inconclusive_not_negative():
    # A white solid against a light backdrop band reads like the liquid there (measure stage:
    # light_solid_hidden). With a white positive control beside it, "no precipitate" is then
    # not evidence of absence; the blank's own check is unchanged.
    import dataclasses

    hidden = dataclasses.replace(clear(1), light_solid_hidden=True)
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), hidden, clear(2)], LABELS3)
    assert _verdicts(j) == {"control": "positive", "unknown A": "inconclusive", "blank": "negative"}
    assert "light backdrop" in j.outcome_for(1)["meaning"]
    assert any("T2 has its bottom in front of a light band" in w for w in j.warnings)
    # a dark control solid would show against the light band: that reason does not apply
    j = judge_step(G1, "chloride-precipitation", [settled(0, *BLACK), hidden, clear(2)], LABELS3)
    assert "light backdrop" not in j.outcome_for(1)["meaning"]
    # the flag comes through the record too (observation_from_record)
    rec = {"index": 1, "state": "clear", "confidence": 0.9, "liquid": {"lab": [90, 0, 0]},
           "pellet": {"present": False, "light_solid_hidden": True}}
    assert observation_from_record(rec).light_solid_hidden


def test_spoiled_control_flags_the_step_and_samples_become_inconclusive():
    # The HCl has been replaced by water: the control (all three ions) stays clear.
    obs = [clear(0), settled(1, *WHITE), clear(2)]
    j = judge_step(G1, "chloride-precipitation", obs, LABELS3)
    assert j.control_failures, "a control that fails must flag the step (exit status 1)"
    f = j.control_failures[0]
    assert (f.position, f.label, f.role, f.expected, f.observed) == (1, "control", "control", "positive", "negative")
    assert _verdicts(j)["unknown A"] == "inconclusive"
    assert "controls failed" in j.outcome_for(1)["meaning"]
    assert any("check the reagent and the technique" in w for w in j.warnings)
    assert j.record_block()["control_failures"][0]["label"] == "control"


def test_control_whose_light_solid_could_not_show_blames_the_photo_not_the_reagent():
    # The control reads clear, but its bottom sat in front of a light band only (measure's
    # light_solid_hidden): the step still fails (exit 1, samples inconclusive), but the advice
    # is to photograph again with a dark band behind the bottoms, not to suspect the reagent.
    import dataclasses

    hidden = dataclasses.replace(clear(0), light_solid_hidden=True)
    j = judge_step(G1, "chloride-precipitation", [hidden, settled(1, *WHITE), clear(2)], LABELS3)
    assert j.failed and j.control_failures[0].cause == "photo"
    assert _verdicts(j)["unknown A"] == "inconclusive"
    assert any("dark band behind the tube bottoms" in w for w in j.warnings)
    assert not any("check the reagent" in w for w in j.warnings)
    assert j.record_block()["control_failures"][0]["cause"] == "photo"
    # without the flag, a clear control is the reagent's or technique's failure as before
    j = judge_step(G1, "chloride-precipitation", [clear(0), settled(1, *WHITE), clear(2)], LABELS3)
    assert j.control_failures[0].cause == "reagent or technique"
    # a step whose positive is a dark solid (ammonia: grey-black) gains nothing from the flag
    hidden = dataclasses.replace(clear(0), light_solid_hidden=True)
    j = judge_step(G1, "ammonia-treatment", [hidden, settled(1, *BLACK), clear(2)], LABELS3)
    assert j.failed and j.control_failures[0].cause == "reagent or technique"
    # ... but a bottom in front of a dark band only hides the black solid it looks for: the
    # advice is then a light band, and a sample's "no solid" there is inconclusive
    dark = dataclasses.replace(clear(0), dark_solid_hidden=True)
    j = judge_step(G1, "ammonia-treatment", [dark, settled(1, *BLACK), clear(2)], LABELS3)
    assert j.control_failures[0].cause == "photo" and "light band" in j.control_failures[0].advice
    assert j.retake_positions == (1,)
    j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), dataclasses.replace(clear(1), dark_solid_hidden=True),
                                              clear(2)], LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive" and not j.failed
    assert "dark band" in j.outcome_for(1)["meaning"]
    assert j.retake_positions == (2,)


def test_retake_asked_only_where_the_other_band_could_change_the_judgement():
    # The chloride step's positive names white and grey solids (silver chloride darkens in
    # light, common practice), but with a white solid in the control a bottom in front of a
    # dark band hides nothing the step could see: no retake for it. Moving the rack would put
    # the control's own white solid in front of a light band (the bench's retake pass lost
    # good steps that way). A bottom in front of a light band still asks for one.
    import dataclasses

    dark_blank = dataclasses.replace(clear(2), dark_solid_hidden=True)
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), settled(1, *WHITE), dark_blank], LABELS3)
    assert j.retake_positions == () and not any("photograph again" in w for w in j.warnings)
    light_blank = dataclasses.replace(clear(2), light_solid_hidden=True)
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), settled(1, *WHITE), light_blank], LABELS3)
    assert j.retake_positions == (3,)
    # a control failing because its light solid could not show: the retake is for it
    light_ctrl = dataclasses.replace(clear(0), light_solid_hidden=True)
    j = judge_step(G1, "chloride-precipitation", [light_ctrl, settled(1, *WHITE), clear(2)], LABELS3)
    assert j.retake_positions == (1,)
    # no positive control labelled: which shade the step's solid has is unknown, both count
    lab = parse_labels("2=unknown A,3=blank", 3)
    j = judge_step(G1, "chloride-precipitation", [clear(0), dark_blank, light_blank], lab)
    assert j.retake_positions == (2, 3)
    # acidification: the control is positive by its cloud, no solid to compare: no retake
    j = judge_step(G1, "acidification", [cloudy(0), dataclasses.replace(clear(1), light_solid_hidden=True),
                                         clear(2)], LABELS3)
    assert _verdicts(j)["unknown A"] == "negative" and j.retake_positions == ()
    # bottoms at a band edge (both flags: neither shade behind them) are moved by half a band,
    # since a whole band's move puts them at the next edge; one shade behind: a whole band
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), settled(1, *WHITE), light_blank], LABELS3)
    assert j.retake_shift_bands == 1.0
    edge = dataclasses.replace(light_blank, dark_solid_hidden=True)
    edge_sample = dataclasses.replace(clear(1), light_solid_hidden=True, dark_solid_hidden=True)
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), edge_sample, edge], LABELS3)
    assert j.retake_positions == (2, 3) and j.retake_shift_bands == 0.5
    assert any("half a band" in w for w in j.warnings)


def test_state_word_contradicted_by_the_measured_turbidity_is_not_judged():
    # The state word is a classifier's; the turbidity a physical measure of scattered light.
    # A spoiled control (the HCl replaced by water) whose clear liquid the classifier called
    # "cloudy" (white) while nothing scatters must not pass: the bench's photo pass let such
    # a control through. Clear-but-scattering is refused the same way.
    spoiled = cloudy(0, turbidity=0.0)
    j = judge_step(G1, "chloride-precipitation", [spoiled, settled(1, *WHITE), clear(2)], LABELS3)
    assert j.failed and j.control_failures[0].position == 1
    assert "no scattered light" in j.control_failures[0].reason
    assert _verdicts(j)["unknown A"] == "inconclusive"
    # a sample: "cloudy" without scattering is no precipitate, nor is it evidence of none
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), cloudy(1, turbidity=0.005), clear(2)], LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive" and not j.failed
    # "clear" over a liquid that scatters plainly (a faint cloud the classifier missed)
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), clear(1, turbidity=0.4), clear(2)], LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive"
    # a measured cloud, and a cloudy word over a settled solid, are judged as before
    j = judge_step(G1, "chloride-precipitation", [cloudy(0), cloudy(1, pellet=WHITE, turbidity=0.0), clear(2)],
                   LABELS3)
    assert _verdicts(j) == {"control": "positive", "unknown A": "positive", "blank": "negative"}
    # the margin is two standard uncertainties of the turbidity when it has one
    import dataclasses

    unsure = dataclasses.replace(cloudy(1, turbidity=0.01), turbidity_sd=0.02)
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), unsure, clear(2)], LABELS3)
    assert _verdicts(j)["unknown A"] == "positive"


def test_no_solid_stands_where_the_controls_solid_was_seen_against_the_same_band():
    # The chromate step's yellow solid (PbCrO4, common practice) shows its colour in front of
    # a light band, where a white one reads like the liquid. When the control's solid was
    # confirmed opaque there (measure: seen_over_light), a sample's bottom in front of a light
    # band hides nothing: its "no solid" is a negative, and no retake is asked for.
    import dataclasses

    chromate = clear(1, CHROMATE_YELLOW, "yellow")
    hidden = dataclasses.replace(chromate, light_solid_hidden=True)
    ctrl = settled(0, *YELLOW, liquid_lab=CHROMATE_YELLOW, liquid_name="yellow")
    blank = clear(2, CHROMATE_YELLOW, "yellow")
    j = judge_step(G1, "chromate-test", [ctrl, hidden, blank], LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive" and j.retake_positions == (2,)
    seen = dataclasses.replace(ctrl, pellet_seen_over_light=True)
    j = judge_step(G1, "chromate-test", [seen, hidden, blank], LABELS3)
    assert _verdicts(j)["unknown A"] == "negative" and j.retake_positions == ()
    # seen over a dark band says nothing about the light band
    j = judge_step(G1, "chromate-test", [dataclasses.replace(ctrl, pellet_seen_over_dark=True), hidden, blank],
                   LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive"
    # the flag comes from the measurement (observation_from) and the record
    m = SimpleNamespace(index=0, empty=False, liquid=SimpleNamespace(lab=CHROMATE_YELLOW, turbidity=0.0),
                        pellet=SimpleNamespace(present=True, height_mm=2.0, lab=YELLOW[1], seen_over_light=True))
    c = SimpleNamespace(state="settled", confidence=0.9, liquid_colour_name="yellow", pellet_colour_name="yellow")
    assert observation_from(m, c).pellet_seen_over_light
    rec = {"index": 0, "state": "settled", "confidence": 0.9, "liquid": {"lab": list(CHROMATE_YELLOW)},
           "pellet": {"present": True, "height_mm": 2.0, "lab": list(YELLOW[1]), "seen_over_light": True}}
    assert observation_from_record(rec).pellet_seen_over_light


def test_blank_clear_by_its_measurements_is_judged_despite_a_doubtful_word():
    # A blank guards against contamination, which shows as a solid or a cloud; the measure
    # stage tests both physically. A blank the classifier calls clear at 0.48 (under the
    # scheme's 0.5) with no solid and no scattered light passes; samples stay inconclusive.
    import dataclasses

    doubt = clear(2, turbidity=0.0, confidence=0.48)
    j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), settled(1, *BLACK), doubt], LABELS3)
    assert _verdicts(j) == {"control": "positive", "unknown A": "positive", "blank": "negative"} and not j.failed
    # not when it scatters light, shows a solid, or is called something else
    for bad in (clear(2, turbidity=0.04, confidence=0.48), cloudy(2, turbidity=0.0, confidence=0.48),
                dataclasses.replace(doubt, pellet_present=True, pellet_height_mm=0.8, pellet_lab=BLACK[1],
                                    pellet_colour_name="black")):
        j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), settled(1, *BLACK), bad], LABELS3)
        assert j.failed and j.control_failures[0].role == "blank"
    # not when its bottom stood where the control's kind of solid could hide
    hidden = dataclasses.replace(doubt, dark_solid_hidden=True)
    j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), settled(1, *BLACK), hidden], LABELS3)
    assert j.failed
    # a light-band bottom hides nothing a black solid could be: judged
    light = dataclasses.replace(doubt, light_solid_hidden=True)
    j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), settled(1, *BLACK), light], LABELS3)
    assert not j.failed
    # a sample's doubtful word is still inconclusive
    j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), clear(1, turbidity=0.0, confidence=0.48),
                                              clear(2)], LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive"


def test_cloudy_blank_fails_and_is_diagnosed():
    obs = [settled(0, *WHITE), clear(1), cloudy(2, turbidity=0.3)]
    j = judge_step(G1, "chloride-precipitation", obs, LABELS3)
    assert [f.role for f in j.control_failures] == ["blank"]
    assert any("cloudy blank: likely cause contaminated reagent or glassware" in w for w in j.warnings)
    assert _verdicts(j)["unknown A"] == "inconclusive"


def test_low_confidence_is_inconclusive_never_a_guess():
    obs = [settled(0, *WHITE), settled(1, *WHITE, confidence=0.3), clear(2)]
    j = judge_step(G1, "chloride-precipitation", obs, LABELS3)
    o = j.outcome_for(1)
    assert o["verdict"] == "inconclusive"
    assert "confidence 0.30 below 0.50" in o["meaning"]


def test_matches_neither_is_inconclusive():
    # A yellow solid at the chloride step is none of the group I chlorides.
    obs = [settled(0, *WHITE), settled(1, *YELLOW), clear(2)]
    j = judge_step(G1, "chloride-precipitation", obs, LABELS3)
    o = j.outcome_for(1)
    assert o["verdict"] == "inconclusive"
    assert "matches neither" in o["meaning"] and "pellet yellow" in o["meaning"]


def test_empty_tube_is_inconclusive():
    empty = TubeObservation(1, "empty", 0.97, None, None, None, False, None, None, None)
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE), empty, clear(2)], LABELS3)
    assert j.outcome_for(1)["verdict"] == "inconclusive"


def test_chromate_clear_yellow_is_negative_and_suspension_needs_the_blank():
    # K2CrO4 is itself yellow: a clear yellow liquid is a negative; a yellow
    # suspension scattering more than the blank is PbCrO4 (common practice).
    ctrl = settled(0, *YELLOW, liquid_lab=CHROMATE_YELLOW, liquid_name="yellow")
    neg = clear(1, CHROMATE_YELLOW, "yellow", turbidity=0.02)
    pos = cloudy(2, "yellow", (84.0, 2.0, 70.0), turbidity=0.4)
    blank = clear(3, CHROMATE_YELLOW, "yellow", turbidity=0.01)
    labels = parse_labels("1=control,2=K-1,3=K-2,4=blank", 4)
    j = judge_step(G1, "chromate-test", [ctrl, neg, pos, blank], labels)
    assert _verdicts(j) == {"control": "positive", "K-1": "negative", "K-2": "positive", "blank": "negative"}
    assert j.outcome_for(2)["quantities"]["turbidity_above_blank"] == pytest.approx(0.39)
    # Without a blank the suspension cannot be told from the reagent's own colour.
    j2 = judge_step(G1, "chromate-test", [ctrl, neg, pos, blank], parse_labels("1=control,2=K-1,3=K-2", 4))
    assert _verdicts(j2)["K-2"] == "inconclusive"
    assert "no blank labelled" in j2.outcome_for(2)["meaning"]
    assert any("no blank labelled" in w for w in j2.warnings)


def test_chromate_slight_haze_between_thresholds_is_inconclusive():
    ctrl = settled(0, *YELLOW, liquid_lab=CHROMATE_YELLOW, liquid_name="yellow")
    hazy = cloudy(1, "yellow", (88.0, -3.0, 64.0), turbidity=0.075)
    blank = clear(2, CHROMATE_YELLOW, "yellow", turbidity=0.01)
    j = judge_step(G1, "chromate-test", [ctrl, hazy, blank], LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive"


def test_ammonia_step_diagnoses_lead_left_in_the_residue():
    obs = [settled(0, *BLACK), settled(1, *WHITE), clear(2)]
    j = judge_step(G1, "ammonia-treatment", obs, LABELS3)
    assert _verdicts(j)["unknown A"] == "inconclusive"
    assert any("white residue left after ammonia" in w and "hot-water extraction was incomplete" in w
               for w in j.warnings)
    assert j.outcome_for(1)["warnings"]


def test_hot_water_cloudy_supernatant_is_diagnosed():
    hazy = cloudy(1, "white", turbidity=0.3, pellet=WHITE)
    j = judge_step(G1, "hot-water-extraction", [settled(0, *WHITE), hazy, clear(2)], LABELS3)
    assert any("cloudy supernatant after centrifuging hot" in w and "carried over" in w for w in j.warnings)
    assert _verdicts(j)["unknown A"] == "positive"


RED = (45.0, 58.0, 35.0)


@pytest.mark.parametrize("lab, name, expected", [
    ((46.0, 56.0, 34.0), "red", "positive"),        # as red as the control
    ((95.5, 0.5, 1.5), "colourless", "negative"),   # as pale as the blank
    ((70.0, 30.0, 18.0), "red", "inconclusive"),    # half-way: between control and blank
    ((92.0, 6.0, 4.0), "pink", "inconclusive"),     # faint: 4 < ΔE00 to blank < 10
])
def test_thiocyanate_judged_beside_control_and_blank(lab, name, expected):
    s = load_scheme("iron-thiocyanate")
    obs = [clear(0, RED, "red"), clear(1, lab, name), clear(2)]
    j = judge_step(s, "thiocyanate-test", obs, LABELS3)
    assert not j.control_failures
    assert j.outcome_for(1)["verdict"] == expected, j.outcome_for(1)["meaning"]


def test_between_reason_is_given():
    s = load_scheme("iron-thiocyanate")
    j = judge_step(s, "thiocyanate-test", [clear(0, RED, "red"), clear(1, (70.0, 30.0, 18.0), "red"), clear(2)],
                   LABELS3)
    assert "between the blank and the positive control" in j.outcome_for(1)["meaning"]


def test_de00_evidence_matches_colour_science():
    """ΔE00 in the evidence equals colour-science's CIE 2000 (independent oracle).

    References: Sharma, Wu & Dalal (2005), Color Res. Appl. 30(1) 21-30, the
    formula both implement; colour-science 0.4 ``colour.delta_E(method="CIE 2000")``.
    Tolerance 1e-4: the record rounds to four decimals.
    """
    import colour

    s = load_scheme("iron-thiocyanate")
    sample = (70.0, 30.0, 18.0)
    j = judge_step(s, "thiocyanate-test", [clear(0, RED, "red"), clear(1, sample, "red"), clear(2)], LABELS3)
    q = j.outcome_for(1)["quantities"]
    assert q["liquid_de00_to_blank"] == pytest.approx(
        float(colour.delta_E(np.array(sample), np.array(COLOURLESS), method="CIE 2000")), abs=1e-4)
    assert q["liquid_de00_to_control"] == pytest.approx(
        float(colour.delta_E(np.array(sample), np.array(RED), method="CIE 2000")), abs=1e-4)


@pytest.mark.parametrize("turbidity, expected", [(0.20, "negative"), (0.30, "negative"), (0.33, "inconclusive"),
                                                 (0.50, "positive")])
def test_chloride_limit_sample_against_standard(turbidity, expected):
    # Passes when not more opalescent than the standard (general limit-test rule, common practice).
    s = load_scheme("chloride-limit")
    obs = [cloudy(0, turbidity=0.30), cloudy(1, turbidity=turbidity) if turbidity > 0.1 else clear(1)]
    j = judge_step(s, "opalescence-comparison", obs, parse_labels("1=standard 20 ppm,2=sample W-4", 2))
    assert not j.control_failures
    assert j.outcome_for(1)["verdict"] == expected
    assert j.outcome_for(0)["role"] == "standard"


def test_chloride_limit_clear_standard_is_a_failure():
    s = load_scheme("chloride-limit")
    j = judge_step(s, "opalescence-comparison", [clear(0), cloudy(1, turbidity=0.2)],
                   parse_labels("1=standard,2=sample W-4", 2))
    assert [f.role for f in j.control_failures] == ["standard"]
    assert j.outcome_for(1)["verdict"] == "inconclusive"


def test_unlabelled_tubes_are_ignored_and_roles_follow_labels():
    obs = [settled(0, *WHITE), settled(1, *WHITE), clear(2), clear(3)]
    j = judge_step(G1, "chloride-precipitation", obs, parse_labels("1=Positive Control,3=negative control,4=K-2", 4))
    assert j.outcome_for(1) is None
    assert [(o.position, o.role) for o in j.outcomes] == [(1, "control"), (3, "blank"), (4, "sample")]


def test_missing_controls_are_warned_not_failed():
    j = judge_step(G1, "chloride-precipitation", [settled(0, *WHITE)], parse_labels("1=K-1", 1))
    assert not j.control_failures
    assert any("no positive control labelled" in w for w in j.warnings)
    assert any("no blank labelled" in w for w in j.warnings)
    assert j.outcome_for(0)["verdict"] == "positive"


def test_bad_step_and_bad_positions():
    with pytest.raises(TubevisionInputError, match="has no step 'flame-test'.*chloride-precipitation"):
        judge_step(G1, "flame-test", [clear(0)], {})
    with pytest.raises(TubevisionInputError, match="position 3 given but only 1 tubes found"):
        judge_step(G1, "chloride-precipitation", [clear(0)], {3: "K-1"})


def test_observation_from_stage_outputs():
    m = SimpleNamespace(index=2, empty=False,
                        liquid=SimpleNamespace(lab=np.array([90.0, -1.0, 3.0]), turbidity=0.25, turbidity_sd=0.02),
                        pellet=SimpleNamespace(present=True, height_mm=1.5, lab=np.array([93.0, 0.0, 2.0])))
    c = SimpleNamespace(state="cloudy", confidence=0.8, liquid_colour_name="white", pellet_colour_name="white")
    o = observation_from(m, c)
    assert o == TubeObservation(2, "cloudy", 0.8, (90.0, -1.0, 3.0), "white", 0.25, True, 1.5, (93.0, 0.0, 2.0),
                                "white", 0.02)
    empty = SimpleNamespace(index=0, empty=True, liquid=None,
                            pellet=SimpleNamespace(present=False, height_mm=None, lab=None))
    oe = observation_from(empty, SimpleNamespace(state="empty", confidence=0.9, liquid_colour_name=None,
                                                 pellet_colour_name=None))
    assert oe.liquid_lab is None and oe.turbidity is None and not oe.pellet_present
    nan_lab = SimpleNamespace(index=0, empty=False, liquid=SimpleNamespace(lab=np.array([np.nan, 0, 0]),
                                                                           turbidity=float("nan")),
                              pellet=SimpleNamespace(present=False, height_mm=None, lab=None))
    on = observation_from(nan_lab, c)
    assert on.liquid_lab is None and on.turbidity is None


def test_outcomes_fit_the_record_schema_and_round_trip():
    from tubevision.record.build import validate_record

    obs = [settled(0, *WHITE), settled(1, *WHITE), clear(2), clear(3)]
    labels = parse_labels("1=control,2=K-1,3=blank", 4)
    j = judge_step(G1, "chloride-precipitation", obs, labels)
    rec = record_for(j, obs, labels, "k1.jpg")
    validate_record(rec)
    assert rec["tubes"][3]["step_outcome"] is None
    back = [observation_from_record(t) for t in rec["tubes"]]
    assert back == obs


def test_white_residue_misnamed_grey_is_not_a_mercury_positive():
    # Hg + HgNH2Cl is grey-black (dark); a light residue named "grey" is still not
    # the darkening the ammonia step looks for (scheme: max_pellet_lightness).
    light_grey = settled(1, "grey", (90.0, 0.0, 1.5))
    dark_grey = settled(1, "grey", (45.0, 0.0, 1.0))
    j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), light_grey, clear(2)], LABELS3)
    assert j.outcome_for(1)["verdict"] == "inconclusive" and "pellet L* 90" in j.outcome_for(1)["meaning"]
    j = judge_step(G1, "ammonia-treatment", [settled(0, *BLACK), dark_grey, clear(2)], LABELS3)
    assert j.outcome_for(1)["verdict"] == "positive"
    # A spent-ammonia control (white residue, misnamed grey) is flagged.
    j = judge_step(G1, "ammonia-treatment", [light_grey, dark_grey, clear(2)], LABELS3)
    assert j.control_failures and j.outcome_for(1)["verdict"] == "inconclusive"


def test_observation_from_the_real_measure_and_classify_outputs():
    # Kind 2: a drawn rack of three plain tubes through the real tubes, measure and
    # classify stages (no card: the plain sRGB assumption). Only the hand-over is
    # checked here: the observation carries what the stages measured.
    from tubevision import measure, tubes
    from tubevision.classify import classify_tube

    a = np.full((300, 240, 3), 235, np.uint8)
    xs = [20, 100, 180]
    for x in xs:
        a[30:280, x:x + 40] = (228, 228, 226)
    finding = tubes.tubes_from_layout(a, [(x, 30, x + 40, 280) for x in xs])
    ms = [measure.measure_tube(a, r, correction=None, mm_per_px=0.1) for r in finding.regions]
    cs = [classify_tube(m) for m in ms]
    obs = [observation_from(m, c) for m, c in zip(ms, cs)]
    for m, c, o in zip(ms, cs, obs):
        assert o.index == m.index and o.state == c.state and o.confidence == pytest.approx(c.confidence)
        assert o.liquid_lab == pytest.approx(tuple(m.liquid.lab))
        assert o.turbidity == pytest.approx(m.liquid.turbidity)
        assert o.pellet_present == m.pellet.present
    j = judge_step(G1, "chloride-precipitation", obs, LABELS3)
    assert len(j.outcomes) == 3


def test_record_carries_what_the_photo_showed_of_each_solid():
    """[synthetic] The observation a step is judged from is the same whether it comes from
    the analysis in memory or from the written record (``tubevision conclude`` reads
    records): in particular the pellet's ``seen_over_light``/``seen_over_dark``, which
    decide whether a sample's 'no solid' beside a yellow control stands."""
    from pathlib import Path

    from tubevision.analysis import AnalysisOptions, analyze_photo, load_shared
    from tubevision.image import load_photo
    from tubevision.record.build import build_record
    from tubevision.scheme import observation_from, observation_from_record

    photo = load_photo(Path(__file__).resolve().parents[2] / "sample_images" / "demo-chloride-step.jpg")
    options = AnalysisOptions()
    analysis = analyze_photo(photo, options, **load_shared(options))
    record = build_record(analysis)
    seen = 0
    for m, c, tube in zip(analysis.measurements, analysis.calls, record["tubes"]):
        a, b = observation_from(m, c), observation_from_record(tube)
        assert (a.pellet_present, a.pellet_seen_over_light, a.pellet_seen_over_dark,
                a.light_solid_hidden, a.dark_solid_hidden) == \
               (b.pellet_present, b.pellet_seen_over_light, b.pellet_seen_over_dark,
                b.light_solid_hidden, b.dark_solid_hidden), tube["id"]
        seen += a.pellet_seen_over_light or a.pellet_seen_over_dark
    assert seen >= 1      # the demo's white solids sit in front of a dark band
