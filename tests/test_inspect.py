"""``iqscope inspect``: exact facts (issue 2 acceptance), levels against closed forms, the
rendered table, inputs left untouched, and flat memory on a multi-GB file (slow)."""

from __future__ import annotations

import hashlib
import io
import json
import os
import subprocess
import sys
import tarfile
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pytest
from rich.console import Console

from iqscope.cli import main
from iqscope.cli._inspect import parse_hz
from iqscope.dsp._levels import LevelAccumulator, levels_of_blocks
from iqscope.io import write_sigmf, write_wav
from iqscope.report._inspect import render_inspect


def _inspect_json(capsys: pytest.CaptureFixture[str], *args: str) -> dict[str, Any]:
    status = main(["inspect", *args, "--json"])
    out, err = capsys.readouterr()
    assert status == 0, err
    assert err == ""  # quiet: no progress bar when stderr is not a terminal
    lines = out.splitlines()
    assert len(lines) == 1  # one JSON object and nothing else
    return json.loads(lines[0])


def _tone(n: int, amp: float, cycles: int) -> np.ndarray:
    return (amp * np.exp(2j * np.pi * cycles * np.arange(n) / n)).astype(np.complex64)


# -- issue 2 acceptance: exact rate, count and centre ----------------------------------------
@pytest.mark.parametrize("datatype", ["ci16_le", "cf32_le"])
@pytest.mark.parametrize("center", [14_100_000.0, None])
def test_json_exact_facts_sigmf(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], datatype: str, center: float | None
) -> None:
    meta = write_sigmf(tmp_path / "s", _tone(48_001, 0.5, 100), 48_000.0, center_frequency_hz=center, datatype=datatype)
    data = _inspect_json(capsys, str(meta))
    assert data["format"] == "sigmf" and data["datatype"] == datatype
    assert data["sample_rate_hz"] == 48_000.0
    assert data["n_samples"] == 48_001
    assert data["duration_s"] == 48_001 / 48_000.0
    assert data["center_frequency_hz"] == center
    assert data["segments"] == [{"start": 0, "center_frequency_hz": center, "datetime": None}]
    assert data["annotations"] == 0 and data["warnings"] == []


