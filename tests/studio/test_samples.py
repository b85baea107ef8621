"""sample_images/: integrity and agreement with the generator.

Kinds: (3) regression — the stored files are what the studio produced; the SHA256 list
guards them, and the truth regenerates from the spec.
"""

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from tubevision.image import load_photo
from tubevision.studio import render_scene
from tubevision.studio.samples import SAMPLES, sample_specs

FOLDER = Path(__file__).resolve().parents[2] / "sample_images"


def test_sha256sums_list_every_file_and_match():
    lines = (FOLDER / "SHA256SUMS").read_text().splitlines()
    listed = {}
    for ln in lines:
        digest, name = ln.split("  ", 1)
        listed[name] = digest
    for name, digest in listed.items():
        assert hashlib.sha256((FOLDER / name).read_bytes()).hexdigest() == digest, name
    for stem in SAMPLES:
        assert f"{stem}.jpg" in listed and f"{stem}.truth.json" in listed


@pytest.mark.parametrize("stem", SAMPLES)
def test_samples_load_upright_and_fit_their_truth(stem):
    photo = load_photo(FOLDER / f"{stem}.jpg")
    truth = json.loads((FOLDER / f"{stem}.truth.json").read_text())
    h, w = photo.pixels.shape[:2]
    assert [w, h] == truth["size"]
    assert (FOLDER / f"{stem}.jpg").stat().st_size <= 300_000
    for t in truth["tubes"]:
        x0, y0, x1, y1 = t["bbox"]
        assert 0 <= x0 < x1 <= w and 0 <= y0 < y1 <= h


def _close(a, b) -> bool:
    """Same JSON tree, floats equal to 1e-9 relative (or 1e-9 absolute near zero)."""
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(_close(a[k], b[k]) for k in a)
    if isinstance(a, list):
        return isinstance(b, list) and len(a) == len(b) and all(map(_close, a, b))
    if isinstance(a, float) and isinstance(b, (int, float)) and not isinstance(b, bool):
        return b == pytest.approx(a, rel=1e-9, abs=1e-9)
    return a == b


def test_a_sample_has_exif_rotation_and_truth_regenerates():
    orient = {stem: spec.exif_orientation for stem, (spec, _, _) in sample_specs().items()}
    assert any(v != 1 for v in orient.values())
    stem = "rotated-exif6-led"
    spec, seed, _ = sample_specs()[stem]
    again = render_scene(spec.with_(width_px=spec.width_px), seed=seed)
    stored = json.loads((FOLDER / f"{stem}.truth.json").read_text())
    if (stored["card"] or {}).get("art_sha256") != (again.truth["card"] or {}).get("art_sha256"):
        pytest.skip("the card design changed since sample_images/ was made: "
                    "run python -m tubevision.studio.samples sample_images")
    # equal up to the last bits of floating point, which differ between numpy builds
    assert _close(json.loads(json.dumps(again.truth)), stored)
    # the pixels regenerate too, up to JPEG codec differences between library builds
    photo = load_photo(FOLDER / f"{stem}.jpg")
    assert np.abs(photo.pixels.astype(int) - again.upright.astype(int)).mean() < 1.0
