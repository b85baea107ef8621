"""Start-up time of the command line: ``tubevision --help`` must return in under 0.5 s.

Heavy libraries (OpenCV, scikit-image, scikit-learn, SciPy) are imported lazily by the
stages that need them, so asking for help costs only Python, argparse and the package's
light modules. Prints the median and worst of several runs in fresh interpreters.

Run: ``python bench/bench_cli.py``
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import time

TARGET_S = 0.5
"""The foundation issue's limit for ``tubevision --help``."""


def main(runs: int = 7) -> int:
    cmds = {"tubevision --help": [sys.executable, "-m", "tubevision", "--help"],
            "python -c pass (interpreter alone)": [sys.executable, "-c", "pass"]}
    for name, cmd in cmds.items():
        times = []
        for _ in range(runs):
            t = time.perf_counter()
            subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            times.append(time.perf_counter() - t)
        print(f"{name:<36} median {statistics.median(times) * 1000:6.0f} ms, worst {max(times) * 1000:6.0f} ms")
        if name.startswith("tubevision"):
            verdict = statistics.median(times) < TARGET_S
    print(f"target: median < {TARGET_S * 1000:.0f} ms -> {'met' if verdict else 'NOT met'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