def test_json_exact_facts_wav16(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = write_wav(tmp_path / "w.wav", _tone(12_345, 0.5, 7), 44_100, bits=16, center_frequency_hz=7_074_000.0)
    data = _inspect_json(capsys, str(path))
    assert (data["format"], data["datatype"], data["sample_rate_hz"], data["n_samples"]) == ("wav", "ci16_le", 44_100.0, 12_345)
    assert data["center_frequency_hz"] == 7_074_000.0
    (tmp_path / "w.wav.iqscope.json").unlink()
    assert _inspect_json(capsys, str(path))["center_frequency_hz"] is None
    assert _inspect_json(capsys, str(path), "--center", "3.6M")["center_frequency_hz"] == 3_600_000.0


def test_json_segments_and_annotations(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = write_sigmf(tmp_path / "m", np.zeros(100, np.complex64), 1000, center_frequency_hz=1e6,
                       datetime="2026-12-01T20:00:00.000000Z")
    doc = json.loads(meta.read_text())
    doc["captures"].append({"core:sample_start": 60, "core:frequency": 2e6})
    doc["annotations"] = [{"core:sample_start": 3, "core:sample_count": 4}]
    meta.write_text(json.dumps(doc))
    data = _inspect_json(capsys, str(meta))
    assert data["segments"] == [
        {"start": 0, "center_frequency_hz": 1e6, "datetime": "2026-12-01T20:00:00.000000Z"},
        {"start": 60, "center_frequency_hz": 2e6, "datetime": None},
    ]
    assert data["annotations"] == 1


# -- levels against closed forms ---------------------------------------------------------------
def test_levels_of_a_tone(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A complex tone A exp(j w n) has |x|^2 = A^2 at every sample (closed form), so peak and
    mean are 20 log10 A = -6.0206 dBFS for A = 0.5; with a whole number of cycles its mean is 0
    (DC below -100 dBFS, float32 rounding). cf32 is stored exactly: tolerance 1e-5 dB."""
    meta = write_sigmf(tmp_path / "t", _tone(4800, 0.5, 37), 48000)
    data = _inspect_json(capsys, str(meta))
    assert data["peak_dbfs"] == pytest.approx(20 * np.log10(0.5), abs=1e-5)
    assert data["mean_dbfs"] == pytest.approx(20 * np.log10(0.5), abs=1e-5)
    assert data["dc_offset_dbfs"] < -100
    assert data["clipped_fraction"] == 0.0


def test_dc_offset_closed_form() -> None:
    """Constant x = 0.1 + 0.2j: |mean x|^2 = 0.05 -> 10 log10(0.05) = -13.0103 dBFS."""
    lv = levels_of_blocks([np.full(1000, 0.1 + 0.2j)])
    assert lv.dc_offset_dbfs == pytest.approx(10 * np.log10(0.05), abs=1e-12)
    assert lv.mean_dbfs == pytest.approx(10 * np.log10(0.05), abs=1e-12)


def test_clipped_fraction_counts_end_codes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """ci16: +1.0 saturates to 32767 (= clip level 32767/32768) and -1.0 is -32768; both count.
    0.9998 rounds to code 32761, below the clip level. 30 of 1000 clipped -> exactly 0.03."""
    x = np.full(1000, 0.1 + 0.1j)
    x[:10] = 1.0 + 0.0j
    x[10:20] = 0.0 - 1.0j
    x[20:30] = -1.0 - 1.0j
    x[30:40] = 0.9998 + 0.9998j
    meta = write_sigmf(tmp_path / "c", x, 1000, datatype="ci16_le")
    data = _inspect_json(capsys, str(meta))
    assert data["clipped_fraction"] == 0.03
    assert data["clip_level"] == 32767 / 32768
    assert data["peak_dbfs"] == pytest.approx(10 * np.log10(2.0), abs=1e-12)  # |-1 - 1j|^2 = 2


@pytest.mark.parametrize("block", [1, 7, 64, 999])
def test_levels_do_not_depend_on_blocking(rng: np.random.Generator, block: int) -> None:
    x = (rng.standard_normal(999) + 1j * rng.standard_normal(999)) * 0.3
    whole = levels_of_blocks([x], 0.5)
    parts = levels_of_blocks((x[i : i + block] for i in range(0, x.size, block)), 0.5)
    assert parts.n_clipped == whole.n_clipped and parts.peak_power == whole.peak_power
    assert parts.mean_power == pytest.approx(whole.mean_power, rel=1e-12)
    assert parts.dc_power == pytest.approx(whole.dc_power, rel=1e-9)
    # oracle: numpy over the whole array
    assert whole.mean_power == pytest.approx(np.mean(np.abs(x) ** 2), rel=1e-12)
    assert whole.n_clipped == np.count_nonzero((np.abs(x.real) >= 0.5) | (np.abs(x.imag) >= 0.5))


def test_accumulator_empty_and_nonfinite() -> None:
    acc = LevelAccumulator()
    lv = acc.result()
    assert lv.peak_dbfs is None and lv.mean_dbfs is None and lv.clipped_fraction is None
    acc.update(np.array([np.nan, 1.0, np.inf * 1j]))
    lv = acc.result()
    assert lv.n_nonfinite == 2 and lv.mean_power == 1.0 and lv.peak_dbfs == 0.0


def test_parse_hz() -> None:
    assert parse_hz("48000") == 48000.0
    assert parse_hz("48k") == 48000.0
    assert parse_hz("14.1M") == pytest.approx(14.1e6)
    assert parse_hz("2.4 MHz") == pytest.approx(2.4e6)
    assert parse_hz("1e3") == 1000.0


# -- rendering --------------------------------------------------------------------------------
GOLDEN = """\
x.sigmf-meta
┌──────────────────┬─────────────────────────┐
│ format           │ sigmf (ci16_le)         │
│ sample rate      │ 48.000 kS/s             │
│ centre frequency │ 14.100000 MHz           │
│ samples          │ 480,000                 │
│ duration         │ 10 s                    │
│ peak             │ -3.01 dBFS              │
│ mean power       │ -6.02 dBFS              │
│ DC offset        │ none                    │
│ clipped          │ 0.1 % of samples        │
│ annotations      │ 2                       │
│ warning          │ something to know about │
└──────────────────┴─────────────────────────┘
"""


def test_render_golden() -> None:
    data = {
        "path": "x.sigmf-meta", "format": "sigmf", "datatype": "ci16_le", "sample_rate_hz": 48000.0,
        "center_frequency_hz": 14.1e6, "n_samples": 480000, "duration_s": 10.0, "peak_dbfs": -3.0103,
        "mean_dbfs": -6.0206, "clipped_fraction": 0.001, "dc_offset_dbfs": None, "nonfinite_samples": 0,
        "segments": [{"start": 0, "center_frequency_hz": 14.1e6, "datetime": None}], "annotations": 2,
        "warnings": ["something to know about"],
    }
    buf = io.StringIO()
    render_inspect(data, Console(file=buf, width=80, color_system=None))
    assert "\n".join(line.rstrip() for line in buf.getvalue().splitlines()) + "\n" == GOLDEN


# -- inputs are never modified ------------------------------------------------------------------
def _digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir()) if p.is_file()}


def test_inspect_leaves_inputs_unchanged(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    x = _tone(5000, 0.5, 11)
    meta = write_sigmf(tmp_path / "a", x, 48000, center_frequency_hz=1e6, datatype="ci16_le")
    wav = write_wav(tmp_path / "b.wav", x, 48000, center_frequency_hz=1e6)
    (tmp_path / "c.cf32").write_bytes(x.tobytes())
    with h5py.File(tmp_path / "d.h5", "w") as f:
        f.create_dataset("iq", data=x).attrs["sample_rate_hz"] = 48000.0
    with tarfile.open(tmp_path / "e.sigmf", "w") as tar:
        tar.add(meta, arcname="e/e.sigmf-meta")
        tar.add(tmp_path / "a.sigmf-data", arcname="e/e.sigmf-data")
    before = _digest(tmp_path)
    mtimes = {p.name: p.stat().st_mtime_ns for p in tmp_path.iterdir()}
    for target in ([str(meta)], [str(wav)], [str(tmp_path / "c.cf32"), "--rate", "48000"],
                   [str(tmp_path / "d.h5")], [str(tmp_path / "e.sigmf")]):
        assert _inspect_json(capsys, *target)["n_samples"] == 5000
        assert main(["inspect", *target]) == 0
        capsys.readouterr()
    assert _digest(tmp_path) == before
    assert {p.name: p.stat().st_mtime_ns for p in tmp_path.iterdir()} == mtimes  # nothing added


# -- memory stays flat -----------------------------------------------------------------------------
@pytest.mark.slow
def test_multi_gb_file_keeps_memory_flat(tmp_path: Path) -> None:
    """A 3 GiB raw ci16 file (sparse, reads as zeros) inspected in a child process: its peak
    resident memory (ru_maxrss, Linux kB) stays far below the file size. Bound 400 MiB: the
    interpreter with numpy/h5py/rich is ~100 MiB and one block is a few MiB."""
    resource = pytest.importorskip("resource")
    big = tmp_path / "big.cs16"
    size = 3 * 1024**3
    with open(big, "wb") as fh:
        fh.truncate(size)
    code = (
        "import resource, sys; from iqscope.cli import main; "
        f"s = main(['inspect', {str(big)!r}, '--rate', '1e6', '--json']); "
        "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr); sys.exit(s)"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=900,
                          env={**os.environ, "PYTHONWARNINGS": "error"})
    assert proc.returncode == 0, proc.stderr
    data = json.loads(proc.stdout)
    assert data["n_samples"] == size // 4
    max_rss_mib = int(proc.stderr.strip().splitlines()[-1]) / 1024
    assert max_rss_mib < 400, max_rss_mib


def test_progress_bar_only_when_enabled() -> None:
    """Disabled (short file, stderr not a terminal): nothing printed. Enabled on a terminal
    console: rich draws the bar (transient, so it is cleared at the end). inspect uses the
    one progress bar of report/_progress.py."""
    from iqscope.report._progress import progress_reporter

    quiet = io.StringIO()
    with progress_reporter(Console(file=quiet), "x.wav", enabled=False) as progress:
        assert progress is None  # the reading loop skips it
    assert quiet.getvalue() == ""
    loud = io.StringIO()
    with progress_reporter(Console(file=loud, force_terminal=True, width=60), "x.wav", enabled=True) as progress:
        assert progress is not None
        progress(50, 100)
        progress(100, 100)
    assert "x.wav" in loud.getvalue()
