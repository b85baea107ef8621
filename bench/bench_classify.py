"""Benchmark of the classify stage: state macro-F1 and colour-word accuracy on held-out studio conditions.

Photos are fresh studio renders (scenes never in the training table: seed
offset ``BENCH_SEED_OFFSET``) at the illuminant × camera combinations that
training never saw (:func:`tubevision.classify.train.held_out_combinations`).
Each photo goes card → tubes (the truth geometry) → measure → classify, as the
training table was made, so the figures are the classifier's on real
measurements, without tube-finding errors. ``--geometry no-meniscus`` /
``box-top`` give the measure stage the faulty liquid tops of a missed meniscus
or of ``--layout`` boxes instead (:data:`tubevision.classify.train.GEOMETRIES`).

Prints the state confusion matrix with per-class precision and recall, the
macro-F1 (target ≥ 0.97), the liquid colour-word accuracy (target ≥ 0.95),
the pellet colour-word accuracy, how often a wrong call carried a warning,
the rule fallback's figures on the same tubes, and a breakdown by backdrop.

Run:  python bench/bench_classify.py [--quick] [--photos N] [--model FILE] [--jobs 2] [--geometry G]
"""

from __future__ import annotations

import argparse
import collections
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

STATE_TARGET = 0.97
COLOUR_TARGET = 0.95


def _lab(part):
    """A measured part's CIELAB as a rounded list (None where absent)."""
    lab = getattr(part, "lab", None) if part is not None else None
    return None if lab is None else [round(float(v), 1) for v in lab]


def _photo_job(args):
    """Render, measure and classify one bench photo; plain dicts per tube."""
    k, seed, model_path, geometry = args
    from tubevision.classify import load_model, rule_state
    from tubevision.classify.train import measure_rendered, studio_scene
    from tubevision.studio import render_scene

    model = load_model(model_path) if model_path else None
    spec, rseed = studio_scene(k, "bench", seed)
    rendered = render_scene(spec, seed=rseed)
    got = measure_rendered(rendered, model=model, geometry=geometry)
    out = []
    for t, m, c in zip(rendered.truth["tubes"], got.measurements, got.calls):
        out.append({
            "photo": k, "contents": t["contents"], "backdrop": spec.backdrop, "illuminant": spec.illuminant,
            "sensor": spec.camera.sensor, "calibration": got.calibration_status,
            "state": t["state"], "called": c.state, "confidence": c.confidence, "warned": bool(c.warnings),
            "method": c.method, "rule": rule_state(m)[0],
            "colour": (t.get("liquid") or {}).get("colour_name"), "colour_called": c.liquid_colour_name,
            "pellet_colour": (t.get("pellet") or {}).get("colour_name"), "pellet_called": c.pellet_colour_name,
            "lab": _lab(getattr(m, "liquid", None)), "pellet_lab": _lab(getattr(m, "pellet", None)),
        })
    return out


