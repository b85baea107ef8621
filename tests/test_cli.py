"""The command line: exit statuses, one-line errors, nothing written on bad input (contract)."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
from PIL import Image

from tubevision.cli import main


def _write(path, data: bytes):
    path.write_bytes(data)
    return path


def _err_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert err, "expected a message on stderr"
    return err[-1]


@pytest.fixture()
def plain_photo(tmp_path):
    arr = np.full((120, 160, 3), 235, np.uint8)
    path = tmp_path / "plain.jpg"
    Image.fromarray(arr).save(path)
    return path


@pytest.mark.parametrize(
    "make, match",
    [
        (lambda d: d / "missing.jpg", "no such file"),
        (lambda d: d, "is a folder"),
        (lambda d: _write(d / "z.jpg", b""), "empty"),
        (lambda d: _write(d / "t.jpg", b"hello"), "not an image"),
    ],
)
def test_bad_photo_exits_2_and_writes_nothing(tmp_path, capsys, make, match):
    out = tmp_path / "out"
    src = tmp_path / "in"
    src.mkdir()
    code = main(["analyze", str(make(src)), "--out", str(out), "--no-card"])
    assert code == 2
    line = _err_line(capsys)
    assert line.startswith("tubevision: error:") and match in line
    assert not out.exists()


@pytest.mark.parametrize(
    "args, match",
    [
        (["analyze"], "usage"),
        (["frobnicate"], "usage"),
        (["analyze", "{photo}", "--no-card", "--card-ref", "x.txt"], "exclude each other"),
        (["analyze", "{photo}", "{photo}", "--json", "--no-card"], "exactly one photo"),
        (["analyze", "{photo}", "--layout", "nope.json"], "--layout nope.json: no such file"),
        (["analyze", "{photo}", "--tubes", "0"], "--tubes"),
        (["card", "--out", "{tmp}/c.png", "--dpi", "5"], "--dpi"),
    ],
)
def test_usage_errors_exit_2(tmp_path, capsys, plain_photo, args, match):
    argv = [a.replace("{photo}", str(plain_photo)).replace("{tmp}", str(tmp_path)) for a in args]
    assert main(argv) == 2
    assert match in _err_line(capsys)


def test_bad_layout_file_names_the_problem(tmp_path, capsys, plain_photo):
    layout = tmp_path / "layout.json"
    layout.write_text('{"tubes": [{"bbox": [10, 10, 5, 50]}]}')
    assert main(["analyze", str(plain_photo), "--no-card", "--layout", str(layout)]) == 2
    assert "needs x0 < x1" in _err_line(capsys)
    layout.write_text('{"tubes": [{"bbox": [10, 10, 50, 500]}]}')
    assert main(["analyze", str(plain_photo), "--no-card", "--layout", str(layout),
                 "--out", str(tmp_path / "o")]) == 2
    assert "reaches outside" in _err_line(capsys)
    assert not (tmp_path / "o").exists()


def test_help_starts_without_heavy_imports():
    code = ("import sys, tubevision.cli as c\n"
            "heavy = [m for m in ('numpy', 'cv2', 'skimage', 'sklearn', 'scipy') if m in sys.modules]\n"
            "print(','.join(heavy))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_module_entry_point_runs():
    out = subprocess.run([sys.executable, "-m", "tubevision", "--version"], capture_output=True, text=True)
    assert out.returncode == 0 and "tubevision 0.1.0" in out.stdout


def test_backdrop_is_written_at_true_size_with_its_bands(tmp_path, capsys):
    out = tmp_path / "backdrop.png"
    assert main(["backdrop", "--out", str(out), "--size", "200x150", "--dpi", "127"]) == 0
    with Image.open(out) as im:
        dpi = im.info["dpi"]
        size = im.size
        arr = np.asarray(im.convert("L"))
    # 127 dpi = 5 dots per mm (25.4 mm per inch): the sheet is 1000 x 750 dots
    assert size == (1000, 750) and dpi[0] == pytest.approx(127, abs=0.01)
    # light and dark bands alternate down the sheet, each 4 mm = 20 dots (tubevision.backdrop)
    column = arr[:, 500].astype(int)
    edges = np.flatnonzero(np.diff(column > 128))
    assert len(edges) > 10
    assert np.median(np.diff(edges)) == pytest.approx(20, abs=1)
    # no silent overwrite, and a clear one-line error for a bad size
    assert main(["backdrop", "--out", str(out)]) == 2
    assert "already exists" in _err_line(capsys)
    assert main(["backdrop", "--out", str(tmp_path / "b.png"), "--size", "huge"]) == 2
    assert "--size" in _err_line(capsys)
    assert not (tmp_path / "b.png").exists()


def test_schemes_lists_the_built_in_group_one_scheme(capsys):
    assert main(["schemes"]) == 0
    text = capsys.readouterr().out
    assert "group1" in text and "chloride-precipitation" in text and "chromate-test" in text
    assert main(["schemes", "no-such-scheme"]) == 2
