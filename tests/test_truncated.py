"""Truncated recordings (issue 18.4): exit 3 with one line naming the file, unless the user
asks to read what is there with ``--accept-truncated``.

The WAV is made as a recorder that writes its header first (the data size of the planned
10 s) and is stopped early leaves it: a complete RIFF header promising 10 s at 48 kS/s,
followed by only 239 samples.
"""

from __future__ import annotations

import json
import struct
from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.errors import EXIT_INPUT
from iqscope.io import write_wav

FS = 48_000


def _short_wav(tmp_path: Path) -> Path:
    t = np.arange(239) / FS
    x = 0.3 * np.exp(2j * np.pi * 1500 * t)
    p = write_wav(tmp_path / "short.wav", x, FS, bits=16)
    blob = bytearray(p.read_bytes())
    pos = blob.index(b"data")
    promised = 10 * FS * 4  # 10 s of 16-bit I/Q frames
    blob[pos + 4 : pos + 8] = struct.pack("<I", promised)
    blob[4:8] = struct.pack("<I", 36 + promised)
    p.write_bytes(bytes(blob))
    return p


@pytest.mark.parametrize("json_flag", [[], ["--json"]])
def test_truncated_wav_is_exit_3_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                          json_flag: list[str]) -> None:
    p = _short_wav(tmp_path)
    assert main(["grade", str(p), *json_flag]) == EXIT_INPUT
    out, err = capsys.readouterr()
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("iqscope: error: ") and "short.wav" in lines[0]
    assert "truncated" in lines[0] and "10 s" in lines[0] and "239 samples" in lines[0]
    assert "--accept-truncated" in lines[0]


def test_truncated_wav_read_when_asked(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _short_wav(tmp_path)
    status = main(["grade", str(p), "--json", "--accept-truncated"])
    doc = json.loads(capsys.readouterr().out)
    assert status in (0, 1, 2)
    assert doc["recording"]["n_samples"] == 239
    assert any(w.startswith("truncated:") and "239 samples" in w for w in doc["warnings"])


def test_truncated_in_a_batch_goes_to_errors(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """One truncated file in a batch: the others are graded, it is listed with its file."""
    bad = _short_wav(tmp_path)
    t = np.arange(FS) / FS
    good = write_wav(tmp_path / "good.wav", 0.3 * np.exp(2j * np.pi * 1500 * t), FS)
    assert main(["grade", str(good), str(bad), "--json", "--mode", "cw"]) == EXIT_INPUT
    doc = json.loads(capsys.readouterr().out)
    assert [e["path"] for e in doc["errors"]] == [str(bad)]
    assert doc["errors"][0]["exit_status"] == EXIT_INPUT and "truncated" in doc["errors"][0]["error"]
    assert len(doc["results"]) == 1


def test_raw_partial_last_sample(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = tmp_path / "cut.cf32"
    p.write_bytes(np.zeros(1000, np.complex64).tobytes() + b"\x00" * 5)
    assert main(["inspect", str(p), "--rate", "48k"]) == EXIT_INPUT
    err = capsys.readouterr().err
    assert "cut.cf32" in err and "partial sample (5 of 8 bytes)" in err
    assert main(["inspect", str(p), "--rate", "48k", "--json", "--accept-truncated"]) == 0
    assert json.loads(capsys.readouterr().out)["n_samples"] == 1000
