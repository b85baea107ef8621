"""Measure-stage benchmark on studio photos: turbidity, settled solid, liquid colour, speed.

What it isolates: the measure stage. Tube regions come from the studio's truth (the
true rows of the liquid top, round bottom and inside bottom, the central third of the
inner width around the true axis), so the tubes stage's errors do not enter; the
colour correction and the mm scale come from the card exactly as
:func:`tubevision.analysis.analyze_photo` gets them (``find_card`` +
``fit_card_correction`` on the nominal reference), with the scale taken at each
tube's position through the card's homography (:func:`tubevision.measure.mm_per_px_at`).

Figures (issue #6 targets in brackets):

* turbidity: Spearman rank correlation of τ with the true scattering depth over
  each dilution series (one photo = one series of a suspension, twofold steps)
  [≥ 0.98], its minimum over series, and pooled over all series;
* faint cloud vs clear (water and clear coloured solutions): ROC AUC of τ [≥ 0.99];
* settled solid ≥ 1 mm: F1 of presence over precipitate tubes and solid-free tubes
  (clear, coloured — incl. yellow — and cloudy) [≥ 0.95]; |height error| median/p90/max
  [≤ 0.5 mm];
* liquid colour: ΔE00 of the measured ``lab`` vs the truth's, median and p90;
* speed: ms per ``measure_tube`` call on a 4032 × 3024 photo.

Conditions vary over illuminants (D65, A, FL11, LED-B3, planck-4000), sensors (phone
Gaussians and the NPL-measured cameras), banded and plain backdrops, with the camera's
own noise, blur, vignetting, perspective and JPEG; every photo is seeded.

Run: ``python bench/bench_measure.py --quick`` (< 1 min) or ``python bench/bench_measure.py``
(full, a few minutes). Prints its figures; exit status 0 always (a benchmark, not a test).
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

ILLUMINANTS = ("D65", "A", "FL11", "LED-B3", "planck-4000")
SENSORS = ("phone-a", "nikon5100-npl", "phone-b", "sigma-sdmerill-npl", "phone-c")
DILUTION = (0.0, 0.05, 0.1, 0.2, 0.4, 0.8, 1.6, 3.2, 6.4)
"""Scattering optical depths of a twofold dilution series (studio's τ at 550 nm)."""
SUSPENSIONS = ("white-cloud", "yellow-cloud", "brown-cloud")


def truth_regions(truth: dict):
    """TubeRegions from the studio truth: central third of the inner width, true rows."""
    from tubevision.tubes import TubeRegion

    out = []
    for t in truth["tubes"]:
        x0, y0, x1, y1 = t["bbox"]
        i0, i1 = t["inner_col0"], t["inner_col1"]
        third = (i1 - i0) / 3.0
        c0 = int(round(i0 + third))
        c1 = max(c0 + 1, int(round(i1 - third)))
        lt = t["liquid_top"] if t["liquid"] is not None else None
        out.append(TubeRegion(index=t["index"], row=t["row"], bbox=(x0, y0, x1, y1), axis_col=float(t["axis_col"]),
                              inner_col0=c0, inner_col1=c1, liquid_top=lt, liquid_bottom=int(t["bottom_top"]),
                              bottom_top=int(t["bottom_top"]), inner_bottom=int(t["inner_bottom"]),
                              source="layout"))
    return out


def calibrate(pixels):
    """(correction, detection or None) exactly as analysis.py does."""
    from tubevision.card import detect as card_detect
    from tubevision.card import fit as card_fit
    from tubevision.card.reference import load_card_reference

    det = card_detect.find_card(pixels)
    if not det:
        return card_fit.uncalibrated_correction(), None
    return card_fit.fit_card_correction(det, load_card_reference(None)), det


def measure_photo(rendered, timings=None):
    from tubevision.measure import measure_tube, mm_per_px_at

    pix = rendered.pixels
    corr, det = calibrate(pix)
    regs = truth_regions(rendered.truth)
    out = []
    for r in regs:
        mm = None
        if det is not None:
            mm = mm_per_px_at(det.homography_mm_to_px, (r.axis_col, r.inner_bottom))
        t0 = time.perf_counter()
        m = measure_tube(pix, r, correction=corr, mm_per_px=mm)
        if timings is not None:
            timings.append(time.perf_counter() - t0)
        out.append(m)
    return out, det is not None


def _camera(k: int):
    from tubevision.studio import CameraSpec

    return CameraSpec().with_(sensor=SENSORS[k % len(SENSORS)], exposure_ev=-0.1 - 0.1 * (k % 3),
                              blur_px=0.6 + 0.2 * (k % 4), jpeg_quality=80 + 3 * (k % 5))


def _spec(tubes, k: int, backdrop: str, size):
    from tubevision.studio import SceneSpec

    return SceneSpec(tubes=tuple(tubes), illuminant=ILLUMINANTS[k % len(ILLUMINANTS)], camera=_camera(k),
                     backdrop=backdrop, width_px=size[0], height_px=size[1],
                     light_gradient=(0.06 * ((k % 3) - 1), 0.04 * ((k % 2) * 2 - 1)),
                     specular=0.6 + 0.2 * (k % 4), scenario="measure bench (invented)")


def spearman(a, b) -> float:
    from scipy.stats import spearmanr

    return float(spearmanr(a, b).statistic)


def roc_auc(pos, neg) -> float:
    """Probability a positive scores above a negative (ties count half): Mann-Whitney U / (n1 n0)."""
    pos, neg = np.asarray(pos, float), np.asarray(neg, float)
    gt = (pos[:, None] > neg[None, :]).sum()
    eq = (pos[:, None] == neg[None, :]).sum()
    return float((gt + 0.5 * eq) / (pos.size * neg.size))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="few photos, under a minute")
    args = ap.parse_args(argv)
    from tubevision.colorimetry import delta_e00
    from tubevision.studio import TubeSpec, render_scene

    quick = args.quick
    size = (2016, 1512)
    n_series = 3 if quick else 15
    n_faint = 2 if quick else 10
    n_pellet = 3 if quick else 15
    t_start = time.perf_counter()
    timings: list[float] = []
    cal_ok = 0
    n_photos = 0
    de_all: list[tuple[float, str]] = []
    warn_counts: dict[str, int] = {}

    def colour_errors(rendered, ms):
        cond = rendered.truth["conditions"]
        for t, m in zip(rendered.truth["tubes"], ms):
            if t["liquid"] is not None and m.liquid is not None:
                d = float(delta_e00(np.array(m.liquid.lab), np.array(t["liquid"]["lab"])))
                de_all.append((d, f"{t['contents']} ({cond['backdrop']}, {cond['illuminant']}, {cond['sensor']}, "
                                  f"seed {cond['seed']}, {m.liquid.n_pixels} px, truth "
                                  f"{np.round(t['liquid']['lab'], 1).tolist()} read "
                                  f"{np.round(m.liquid.lab, 1).tolist()})"))
            for w in m.warnings:
                key = w.split(": ", 1)[-1].split(";")[0][:40]
                warn_counts[key] = warn_counts.get(key, 0) + 1

    # 1. dilution series
    rhos, pooled_t, pooled_m = [], [], []
    for k in range(n_series):
        sus = SUSPENSIONS[k % len(SUSPENSIONS)]
        tubes = [TubeSpec("water" if s == 0 else sus, turbidity=(s if s > 0 else None),
                          fill_mm=50.0 + 2 * (i % 3)) for i, s in enumerate(DILUTION)]
        backdrop = "hbands" if k % 4 != 3 else "plain"
        r = render_scene(_spec(tubes, k, backdrop, size), seed=1000 + k)
        ms, ok = measure_photo(r, timings)
        cal_ok += ok
        n_photos += 1
        colour_errors(r, ms)
        tt = [t["liquid"]["turbidity"] for t in r.truth["tubes"]]
        mt = [m.liquid.turbidity if m.liquid else float("nan") for m in ms]
        rho = spearman(tt, mt)
        rhos.append((rho, sus, backdrop))
        if backdrop == "hbands":
            pooled_t += tt
            pooled_m += mt
        print(f"  series {k:2d} {sus:12s} {backdrop:6s} {ILLUMINANTS[k % 5]:11s} {SENSORS[k % 5]:18s} "
              f"rho={rho:.3f}  tau=" + " ".join(f"{v:.2f}" for v in mt))

    # 2. faint cloud vs clear
    pos, neg = [], []
    clear_kinds = ("water", "yellow-solution", "blue-solution", "pink-solution", "water", "orange-solution")
    for k in range(n_faint):
        tubes = []
        for i in range(6):
            tubes.append(TubeSpec("faint-cloud", turbidity=float(0.25 + 0.05 * ((i + k) % 5))))
            tubes.append(TubeSpec(clear_kinds[(i + k) % len(clear_kinds)]))
        r = render_scene(_spec(tubes, k + 7, "hbands", size), seed=2000 + k)
        ms, ok = measure_photo(r, timings)
        cal_ok += ok
        n_photos += 1
        colour_errors(r, ms)
        for t, m in zip(r.truth["tubes"], ms):
            (pos if t["contents"] == "faint-cloud" else neg).append(m.liquid.turbidity if m.liquid else 0.0)

    # 3. settled solid
    conf = {"hbands": [0, 0, 0, 0], "plain": [0, 0, 0, 0]}      # tp, fp, fn, tn
    herr_by: dict[str, list[float]] = {"hbands": [], "plain": []}
    misses: list[str] = []
    solids = ("white-precipitate", "yellow-precipitate", "black-precipitate", "brown-precipitate",
              "pink-precipitate")
    nonsolid = ("water", "yellow-solution", "white-cloud", "orange-solution", "milky", "red-solution",
                "faint-cloud", "blue-solution", "yellow-cloud", "brown-cloud")
    for k in range(n_pellet):
        rng = np.random.default_rng(3000 + k)
        tubes = []
        for i in range(10):
            if i % 2 == 0:
                tubes.append(TubeSpec(solids[(i // 2 + k) % len(solids)], pellet_mm=float(np.round(rng.uniform(1.0, 8.0), 2))))
            else:
                tubes.append(TubeSpec(nonsolid[(i // 2 + 5 * k) % len(nonsolid)]))
        backdrop = "hbands" if k % 3 != 2 else "plain"
        r = render_scene(_spec(tubes, k + 3, backdrop, size), seed=3000 + k)
        ms, ok = measure_photo(r, timings)
        cal_ok += ok
        n_photos += 1
        colour_errors(r, ms)
        c = conf[backdrop]
        where = f"({backdrop}, photo {k}, {ILLUMINANTS[(k + 3) % 5]}, {SENSORS[(k + 3) % 5]})"
        for t, m in zip(r.truth["tubes"], ms):
            truth_present = t["pellet"]["present"] and t["pellet"]["height_mm"] >= 1.0
            found = m.pellet.present
            if truth_present and found:
                c[0] += 1
                if m.pellet.height_mm is not None:
                    e = m.pellet.height_mm - t["pellet"]["height_mm"]
                    herr_by[backdrop].append(e)
                    if abs(e) > 0.5:
                        misses.append(f"height {t['contents']} {t['pellet']['height_mm']} mm read "
                                      f"{m.pellet.height_mm:.2f} mm {where}")
            elif truth_present:
                c[2] += 1
                misses.append(f"miss {t['contents']} {t['pellet']['height_mm']} mm {where}")
            elif found:
                c[1] += 1
                misses.append(f"false {t['contents']} {m.pellet.height_mm:.2f} mm {where}")
            else:
                c[3] += 1

    # 4. speed on a 12 MP photo
    sp_t: list[float] = []
    sp_cpu: list[float] = []
    tubes = [TubeSpec(c) for c in ("white-precipitate", "water", "yellow-solution", "faint-cloud",
                                   "white-cloud-settling", "blue-solution")] * 2
    r = render_scene(_spec(tubes, 0, "hbands", (4032, 3024)), seed=4000)
    corr, det = calibrate(r.pixels)
    from tubevision.measure import measure_tube

    for reg in truth_regions(r.truth):
        measure_tube(r.pixels, reg, correction=corr, mm_per_px=0.1)
    for _ in range(1 if quick else 3):
        for reg in truth_regions(r.truth):
            t0, c0 = time.perf_counter(), time.process_time()
            measure_tube(r.pixels, reg, correction=corr, mm_per_px=0.1)
            sp_t.append(time.perf_counter() - t0)
            sp_cpu.append(time.process_time() - c0)

    # report
    print()
    print(f"photos: {n_photos} ({'quick' if quick else 'full'}), card found in {cal_ok}")
    band = [x for x, _, b in rhos if b == "hbands"]
    plain = [x for x, _, b in rhos if b == "plain"]
    print(f"turbidity Spearman per dilution series, banded: median {statistics.median(band):.3f}, "
          f"min {min(band):.3f} over {len(band)} series (target >= 0.98)")
    if plain:
        print(f"turbidity Spearman per dilution series, plain backdrop: min {min(plain):.3f} over {len(plain)}")
    if pooled_t:
        print(f"turbidity Spearman pooled over all banded series ({len(pooled_t)} tubes): "
              f"{spearman(pooled_t, pooled_m):.3f}")
    print(f"faint cloud vs clear ROC AUC: {roc_auc(pos, neg):.4f} ({len(pos)} faint, {len(neg)} clear; "
          f"target >= 0.99); faint tau median {np.median(pos):.3f}, clear tau p95 {np.percentile(neg, 95):.3f}")
    def f1_line(name, c, errs):
        tp, fp, fn, tn = c
        prec = tp / max(1, tp + fp)
        rec = tp / max(1, tp + fn)
        f1 = 2 * prec * rec / max(1e-9, prec + rec)
        print(f"settled solid >= 1 mm, {name}: F1 {f1:.3f} (precision {prec:.3f}, recall {rec:.3f}; tp {tp} "
              f"fp {fp} fn {fn} tn {tn}; target >= 0.95)")
        if errs:
            a = np.abs(errs)
            print(f"  height error, {name}: median |e| {np.median(a):.2f} mm, p90 {np.percentile(a, 90):.2f} mm, "
                  f"max {a.max():.2f} mm, mean signed {np.mean(errs):+.2f} mm (target <= 0.5 mm)")

    f1_line("banded backdrop", conf["hbands"], herr_by["hbands"])
    f1_line("plain backdrop", conf["plain"], herr_by["plain"])
    f1_line("all", [a + b for a, b in zip(conf["hbands"], conf["plain"])], herr_by["hbands"] + herr_by["plain"])
    for line in misses[:20]:
        print(f"  {line}")
    de_all.sort(key=lambda x: -x[0])
    for d, what in de_all[:3]:
        print(f"  worst colour: dE00 {d:.1f} {what}")
    de = np.asarray([d for d, _ in de_all])
    print(f"liquid colour dE00 vs truth: median {np.median(de):.2f}, p90 {np.percentile(de, 90):.2f}, "
          f"max {de.max():.2f} over {de.size} tubes")
    print(f"measure_tube speed, 4032x3024 photo: median {1000 * statistics.median(sp_t):.1f} ms per tube wall, "
          f"{1000 * statistics.median(sp_cpu):.1f} ms CPU (target <= 10 ms; wall time rises when other jobs "
          f"share the cores, see os.getloadavg {os.getloadavg()[0]:.1f}); 2016x1512: "
          f"median {1000 * statistics.median(timings):.1f} ms wall")
    top = sorted(warn_counts.items(), key=lambda kv: -kv[1])[:6]
    if top:
        print("most common tube warnings: " + "; ".join(f"{k!r} x{v}" for k, v in top))
    print(f"bench time: {time.perf_counter() - t_start:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
