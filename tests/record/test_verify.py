"""verify(): changed, missing and extra files are named (issue 9).

Kinds of test (STYLE.md §6): *synthetic data with a known answer*. Each
test makes a clean archive or output folder, tampers with one known file,
and expects exactly that file to be named. The manifest format is checked
against GNU coreutils ``sha256sum -c`` (an independent implementation),
where that program is installed.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import subprocess
import zipfile
from pathlib import Path

import pytest

from tubevision.errors import TubevisionInputError
from tubevision.record.crate import archive_inputs, write_crate
from tubevision.record.verify import manifest_sha256, parse_manifest, verify

from ._records import PHOTO_BYTES, small_png, write_output_folder


@pytest.fixture
def bench(tmp_path: Path) -> Path:
    (tmp_path / "photos").mkdir()
    (tmp_path / "photos" / "bench-k7.jpg").write_bytes(PHOTO_BYTES)
    write_output_folder(tmp_path / "out" / "bench-k7")
    return tmp_path


@pytest.fixture
def archive(bench: Path) -> Path:
    files, base = archive_inputs([bench / "photos", bench / "out"])
    return write_crate(bench / "evidence.zip", files, base=base)


def _rewrite_zip(src: Path, dst: Path, *, change=None, drop=(), add=None) -> Path:
    """Copy a zip member by member, changing, dropping or adding members."""
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w") as zout:
        for info in zin.infolist():
            if info.filename in drop:
                continue
            data = zin.read(info.filename)
            if change and info.filename in change:
                data = change[info.filename](data)
            zout.writestr(info, data)
        for name, data in (add or {}).items():
            zout.writestr(name, data)
    return dst


def test_clean_archive_verifies(archive):
    res = verify(archive)
    assert res.ok and bool(res) and res.kind == "crate zip"
    assert "photos/bench-k7.jpg" in res.checked and "out/bench-k7/report.html" in res.checked
    assert len(res.checked) == 6 and not res.problems


def test_tampered_photo_in_archive_is_caught(archive, bench):
    def flip(b: bytes) -> bytes:
        return b[:100] + bytes([b[100] ^ 0x01]) + b[101:]

    bad = _rewrite_zip(archive, bench / "bad.zip", change={"photos/bench-k7.jpg": flip})
    res = verify(bad)
    assert not res.ok and res.exit_status == 1
    assert res.changed == ("photos/bench-k7.jpg",)
    assert not res.missing and not res.extra
    assert any("image.sha256 in out/bench-k7/record.json" in p for p in res.problems)
    assert any("MISMATCH photos/bench-k7.jpg" in line for line in res.lines())


def test_photo_changed_in_place_with_a_bad_crc_is_caught(archive, bench):
    """Bytes overwritten inside the zip file itself (the photo is stored uncompressed)."""
    data = bytearray(archive.read_bytes())
    at = data.find(PHOTO_BYTES[200:260])
    assert at > 0
    data[at] ^= 0xFF
    bad = bench / "crc.zip"
    bad.write_bytes(bytes(data))
    res = verify(bad)
    assert res.changed == ("photos/bench-k7.jpg",)


def test_missing_and_extra_members_are_named(archive, bench):
    bad = _rewrite_zip(archive, bench / "bad.zip", drop={"out/bench-k7/tubes.csv"},
                       add={"out/bench-k7/notes.txt": b"added later"})
    res = verify(bad)
    assert res.missing == ("out/bench-k7/tubes.csv",)
    assert res.extra == ("out/bench-k7/notes.txt",)
    assert not res.changed


def test_record_edited_in_archive_is_caught(archive, bench):
    def edit(b: bytes) -> bytes:
        rec = json.loads(b)
        rec["tubes"][0]["step_outcome"]["verdict"] = "negative"
        return json.dumps(rec).encode()

    res = verify(_rewrite_zip(archive, bench / "bad.zip", change={"out/bench-k7/record.json": edit}))
    assert res.changed == ("out/bench-k7/record.json",)


def test_unzipped_crate_folder_is_checked_too(archive, bench):
    folder = bench / "unzipped"
    with zipfile.ZipFile(archive) as zf:
        zf.extractall(folder)
    assert verify(folder).ok and verify(folder).kind == "crate folder"
    (folder / "out" / "bench-k7" / "annotated.png").write_bytes(small_png(seed=99))
    res = verify(folder)
    assert res.changed == ("out/bench-k7/annotated.png",)


def test_output_folder_with_manifest(bench):
    out = bench / "out" / "bench-k7"
    assert verify(out).ok and verify(out).kind == "output folder"
    (out / "tubes.csv").write_text("id\r\nT9\r\n")
    (out / "report.html").unlink()
    (out / "extra.txt").write_text("not ours")
    res = verify(out)
    assert res.changed == ("tubes.csv",)
    assert res.missing == ("report.html",)
    assert res.extra == ("extra.txt",)


def test_output_folder_without_manifest_cross_checks_report_record_and_photo(tmp_path):
    (tmp_path / "bench-k7.jpg").write_bytes(PHOTO_BYTES)  # the photo beside the output folder
    out = write_output_folder(tmp_path / "bench-k7", manifest=False)
    res = verify(out)
    assert res.ok and res.exit_status == 0
    assert set(res.checked) == {str(tmp_path / "bench-k7.jpg"), "record.json", "annotated.png"}
    assert any("no manifest.sha256" in n for n in res.notes)
    (out / "annotated.png").write_bytes(small_png(seed=3))
    assert verify(out).changed == ("annotated.png",)
    out2 = write_output_folder(tmp_path / "second" / "bench-k7", manifest=False)
    (tmp_path / "second" / "bench-k7.jpg").write_bytes(PHOTO_BYTES + b"\x00")
    res2 = verify(out2)
    assert res2.changed == (str(tmp_path / "second" / "bench-k7.jpg"),)
    rec = json.loads((out2 / "record.json").read_text())
    rec["tubes"][1]["label"] = "K-9"
    (out2 / "record.json").write_text(json.dumps(rec))
    assert "record.json" in verify(out2).changed


def test_folder_of_output_folders_is_checked_folder_by_folder(bench):
    write_output_folder(bench / "out" / "bench-k9")
    (bench / "out" / "bench-k9" / "annotated.png").write_bytes(small_png(seed=5))
    res = verify(bench / "out")
    assert res.kind == "output folders"
    assert res.changed == ("bench-k9/annotated.png",)
    assert "bench-k7/record.json" in res.checked


def test_manifest_lines_hold_each_files_sha256():
    """Published value: SHA-256("abc") from NIST FIPS 180-4 examples (CSRC, SHA256.pdf)."""
    files = {"record.json": b'{"a": 1}\n', "annotated.png": small_png(), "report.html": b"<p>x</p>"}
    text = manifest_sha256(files).decode()
    parsed, bad = parse_manifest(text)
    assert not bad and parsed == {k: hashlib.sha256(v).hexdigest() for k, v in files.items()}
    assert manifest_sha256({"m": b"abc"}).startswith(
        b"ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad  m")


def test_manifest_checks_with_coreutils(tmp_path):
    """Oracle: GNU coreutils ``sha256sum -c`` accepts the manifest and rejects a changed file."""
    exe = shutil.which("sha256sum")
    if exe is None:
        pytest.skip("GNU coreutils sha256sum not installed")
    files = {"record.json": b'{"a": 1}\n', "annotated.png": small_png()}
    for k, v in files.items():
        (tmp_path / k).write_bytes(v)
    (tmp_path / "manifest.sha256").write_bytes(manifest_sha256(files))
    ok = subprocess.run([exe, "-c", "manifest.sha256"], cwd=tmp_path, capture_output=True)
    assert ok.returncode == 0
    (tmp_path / "annotated.png").write_bytes(b"changed")
    bad = subprocess.run([exe, "-c", "manifest.sha256"], cwd=tmp_path, capture_output=True)
    assert bad.returncode != 0


def test_bad_input_is_refused_with_a_message(tmp_path):
    with pytest.raises(TubevisionInputError, match="no such file or folder"):
        verify(tmp_path / "nope.zip")
    (tmp_path / "notes.txt").write_text("hello")
    with pytest.raises(TubevisionInputError, match="not a zip archive"):
        verify(tmp_path / "notes.txt")
    with zipfile.ZipFile(tmp_path / "plain.zip", "w") as zf:
        zf.writestr("a.txt", "x")
    with pytest.raises(TubevisionInputError, match="not an RO-Crate archive"):
        verify(tmp_path / "plain.zip")
    (tmp_path / "empty").mkdir()
    with pytest.raises(TubevisionInputError, match="nothing to verify"):
        verify(tmp_path / "empty")
    with pytest.raises(TubevisionInputError, match="line breaks"):
        manifest_sha256({"a\nb": b""})


def test_unreadable_crate_metadata_is_a_finding(archive, bench):
    bad = _rewrite_zip(archive, bench / "bad.zip", change={"ro-crate-metadata.json": lambda b: b[:20]})
    res = verify(bad)
    assert not res.ok and res.changed == ("ro-crate-metadata.json",)
