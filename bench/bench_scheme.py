"""Benchmark: group I calls from simulated bench sessions, and spoiled controls.

Targets (issue 8): on photo series of every subset of the three group I ions
(none included), each photo with a positive control and a blank, at least
99 % of calls correct; a spoiled control flagged every time.

What this measures
------------------
The full photo pipeline (card, tubes, measure, classify) is not composed
here: each tube's observation is built from what standard group I chemistry
says it shows at each step (common practice: AgCl, PbCl2, Hg2Cl2 white;
PbCl2 dissolves in hot water; PbCrO4 yellow; Hg2Cl2 turns grey-black with
ammonia while AgCl dissolves; AgCl reprecipitates on acidifying), then
perturbed the way a measured photo is: CIELAB noise, turbidity noise,
state confidence, and occasional slips of the classifier's words
(neighbouring colour words, settled/cloudy). Every observation then goes
through the real ``judge_step`` and ``conclude``. Run it on rendered photos
once the studio renderer and the card stage are in (``--help``).

A call counts as correct when it equals the truth; "inconclusive" is
counted apart from "wrong" (an inconclusive call is safe but not correct).

With ``--photos N`` it also renders N photo series per ion subset with the
studio (``tubevision.studio``) and runs the whole pipeline on them
(``analyze_photo`` → ``build_record`` → ``conclude``): the issue's target
proper. Each tube's studio contents follow the same chemistry (white
precipitate, yellow solution or precipitate, grey-black precipitate, white
suspension, clear water).

Usage: ``python bench/bench_scheme.py [--series N] [--photos N] [--seed S]``
"""

from __future__ import annotations

import argparse
import itertools
import sys
import time

import numpy as np

from tubevision.errors import TubevisionInputError
from tubevision.scheme import (TubeObservation, conclude, judge_step, load_scheme, parse_labels)

GROUP1 = ("Ag+", "Pb2+", "Hg2^2+")
STEPS = ("chloride-precipitation", "hot-water-extraction", "chromate-test", "ammonia-treatment", "acidification")

# Bench colours (CIELAB D65/2°), chosen by hand as plausible for each solid or
# solution over a light backdrop (invented demo values).
LAB = {
    "colourless": (96.0, -0.3, 1.2),
    "chromate": (90.0, -6.0, 62.0),      # clear K2CrO4 solution, yellow
    "white": (93.0, -0.5, 2.0),
    "yellow": (82.0, 6.0, 85.0),
    "black": (30.0, 0.2, 0.5),
    "milky": (85.0, -0.4, 2.0),
}

LAB_SD = 1.0
"""CIELAB noise per channel: about the card fit's residual of ~1 ΔE00 (record fixtures)."""
TURBIDITY_SD = 0.02
"""Turbidity noise: of the order of the measure stage's bootstrap turbidity_sd."""
WORD_SLIP = {"white": "grey", "grey": "black", "black": "grey", "yellow": "orange", "orange": "yellow"}
"""Neighbouring colour words the classifier may give instead."""


def truth(step: str, ions: set[str]) -> dict:
    """What a tube holding ``ions`` shows at ``step`` (standard chemistry; see module doc)."""
    if step == "chloride-precipitation":
        return _settled("white", 2.0) if ions else _clear()
    if step == "hot-water-extraction":
        return _settled("white", 1.2) if ions & {"Ag+", "Hg2^2+"} else _clear()
    if step == "chromate-test":
        if "Pb2+" in ions:
            return _settled("yellow", 1.0, liquid=("chromate", "yellow"))
        return _clear(("chromate", "yellow"))
    if step == "ammonia-treatment":
        return _settled("black", 0.8) if "Hg2^2+" in ions else _clear()
    if step == "acidification":
        if "Ag+" in ions:
            return {"state": "cloudy", "liquid": ("milky", "white"), "turbidity": 0.45, "pellet": None}
        return _clear()
    raise KeyError(step)


def spoiled(step: str) -> dict:
    """What the positive control shows when the step's reagent or technique failed.

    No reaction at the chloride, chromate and acid steps (a clear liquid); the
    residue lost when decanting at the hot-water step; an unchanged white
    residue when the ammonia is spent.
    """
    if step == "chromate-test":
        return _clear(("chromate", "yellow"))
    if step == "ammonia-treatment":
        return _settled("white", 1.2)
    return _clear()


def _clear(liquid=("colourless", "colourless")) -> dict:
    return {"state": "clear", "liquid": liquid, "turbidity": 0.01, "pellet": None}


