"""Atomic output writing and the record schema (issue 2: records, nothing overwritten)."""

from __future__ import annotations

import copy
import json

import pytest

from tubevision.errors import TubevisionInputError
from tubevision.record.build import to_json, validate_record
from tubevision.record.write import atomic_write_bytes, write_folder

MINIMAL_RECORD = {
    "schema": "tubevision.record/1",
    "software": {"name": "tubevision", "version": "0.1.0"},
    "image": {"file": "rack.jpg", "sha256": "0" * 64, "width": 4032, "height": 3024,
              "captured_at": None},
    "calibration": {"status": "none", "method": "none", "residual_de00": None, "mm_per_px": None},
    "colour_space": {"name": "CIELAB", "illuminant": "D65", "observer": "2"},
    "tubes": [
        {"id": "T1", "index": 0, "row": 0, "bbox": [10, 20, 60, 400], "state": "cloudy",
         "confidence": 0.9,
         "liquid": {"lab": [80.0, 0.5, 3.0], "lab_sd": [1.0, 0.2, 0.3], "colour_name": "white",
                    "turbidity": 0.42},
         "pellet": {"present": True, "height_mm": 2.1, "lab": [90.0, 0.0, 1.0], "colour_name": "white"},
         "label": "unknown A",
         "step_outcome": {"verdict": "positive", "meaning": "m", "evidence": "e"}},
        {"id": "T2", "index": 1, "row": 0, "bbox": [70, 20, 120, 400], "state": "empty",
         "confidence": 0.95,
         "liquid": {"lab": None, "lab_sd": None, "colour_name": None, "turbidity": None},
         "pellet": {"present": False, "height_mm": None, "lab": None, "colour_name": None},
         "label": None, "step_outcome": None},
    ],
    "warnings": [],
}


def test_contract_example_validates():
    validate_record(MINIMAL_RECORD)
    json.loads(to_json(MINIMAL_RECORD))


@pytest.mark.parametrize(
    "path, value, match",
    [
        (("tubes", 1, "liquid", "lab"), [50.0, 0.0, 0.0], "tubes/1"),  # empty tube with a colour
        (("tubes", 0, "state"), "murky", "tubes/0/state"),
        (("tubes", 0, "pellet", "colour_name"), "colourless", "pellet"),  # a solid is never colourless
        (("calibration", "status"), "maybe", "calibration/status"),
        (("tubes", 0, "liquid", "turbidity"), -0.1, "turbidity"),
    ],
)
def test_schema_rejects_contract_violations(path, value, match):
    rec = copy.deepcopy(MINIMAL_RECORD)
    node = rec
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    with pytest.raises(TubevisionInputError, match=match):
        validate_record(rec, where="r.json")


def test_nan_is_refused_not_written():
    rec = copy.deepcopy(MINIMAL_RECORD)
    rec["tubes"][0]["confidence"] = float("nan")
    with pytest.raises(ValueError):
        to_json(rec)


def test_atomic_write_refuses_existing(tmp_path):
    target = tmp_path / "r.json"
    atomic_write_bytes(target, b"one")
    with pytest.raises(TubevisionInputError, match="already exists"):
        atomic_write_bytes(target, b"two")
    assert target.read_bytes() == b"one"
    atomic_write_bytes(target, b"two", overwrite=True)
    assert target.read_bytes() == b"two"
    assert [p.name for p in tmp_path.iterdir()] == ["r.json"]  # no temporary left behind


def test_write_folder_is_all_or_nothing(tmp_path):
    target = tmp_path / "out" / "rack"
    write_folder(target, {"record.json": b"{}", "annotated.png": b"png"})
    assert sorted(p.name for p in target.iterdir()) == ["annotated.png", "record.json"]
    with pytest.raises(TubevisionInputError, match="--overwrite"):
        write_folder(target, {"record.json": b"new"})
    assert (target / "record.json").read_bytes() == b"{}"

    class Boom(dict):
        def items(self):
            yield "record.json", b"partial"
            raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        write_folder(tmp_path / "out" / "other", Boom())
    assert not (tmp_path / "out" / "other").exists()
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == ["rack"]  # no temp folder left
