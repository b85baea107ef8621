"""Hand-built observations and records for the group I scheme tests.

Invented demo data (a water-treatment QC bench, samples "K-7" and so on).
What each tube shows at each step follows standard group I chemistry
(common practice, as written in the scheme's notes):

* chloride-precipitation: white precipitate if any of Ag+, Pb2+, Hg2^2+;
* hot-water-extraction: a white residue is left if Ag+ or Hg2^2+ (PbCl2 dissolves);
* chromate-test: yellow PbCrO4 if Pb2+, else a clear yellow solution (the reagent's colour);
* ammonia-treatment: grey-black residue if Hg2^2+, else the residue dissolves;
* acidification: white AgCl reprecipitates if Ag+.

Lab values are plausible bench colours chosen by hand (D65/2°); turbidity is
in the record's units (0 clear).
"""

from __future__ import annotations

from tubevision.scheme import TubeObservation, judge_step, load_scheme, parse_labels

GROUP1 = ("Ag+", "Pb2+", "Hg2^2+")
STEPS = ("chloride-precipitation", "hot-water-extraction", "chromate-test", "ammonia-treatment", "acidification")

COLOURLESS = (96.0, -0.3, 1.2)
CHROMATE_YELLOW = (90.0, -6.0, 62.0)


def clear(index: int, lab=COLOURLESS, name="colourless", turbidity=0.01, confidence=0.95) -> TubeObservation:
    return TubeObservation(index, "clear", confidence, lab, name, turbidity, False, None, None, None)


def settled(index: int, pellet_name: str, pellet_lab, *, liquid_lab=COLOURLESS, liquid_name="colourless",
            height_mm=2.0, turbidity=0.02, confidence=0.9) -> TubeObservation:
    return TubeObservation(index, "settled", confidence, liquid_lab, liquid_name, turbidity, True, height_mm,
                           pellet_lab, pellet_name)


def cloudy(index: int, name="white", lab=(85.0, -0.4, 2.0), turbidity=0.45, confidence=0.9,
           pellet=None) -> TubeObservation:
    if pellet:
        return TubeObservation(index, "cloudy", confidence, lab, name, turbidity, True, 1.0, pellet[1], pellet[0])
    return TubeObservation(index, "cloudy", confidence, lab, name, turbidity, False, None, None, None)


WHITE = ("white", (93.0, -0.5, 2.0))
YELLOW = ("yellow", (82.0, 6.0, 85.0))
BLACK = ("black", (30.0, 0.2, 0.5))


def tube_for(step: str, ions: set[str], index: int) -> TubeObservation:
    """What a tube holding ``ions`` shows at ``step`` (standard chemistry, see module doc)."""
    if step == "chloride-precipitation":
        return settled(index, *WHITE) if ions else clear(index)
    if step == "hot-water-extraction":
        return settled(index, *WHITE, height_mm=1.2) if ions & {"Ag+", "Hg2^2+"} else clear(index)
    if step == "chromate-test":
        if "Pb2+" in ions:
            return settled(index, *YELLOW, liquid_lab=CHROMATE_YELLOW, liquid_name="yellow")
        return clear(index, CHROMATE_YELLOW, "yellow")
    if step == "ammonia-treatment":
        return settled(index, *BLACK, height_mm=0.8) if "Hg2^2+" in ions else clear(index)
    if step == "acidification":
        return cloudy(index) if "Ag+" in ions else clear(index)
    raise KeyError(step)


def steps_run(ions: set[str]) -> list[str]:
    """The steps a bench runs on a sample with ``ions`` (each runs only where the scheme says)."""
    run = ["chloride-precipitation"]
    if ions:
        run += ["hot-water-extraction", "chromate-test"]
        if ions & {"Ag+", "Hg2^2+"}:
            run += ["ammonia-treatment", "acidification"]
    return run


def record_for(judgement, observations, labels: dict[int, str], photo: str) -> dict:
    """A minimal evidence record (contract keys) around one judged photo."""
    tubes = []
    for i, o in enumerate(observations):
        tubes.append({
            "id": f"T{i + 1}", "index": i, "row": 0, "bbox": [10 + 60 * i, 20, 60 + 60 * i, 400],
            "state": o.state, "confidence": o.confidence,
            "liquid": {"lab": list(o.liquid_lab) if o.liquid_lab else None, "lab_sd": [0.5, 0.2, 0.3],
                       "colour_name": o.liquid_colour_name, "turbidity": o.turbidity},
            "pellet": {"present": o.pellet_present, "height_mm": o.pellet_height_mm,
                       "lab": list(o.pellet_lab) if o.pellet_lab else None, "colour_name": o.pellet_colour_name},
            "label": labels.get(i + 1),
            "step_outcome": judgement.outcome_for(i),
        })
    return {
        "schema": "tubevision.record/1",
        "software": {"name": "tubevision", "version": "0.1.0"},
        "image": {"file": photo, "sha256": "0" * 64, "width": 400, "height": 300, "captured_at": None},
        "calibration": {"status": "card", "method": "test", "residual_de00": {"mean": 0.9, "max": 2.0},
                        "mm_per_px": 0.06},
        "colour_space": {"name": "CIELAB", "illuminant": "D65", "observer": "2"},
        "tubes": tubes,
        "warnings": list(judgement.warnings),
        "scheme": judgement.record_block(),
    }


def photo_records(samples: dict[str, set[str]], *, control_ions=frozenset(GROUP1), spoil: dict | None = None,
                  skip: tuple[str, ...] = ()) -> list[dict]:
    """Records of a bench running group I on ``samples`` with a control (all three ions) and a blank.

    ``spoil`` maps a step to the observation the control shows there instead
    (a spoiled reagent); ``skip`` leaves steps out.
    """
    scheme = load_scheme("group1")
    records = []
    needed = set().union(*(set(steps_run(ions)) for ions in samples.values())) | {"chloride-precipitation"}
    for step in STEPS:
        if step not in needed or step in skip:
            continue
        names = [n for n, ions in samples.items() if step in steps_run(ions)]
        obs = [tube_for(step, set(control_ions), 0)]
        if spoil and step in spoil:
            obs = [spoil[step]]
        label_text = ["1=control"]
        for k, n in enumerate(names):
            obs.append(tube_for(step, samples[n], k + 1))
            label_text.append(f"{k + 2}={n}")
        obs.append(clear(len(obs), CHROMATE_YELLOW, "yellow") if step == "chromate-test" else clear(len(obs)))
        label_text.append(f"{len(obs)}=blank")
        labels = parse_labels(",".join(label_text), len(obs))
        j = judge_step(scheme, step, obs, labels)
        records.append(record_for(j, obs, labels, f"bench-{step}.jpg"))
    return records