def _settled(colour: str, height_mm: float, liquid=("colourless", "colourless")) -> dict:
    return {"state": "settled", "liquid": liquid, "turbidity": 0.02, "pellet": (colour, height_mm)}


def observe(t: dict, index: int, rng: np.random.Generator, slips: bool) -> TubeObservation:
    """A measured-looking observation of the true appearance ``t``."""
    state = t["state"]
    conf = float(rng.uniform(0.6, 0.99))
    if slips and rng.random() < 0.03:
        conf = float(rng.uniform(0.3, 0.5))           # a doubtful tube
    if slips and state in ("settled", "cloudy") and rng.random() < 0.01:
        state = "cloudy" if state == "settled" else "settled"
    lab_key, liquid_word = t["liquid"]
    liquid_lab = tuple(float(v) for v in np.asarray(LAB[lab_key]) + rng.normal(0, LAB_SD, 3))
    turb = max(0.0, t["turbidity"] + float(rng.normal(0, TURBIDITY_SD)))
    pel = t["pellet"]
    if pel is None and state == "settled":
        pel = ("white", 0.5)
    if pel is not None:
        word, height = pel
        p_lab = tuple(float(v) for v in np.asarray(LAB[word]) + rng.normal(0, LAB_SD, 3))
        if slips and rng.random() < 0.02:
            word = WORD_SLIP.get(word, word)
        return TubeObservation(index, state, conf, liquid_lab, liquid_word, turb, True,
                               max(0.1, height + float(rng.normal(0, 0.1))), p_lab, word,
                               turbidity_sd=TURBIDITY_SD)
    # the measured turbidity comes with its standard uncertainty, as the measure stage gives it
    return TubeObservation(index, state, conf, liquid_lab, liquid_word, turb, False, None, None, None,
                           turbidity_sd=TURBIDITY_SD)


def steps_run(ions: set[str]) -> list[str]:
    run = ["chloride-precipitation"]
    if ions:
        run += ["hot-water-extraction", "chromate-test"]
        if ions & {"Ag+", "Hg2^2+"}:
            run += ["ammonia-treatment", "acidification"]
    return run


def _record(j, obs, labels, step) -> dict:
    return {"image": {"file": f"{step}.jpg"}, "scheme": j.record_block(),
            "tubes": [{"index": i, "label": labels.get(i + 1), "step_outcome": j.outcome_for(i)}
                      for i in range(len(obs))]}


def session(scheme, ions: set[str], rng, slips: bool, spoil_step: str | None = None):
    """One sample through the scheme with control and blank in every photo."""
    records, flagged = [], {}
    labels = parse_labels("1=control,2=sample,3=blank", 3)
    for step in steps_run(ions):
        ctrl_truth = spoiled(step) if step == spoil_step else truth(step, set(GROUP1))
        blank_truth = truth(step, set())
        obs = [observe(ctrl_truth, 0, rng, slips), observe(truth(step, ions), 1, rng, slips),
               observe(blank_truth, 2, rng, slips)]
        j = judge_step(scheme, step, obs, labels)
        flagged[step] = bool(j.control_failures)
        records.append(_record(j, obs, labels, step))
    return conclude(records), flagged


# Studio contents for each true appearance (keys of tubevision.studio.materials.CONTENTS).
def _studio_contents(t: dict) -> str:
    if t["pellet"] is not None:
        return {"white": "white-precipitate", "yellow": "yellow-precipitate", "black": "black-precipitate"}[
            t["pellet"][0]]
    if t["state"] == "cloudy":
        return "white-cloud"
    return "yellow-solution" if t["liquid"][0] == "chromate" else "water"


def _have_card() -> bool:
    try:
        import tubevision.card  # noqa: F401
    except ImportError:
        return False
    return True