def main(argv=None) -> int:
    from tubevision.classify.train import BENCH_SEED_OFFSET, TRAIN_SEED, evaluate, held_out_combinations

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="20 photos instead of 120")
    ap.add_argument("--photos", type=int, default=None)
    ap.add_argument("--seed", type=int, default=TRAIN_SEED)
    ap.add_argument("--model", default=None, help="model JSON (default: the shipped one)")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--misses", action="store_true", help="list every wrong colour word with its measured Lab")
    ap.add_argument("--geometry", default="truth", choices=("truth", "no-meniscus", "box-top"),
                    help="liquid top given to measure: the truth (default), none (a missed meniscus), "
                         "or the box top (what --layout boxes give)")
    args = ap.parse_args(argv)
    n = args.photos or (20 if args.quick else 120)
    seed = args.seed + BENCH_SEED_OFFSET
    t0 = time.perf_counter()
    work = [(k, seed, args.model, args.geometry) for k in range(n)]
    if args.jobs > 1:
        import concurrent.futures as cf
        import multiprocessing as mp

        with cf.ProcessPoolExecutor(max_workers=args.jobs, mp_context=mp.get_context("spawn")) as ex:
            parts = list(ex.map(_photo_job, work, chunksize=2))
    else:
        parts = [_photo_job(w) for w in work]
    rows = [r for p in parts for r in p]
    dt = time.perf_counter() - t0

    print(f"bench_classify: {n} photos, {len(rows)} tubes, liquid top from geometry '{args.geometry}', "
          "held-out combinations "
          + ", ".join(f"{i}/{s}" for i, s in held_out_combinations()))
    print(f"  {dt:.1f} s ({dt / max(n, 1):.2f} s per photo incl. render, {args.jobs} jobs); "
          f"method {collections.Counter(r['method'] for r in rows).most_common()}; "
          f"card found in {sum(1 for p in parts if p and p[0]['calibration'] == 'card')} of {n} photos")
    ev = evaluate([r["state"] for r in rows], [r["called"] for r in rows], title="state (held-out conditions)")
    print()
    print(ev.report)
    wrong = [r for r in rows if r["called"] != r["state"]]
    right = [r for r in rows if r["called"] == r["state"]]
    if rows:
        mean = lambda v: sum(v) / len(v) if v else float("nan")  # noqa: E731
        print(f"mean confidence: right calls {mean([r['confidence'] for r in right]):.3f}, "
              f"wrong calls {mean([r['confidence'] for r in wrong]):.3f}; wrong calls with a warning "
              f"{sum(r['warned'] for r in wrong)} of {len(wrong)}; right calls with a warning "
              f"{sum(r['warned'] for r in right)} of {len(right)}")

    liq = [r for r in rows if r["state"] != "empty" and r["colour"]]
    acc = sum(r["colour_called"] == r["colour"] for r in liq) / len(liq) if liq else float("nan")
    print()
    print(f"liquid colour-word accuracy {acc:.4f} (n = {len(liq)}; a cloudy liquid is named as its solid, "
          f"contract vocabulary)")
    misses = collections.Counter((r["colour"], r["colour_called"]) for r in liq if r["colour_called"] != r["colour"])
    if misses:
        print("  most frequent misses (truth -> called): "
              + ", ".join(f"{a}->{b} {k}" for (a, b), k in misses.most_common(8)))
    if args.misses:
        for r in wrong:
            print(f"    miss state  {r['contents']:22s} {r['state']:8s}->{r['called']:8s} "
                  f"confidence {r['confidence']:.2f} warned {r['warned']} {r['illuminant']}/{r['sensor']} "
                  f"{r['backdrop']}")
        for r in [r for r in rows if r in liq or r["pellet_colour"]]:
            for kind, truth, called, lab in (("liquid", r["colour"], r["colour_called"], r["lab"]),
                                             ("pellet", r["pellet_colour"], r["pellet_called"], r["pellet_lab"])):
                if truth and called != truth:
                    print(f"    miss {kind:6s} {r['contents']:22s} {r['state']:8s}->{r['called']:8s} "
                          f"{truth}->{called} Lab {lab} {r['illuminant']}/{r['sensor']} {r['backdrop']}")
    pel = [r for r in rows if r["pellet_colour"]]
    if pel:
        pacc = sum(r["pellet_called"] == r["pellet_colour"] for r in pel) / len(pel)
        print(f"pellet colour-word accuracy {pacc:.4f} (n = {len(pel)} tubes with a settled solid; "
              f"no word when no pellet was found)")

    rev = evaluate([r["state"] for r in rows], [r["rule"] for r in rows], title="rule fallback")
    print(f"\nrule fallback on the same tubes: macro-F1 {rev.macro_f1:.4f}, accuracy {rev.accuracy:.4f}")
    print("\nby backdrop:")
    for bd in sorted({r["backdrop"] for r in rows}):
        sub = [r for r in rows if r["backdrop"] == bd]
        e = evaluate([r["state"] for r in sub], [r["called"] for r in sub])
        sl = [r for r in sub if r["state"] != "empty" and r["colour"]]
        ca = sum(r["colour_called"] == r["colour"] for r in sl) / len(sl) if sl else float("nan")
        print(f"  {bd:8s} tubes {len(sub):4d}  state macro-F1 {e.macro_f1:.4f}  colour-word accuracy {ca:.4f}")
    print()
    print(f"state macro-F1 {ev.macro_f1:.4f} (target >= {STATE_TARGET}): "
          f"{'met' if ev.macro_f1 >= STATE_TARGET else 'NOT met'}")
    print(f"colour-word accuracy {acc:.4f} (target >= {COLOUR_TARGET}): "
          f"{'met' if acc >= COLOUR_TARGET else 'NOT met'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
