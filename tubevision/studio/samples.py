"""Regenerate ``sample_images/``: a few small rendered photos with their truth.

Run from the repository root::

    python -m tubevision.studio.samples sample_images

Writes each photo as JPEG (1008 × 756 upright, quality 88), its truth as
``<stem>.truth.json`` beside it, ``SHA256SUMS`` (``sha256sum -c`` format) and
``README.txt``. All scenarios are invented. Same code and library versions
give the same files.
"""

from __future__ import annotations

import hashlib
import sys
from pathlib import Path

from .camera import CameraSpec
from .generate import demo_scene, save_rendered
from .scene import SceneSpec, TubeSpec, render_scene

__all__ = ["SAMPLES", "sample_specs", "write_samples"]

SAMPLE_SIZE_PX = (1008, 756)
"""Width and height of the upright sample photos (a quarter of a 12 MP frame's area / 4)."""

SAMPLE_JPEG_QUALITY = 88
"""JPEG quality of the samples (keeps each file well under 300 kB)."""


def sample_specs() -> dict[str, tuple[SceneSpec, int, str]]:
    """The sample scenes: file stem → (spec, seed, one-line description). Invented scenarios."""
    w, h = SAMPLE_SIZE_PX
    cam = CameraSpec(jpeg_quality=SAMPLE_JPEG_QUALITY)
    demo = demo_scene().with_(width_px=w, height_px=h, camera=cam)
    return {
        "demo-chloride-step": (demo, 101, "demo scenario: water-screening bench, chloride step, banded backdrop"),
        "mixed-plain-d65": (SceneSpec(
            tubes=(TubeSpec("yellow-solution", label="K-1"), TubeSpec("blue-solution", label="K-2"),
                   TubeSpec("water", label="blank"), TubeSpec("yellow-precipitate", fill_mm=48.0, label="K-3"),
                   TubeSpec("red-solution", label="K-4"), TubeSpec("empty")),
            illuminant="D65", camera=cam, width_px=w, height_px=h, scenario="coloured solutions, plain backdrop"),
            102, "six tubes, plain light backdrop, D65, phone-a sensor"),
        "two-rows-fl11": (SceneSpec(
            tubes=tuple(TubeSpec(k) for k in ("water", "white-precipitate", "black-precipitate", "brown-precipitate",
                                              "pink-precipitate", "green-solution", "orange-solution",
                                              "pink-solution", "yellow-cloud", "white-cloud")),
            rows=2, illuminant="FL11", camera=cam.with_(sensor="nikon5100-npl"), rack_colour="blue",
            card_angle_deg=-5.0,
            width_px=w, height_px=h, scenario="two racks, fluorescent light"),
            103, "ten tubes in two rows, FL11, Nikon 5100 (NPL) sensor, card turned 5 degrees"),
        "rotated-exif6-led": (SceneSpec(
            tubes=(TubeSpec("white-cloud-settling"), TubeSpec("water"), TubeSpec("white-precipitate")),
            illuminant="LED-B3", camera=cam.with_(sensor="phone-b"), exif_orientation=6,
            width_px=w, height_px=h, scenario="photo stored sideways with EXIF orientation 6"),
            104, "three tubes, LED-B3, stored rotated with EXIF orientation 6"),
        "vbands-warm": (SceneSpec(
            tubes=tuple(TubeSpec(k) for k in ("blue-solution", "water", "red-solution", "milky", "empty")),
            illuminant="planck-2700", camera=cam.with_(sensor="sigma-sdmerill-npl"), backdrop="vbands",
            rack_colour="grey", width_px=w, height_px=h, scenario="warm lamp, vertical bands"),
            105, "five tubes, Planckian 2700 K, vertical dark bands, Sigma SDMerill (NPL) sensor"),
        "turbidity-series-hbands": (SceneSpec(
            tubes=tuple(TubeSpec("white-cloud", turbidity=t, label=f"tau={t:g}")
                        for t in (0.0, 0.2, 0.5, 1.0, 2.0, 4.0, 8.0)),
            illuminant="A", camera=cam.with_(white_balance="grey"), backdrop="hbands",
            width_px=w, height_px=h, scenario="turbidity series over dark bands"),
            106, "seven tubes from clear to milky (tau 0-8), illuminant A, horizontal dark bands"),
    }


SAMPLES = tuple(sample_specs())
"""Stems of the sample photos."""


def write_samples(folder: str | Path) -> list[Path]:
    """Render all samples into ``folder`` with truth, SHA256SUMS and README.txt; return the files."""
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    files: list[Path] = []
    lines = []
    for stem, (spec, seed, desc) in sample_specs().items():
        img = save_rendered(render_scene(spec, seed=seed), out / f"{stem}.jpg")
        files += [img, out / f"{stem}.truth.json"]
        lines.append(f"- {stem}.jpg (seed {seed}): {desc}")
    readme = out / "README.txt"
    readme.write_text(
        "Synthetic rack photos rendered by tubevision's studio (spectral renderer, invented scenarios),\n"
        "made with: python -m tubevision.studio.samples sample_images\n"
        "Each photo has its ground truth beside it (<stem>.truth.json, pixels of the upright photo).\n\n"
        + "\n".join(lines) + "\n", encoding="utf-8")
    files.append(readme)
    sums = "".join(f"{hashlib.sha256(f.read_bytes()).hexdigest()}  {f.name}\n" for f in sorted(files))
    (out / "SHA256SUMS").write_text(sums, encoding="utf-8")
    return files + [out / "SHA256SUMS"]


def main(argv: list[str] | None = None) -> int:
    """Command-line entry: ``python -m tubevision.studio.samples FOLDER``."""
    argv = sys.argv[1:] if argv is None else argv
    write_samples(argv[0] if argv else "sample_images")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
