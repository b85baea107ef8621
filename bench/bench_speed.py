"""Speed budget: analysing a 12-megapixel photo vs decoding its JPEG, side by side in one run.

Target (developers' brief): analysis ≤ 3 × the JPEG decode time of the same photo.
"Analysis" is :func:`tubevision.analysis.analyze_photo` plus building the record; the
decode is :func:`tubevision.image.load_photo` (Pillow). Writing the PNG/HTML outputs is
timed separately, since it is file output rather than analysis.

Run: ``python bench/bench_speed.py`` (prints its figures; takes about a minute).
"""

from __future__ import annotations

import dataclasses
import statistics
import sys
import tempfile
import time
from pathlib import Path


def main(repeats: int = 3) -> int:
    from tubevision.analysis import AnalysisOptions, analyze_photo, load_shared
    from tubevision.image import load_photo
    from tubevision.record.build import build_record
    from tubevision.record.folder import photo_output_files
    from tubevision.studio import demo_scene, render_scene, save_rendered

    spec = dataclasses.replace(demo_scene(), width_px=4032, height_px=3024)
    t = time.perf_counter()
    rendered = render_scene(spec, seed=7)
    print(f"render 4032x3024: {time.perf_counter() - t:.2f} s")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "rack12mp.jpg"
        save_rendered(rendered, path, truth=False)
        print(f"JPEG size: {path.stat().st_size / 1e6:.2f} MB")
        options = AnalysisOptions(scheme="group1", step="chloride-precipitation",
                                  labels="1=control,2=blank,3=unknown W-1")
        shared = load_shared(options)
        decode, analyse, write = [], [], []
        for _ in range(repeats):
            t0 = time.perf_counter()
            photo = load_photo(path)
            t1 = time.perf_counter()
            analysis = analyze_photo(photo, options, **shared)
            record = build_record(analysis)
            t2 = time.perf_counter()
            photo_output_files(analysis, record)
            t3 = time.perf_counter()
            decode.append(t1 - t0)
            analyse.append(t2 - t1)
            write.append(t3 - t2)
    d, a, w = (statistics.median(v) for v in (decode, analyse, write))
    print(f"tubes found: {len(record['tubes'])}, calibration: {record['calibration']['status']}")
    print(f"decode (load_photo) median: {d * 1000:.0f} ms")
    print(f"analysis (analyze_photo + build_record) median: {a * 1000:.0f} ms")
    print(f"outputs (annotated PNG, report, csv) median: {w * 1000:.0f} ms")
    print(f"analysis / decode = {a / d:.2f} (target <= 3.00): {'PASS' if a / d <= 3 else 'FAIL'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
