"""The output folder as the pipeline writes it carries a report and a table that verify (issue 9).

Kind of test (STYLE.md §6): *synthetic data with a known answer*: a
hand-made record and a plain grey photo array go through the lead's
``photo_output_files`` and ``write_folder``; the folder must hold
``report.html`` and ``tubes.csv`` made from that record, and :func:`verify`
must pass it clean and catch a changed annotated image.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from tubevision.record.folder import photo_output_files
from tubevision.record.verify import verify
from tubevision.record.write import write_folder

from ._htmltable import read_tube_table
from ._records import make_record, small_png


def test_pipeline_folder_has_report_and_table_and_verifies(tmp_path):
    rec = make_record()
    pixels = np.full((900, 200, 3), 200, dtype=np.uint8)
    files = photo_output_files(SimpleNamespace(photo=SimpleNamespace(pixels=pixels)), rec)
    assert {"record.json", "annotated.png", "report.html", "tubes.csv"} <= set(files)
    rows = read_tube_table(files["report.html"].decode("utf-8")).rows
    assert [r["id"] for r in rows] == ["T1", "T2", "T3"]
    assert files["tubes.csv"].decode("utf-8").count("\r\n") == 1 + len(rec["tubes"])
    out = write_folder(tmp_path / "bench-k7", files)
    res = verify(out)
    assert res.ok, res.lines()
    assert {"record.json", "annotated.png"} <= set(res.checked)
    (out / "annotated.png").write_bytes(small_png(seed=11))
    assert "annotated.png" in verify(out).changed