def photo_session(scheme, ions: set[str], seed: int, spoil_step: str | None = None, *,
                  size=(1344, 1008), truth_boxes: bool = False, retake: bool = False,
                  band_mm: float | None = None):
    """One sample through the scheme on rendered photos and the pipeline.

    With the card stage present: ``analyze_photo`` → ``build_record`` (tubes
    found, or the truth boxes as a ``--layout`` when ``truth_boxes``). Without
    it: tubes from the truth boxes, measure uncalibrated (plain sRGB), classify,
    judge: the scheme stage on real measurements, the card left out.

    With ``retake``, the analyst follows the tool's advice once: where a step's judgement
    asks for a new photo with the other band behind the tube bottoms
    (``StepJudgement.retake_positions``), the same scene is photographed again with the
    rack moved as advised (``band_shift_mm = band_mm × retake_shift_bands``: one band, or half
    a band for bottoms at a band edge), and both photos' records go to
    ``conclude`` (which sets aside a photo whose controls failed and needs the others to
    agree). A step counts as flagged when no photo of it passed its controls.
    """
    from tubevision.image import photo_from_array
    from tubevision.studio import SceneSpec, TubeSpec, render_scene

    full = _have_card()
    records, flagged = [], {}
    labels_text = "1=control,2=sample,3=blank"
    for k, step in enumerate(steps_run(ions)):
        ctrl = spoiled(step) if step == spoil_step else truth(step, set(GROUP1))
        spec = SceneSpec(tubes=(TubeSpec(_studio_contents(ctrl), label="control"),
                                TubeSpec(_studio_contents(truth(step, ions)), label="sample"),
                                TubeSpec(_studio_contents(truth(step, set())), label="blank")),
                         width_px=size[0], height_px=size[1], backdrop="hbands",
                         scenario=f"bench: group1 {step}, sample {'+'.join(sorted(ions)) or 'none'}")
        if band_mm is not None:
            spec = spec.with_(band_mm=band_mm)
        photo = render_scene(spec, seed=seed * 10 + k)
        boxes = tuple(tuple(int(v) for v in tb["bbox"]) for tb in photo.truth["tubes"])
        if full:
            from dataclasses import replace

            from tubevision.analysis import AnalysisOptions, analyze_photo
            from tubevision.record.build import build_record

            opts = AnalysisOptions(scheme="group1", step=step, labels=labels_text, expected_tubes=3,
                                   layout_boxes=boxes if truth_boxes else None)
            try:
                a = analyze_photo(photo_from_array(photo.upright, name=f"{step}.png"), opts, scheme=scheme)
            except TubevisionInputError:  # fewer tubes found than labelled: this step is lost
                flagged[step] = True
                continue
            shots = [a]
            if retake and a.judgement.retake_positions:
                photo = render_scene(replace(spec, band_shift_mm=spec.band_mm * a.judgement.retake_shift_bands),
                                     seed=seed * 10 + k)
                boxes = tuple(tuple(int(v) for v in tb["bbox"]) for tb in photo.truth["tubes"])
                opts = replace(opts, layout_boxes=boxes if truth_boxes else None)
                try:
                    shots.append(analyze_photo(photo_from_array(photo.upright, name=f"{step}-again.png"), opts,
                                               scheme=scheme))
                except TubevisionInputError:  # the second photo is lost; the first one stands
                    pass
            # the step is flagged when no photo of it passed its controls
            causes = [tuple(f.cause for f in s.judgement.control_failures) for s in shots]
            flagged[step] = tuple(c for cs in causes for c in cs) if all(causes) else ()
            records.extend(build_record(s) for s in shots)
        else:
            from tubevision import measure, tubes
            from tubevision.classify import classify_tube
            from tubevision.scheme import observation_from

            px = photo.upright
            finding = tubes.tubes_from_layout(px, list(boxes))
            ms = [measure.measure_tube(px, r, correction=None, mm_per_px=photo.truth.get("mm_per_px"))
                  for r in finding.regions]
            obs = [observation_from(m, classify_tube(m)) for m in ms]
            labels = parse_labels(labels_text, len(obs))
            j = judge_step(scheme, step, obs, labels)
            flagged[step] = bool(j.control_failures)
            records.append(_record(j, obs, labels, step))
    if not records:  # no step could be analysed: every call inconclusive
        return {"samples": {"sample": {"calls": {ion: "inconclusive" for ion in GROUP1}}}}, flagged
    return conclude(records), flagged


def photo_bench(scheme, subsets, n: int, seed: int, truth_boxes: bool, band_mm: float | None = None) -> None:
    for retake in (False, True):
        _photo_pass(scheme, subsets, n, seed, truth_boxes, retake, band_mm)


