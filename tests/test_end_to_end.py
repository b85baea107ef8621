"""End to end on the shipped sample photos (studio renders with known truth), through the CLI."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest

from tubevision.cli import main
from tubevision.colorimetry import delta_e00
from tubevision.record.build import validate_record

SAMPLES = Path(__file__).resolve().parents[1] / "sample_images"


def test_sample_images_match_their_sha256_list():
    lines = (SAMPLES / "SHA256SUMS").read_text().split("\n")
    listed = dict(reversed(ln.split(None, 1)) for ln in lines if ln.strip())
    assert listed, "SHA256SUMS is empty"
    for name, digest in listed.items():
        assert hashlib.sha256((SAMPLES / name.strip().lstrip("*")).read_bytes()).hexdigest() == digest


def test_demo_sample_through_the_cli(tmp_path, capsys):
    photo = SAMPLES / "demo-chloride-step.jpg"
    truth = json.loads((SAMPLES / "demo-chloride-step.truth.json").read_text())
    labels = ",".join(f"{i + 1}={t['label']}" for i, t in enumerate(truth["tubes"]) if t.get("label"))
    out = tmp_path / "out"
    # boxes from the truth, so this test follows measuring and judging, not finding
    layout = tmp_path / "layout.json"
    layout.write_text(json.dumps({"tubes": [{"bbox": t["bbox"]} for t in truth["tubes"]]}))
    args = ["--out", str(out), "--layout", str(layout), "--scheme", "group1",
            "--step", "chloride-precipitation", "--labels", labels]
    code = main(["analyze", str(photo)] + args)
    assert code in (0, 1)
    folder = out / photo.stem
    record = json.loads((folder / "record.json").read_text())
    validate_record(record)
    assert record["image"]["sha256"] == hashlib.sha256(photo.read_bytes()).hexdigest()
    assert record["calibration"]["status"] == "card"
    assert record["calibration"]["mm_per_px"] == pytest.approx(truth["mm_per_px"], rel=0.02)
    assert len(record["tubes"]) == len(truth["tubes"])
    # the clear blank's colour is close to its true apparent colour (studio truth, D65)
    for tube, t in zip(record["tubes"], truth["tubes"]):
        if t.get("label") == "blank":
            assert tube["liquid"]["lab"] is not None
            assert float(delta_e00(tube["liquid"]["lab"], t["lab"])) < 3.0
    for name in ("annotated.png", "report.html", "tubes.csv", "manifest.sha256"):
        assert (folder / name).stat().st_size > 0
    # the folder verifies, and a re-run with the same settings refuses to overwrite
    capsys.readouterr()
    assert main(["verify", str(folder)]) == 0
    assert main(["analyze", str(photo)] + args) == 2
    assert "--overwrite" in capsys.readouterr().err
    # an archive of photo and outputs verifies; tampering is named
    crate = tmp_path / "evidence.zip"
    assert main(["archive", str(crate), str(folder), str(photo)]) == 0
    assert main(["verify", str(crate)]) == 0


def test_json_mode_prints_the_record_and_writes_nothing(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code = main(["analyze", str(SAMPLES / "mixed-plain-d65.jpg"), "--json"])
    assert code in (0, 1)
    record = json.loads(capsys.readouterr().out)
    validate_record(record)
    assert list(tmp_path.iterdir()) == []


def test_no_card_on_purpose_exits_0(tmp_path, capsys):
    code = main(["analyze", str(SAMPLES / "mixed-plain-d65.jpg"), "--no-card", "--json"])
    record = json.loads(capsys.readouterr().out)
    assert code == 0 and record["calibration"]["status"] == "none"
    assert any("--no-card" in w for w in record["warnings"])
