"""The warm loop (`figkit draft`): started on a small project, it redraws only the figure whose
row changed, shows a bad row's one-line error on its page while keeping the last good preview,
and stops cleanly on Ctrl-C (SIGINT, POSIX).  The page is opened in headless Chromium."""
from __future__ import annotations

import hashlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from browser import require_browser, visit


def _wait(check, timeout=90.0, step=0.2):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        got = check()
        if got:
            return got
        time.sleep(step)
    raise AssertionError("timed out waiting")


def _sha(p: Path) -> str | None:
    try:
        return hashlib.sha256(p.read_bytes()).hexdigest()
    except OSError:
        return None


@pytest.fixture
def started(tmp_path):
    from figkit.cli import main
    proj = tmp_path / "proj"
    assert main(["init", str(proj)]) == 0
    log = open(tmp_path / "draft.log", "w")
    proc = subprocess.Popen([sys.executable, "-m", "figkit", "draft", "--interval", "0.2"],
                            cwd=proj, stdout=log, stderr=subprocess.STDOUT,
                            env=dict(os.environ, MPLBACKEND="Agg"))
    yield proj, proc, tmp_path / "draft.log"
    if proc.poll() is None:
        proc.kill()
        proc.wait()
    log.close()


def test_draft_redraws_the_edited_figure_keeps_the_last_good_one_and_stops(started, tmp_path):
    proj, proc, log = started
    page = proj / "results" / "draft" / "index.html"
    first, second = proj / "results" / "draft" / "000.png", proj / "results" / "draft" / "001.png"
    _wait(lambda: "Ctrl-C stops" in log.read_text())
    a0, b0 = _sha(first), _sha(second)
    assert a0 and b0 and 'src="000.png?v=1"' in page.read_text()
    print_png = proj / "results" / "figures" / "taxa-by-season.png"
    assert print_png.is_file()
    # edit the second row only: its preview and print files are redrawn, the first is not
    sheet = proj / "config" / "figures.tsv"
    text = sheet.read_text()
    sheet.write_text(text.replace("\tcount\t\t\tfull\t", "\tcount\t\t\tsingle\t"))
    _wait(lambda: _sha(second) not in (None, b0) and 'src="001.png?v=2"' in page.read_text())
    _wait(lambda: log.read_text().count("figkit: draft: taxa-by-season:") == 2)
    assert _sha(first) == a0 and log.read_text().count("figkit: draft: oxygen-by-land-use:") == 1
    import json
    _wait(lambda: json.loads((proj / "results" / "figures" / "taxa-by-season.json").read_text())
          ["size_mm"][0] == 84.0)                     # the print files follow ('single' is 84 mm)
    # a bad row: one-line error on the page and in the terminal, the last good preview kept
    good = _sha(second)
    sheet.write_text(sheet.read_text().replace("count-bars", "count-barz"))
    _wait(lambda: "count-barz" in page.read_text())
    assert _sha(second) == good
    err = [ln for ln in log.read_text().splitlines() if "count-barz" in ln]
    assert err and err[0].startswith("figkit: error: sheet row 3, figure 'taxa-by-season'")
    require_browser()
    seen = visit(page, screenshot=tmp_path / "draft.png", selectors=(".error",))
    assert seen.errors == [] and all(i["natural_width"] > 0 for i in seen.images)
    assert any("count-barz" in t for t in seen.texts[".error"])
    # Ctrl-C: stops at once, exit 0, no temporary file left behind
    proc.send_signal(signal.SIGINT)
    assert proc.wait(timeout=30) == 0
    assert "figkit: draft: stopped" in log.read_text()
    assert not list((proj / "results").rglob("*.part"))