def _photo_pass(scheme, subsets, n: int, seed: int, truth_boxes: bool, retake: bool,
                band_mm: float | None = None) -> None:
    t0 = time.perf_counter()
    how = ("analyze_photo + build_record" + (", truth boxes as layout" if truth_boxes else ", tubes found")
           if _have_card() else "no card stage yet: truth boxes, uncalibrated measure + classify + judge_step")
    how += ("; a step whose judgement asks for it photographed again once, rack moved as advised"
            if retake else "; one photo per step")
    if band_mm is not None:
        how += f"; backdrop bands {band_mm:g} mm"
    print(f"  photos ({how}):")
    calls = correct = wrong = inconc = false_flags = photo_flags = 0
    for s_i, ions in enumerate(subsets):
        for r in range(n):
            out, flagged = photo_session(scheme, ions, seed + 1000 * s_i + r, truth_boxes=truth_boxes,
                                         retake=retake, band_mm=band_mm)
            false_flags += sum(bool(v) for v in flagged.values())
            photo_flags += sum(isinstance(v, tuple) and "photo" in v for v in flagged.values())
            for ion, call in out["samples"]["sample"]["calls"].items():
                calls += 1
                expect = "present" if ion in ions else "absent"
                correct += call == expect
                inconc += call == "inconclusive"
                wrong += call not in (expect, "inconclusive")
    print(f"    calls {calls}; correct {100 * correct / calls:.2f} % (target >= 99 %), "
          f"inconclusive {100 * inconc / calls:.2f} %, wrong {100 * wrong / calls:.2f} %; "
          f"good controls flagged {false_flags} (of them {photo_flags} with the photo as the cause: "
          f"a light solid that the backdrop could hide)")
    n_sp = n_flag = 0
    for k, step in enumerate(STEPS):
        for r in range(n):
            _, flagged = photo_session(scheme, set(GROUP1), seed + 50000 + 100 * k + r, spoil_step=step,
                                       truth_boxes=truth_boxes, retake=retake, band_mm=band_mm)
            n_sp += 1
            n_flag += bool(flagged[step])
    print(f"    spoiled controls {n_sp}; flagged {n_flag} ({100 * n_flag / n_sp:.1f} %, target 100 %); "
          f"time {time.perf_counter() - t0:.1f} s")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--series", type=int, default=100, help="sessions per ion subset (default 100)")
    ap.add_argument("--photos", type=int, default=0, help="rendered photo series per ion subset (default 0)")
    ap.add_argument("--truth-boxes", action="store_true", help="photos: give the true tube boxes as a layout")
    ap.add_argument("--seed", type=int, default=20260504, help="random seed (default fixed)")
    ap.add_argument("--band-mm", type=float, default=None,
                    help="photos: width of the backdrop's bands in mm (default the printable backdrop's)")
    a = ap.parse_args(argv)
    rng = np.random.default_rng(a.seed)  # seeded: the figures are reproducible
    scheme = load_scheme("group1")
    subsets = [set(c) for r in range(4) for c in itertools.combinations(GROUP1, r)]
    t0 = time.perf_counter()
    print(f"bench_scheme: group1, {len(subsets)} ion subsets x {a.series} sessions, seed {a.seed}")
    print("  observations: standard chemistry + simulated measurement noise (no photos rendered)")
    for slips in (False, True):
        n = correct = wrong = inconc = 0
        false_flags = 0
        for ions in subsets:
            for _ in range(a.series):
                out, flagged = session(scheme, ions, rng, slips)
                false_flags += sum(flagged.values())
                for ion, call in out["samples"]["sample"]["calls"].items():
                    n += 1
                    expect = "present" if ion in ions else "absent"
                    correct += call == expect
                    inconc += call == "inconclusive"
                    wrong += call not in (expect, "inconclusive")
        label = "with classifier slips" if slips else "noise only"
        print(f"  calls ({label}): {n}; correct {100 * correct / n:.2f} % (target >= 99 %), "
              f"inconclusive {100 * inconc / n:.2f} %, wrong {100 * wrong / n:.3f} %; "
              f"good controls flagged {false_flags}")
    n_sp = n_flag = 0
    for step in STEPS:
        for _ in range(a.series):
            ions = set(GROUP1)
            _, flagged = session(scheme, ions, rng, True, spoil_step=step)
            n_sp += 1
            n_flag += bool(flagged[step])
    print(f"  spoiled controls: {n_sp}; flagged {n_flag} ({100 * n_flag / n_sp:.1f} %, target 100 %)")
    print(f"  time {time.perf_counter() - t0:.1f} s")
    if a.photos:
        photo_bench(scheme, subsets, a.photos, a.seed, a.truth_boxes, a.band_mm)
    return 0


if __name__ == "__main__":
    sys.exit(main())
