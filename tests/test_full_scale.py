"""Float files in ADC counts, ``--full-scale`` and clipping found from the data (issue 12.1).

Many receivers' programs write cf32 samples in raw ADC counts (|I|, |Q| up to 2047 for a
12-bit converter, 32767 for a 16-bit one) rather than scaled to 1. The test signals here
are made that way: a complex baseband emission plus receiver noise, then, for a
converter, rounded to its integer codes and saturated at its end codes (-2^(b-1) ..
2^(b-1) - 1), and written as float32 of those codes, as such a program does.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.dsp import LevelAccumulator, RailTracker
from iqscope.io import ArrayRecording, open_recording
from iqscope.measure import AnalysisRequest
from iqscope.measure.pipeline import analyse

FS = 48_000.0
N = 1 << 16


def _dsb(rng: np.random.Generator, amplitude: float, *, carrier_hz: float = 3210.7, tone_hz: float = 1000.0,
         noise_rms: float = 1e-3, leak: float = 1e-3) -> np.ndarray:
    """A DSB signal (1 kHz tone, carrier leak ``leak`` of each sideband's amplitude) at
    ``carrier_hz`` from the capture centre, peak component about ``amplitude``, in complex
    white receiver noise of ``noise_rms`` (relative to ``amplitude``)."""
    t = np.arange(N) / FS
    bb = np.cos(2 * np.pi * tone_hz * t) + leak
    x = amplitude * 0.5 * bb * np.exp(2j * np.pi * carrier_hz * t)
    x += amplitude * noise_rms * (rng.standard_normal(N) + 1j * rng.standard_normal(N)) / math.sqrt(2)
    return x


def _adc(x: np.ndarray, bits: int) -> np.ndarray:
    """Round each component to a ``bits``-bit converter's codes and saturate at its end codes."""
    top = 2 ** (bits - 1)
    re = np.clip(np.rint(x.real), -top, top - 1)
    im = np.clip(np.rint(x.imag), -top, top - 1)
    return (re + 1j * im).astype(np.complex64)


def _write_cf32(path: Path, x: np.ndarray) -> Path:
    path.write_bytes(np.ascontiguousarray(x, dtype=np.complex64).tobytes())
    return path


def _grade_json(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, dict]:
    status = main(["grade", *argv, "--json", "--rate", str(FS)])
    out = capsys.readouterr().out
    return status, json.loads(out)


# -- relative figures do not depend on the scale -------------------------------------------
def test_relative_figures_identical_at_two_scales(tmp_path: Path, rng: np.random.Generator,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    """The same recording scaled by 2047 and by 32767 (float, no rounding) gives the same
    dB, dBc, Hz and ratio figures: a common factor cancels in every ratio (definition of
    dBc / dB). Tolerance: float32 products of the two scales differ by a relative 2^-24 per
    sample, so 1e-6 dB (1e-4 relative for Hz-valued widths whose edges are interpolated)."""
    x = _dsb(rng, 1.0)
    a = _write_cf32(tmp_path / "a.cf32", x * 2047.0)
    b = _write_cf32(tmp_path / "b.cf32", x * 32767.0)
    _, da = _grade_json(capsys, str(a), "--mode", "dsb")
    _, db = _grade_json(capsys, str(b), "--mode", "dsb")
    ma, mb = da["measurements"], db["measurements"]
    compared = 0
    for key, m in ma.items():
        if m["unit"] in ("dB", "dBc", "Hz", "1", "Hz/min") and m["value"] is not None:
            assert mb[key]["value"] == pytest.approx(m["value"], rel=1e-4, abs=1e-6), key
            compared += 1
    assert compared >= 4
    assert ma["clipped_fraction"]["value"] == 0.0 and mb["clipped_fraction"]["value"] == 0.0
    assert not [art for art in da["artefacts"] + db["artefacts"] if art["kind"] == "clipping"]
    # levels in dBFS are relative to 1.0 and differ by 20 log10(32767 / 2047)
    diff = mb["peak_dbfs"]["value"] - ma["peak_dbfs"]["value"]
    assert diff == pytest.approx(20 * math.log10(32767 / 2047), abs=1e-4)
    assert any("--full-scale" in w and "relative to 1.0" in w for w in da["warnings"])


def test_full_scale_states_the_level(tmp_path: Path, rng: np.random.Generator,
                                     capsys: pytest.CaptureFixture[str]) -> None:
    """With --full-scale the dBFS levels are those of the file scaled to 1: a cf32 file in
    12-bit counts with --full-scale 2048 reads as the same signal divided by 2048."""
    x = _dsb(rng, 0.25)
    ref = _write_cf32(tmp_path / "ref.cf32", x)
    counts = _write_cf32(tmp_path / "counts.cf32", x * 2048.0)
    _, dr = _grade_json(capsys, str(ref), "--mode", "dsb")
    _, dc = _grade_json(capsys, str(counts), "--mode", "dsb", "--full-scale", "2048")
    for key in ("peak_dbfs", "noise_floor_dbfs_per_hz", "carrier_suppression_db", "occupied_bandwidth_hz"):
        assert dc["measurements"][key]["value"] == pytest.approx(dr["measurements"][key]["value"], rel=1e-5,
                                                                 abs=1e-4), key
    assert not any("--full-scale" in w for w in dc["warnings"])


def test_full_scale_of_integer_file_is_in_codes(tmp_path: Path) -> None:
    """ci16 holding a 12-bit converter's codes: --full-scale 2048 scales by 32768/2048 = 16,
    so code 1024 reads 0.5 (exact in float32)."""
    raw = np.array([1024, -1024, 2047, 0], np.int16)
    p = tmp_path / "x.cs16"
    p.write_bytes(raw.tobytes())
    with open_recording(p, rate=FS) as rec:
        rec.set_full_scale(2048)
        x = rec.read()
        assert x[0] == pytest.approx(0.5 - 0.5j)
        assert rec.clip_level == pytest.approx(32767 / 2048)
    with pytest.raises(ValueError):
        ArrayRecording(np.zeros(4), FS).set_full_scale(0.0)


def test_full_scale_option_on_every_reading_command(capsys: pytest.CaptureFixture[str]) -> None:
    for cmd in ("grade", "drift", "inspect", "watch", "sweep", "calibrate", "harmonics", "capture"):
        with pytest.raises(SystemExit):
            main([cmd, "--help"])
        assert "--full-scale" in capsys.readouterr().out, cmd


def test_capture_passes_full_scale_to_grade() -> None:
    import argparse

    from iqscope.cli._capture import grade_argv

    args = argparse.Namespace(mode=None, limits=None, calibration=None, report=None, json=False, full_scale=2048.0)
    assert grade_argv(args, "x.sigmf-meta") == ["grade", "x.sigmf-meta", "--full-scale", "2048.0"]


# -- clipping from the data ------------------------------------------------------------------
def test_clipped_adc_count_float_file_is_flagged(tmp_path: Path, rng: np.random.Generator,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    """A signal driven 20 % past a 12-bit converter's range, written as float counts: the
    samples pile up at +2047 and -2048 (the rails); the count on the rails is known exactly."""
    x = _adc(_dsb(rng, 2 * 2048 * 1.2), 12)  # peak component 1.2 x the range
    p = _write_cf32(tmp_path / "clipped.cf32", x)
    on_rails = int(np.count_nonzero(x.real == 2047) + np.count_nonzero(x.real == -2048)
                   + np.count_nonzero(x.imag == 2047) + np.count_nonzero(x.imag == -2048))
    _, doc = _grade_json(capsys, str(p), "--mode", "dsb")
    m = doc["measurements"]["clipped_fraction"]
    assert m["value"] == pytest.approx(min(on_rails, N) / N)
    assert m["value"] > 0.01
    assert any(a["kind"] == "clipping" and "plateau" in a["note"] for a in doc["artefacts"])


@pytest.mark.parametrize("amplitude", [2040.0, 1500.0, 300.0, 20.0])
def test_unclipped_adc_count_float_file_is_not_flagged(tmp_path: Path, rng: np.random.Generator,
                                                      capsys: pytest.CaptureFixture[str], amplitude: float) -> None:
    """Float counts far beyond 1 but below the converter's end codes: no clipping, and the
    scale warning instead (dBFS relative to 1.0)."""
    x = _adc(_dsb(rng, 2 * amplitude, noise_rms=3e-4), 12)  # peak component about amplitude
    assert np.abs(x.real).max() < 2047
    p = _write_cf32(tmp_path / "ok.cf32", x)
    _, doc = _grade_json(capsys, str(p), "--mode", "dsb")
    assert doc["measurements"]["clipped_fraction"]["value"] == 0.0
    assert not [a for a in doc["artefacts"] if a["kind"] == "clipping"]
    assert any("relative to 1.0" in w for w in doc["warnings"])


@pytest.mark.parametrize("amplitude", [2047.3, 900.0, 40.0, 7.0])
def test_noise_free_quantised_tone_is_no_plateau(amplitude: float) -> None:
    """The hardest unclipped case: a noise-free quantised sinusoid crowds its samples near the
    peak (arcsine amplitude law), yet its top code holds at most a third of the window just
    below it; a plateau test that flagged it would call every quiet integer file clipped."""
    n = 200_003
    x = amplitude * np.exp(2j * np.pi * 0.01234567 * np.arange(n))
    x = (np.rint(x.real) + 1j * np.rint(x.imag)).astype(np.complex64)
    tr = RailTracker()
    tr.update_components(x.view(np.float32))
    tr.update_power((np.abs(x) ** 2).astype(np.float32))
    assert tr.clipped_values(n)[0] == 0


def test_overdriven_tone_is_a_plateau() -> None:
    """A tone 2 % past the rail, noise-free and quantised: the rails hold many more samples
    than the window below them (arcsine law: 2/pi * acos(1/1.02) ~ 12.6 % of the components)."""
    n = 100_000
    x = 1.02 * 2047 * np.exp(2j * np.pi * 0.00731 * np.arange(n))
    x = np.clip(np.rint(x.real), -2048, 2047) + 1j * np.clip(np.rint(x.imag), -2048, 2047)
    acc = LevelAccumulator(1.0, float_data=True)
    acc.update(x.astype(np.complex64))
    lv = acc.result()
    # components (I and Q) on either rail, closed form: P(|cos| >= c) = 2 acos(c) / pi each
    expected = 2 * (2 / math.pi) * math.acos(1 / 1.02) * n
    assert lv.n_clipped == pytest.approx(expected, rel=0.05)
    assert lv.plateau_level == pytest.approx(2047)


def test_flat_topped_envelope_is_flagged_constant_envelope_is_not(rng: np.random.Generator) -> None:
    """A magnitude limiter (|x| held at L when above it) gives a flat-topped envelope; a
    noise-free constant-envelope carrier is flat on top by nature and is not clipping."""
    t = np.arange(N) / FS
    am = (1 + 0.9 * np.cos(2 * np.pi * 700 * t)) * np.exp(2j * np.pi * 2500 * t) * 0.5
    lim = np.where(np.abs(am) > 0.8, am / np.abs(am) * 0.8, am)
    an = analyse(ArrayRecording(lim, FS), AnalysisRequest(mode="am"))
    assert an.measurements["clipped_fraction"].value > 0.05
    assert any(a.kind == "clipping" and "envelope" in a.note for a in an.artefacts)
    cw = 0.5 * np.exp(2j * np.pi * 2500 * t)
    an = analyse(ArrayRecording(cw, FS), AnalysisRequest(mode="cw"))
    assert an.measurements["clipped_fraction"].value == 0.0


def test_inspect_reports_full_scale_and_warning(tmp_path: Path, rng: np.random.Generator,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    x = _adc(_dsb(rng, 1500.0), 12)
    p = _write_cf32(tmp_path / "i.cf32", x)
    assert main(["inspect", str(p), "--rate", "48k", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["clipped_fraction"] == 0.0 and data["full_scale"] is None
    assert any("--full-scale VALUE" in w for w in data["warnings"])
    assert main(["inspect", str(p), "--rate", "48k", "--json", "--full-scale", "2048"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["full_scale"] == 2048 and not data["warnings"]
    assert data["peak_dbfs"] < 0


def test_drift_carries_the_scale_warning(tmp_path: Path, rng: np.random.Generator,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    t = np.arange(N) / FS
    x = 1500 * np.exp(2j * np.pi * 1234 * t) + 2 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    p = _write_cf32(tmp_path / "d.cf32", x)
    main(["drift", str(p), "--rate", "48k", "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert any("relative to 1.0" in w for w in doc["warnings"])


def test_adc_counts_demo_against_its_truth(capsys: pytest.CaptureFixture[str]) -> None:
    """recordings/dsb40m_counts: cf32 in 12-bit counts (full scale 2048), carrier 250 Hz from
    the centre. Truth from recordings/demos.json (synthesized closed form): carrier 38 dB
    below the sidebands (tolerance 3 sigma + 0.05 dB: the DC line 250 Hz away leaks
    nothing into the carrier's main lobe at 6 Hz bins). The scale warning is shown, no
    clipping; with --full-scale 2048 the peak reads the truth's PEP to within the noise
    (peak of 96 000 samples with the carrier and noise: within 0.3 dB, common practice)."""
    demos = Path(__file__).resolve().parent.parent / "recordings"
    truth = json.loads((demos / "demos.json").read_text())["recordings"]["dsb40m_counts"]
    assert truth["full_scale"] == 2048
    assert (demos / "dsb40m_counts.sigmf-data").stat().st_size < 1_000_000
    meta = str(demos / truth["open"])
    assert main(["grade", meta, "--json"]) in (0, 1, 2)
    doc = json.loads(capsys.readouterr().out)
    m = doc["measurements"]["carrier_suppression_db"]
    assert m["value"] == pytest.approx(truth["truth"]["carrier_suppression_db"], abs=3 * m["uncertainty"] + 0.05)
    assert doc["measurements"]["clipped_fraction"]["value"] == 0.0
    assert any("relative to 1.0" in w for w in doc["warnings"])
    assert main(["grade", meta, "--json", "--full-scale", "2048"]) in (0, 1, 2)
    doc = json.loads(capsys.readouterr().out)
    assert doc["measurements"]["peak_dbfs"]["value"] == pytest.approx(truth["truth"]["pep_dbfs"], abs=0.3)
    assert not any("relative to 1.0" in w for w in doc["warnings"])
