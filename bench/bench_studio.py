"""Render time of the studio: a 2016 × 1512 photo should take at most 2 s on one core.

Run: ``OMP_NUM_THREADS=1 /work/venv/bin/python bench/bench_studio.py``. Prints seconds per
render (median of 5, after one warm-up that fills the spectral caches) for a few layouts.
"""

from __future__ import annotations

import os
import statistics
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import cv2  # noqa: E402

from tubevision.studio import SceneSpec, TubeSpec, demo_scene, random_scene, render_scene  # noqa: E402
from tubevision.studio.materials import CONTENTS  # noqa: E402

TARGET_S = 2.0
"""Budget per 2016 × 1512 photo on one core (issue 3)."""


def _time(spec: SceneSpec, n: int = 5) -> float:
    render_scene(spec, seed=0)
    out = []
    for k in range(n):
        t0 = time.perf_counter()
        render_scene(spec, seed=k + 1)
        out.append(time.perf_counter() - t0)
    return statistics.median(out)


def main() -> int:
    cv2.setNumThreads(1)
    import numpy as np

    keys = list(CONTENTS)
    cases = {
        "demo (6 tubes, banded, card)": demo_scene(),
        "24 tubes, one row": SceneSpec(tubes=tuple(TubeSpec(keys[i % len(keys)]) for i in range(24))),
        "24 tubes, two rows, vbands": SceneSpec(tubes=tuple(TubeSpec(keys[i % len(keys)]) for i in range(24)),
                                               rows=2, backdrop="vbands"),
        "random scene (seed 7)": random_scene(np.random.default_rng(7)),
    }
    worst = 0.0
    for name, spec in cases.items():
        s = _time(spec)
        worst = max(worst, s)
        print(f"{name:34s} {spec.width_px}x{spec.height_px}: {s:.3f} s per render")
    print(f"worst {worst:.3f} s; target <= {TARGET_S:.1f} s: {'met' if worst <= TARGET_S else 'NOT met'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
