"""report.html renders in a real browser without console errors (issue 9).

Kind of test (STYLE.md §6): *independent oracle*: headless Chromium (Debian's
``chromium`` package) parses and lays out the page; its DOM must hold the
tube table our own parser reads, and its log must show no console message
(a blocked external fetch, a Content-Security-Policy violation or a script
error would each log one). One browser start for the whole module; skipped,
with a message, where Chromium is not installed.
"""

from __future__ import annotations

import shutil
import subprocess

import pytest

from tubevision.record.report import render_report

from ._htmltable import read_tube_table
from ._records import make_record, small_png

CHROMIUM_TIMEOUT_S = 90
"""Upper bound for one headless page load on a slow CI machine (our choice; typically ~1 s)."""


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        exe = shutil.which(name)
        if exe:
            return exe
    return None


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    exe = _chromium()
    if exe is None:
        pytest.skip("Chromium is not installed (Debian: apt-get install chromium); browser check skipped")
    tmp = tmp_path_factory.mktemp("browser")
    rec = make_record()
    rec["tubes"][0]["label"] = "K-7 <b>not bold</b> & co"
    page = tmp / "report.html"
    source = render_report(rec, small_png())
    page.write_text(source, encoding="utf-8")
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-extensions",
           f"--user-data-dir={tmp / 'profile'}", "--enable-logging=stderr", "--v=0",
           "--dump-dom", page.as_uri()]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=CHROMIUM_TIMEOUT_S)
    return {"rc": proc.returncode, "dom": proc.stdout, "log": proc.stderr, "source": source, "record": rec}


def test_browser_renders_the_tube_table(rendered):
    assert rendered["rc"] == 0, rendered["log"][-2000:]
    dom = rendered["dom"]
    assert '<table id="tubes">' in dom
    ours = read_tube_table(rendered["source"]).rows
    browsers = read_tube_table(dom).rows
    assert browsers == ours and len(browsers) == len(rendered["record"]["tubes"])
    assert browsers[0]["label"] == "K-7 <b>not bold</b> & co"  # text, not markup, to the browser too
    for section in ("safety", "provenance", "calibration", "warnings"):
        assert f'id="{section}"' in dom


def test_browser_logs_no_console_errors(rendered):
    bad = [line for line in rendered["log"].splitlines()
           if "CONSOLE" in line or "Uncaught" in line or "Content Security Policy" in line]
    assert bad == []
