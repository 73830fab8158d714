"""Tests of ``iqscope watch``: following a recording while a writer appends to it.

A writer thread appends blocks of a synthesized CW (phase = 2 pi * integral of f dt,
closed-form linear drift) to a raw cf32 file or a SigMF dataset while watch runs; each
test is bounded to a few seconds of wall time. Check values: the drift rate the writer
used (closed form) and the number of samples it wrote.
"""

from __future__ import annotations

import argparse
import io
import json
import math
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.cli._watch import watch
from iqscope.io import write_sigmf
from iqscope.measure.drift import WatchStatus
from iqscope.report._drift import watch_panel
from iqscope.report._theme import make_console

FS = 4000.0
CHUNK = 2000  # 0.5 s per write


class Writer(threading.Thread):
    """Appends ``n_chunks`` chunks of a drifting CW (plus an optional DSB pair) to ``path``."""

    def __init__(self, path: Path, n_chunks: int, *, pause_s: float = 0.02, rate_hz_per_min: float = 1.9,
                 dsb_leak_db: float | None = None) -> None:
        super().__init__(daemon=True)
        self.path, self.n_chunks, self.pause_s = path, n_chunks, pause_s
        self.rate = rate_hz_per_min / 60.0
        self.dsb_leak_db = dsb_leak_db
        self.written = 0

    def chunk(self, i: int, rng: np.random.Generator) -> np.ndarray:
        t = (i * CHUNK + np.arange(CHUNK)) / FS
        # closed-form phase of f(t) = f0 + r t: 2 pi (f0 t + r t^2 / 2)
        if self.dsb_leak_db is None:
            phase = 2 * np.pi * (700.0 * t + 0.5 * self.rate * t**2)
            x = 0.3 * np.exp(1j * phase)
        else:
            c = 2 * np.pi * (150.0 * t + 0.5 * self.rate * t**2)
            a = 2 * np.pi * 1000.0 * t
            sb = 0.2 * (np.exp(1j * (c + a)) + np.exp(1j * (c - a)))
            # leak amplitude so that P_sidebands / P_carrier = dsb_leak_db
            leak = math.sqrt(2 * 0.2**2 / 10 ** (self.dsb_leak_db / 10)) * np.exp(1j * (c + 0.3))
            x = sb + leak
        x = x + 0.01 * (rng.standard_normal(CHUNK) + 1j * rng.standard_normal(CHUNK))
        return x.astype(np.complex64)

    ci16 = False
    """Write 16-bit integer I/Q (a WAV recorder) instead of cf32."""

    def encode(self, x: np.ndarray) -> bytes:
        if not self.ci16:
            return x.tobytes()
        inter = np.empty(2 * x.size, np.int16)
        inter[0::2] = np.round(x.real * 32767)
        inter[1::2] = np.round(x.imag * 32767)
        return inter.tobytes()

    def run(self) -> None:
        rng = np.random.default_rng(7)
        for i in range(self.n_chunks):
            with open(self.path, "ab") as fh:
                fh.write(self.encode(self.chunk(i, rng)))
            self.written += CHUNK
            time.sleep(self.pause_s)


def _args(path: Path, **kw: object) -> argparse.Namespace:
    base = dict(file=str(path), format="cf32", rate=FS, center=None, mode="auto", carrier=None, tone=None,
                line=None, reference=None, block=None, span=None, window=120.0, settle_band=1.0,
                idle=0.8, poll=0.05, json=True, no_live=True)
    base.update(kw)
    return argparse.Namespace(**base)


