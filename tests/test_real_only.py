"""Real-only recordings (issue 12.2): detected in I/Q files, and real datatypes accepted.

Test signals are made as the hardware makes them:

* a sound card digitising a receiver's audio output: one real ADC stream; stored as a
  real datatype (SigMF ``ri16_le``, raw ``rf32``, ``ru8``), or copied to both channels
  of an I/Q file (I == Q exactly), or into the left channel only (Q == 0);
* a receiver's driver left in real (direct) sampling: the I/Q file's Q carries the same
  samples scaled (Q = k I) or nothing at all;
* integers rounded by the converter (16-bit codes), each channel with its own DC offset.

The emission is a DSB signal with a 1 kHz tone on an audio "IF" of 9 kHz, its carrier
40 dB below the total sideband power (closed form in ``_dsb_real``).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.grading import grade
from iqscope.io import ArrayRecording, open_recording, write_sigmf
from iqscope.io._real import RealAsComplex
from iqscope.measure import AnalysisRequest
from iqscope.measure.pipeline import analyse

FS = 48_000.0
N = 1 << 17
IF_HZ = 9_000.0
SUPPRESSION_DB = 40.0


def _dsb_real(rng: np.random.Generator, amplitude: float = 0.3, noise: float = 1e-4) -> np.ndarray:
    """Real DSB: A cos(w_a t) cos(w_c t) (two sidebands of amplitude A/2 each, total power
    A^2/4) plus a carrier of power A^2/4 * 10^(-40/10) (amplitude A/2 * 10^(-40/20) * sqrt 2),
    plus the sound card's own (real, white) noise."""
    t = np.arange(N) / FS
    carrier_amp = amplitude / 2 * 10 ** (-SUPPRESSION_DB / 20) * math.sqrt(2)
    return (amplitude * np.cos(2 * np.pi * 1000 * t) * np.cos(2 * np.pi * IF_HZ * t)
            + carrier_amp * np.cos(2 * np.pi * IF_HZ * t) + noise * rng.standard_normal(N))


def _check_graded_from_the_positive_half(an, *, expect_artefact: bool) -> None:
    """Carrier suppression is the closed-form 40 dB (tolerance: 3 sigma of the stated
    uncertainty plus 0.05 dB for the FIR's passband ripple, < 0.01 dB for a Kaiser beta 10
    design, and window scalloping); the carrier sits at IF - fs/4 from the analysed centre."""
    m = an.measurements["carrier_suppression_db"]
    assert m.value == pytest.approx(SUPPRESSION_DB, abs=3 * (m.uncertainty or 0) + 0.05)
    assert an.signal.mode == "dsb"
    assert an.signal.carrier_offset_hz == pytest.approx(IF_HZ - FS / 4, abs=1.0)
    kinds = [a.kind for a in an.artefacts]
    assert ("real_only" in kinds) is expect_artefact
    # no mirror image left to be flagged as the receiver's image
    assert "iq_image" not in kinds


@pytest.mark.parametrize("how", ["q_zero", "i_equals_q", "q_is_k_i", "i_zero"])
def test_real_only_iq_detected(rng: np.random.Generator, how: str) -> None:
    r = _dsb_real(rng)
    x = {"q_zero": r + 0j, "i_equals_q": r * (1 + 1j), "q_is_k_i": r * (1 - 0.63j), "i_zero": 1j * r}[how]
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="auto"))
    _check_graded_from_the_positive_half(an, expect_artefact=True)
    art = next(a for a in an.artefacts if a.kind == "real_only")
    assert "mirror image" in art.note
    g = grade(an).to_json()
    assert any(s.startswith("sideband_balance_db: real-only") for s in g["not_graded"])
    assert all(v["measurement"] != "sideband_balance_db" for v in g["verdicts"])


