"""Outputs are checked before any work, in every command that writes a file: an existing
``--report``, plot, annotation, calibration, limits copy, synthesized or captured file is
refused (exit 5, the file named) without reading a single sample. A recording opened
before the check fails the test (``open_recording`` and the analysis are replaced by
functions that raise)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.errors import EXIT_ERROR
from iqscope.io import write_sigmf


class _Touched(AssertionError):
    pass


@pytest.fixture()
def no_work(monkeypatch: pytest.MonkeyPatch) -> None:
    """Any attempt to read a recording, measure or capture raises _Touched."""
    import iqscope.capture
    import iqscope.cli._synth as synth_cli  # imported before patching: it binds write_signal
    import iqscope.io
    import iqscope.synth

    def refuse(*_a: Any, **_k: Any) -> Any:
        raise _Touched("work started before the outputs were checked")

    monkeypatch.setattr(iqscope.io, "open_recording", refuse)
    monkeypatch.setattr(iqscope.synth, "write_signal", refuse)
    monkeypatch.setattr(iqscope.synth, "write_audio", refuse)
    monkeypatch.setattr(iqscope.capture, "capture_to_sigmf", refuse)
    monkeypatch.setattr(synth_cli, "write_signal", refuse)
    monkeypatch.setattr(synth_cli, "write_audio", refuse)


@pytest.fixture()
def rec(tmp_path: Path) -> str:
    x = np.exp(2j * np.pi * 1000.0 * np.arange(8192) / 48_000.0).astype(np.complex64) * 0.1
    return str(write_sigmf(tmp_path / "rec", x, 48_000.0, center_frequency_hz=7.1e6))


def _exists(path: Path) -> str:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("keep me\n")
    return str(path)


def _cases(tmp: Path, rec: str) -> list[tuple[list[str], Path]]:
    plots = tmp / "plots"
    return [
        (["grade", rec, "--report", _exists(tmp / "r.html")], tmp / "r.html"),
        (["grade", rec, "--plot", str(plots)], plots / "rec-spectrum.png"),
        (["grade", rec, "--annotate"], tmp / "rec.graded.sigmf-meta"),
        (["drift", rec, "--plot", str(plots)], plots / "rec-drift-frequency.png"),
        (["sweep", rec, rec, "--drive", "0,3", "--plot", str(plots)], plots / "sweep.png"),
        (["harmonics", rec, rec + "x", "--plot", str(plots)], plots / "harmonics.png"),
        (["calibrate", rec, "--level-dbm", "-30", "-o", _exists(tmp / "cal.json")], tmp / "cal.json"),
        (["limits", "init", "home-built", "-o", _exists(tmp / "mine.toml")], tmp / "mine.toml"),
        (["synth", "cw", "-o", str(tmp / "rec.sigmf-meta"), "--duration", "0.1"], tmp / "rec.sigmf-meta"),
        (["synth", "audio", "-o", _exists(tmp / "a.wav"), "--duration", "0.1"], tmp / "a.wav"),
        (["capture", "--freq", "7.1M", "--rate", "48k", "--seconds", "1", "-o", str(tmp / "rec")],
         tmp / "rec.sigmf-meta"),
        (["capture", "--freq", "7.1M", "--rate", "48k", "--seconds", "1", "-o", str(tmp / "new"),
          "--grade", "--report", _exists(tmp / "cap.html")], tmp / "cap.html"),
    ]


@pytest.mark.parametrize("index", range(12))
def test_existing_output_is_refused_before_any_work(
    index: int, tmp_path: Path, rec: str, no_work: None, capsys: pytest.CaptureFixture[str]
) -> None:
    argv, target = _cases(tmp_path, rec)[index]
    if not target.exists():
        _exists(target)
    before = target.read_bytes()
    status = main(argv)
    err = capsys.readouterr().err
    assert status == EXIT_ERROR, (argv, err)
    assert target.name in err and "exist" in err, err
    assert len(err.strip().splitlines()) <= 2  # one error line (capture may add a safety note)
    assert target.read_bytes() == before  # the existing file is left alone