def test_watch_raw_file_while_written(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Watch sees every whole block the writer wrote and recovers its drift rate."""
    path = tmp_path / "live.cf32"
    path.touch()
    w = Writer(path, 40)  # 20 s of signal, ~1 s of wall time
    w.start()
    rc = main(["watch", str(path), "--format", "cf32", "--rate", "4000", "--idle", "0.8", "--poll", "0.05", "--json"])
    w.join()
    cap = capsys.readouterr()
    assert rc == 0
    assert "stopped growing" in cap.err
    doc = json.loads(cap.out)
    assert doc["schema"] == "iqscope.drift/1"
    block_n = round(doc["tracking"]["block_s"] * FS)
    assert doc["tracking"]["n_blocks"] == w.written // block_n
    slope = doc["measurements"]["drift_hz_per_min"]
    # 3 standard errors, plus the estimator's own tolerance (REFERENCES item 8 bound)
    assert slope["value"] == pytest.approx(1.9, abs=3 * slope["uncertainty"] + 0.01)


def test_watch_sigmf_dataset_growing(tmp_path: Path) -> None:
    """The SigMF metadata is written first; the recorder then appends to the .sigmf-data."""
    w = Writer(tmp_path / "cap.sigmf-data", 30)
    rng = np.random.default_rng(7)
    write_sigmf(tmp_path / "cap", w.chunk(0, rng), FS, center_frequency_hz=7.0e6)
    w.n_chunks, w.written = 30, CHUNK
    # continue the same signal from chunk 1 on
    orig = w.chunk
    w.chunk = lambda i, r: orig(i + 1, r)  # type: ignore[method-assign]
    statuses: list[WatchStatus] = []
    w.start()
    out = watch(_args(tmp_path / "cap.sigmf-meta", format=None, rate=None),
                on_status=lambda s, state: statuses.append(s) if s is not None else None)
    w.join()
    assert out.reason == "idle"
    tr = out.result.track
    assert tr.n_blocks == (w.written) // round(tr.block_s * FS)
    # live updates came block after block, and the drift so far converged
    assert len(statuses) >= 3
    assert [s.n_blocks for s in statuses] == sorted(s.n_blocks for s in statuses)
    assert statuses[-1].drift_hz_per_min == pytest.approx(1.9, abs=0.1)
    assert "allan_deviation" in out.result.measurements  # centre frequency known


def test_watch_wav_growing(tmp_path: Path) -> None:
    """A WAV recorder that writes 0xFFFFFFFF as the data size while recording (RIFF sizes
    patched the same way; the reader reads what the file holds) and appends 16-bit I/Q."""
    import struct

    from iqscope.io import write_wav

    path = tmp_path / "rec.wav"
    w = Writer(path, 24)
    w.ci16 = True
    write_wav(path, w.chunk(0, np.random.default_rng(7)), FS, bits=16)
    head = path.read_bytes()[:64]
    pos = head.index(b"data")
    with open(path, "r+b") as fh:
        fh.seek(4)
        fh.write(struct.pack("<I", 0xFFFFFFFF))
        fh.seek(pos + 4)
        fh.write(struct.pack("<I", 0xFFFFFFFF))
    orig = w.chunk
    w.chunk = lambda i, r: orig(i + 1, r)  # type: ignore[method-assign]
    w.written = CHUNK
    w.start()
    out = watch(_args(path, format=None, rate=None))
    w.join()
    tr = out.result.track
    assert tr.n_blocks == w.written // round(tr.block_s * FS)
    assert out.result.measurements["drift_hz_per_min"].value == pytest.approx(1.9, abs=0.15)


def test_watch_dsb_carrier_suppression(tmp_path: Path) -> None:
    """DSB with a carrier leak 30 dB below the sideband power: the live display's carrier
    suppression (DESIGN.md section 3 definition, P_sidebands / P_carrier) reads 30 dB."""
    path = tmp_path / "dsb.cf32"
    path.touch()
    w = Writer(path, 24, dsb_leak_db=30.0)
    statuses: list[WatchStatus] = []
    w.start()
    out = watch(_args(path, mode="dsb", carrier=150.0),
                on_status=lambda s, state: statuses.append(s) if s is not None else None)
    w.join()
    last = statuses[-1]
    assert out.result.track.plan.kind == "sideband pair"
    assert last.carrier_suppression_db == pytest.approx(30.0, abs=0.5)
    assert not last.carrier_limited_by_noise


def test_watch_interrupted_prints_summary(tmp_path: Path) -> None:
    """Ctrl-C (KeyboardInterrupt from the sleep) ends the session with a summary."""
    path = tmp_path / "live.cf32"
    path.touch()
    w = Writer(path, 12, pause_s=0.0)
    w.run()  # 6 s of signal already there
    calls = {"n": 0}

    def sleep(s: float) -> None:
        calls["n"] += 1
        if calls["n"] > 2:
            raise KeyboardInterrupt

    out = watch(_args(path), sleep=sleep)
    assert out.reason == "interrupted"
    tr = out.result.track
    assert tr.n_blocks == w.written // round(tr.block_s * FS)
    assert set(out.result.measurements) >= {"drift_hz_per_min", "frequency_offset_hz"}


def test_watch_missing_file_gives_input_error(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc = main(["watch", str(tmp_path / "never.cf32"), "--format", "cf32", "--rate", "4000", "--idle", "0.2",
               "--poll", "0.05"])
    assert rc == 3
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "never.cf32" in err


@pytest.mark.parametrize(("extra", "status", "words"), [
    (["--window", "5e-324"], 4, "--window"),  # shorter than two blocks: usage error, at once
    (["--block", "1e-9"], 4, "--block"),  # under 64 samples
    ([], 5, "nothing to track"),  # silence: no line (a measurement impossible)
])
def test_watch_errors_name_the_file(tmp_path: Path, capsys: pytest.CaptureFixture[str], extra: list[str],
                                    status: int, words: str) -> None:
    """Each is refused before following, in one line naming the file."""
    path = tmp_path / "done.cf32"
    x = np.zeros(8000, np.complex64) if not extra else Writer(path, 1).chunk(0, np.random.default_rng(1))
    path.write_bytes(np.resize(x, 8000).astype(np.complex64).tobytes())
    rc = main(["watch", str(path), "--format", "cf32", "--rate", "4000", "--idle", "0.1", "--poll", "0.05",
               *extra])
    err = capsys.readouterr().err
    assert rc == status and err.count("\n") == 1 and "done.cf32" in err and words in err, err


def test_watch_panel_renders() -> None:
    status = WatchStatus(
        elapsed_s=75.0, n_blocks=300, n_valid=298, level_dbfs=-10.5, snr_db=25.0, offset_hz=3.25,
        sigma_hz=0.01, drift_hz_per_min=1.234, drift_se_hz_per_min=0.01, peak_to_peak_hz=1.5,
        carrier_suppression_db=42.7, carrier_limited_by_noise=False, what="the carrier at 700.0 Hz",
    )
    buf = io.StringIO()
    make_console(file=buf, width=80, color_system=None).print(watch_panel(status, title="t"))
    text = buf.getvalue()
    assert "1 min 15 s" in text
    assert "+3.250 Hz" in text and "+1.234 Hz/min" in text
    assert "42.7 dB" in text
    assert "-10.5 dBFS" in text


def test_live_watch_shows_waiting_then_the_panel() -> None:
    """report._drift.live_watch: the display cli/_watch.py drives (rich stays in report/).
    Expected text: the panel's own rendering (test_watch_panel_renders) and the waiting line."""
    from rich.console import Console

    from iqscope.report._drift import live_watch
    from iqscope.report._theme import THEME

    status = WatchStatus(
        elapsed_s=75.0, n_blocks=300, n_valid=298, level_dbfs=-10.5, snr_db=25.0, offset_hz=3.25,
        sigma_hz=0.01, drift_hz_per_min=1.234, drift_se_hz_per_min=0.01, peak_to_peak_hz=1.5,
        carrier_suppression_db=42.7, carrier_limited_by_noise=False, what="the carrier at 700.0 Hz",
    )
    buf = io.StringIO()
    console = Console(file=buf, width=80, color_system=None, force_terminal=True, theme=THEME)
    with live_watch(console, "iqscope watch cap.cf32") as show:
        show(None, "waiting for data")
        console.file.flush()
        waiting = buf.getvalue()
        show(status, "following")
    text = buf.getvalue()
    assert "waiting for data" in waiting
    assert "iqscope watch cap.cf32" in text and "+3.250 Hz" in text and "following" in text
