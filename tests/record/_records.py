"""Hand-made evidence records for the report, table, crate and verify tests.

Invented demo data: a water-treatment QC bench running the group I cation
scheme on samples "K-7" and "K-9". The numbers are made up; they only need to
follow the contract's shapes.
"""

from __future__ import annotations

import copy
import hashlib

import numpy as np

from tubevision.record.annotate import encode_png

PHOTO_BYTES = b"\xff\xd8\xff\xe0" + bytes(range(256)) * 8 + b"\xff\xd9"
"""Stand-in JPEG bytes (only hashed, never decoded)."""
PHOTO_SHA256 = hashlib.sha256(PHOTO_BYTES).hexdigest()


def small_png(seed: int = 7) -> bytes:
    """A 24 x 32 PNG with seeded noise, standing in for the annotated image."""
    rng = np.random.default_rng(seed)  # seed fixed: the bytes only need to be stable
    return encode_png(rng.integers(0, 256, size=(24, 32, 3), dtype=np.uint8))


_TUBE_CLOUDY = {
    "id": "T1", "index": 0, "row": 0, "bbox": [10, 20, 60, 400], "state": "cloudy",
    "confidence": 0.912,
    "liquid": {"lab": [81.25, -0.52, 3.1], "lab_sd": [1.04, 0.21, 0.33], "colour_name": "white",
               "turbidity": 0.4213, "turbidity_sd": 0.0311, "n_pixels": 5120},
    "pellet": {"present": True, "height_mm": 2.14, "height_mm_sd": 0.18, "lab": [92.0, 0.1, 1.2],
               "colour_name": "white"},
    "label": "K-7",
    "step_outcome": {"verdict": "positive", "meaning": "a chloride of the group precipitated",
                     "evidence": "turbidity 0.4213 >= 0.15; pellet 2.14 mm", "role": "sample",
                     "confidence": 0.874, "warnings": ["pellet partly hidden by the rack clip"]},
    "warnings": [],
}
_TUBE_CLEAR = {
    "id": "T2", "index": 1, "row": 0, "bbox": [70, 20, 120, 400], "state": "clear",
    "confidence": 0.8,
    "liquid": {"lab": [95.5, -3.75, 28.0], "lab_sd": [0.5, 0.25, 0.75], "colour_name": "yellow",
               "turbidity": 0.0125},
    "pellet": {"present": False, "height_mm": None, "lab": None, "colour_name": None},
    "label": "control",
    "step_outcome": {"verdict": "negative", "meaning": "nothing precipitated",
                     "evidence": "turbidity 0.0125 < 0.15"},
    "warnings": ["meniscus glare on 4 % of the column"],
}
_TUBE_EMPTY = {
    "id": "T3", "index": 2, "row": 1, "bbox": [10, 420, 60, 800], "state": "empty",
    "confidence": 0.97,
    "liquid": {"lab": None, "lab_sd": None, "colour_name": None, "turbidity": None},
    "pellet": {"present": False, "height_mm": None, "lab": None, "colour_name": None},
    "label": None, "step_outcome": None,
}

BASE_RECORD = {
    "schema": "tubevision.record/1",
    "software": {"name": "tubevision", "version": "0.1.0", "dependencies": {"numpy": "2.1.0"}},
    "image": {"file": "bench-k7.jpg", "sha256": PHOTO_SHA256, "width": 4032, "height": 3024,
              "captured_at": "2026-05-04T10:31:00"},
    "calibration": {"status": "card", "method": "linear 3x3 (least squares)",
                    "residual_de00": {"mean": 0.91, "max": 2.1}, "mm_per_px": 0.061,
                    "patches": [{"id": f"P{i:02d}", "residual_de00": round(0.3 + 0.15 * i, 2),
                                 "used": i != 5} for i in range(1, 13)]},
    "colour_space": {"name": "CIELAB", "illuminant": "D65", "observer": "2"},
    "tubes": [_TUBE_CLOUDY, _TUBE_CLEAR, _TUBE_EMPTY],
    "warnings": ["card partly shaded"],
    "scheme": {"name": "group1", "step": "chloride-precipitation"},
    "provenance": {"command": ["tubevision", "analyze", "bench-k7.jpg", "--scheme", "group1",
                               "--step", "chloride-precipitation", "--labels", "1=K-7,2=control"],
                   "ran_at": "2026-05-04T10:40:12+00:00",
                   "card_ref": {"file": "card-batch-3.cgats.txt", "sha256": "c" * 64},
                   "scheme": {"file": "group1", "sha256": "d" * 64},
                   "device": {"make": "ExampleCam", "model": "Z 10"}},
}


def make_record(**changes) -> dict:
    """A deep copy of :data:`BASE_RECORD` with top-level keys replaced."""
    rec = copy.deepcopy(BASE_RECORD)
    rec.update(copy.deepcopy(changes))
    return rec


def write_output_folder(folder, record: dict | None = None, *, png: bytes | None = None,
                        manifest: bool = True):
    """Write an output folder as the pipeline lays it out (record, image, report, csv, manifest)."""
    from pathlib import Path

    from tubevision.record.build import to_json
    from tubevision.record.report import render_report
    from tubevision.record.table import tubes_csv
    from tubevision.record.verify import manifest_sha256

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=False)
    record = make_record() if record is None else record
    png = small_png() if png is None else png
    files = {"record.json": to_json(record).encode("utf-8"), "annotated.png": png,
             "report.html": render_report(record, png).encode("utf-8"),
             "tubes.csv": tubes_csv(record).encode("utf-8")}
    if manifest:
        files["manifest.sha256"] = manifest_sha256(files)
    for name, data in files.items():
        (folder / name).write_bytes(data)
    return folder
