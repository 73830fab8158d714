"""The HTML report rendered by a real browser (headless Chromium), at a phone's width.

Skipped, with the reason, where no Chromium is installed (``.ci/run`` installs Debian's
``chromium`` package). Checks: the screenshot is not blank (pixel variance) and the
verdict text is in the DOM the browser built.
"""

from __future__ import annotations

import io
import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from grading_helpers import dsb_analysis

from iqscope.grading import grade
from iqscope.report import render_html, render_plots

pytestmark = pytest.mark.browser


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if os.access("/usr/bin/chromium", os.X_OK) else None


CHROMIUM = _chromium()
needs_browser = pytest.mark.skipif(
    CHROMIUM is None, reason="no headless Chromium found (apt-get install chromium; .ci/run does this)"
)


def _run(args: list[str], profile: Path) -> subprocess.CompletedProcess[bytes]:
    assert CHROMIUM is not None
    cmd = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        "--hide-scrollbars",
        f"--user-data-dir={profile}",
        *args,
    ]
    return subprocess.run(cmd, capture_output=True, timeout=120, check=False)


@needs_browser
def test_report_renders_in_headless_chromium(tmp_path: Path) -> None:
    result = grade(dsb_analysis(8.0, with_traces=False))  # one plot keeps the test quick
    page = tmp_path / "report.html"
    page.write_text(render_html([result], [render_plots(result)], generated="2026-12-01 00:00 UTC"), encoding="utf-8")
    shot = tmp_path / "shot.png"
    done = _run([f"--screenshot={shot}", "--window-size=412,1600", page.as_uri()], tmp_path / "profile-a")
    assert shot.exists(), done.stderr.decode(errors="replace")[-2000:]

    from matplotlib.image import imread

    pixels = np.asarray(imread(io.BytesIO(shot.read_bytes()), format="png"))[..., :3]
    assert pixels.shape[0] >= 1000 and pixels.shape[1] >= 400
    assert float(pixels.std()) > 0.05, "the screenshot is blank"
    # The failing verdict badge is drawn in its red: some clearly red pixels exist.
    red = (pixels[..., 0] > 0.6) & (pixels[..., 1] < 0.35) & (pixels[..., 2] < 0.35)
    assert int(red.sum()) > 50

    dom = _run(["--dump-dom", page.as_uri()], tmp_path / "profile-b").stdout.decode("utf-8", errors="replace")
    assert "\u2718 FAIL" in dom
    assert "carrier suppression" in dom
    assert "carrier leak: trim the modulator balance" in dom
