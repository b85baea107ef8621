"""``tubevision demo``: render a photo of an invented scenario and analyse it, with no other input.

The scenario (invented for the demo): a water-treatment screening bench at
the chloride-precipitation step of the group I scheme — a positive control,
a blank and four unknown water samples — photographed under a daylight lamp
with the tool's card beside the rack. The photo comes from
:mod:`tubevision.studio`, so its ground truth is known and the summary
prints the measured values beside the true ones.
"""

from __future__ import annotations

from pathlib import Path

from .errors import TubevisionInputError

__all__ = ["DEMO_SEED", "run_demo"]

DEMO_SEED = 20261202
"""Seed of the demo render, so every run shows the same photo (our own choice)."""

DEMO_SCHEME = "group1"
DEMO_STEP = "chloride-precipitation"


def _labels_text(spec) -> str:
    return ",".join(f"{i + 1}={t.label}" for i, t in enumerate(spec.tubes) if getattr(t, "label", None))


def run_demo(out: Path, *, overwrite: bool = False) -> str:
    """Render the demo photo into ``out``, analyse it there and return a short summary text.

    Raises
    ------
    TubevisionInputError
        ``out`` already holds a demo and ``overwrite`` is False.
    """
    from .analysis import AnalysisOptions, analyze_photo
    from .colorimetry import delta_e00
    from .image import load_photo
    from .record.build import build_record
    from .record.folder import write_photo_outputs
    from .studio import demo_scene, render_scene, save_rendered

    out = Path(out)
    photo_path = out / "rack-demo.jpg"
    if photo_path.exists() and not overwrite:
        raise TubevisionInputError(f"{out}: already holds a demo; pass --overwrite or choose --out")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise TubevisionInputError(f"{out}: cannot create folder ({exc.strerror})") from None
    spec = demo_scene()
    rendered = render_scene(spec, seed=DEMO_SEED)
    for old in (photo_path, out / "rack-demo.truth.json"):
        if old.exists():  # only reached with overwrite=True
            old.unlink()
    save_rendered(rendered, photo_path, truth=True)
    labels = _labels_text(spec)
    options = AnalysisOptions(scheme=DEMO_SCHEME, step=DEMO_STEP, labels=labels,
                              command=("tubevision", "demo", "--out", str(out)))
    analysis = analyze_photo(load_photo(photo_path), options)
    folder = write_photo_outputs(out, photo_path, analysis, overwrite=overwrite)
    record = build_record(analysis)
    truth = rendered.truth
    truth_tubes = truth.get("tubes", [])

    lines = [f"Demo scenario: {spec.scenario}", f"Photo: {photo_path} (rendered, seed {DEMO_SEED}; "
             f"its ground truth is in {out / 'rack-demo.truth.json'})",
             f"Calibration: {record['calibration']['status']}"
             + (f", card residual ΔE00 mean {record['calibration']['residual_de00']['mean']:.2f}"
                if record["calibration"]["residual_de00"] else ""), ""]
    lines.append(f"{'tube':5} {'label':13} {'state':8} {'colour':10} {'turbidity':>9} {'pellet mm':>9} "
                 f"{'ΔE00 vs truth':>13}  verdict")
    for i, tube in enumerate(record["tubes"]):
        lab = tube["liquid"]["lab"]
        de = ""
        if lab is not None and i < len(truth_tubes) and truth_tubes[i].get("lab"):
            de = f"{float(delta_e00(lab, truth_tubes[i]['lab'])):.2f}"
        turb = tube["liquid"]["turbidity"]
        height = tube["pellet"]["height_mm"]
        verdict = (tube["step_outcome"] or {}).get("verdict", "")
        lines.append(f"{tube['id']:5} {str(tube['label'] or ''):13} {tube['state']:8} "
                     f"{str(tube['liquid']['colour_name'] or '-'):10} "
                     f"{'-' if turb is None else f'{turb:.3f}':>9} {'-' if height is None else f'{height:.1f}':>9} "
                     f"{de:>13}  {verdict}")
    if record.get("warnings"):
        lines += ["", "Warnings:"] + [f"  - {w}" for w in record["warnings"]]
    lines += ["", f"Outputs: {folder}/ — record.json (the evidence record), annotated.png, report.html "
              "(open it in a browser), tubes.csv, manifest.sha256",
              f"Next: tubevision conclude {folder / 'record.json'} --json", ""]
    return "\n".join(lines)
