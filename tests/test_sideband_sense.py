"""Sideband sense and I/Q order: a USB recording graded --mode lsb, or with I and Q
swapped by the receiver, is flagged ``sideband_reversed`` and no sideband figure is graded;
``--swap-iq`` undoes the swap on every reading command and is recorded in the outputs.

A USB emission with a test tone is one line at f0 + f_tone (phasing-method SSB, Haykin
SSB chapter, from memory), here with a residual carrier 45 dB and the opposite line
50 dB below it. A receiver that delivers Q as I and I as Q records Q + jI = j conj(x):
the spectrum mirrored about the capture centre (complex baseband, common practice).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.grading import grade
from iqscope.io import ArrayRecording
from iqscope.io._sigmf import write_sigmf
from iqscope.measure import AnalysisRequest, analyse

FS = 48_000.0
N = 1 << 17
T = np.arange(N) / FS
F0 = 3000.0
CENTRE = 14.2e6
SIDEBAND_FIGURES = ("carrier_suppression_db", "carrier_below_pep_db", "opposite_sideband_suppression_db")


def _usb(rng: np.random.Generator, f0: float = F0) -> np.ndarray:
    x = (0.3 * np.exp(2j * np.pi * (f0 + 1000) * T)
         + 0.3 * 10 ** (-45 / 20) * np.exp(2j * np.pi * f0 * T)
         + 0.3 * 10 ** (-50 / 20) * np.exp(2j * np.pi * (f0 - 1000) * T))
    p = 10 ** (-120 / 10) * FS
    noise = np.sqrt(p / 2) * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    return x + noise + 10 ** (-50 / 20) * np.exp(0.7j)  # receiver DC line


def _swap(x: np.ndarray) -> np.ndarray:
    return x.imag + 1j * x.real


def _reversed_checks(j: dict) -> None:
    kinds = [a["kind"] for a in j["artefacts"]]
    assert "sideband_reversed" in kinds
    art = next(a for a in j["artefacts"] if a["kind"] == "sideband_reversed")
    assert "wrong --mode, or I and Q swapped" in art["note"]
    graded = {v["measurement"] for v in j["verdicts"]}
    for name in SIDEBAND_FIGURES:
        assert name not in graded
        assert any(s.startswith(f"{name}: not graded") for s in j["not_graded"])
    assert j["advice"] == []  # no transmitter advice
    assert j["overall"] == "warn"


@pytest.mark.parametrize("kw", [dict(carrier_hz=F0), dict(tone_hz=1000.0), dict(carrier_hz=F0, tone_hz=1000.0)])
def test_usb_graded_as_lsb(rng: np.random.Generator, kw: dict) -> None:
    an = analyse(ArrayRecording(_usb(rng), FS, CENTRE), AnalysisRequest(mode="lsb", **kw))
    _reversed_checks(grade(an).to_json())


def test_usb_graded_as_usb_is_not_reversed(rng: np.random.Generator) -> None:
    an = analyse(ArrayRecording(_usb(rng), FS, CENTRE), AnalysisRequest(mode="usb", carrier_hz=F0, tone_hz=1000.0))
    j = grade(an).to_json()
    assert "sideband_reversed" not in [a["kind"] for a in j["artefacts"]]
    # Opposite line 50 dB down by construction; 1-sigma well below 0.05 dB at 50 dB SNR
    # on the weaker line: 0.2 dB is 3 sigma plus the scalloping allowance.
    assert j["measurements"]["opposite_sideband_suppression_db"]["value"] == pytest.approx(50.0, abs=0.2)


def test_swapped_iq_with_offset_carrier(rng: np.random.Generator) -> None:
    """I and Q swapped; the user gives the carrier where the swap put it (-3 kHz), mode usb."""
    an = analyse(ArrayRecording(_swap(_usb(rng)), FS, CENTRE), AnalysisRequest(mode="usb", carrier_hz=-F0))
    _reversed_checks(grade(an).to_json())


def test_swapped_iq_with_rf_carrier(rng: np.random.Generator) -> None:
    """I and Q swapped, carrier 7 kHz from the centre given as RF: the signal sits at the mirror."""
    x = _swap(_usb(rng, 7000.0))
    an = analyse(ArrayRecording(x, FS, CENTRE), AnalysisRequest(mode="usb", carrier_hz=CENTRE + 7000.0))
    j = grade(an).to_json()
    _reversed_checks(j)
    assert "--swap-iq" in next(a for a in j["artefacts"] if a["kind"] == "sideband_reversed")["note"]


def _write(tmp_path: Path, x: np.ndarray) -> Path:
    return write_sigmf(tmp_path / "swapped", x.astype(np.complex64), FS, center_frequency_hz=CENTRE)


def test_swap_iq_option_grades_the_swapped_recording(
    rng: np.random.Generator, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    meta = _write(tmp_path, _swap(_usb(rng)))
    args = ["grade", str(meta), "--mode", "usb", "--carrier", str(CENTRE + F0), "--json"]
    main(args)
    j = json.loads(capsys.readouterr().out)
    assert j["recording"]["swap_iq"] is False
    main(args + ["--swap-iq"])
    j = json.loads(capsys.readouterr().out)
    assert j["recording"]["swap_iq"] is True
    assert "sideband_reversed" not in [a["kind"] for a in j["artefacts"]]
    assert j["measurements"]["opposite_sideband_suppression_db"]["value"] == pytest.approx(50.0, abs=0.2)


def test_swap_iq_on_every_reading_command(rng: np.random.Generator, tmp_path: Path,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    from iqscope.cli import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    for name in ("grade", "drift", "inspect", "harmonics", "sweep", "calibrate", "watch", "capture"):
        p = sub.choices[name]  # type: ignore[attr-defined]
        assert any("--swap-iq" in a.option_strings for a in p._actions), name
    meta = _write(tmp_path, _swap(_usb(rng)))
    main(["inspect", str(meta), "--swap-iq", "--json"])
    assert json.loads(capsys.readouterr().out)["swap_iq"] is True
    main(["drift", str(meta), "--swap-iq", "--json"])
    assert json.loads(capsys.readouterr().out)["recording"]["swap_iq"] is True


def test_swap_iq_mirrors_the_samples() -> None:
    """Q + jI exactly (the reader's view, not a copy of the file)."""
    x = np.array([1 + 2j, -3 + 0.5j], np.complex64)
    rec = ArrayRecording(x, FS)
    rec.set_swap_iq(True)
    assert np.array_equal(rec.read(), np.array([2 + 1j, 0.5 - 3j], np.complex64))
    assert np.array_equal(x, np.array([1 + 2j, -3 + 0.5j], np.complex64))
