"""Card calibration accuracy on studio photos: held-out patches and tube liquids vs truth.

Targets (issue "Reference card and colour calibration"), over at least 6 illuminants ×
3 camera sensitivities:

* held-out patch ΔE00 (CIEDE2000) median ≤ 1.0 — each patch in turn is left out of the
  fit (white balance and model choice redone without it) and predicted from the rest;
* tube liquid colour ΔE00 against the studio's truth median ≤ 1.5, 90th percentile ≤ 3.0,
  measured in the true tube boxes (so this isolates calibration + measurement from the
  finder);
* the uncalibrated reading (camera RGB taken as sRGB, IEC 61966-2-1) printed beside both,
  so the gain from the card is visible.

Truth is the studio's own colorimetry of the rendered spectra (CIE 1931 2°, D65), not the
card's nominal file: the printed patch spectra, the liquids' Beer–Lambert transmittance
over the light backdrop (see ``tubevision.studio``). Everything here is rendered; real
photos will differ (see the README's known limits).

Run: ``python bench/bench_card.py`` (full: 7 illuminants × 5 sensors) or
``python bench/bench_card.py --quick`` (6 × 3, smaller photos).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

QUICK_ILLUMINANTS = ("A", "D50", "D65", "FL2", "FL11", "LED-B3")
QUICK_SENSORS = ("phone-a", "nikon5100-npl", "sigma-sdmerill-npl")

CONTENTS = ("water", "yellow-solution", "orange-solution", "red-solution", "blue-solution",
            "green-solution", "pink-solution", "faint-cloud")
"""Liquids whose apparent colour the bench checks (clear or nearly clear ones: a heavy
suspension's 'apparent colour over the backdrop' depends on the pixels chosen more than on
calibration)."""


def _pct(values, q):
    return float(np.percentile(np.asarray(values, dtype=float), q)) if len(values) else float("nan")


def held_out_patches(detection, reference, truth_lab_d65):
    """ΔE00 of each usable patch predicted by a fit without it; uncalibrated ΔE00 beside it.

    The fits use ``reference`` (the card's nominal values, as a user has them); the error is
    against ``truth_lab_d65`` (patch id → the studio's D65 colorimetry of the printed patch).
    """
    from tubevision.card.fit import apply_card_correction, fit_card_correction, uncalibrated_correction
    from tubevision.colorimetry import delta_e00, xyz_to_lab

    ref = dict(zip(reference.ids, reference.lab_d65()))
    ok = np.asarray(detection.patch_ok, dtype=bool)
    unc = uncalibrated_correction()
    held, raw = [], []
    for k, pid in enumerate(detection.patch_ids):
        if not ok[k] or pid not in ref:
            continue
        mask = ok.copy()
        mask[k] = False
        corr = fit_card_correction(replace(detection, patch_ok=mask), reference)
        rgb = detection.patch_rgb_linear[k][None, :]
        lab = xyz_to_lab(np.clip(apply_card_correction(corr, rgb), 1e-6, None))
        lab_u = xyz_to_lab(np.clip(apply_card_correction(unc, rgb), 1e-6, None))
        truth = np.asarray(truth_lab_d65[pid])[None, :]
        held.append(float(delta_e00(lab, truth)[0]))
        raw.append(float(delta_e00(lab_u, truth)[0]))
    return held, raw


CLIPPED_SHARE = 0.2
"""A tube counts as gamut-clipped when more than this share of its measured pixels has a
channel at code 0 or at full scale: the camera's JPEG could not hold the colour, so no
calibration can recover it (the liquid lies outside the photo's sRGB gamut)."""


def gamut_clipped(pixels: np.ndarray, region) -> bool:
    """Whether the tube's measuring band is mostly clipped in some channel (see CLIPPED_SHARE)."""
    top = np.iinfo(pixels.dtype).max
    sub = pixels[region.liquid_top:region.liquid_bottom, region.inner_col0:region.inner_col1]
    share = float(np.mean(np.any((sub <= 0) | (sub >= top), axis=-1))) if sub.size else 0.0
    return share > CLIPPED_SHARE


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="6 illuminants × 3 sensors at 1344×1008")
    ap.add_argument("--seed", type=int, default=4100, help="first render seed (default 4100)")
    args = ap.parse_args(argv)

    from tubevision.card import detect as card_detect
    from tubevision.card import fit as card_fit
    from tubevision.card.reference import load_card_reference
    from tubevision.classify.train import truth_regions
    from tubevision.colorimetry import delta_e00
    from tubevision.image import load_photo
    from tubevision.measure import measure_tube
    from tubevision.studio import SceneSpec, TubeSpec, save_rendered, suite
    from tubevision.studio.spectra import ILLUMINANT_NAMES, SENSOR_NAMES

    illuminants = QUICK_ILLUMINANTS if args.quick else ILLUMINANT_NAMES
    sensors = QUICK_SENSORS if args.quick else tuple(s for s in SENSOR_NAMES if s != "ideal-cmf")
    size = (1344, 1008) if args.quick else (2016, 1512)
    base = SceneSpec(tubes=tuple(TubeSpec(c, fill_mm=50.0) for c in CONTENTS),
                     width_px=size[0], height_px=size[1], backdrop="plain")

    nominal = load_card_reference(None)
    held_all, raw_all, tube_cal, tube_raw, tube_clip = [], [], [], [], []
    per_cond = []
    not_found = 0
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        for k, rendered in enumerate(suite({"illuminant": illuminants, "sensor": sensors},
                                           seed=args.seed, base=base)):
            cond = rendered.truth["conditions"]["grid"]
            path = save_rendered(rendered, Path(tmp) / f"p{k}.jpg", truth=False)
            photo = load_photo(path)
            det = card_detect.find_card(photo.pixels)
            if not det:
                not_found += 1
                print(f"  {cond['illuminant']:>8} {cond['sensor']:<20} card NOT found: {det.reason}")
                continue
            # truth for the patches: the studio's colorimetry of the printed spectra (D65)
            truth_patches = {p["id"]: p["lab_d65"] for p in rendered.truth["card"]["patches"]}
            held, raw = held_out_patches(det, nominal, truth_patches)
            held_all += held
            raw_all += raw

            corr = card_fit.fit_card_correction(det, nominal)
            unc = card_fit.uncalibrated_correction()
            cal, raw_t, clipped = [], [], []
            # the true tube geometry (liquid top, central third), as the classifier's training
            # measures it, so these figures are about calibration and measurement, not finding
            for t, region in zip(rendered.truth["tubes"], truth_regions(rendered.truth)):
                if t["lab"] is None:
                    continue
                clipped.append(gamut_clipped(photo.pixels, region))
                m = measure_tube(photo.pixels, region, correction=corr, mm_per_px=det.mm_per_px)
                mu = measure_tube(photo.pixels, region, correction=unc, mm_per_px=det.mm_per_px)
                truth = np.asarray(t["lab"])[None, :]
                if m.liquid is not None and m.liquid.lab is not None:
                    cal.append(float(delta_e00(np.asarray(m.liquid.lab)[None, :], truth)[0]))
                if mu.liquid is not None and mu.liquid.lab is not None:
                    raw_t.append(float(delta_e00(np.asarray(mu.liquid.lab)[None, :], truth)[0]))
            tube_cal += cal
            tube_raw += raw_t
            tube_clip += clipped
            per_cond.append((cond["illuminant"], cond["sensor"], corr.method, statistics.median(held),
                             statistics.median(raw), statistics.median(cal) if cal else float("nan"),
                             statistics.median(raw_t) if raw_t else float("nan")))
    elapsed = time.perf_counter() - t0

    print(f"\ncard calibration bench ({'quick' if args.quick else 'full'}): {len(illuminants)} illuminants × "
          f"{len(sensors)} sensors, {size[0]}×{size[1]} px, {elapsed:.1f} s")
    print(f"{'illuminant':>10} {'sensor':<20} {'fit':<8} {'patch LOO':>9} {'patch raw':>9} "
          f"{'tube cal':>8} {'tube raw':>8}   (median ΔE00)")
    for ill, sen, meth, h, r, c, u in per_cond:
        print(f"{ill:>10} {sen:<20} {meth:<8} {h:9.2f} {r:9.2f} {c:8.2f} {u:8.2f}")
    print(f"\ncards not found: {not_found}")
    print(f"held-out patch ΔE00: median {_pct(held_all, 50):.2f} (target ≤ 1.0), p90 {_pct(held_all, 90):.2f}, "
          f"n={len(held_all)}; uncalibrated median {_pct(raw_all, 50):.2f}, p90 {_pct(raw_all, 90):.2f}")
    print(f"tube liquid ΔE00: median {_pct(tube_cal, 50):.2f} (target ≤ 1.5), p90 {_pct(tube_cal, 90):.2f} "
          f"(target ≤ 3.0), n={len(tube_cal)}; uncalibrated median {_pct(tube_raw, 50):.2f}, "
          f"p90 {_pct(tube_raw, 90):.2f}")
    inside = [c for c, k in zip(tube_cal, tube_clip) if not k]
    inside_raw = [c for c, k in zip(tube_raw, tube_clip) if not k]
    print(f"  of which within the photo's gamut ({len(inside)} tubes; {sum(tube_clip)} gamut-clipped left out): "
          f"median {_pct(inside, 50):.2f}, p90 {_pct(inside, 90):.2f}; uncalibrated median "
          f"{_pct(inside_raw, 50):.2f}, p90 {_pct(inside_raw, 90):.2f}")
    ok = (not_found == 0 and _pct(held_all, 50) <= 1.0 and _pct(tube_cal, 50) <= 1.5
          and _pct(tube_cal, 90) <= 3.0)
    print("targets met" if ok else "targets NOT met")
    return 0


if __name__ == "__main__":
    sys.exit(main())
