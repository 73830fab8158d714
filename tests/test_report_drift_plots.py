"""Drift plots drawn through the shared figures of report/_plots.py (one size, one look
for grade and drift). Expected values: the PNG header layout (PNG specification, ISO/IEC
15948:2004, section 11.2.2: IHDR width and height, 4-byte big-endian, at bytes 16-24) and
the figure size 8 x 4.5 in at 110 dpi (project choice, report/_plots.py) -> 880 x 495 px."""

from __future__ import annotations

import struct

import numpy as np
import pytest

from iqscope.io import ArrayRecording
from iqscope.measure.drift import analyse_drift
from iqscope.report._drift import allan_figure, drift_plots, frequency_figure
from iqscope.report._plots import worst_window

FS = 2000.0


@pytest.fixture(scope="module")
def result():  # type: ignore[no-untyped-def]
    """A carrier at +300 Hz drifting 1.2 Hz/min for 60 s, SNR high, RF known (seeded)."""
    n = int(FS * 60)
    t = np.arange(n) / FS
    f = 300.0 + 0.02 * t
    rng = np.random.default_rng(7)
    x = 0.5 * np.exp(2j * np.pi * np.cumsum(f) / FS) + 0.005 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return analyse_drift(ArrayRecording(x, FS, 7.1e6), window_s=20.0)


def _png_size(png: bytes) -> tuple[int, int]:
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", png[16:24])


def test_drift_pngs_have_the_shared_size(result) -> None:  # type: ignore[no-untyped-def]
    pngs = drift_plots(result, "drifty.cf32")
    assert set(pngs) == {"frequency", "allan"}
    for png in pngs.values():
        assert _png_size(png) == (880, 495)


def test_frequency_figure_marks(result) -> None:  # type: ignore[no-untyped-def]
    """Band, worst window (from the shared worst_window) and the drift's own fit line."""
    fig = frequency_figure(result, "Frequency over time: drifty.cf32")
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    start, span, text = worst_window(result.measurements) or (0.0, 0.0, "")
    assert span == 20.0 and text in labels
    assert "1-sigma" in labels and any(lb.startswith("fit +1.2") for lb in labels)  # 0.02 Hz/s = 1.2 Hz/min
    assert ax.get_title() == "Frequency over time: drifty.cf32" and ax.get_xlabel() == "time (s)"


def test_allan_figure_is_log_log(result) -> None:  # type: ignore[no-untyped-def]
    fig = allan_figure(result, "Allan deviation: drifty.cf32")
    assert fig is not None
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert ax.get_ylabel().endswith("(fractional)")