def test_sound_card_int16_with_dc_offsets_detected(tmp_path: Path, rng: np.random.Generator,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    """A stereo sound card fed one signal: each channel rounded to 16-bit codes with its own
    gain and DC offset (Q = round(0.8 I_true + 40 codes)), written as ci16 SigMF."""
    r = _dsb_real(rng) * 32768
    i_codes = np.rint(r + 25)
    q_codes = np.rint(0.8 * r - 40)
    meta = write_sigmf(tmp_path / "card", (i_codes + 1j * q_codes) / 32768, FS, datatype="ci16_le")
    assert main(["grade", str(meta), "--json"]) in (0, 1, 2)
    doc = json.loads(capsys.readouterr().out)
    assert any(a["kind"] == "real_only" for a in doc["artefacts"])
    assert doc["measurements"]["carrier_suppression_db"]["value"] == pytest.approx(SUPPRESSION_DB, abs=0.3)


def test_complex_signals_not_flagged(rng: np.random.Generator) -> None:
    """Controls: a proper I/Q DSB off centre, and an AM signal on the capture centre (whose
    spectrum is symmetric about 0 Hz, like a real signal's) with a complex receiver's
    independent noise in I and Q, at -130 dBFS/Hz."""
    t = np.arange(N) / FS
    noise = math.sqrt(FS * 1e-13 / 2) * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    dsb = 0.3 * np.cos(2 * np.pi * 1000 * t) * np.exp(2j * np.pi * 3000 * t) + noise
    am = 0.3 * (1 + 0.5 * np.cos(2 * np.pi * 1000 * t)) * np.exp(0.7j) + noise
    for x, mode in ((dsb, "dsb"), (am, "am")):
        an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode=mode))
        assert not [a for a in an.artefacts if a.kind == "real_only"], mode
        assert an.recording.sample_rate_hz == FS


@pytest.mark.parametrize("datatype", ["ri16_le", "rf32_le", "ru8", "ri8", "rf64_be", "ri32_be", "ru16_le"])
def test_real_sigmf_datatypes(tmp_path: Path, rng: np.random.Generator, datatype: str) -> None:
    """SigMF real datatypes (spec 1.2.6: core:datatype ^(c|r)(f32|f64|i32|i16|u32|u16|i8|u8)
    (_le|_be)?) are read as real recordings and analysed from their positive half."""
    meta = write_sigmf(tmp_path / "real", _dsb_real(rng, noise=3e-3), FS, datatype=datatype)
    assert json.loads(meta.read_text())["global"]["core:datatype"] == datatype
    with open_recording(meta) as rec:
        assert isinstance(rec, RealAsComplex)
        assert rec.sample_rate_hz == FS / 2 and rec.n_samples == N // 2
        assert rec.datatype == datatype
        an = analyse(rec, AnalysisRequest(mode="dsb"))
    # 8-bit: quantisation noise -50 dBc lifts nothing near the 40 dB carrier (3-sigma rule)
    _check_graded_from_the_positive_half(an, expect_artefact=False)


def test_real_raw_format_and_tone_level(tmp_path: Path) -> None:
    """Raw --format rf32: a real full-scale-ish sine A cos(w n) reads as a complex tone of
    amplitude A (0 dBFS for A = 1); its frequency f maps to f - fs/4."""
    t = np.arange(N) / FS
    p = tmp_path / "tone.raw"
    p.write_bytes((0.5 * np.cos(2 * np.pi * 7000 * t)).astype("<f4").tobytes())
    with open_recording(p, format="rf32", rate=FS, center=7.0e6) as rec:
        assert rec.center_frequency_hz == 7.0e6 + FS / 4
        x = rec.read(1000, 10_000)
    assert np.abs(x).mean() == pytest.approx(0.5, rel=1e-4)  # passband ripple < 1e-4
    spec = np.abs(np.fft.fft(x * np.blackman(x.size)))
    f = np.fft.fftfreq(x.size, 2 / FS)
    assert f[np.argmax(spec)] == pytest.approx(7000 - FS / 4, abs=FS / 2 / x.size)
    # the mirror (real -7 kHz, now at +5 kHz) is gone: Kaiser beta 10 stopband < -100 dB
    mirror = spec[np.argmin(np.abs(f - 5000))]
    assert 20 * np.log10(mirror / spec.max()) < -100


def test_cli_real_raw(tmp_path: Path, rng: np.random.Generator, capsys: pytest.CaptureFixture[str]) -> None:
    p = tmp_path / "card.raw"
    p.write_bytes(np.rint(_dsb_real(rng) * 32767).astype("<i2").tobytes())
    assert main(["grade", str(p), "--format", "ri16", "--rate", "48k", "--json", "--mode", "dsb"]) in (0, 1, 2)
    doc = json.loads(capsys.readouterr().out)
    assert doc["recording"]["datatype"] == "ri16_le"
    assert doc["recording"]["sample_rate_hz"] == FS / 2
    assert doc["measurements"]["carrier_suppression_db"]["value"] == pytest.approx(SUPPRESSION_DB, abs=0.3)
    assert any("positive-frequency half" in w for w in doc["warnings"])
