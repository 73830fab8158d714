"""Mode classification and carrier location (DESIGN.md section 3 rules).

Signals are closed-form: CW = one line; AM = carrier + two lines m Ac / 2 (Haykin, AM
chapter); DSB = two equal lines about f0 (carrier = their mean); SSB = one tone line
f0 + tone; a keyed carrier = a line switched on and off (Morse keying, common practice).
The rule that a ``--carrier`` value within +/- fs/2 is an offset and a larger one is
absolute RF is DESIGN.md section 4 (contract).
"""

from __future__ import annotations

import numpy as np
import pytest

from iqscope.errors import UsageError
from iqscope.io import ArrayRecording
from iqscope.measure import AnalysisRequest, analyse
from iqscope.measure.locate import carrier_offset_from_arg, symmetry_centre

FS = 48_000.0
N = 1 << 16
T = np.arange(N) / FS


def _noise(rng: np.random.Generator) -> np.ndarray:
    return np.sqrt(1e-9 / 2) * (rng.standard_normal(N) + 1j * rng.standard_normal(N))


def tone(f: float, a: float = 0.3) -> np.ndarray:
    return a * np.exp(2j * np.pi * f * T)


def test_auto_cw(rng: np.random.Generator) -> None:
    an = analyse(ArrayRecording(tone(-2345.6) + _noise(rng), FS, 10.1e6))
    assert an.signal.mode == "cw" and an.signal.mode_detected
    assert an.signal.carrier_offset_hz == pytest.approx(-2345.6, abs=0.01)
    assert an.signal.carrier_frequency_hz == pytest.approx(10.1e6 - 2345.6, abs=0.01)


@pytest.mark.parametrize("duty", [0.5, 0.3])
def test_auto_keyed_cw_is_not_am(rng: np.random.Generator, duty: float) -> None:
    """On-off keying at 10 elements/s with 5 ms raised-cosine edges: CW, not AM."""
    key = ((T * 10) % 1.0 < duty).astype(float)
    edge = np.hanning(int(0.010 * FS))
    shaped = np.convolve(key, edge / edge.sum(), mode="same")
    an = analyse(ArrayRecording(tone(1500.0) * shaped + _noise(rng), FS))
    assert an.signal.mode == "cw"


def test_auto_am(rng: np.random.Generator) -> None:
    x = 0.3 * (1 + 0.5 * np.cos(2 * np.pi * 1000 * T)) * np.exp(2j * np.pi * 3000.3 * T)
    an = analyse(ArrayRecording(x + _noise(rng), FS))
    assert an.signal.mode == "am"
    assert an.signal.carrier_offset_hz == pytest.approx(3000.3, abs=0.01)


def test_auto_dsb_carrier_is_mean_of_sideband_lines(rng: np.random.Generator) -> None:
    f0, fm = 1234.56, 987.65
    an = analyse(ArrayRecording(tone(f0 + fm) + tone(f0 - fm) + _noise(rng), FS))
    assert an.signal.mode == "dsb"
    assert an.signal.carrier_offset_hz == pytest.approx(f0, abs=0.01)
    assert "mean of the two sideband lines" in an.signal.how


def test_auto_ssb_needs_carrier_or_tone(rng: np.random.Generator) -> None:
    """A one-sided band-limited signal: a usage error naming --carrier and --tone."""
    f = np.fft.fftfreq(N, 1 / FS)
    spec = rng.standard_normal(N) + 1j * rng.standard_normal(N)
    spec[(f < 2300) | (f > 4700)] = 0
    x = np.fft.ifft(spec)
    x *= 0.2 / np.sqrt(np.mean(np.abs(x) ** 2))
    with pytest.raises(UsageError) as err:
        analyse(ArrayRecording(x + _noise(rng), FS))
    assert "--carrier" in str(err.value) and "--tone" in str(err.value)
    an = analyse(ArrayRecording(x + _noise(rng), FS), AnalysisRequest(carrier_hz=2000.0))
    assert an.signal.mode == "usb"


def test_explicit_ssb_with_tone_and_auto_with_tone(rng: np.random.Generator) -> None:
    f0, tn = 2000.0, 1111.1
    x = tone(f0 + tn) + tone(f0, 0.3e-2) + _noise(rng)  # residual carrier 40 dB down
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="usb", tone_hz=tn))
    assert an.signal.carrier_offset_hz == pytest.approx(f0, abs=0.01)
    auto = analyse(ArrayRecording(x, FS), AnalysisRequest(tone_hz=tn))
    assert auto.signal.mode == "usb"
    assert auto.signal.carrier_offset_hz == pytest.approx(f0, abs=0.01)
    with pytest.raises(UsageError, match="--mode usb"):
        analyse(ArrayRecording(tone(f0 + tn) + _noise(rng), FS), AnalysisRequest(tone_hz=tn))


def test_unknown_mode_and_bad_resolution(rng: np.random.Generator) -> None:
    rec = ArrayRecording(tone(100.0) + _noise(rng), FS)
    with pytest.raises(UsageError, match="unknown --mode"):
        analyse(rec, AnalysisRequest(mode="fm"))
    with pytest.raises(UsageError, match="--resolution"):
        analyse(rec, AnalysisRequest(resolution_hz=-1.0))


def test_carrier_offset_from_arg() -> None:
    assert carrier_offset_from_arg(1000.0, FS, None) == 1000.0
    assert carrier_offset_from_arg(-24_000.0, FS, None) == -24_000.0
    assert carrier_offset_from_arg(7_101_000.0, FS, 7.1e6) == pytest.approx(1000.0)
    with pytest.raises(UsageError, match="no centre frequency"):
        carrier_offset_from_arg(7_101_000.0, FS, None)
    with pytest.raises(UsageError, match="not a number"):
        carrier_offset_from_arg(float("nan"), FS, None)


def test_symmetry_centre_of_a_continuum() -> None:
    s = np.zeros(200)
    s[50:80] = 1.0
    s[120:150] = 1.0
    f = np.arange(200) * 2.0 - 100.0
    centre, score = symmetry_centre(s, f, 2.0, near=2)
    assert centre == pytest.approx(f[0] + 99.5 * 2.0, abs=1.0)
    assert score > 0.5


# -- a receiver DC line stronger than the emission (review finding 1) -----------------
# A direct-conversion receiver's DC offset is a constant added to x: a line at exactly
# 0 Hz (closed form: the DFT of a constant is a single line at bin 0). Levels: DC at
# -30 dBFS (|x|^2 = 1e-3), emission lines at -40 dBFS, noise at -90 dBFS total power.
_DC = 10 ** (-30 / 20)
_A40 = 10 ** (-40 / 20)


def test_dc_line_stronger_than_ssb_tone_is_not_the_tone(rng: np.random.Generator) -> None:
    """``--mode usb --tone 1000``: the carrier is the tone line minus 1000 Hz, not DC - 1000."""
    f0 = 3000.0
    x = _DC + tone(f0 + 1000.0, _A40) + _noise(rng)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="usb", tone_hz=1000.0))
    # Sub-bin centroid of a line 50 dB above the noise: well inside 0.05 Hz (bin 0.73 Hz).
    assert an.signal.carrier_offset_hz == pytest.approx(f0, abs=0.05)
    assert "dc_line" in {a.kind for a in an.artefacts}
    cs = an.measurements["carrier_suppression_db"]
    # No carrier was put in: the figure is a lower bound, not a 92 dB "measurement" of DC.
    assert cs.limited_by_noise and cs.bound == "lower"


@pytest.mark.parametrize("mode", ["auto", "dsb"])
def test_dc_line_stronger_than_dsb_is_not_the_carrier(rng: np.random.Generator, mode: str) -> None:
    """A -46 dBFS-per-line DSB tone pair about 3 kHz beside a -30 dBFS DC line: DSB at 3 kHz."""
    f0, fm = 3000.0, 700.0
    x = _DC + tone(f0 + fm, _A40 / 2) + tone(f0 - fm, _A40 / 2) + _noise(rng)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode=mode))
    assert an.signal.mode == "dsb"
    assert an.signal.carrier_offset_hz == pytest.approx(f0, abs=0.05)
    assert "dc_line" in {a.kind for a in an.artefacts}


def test_dc_line_kept_when_alone_or_pointed_at(rng: np.random.Generator) -> None:
    """The DC line is the carrier when it is all there is, or when --carrier points at it."""
    an = analyse(ArrayRecording(_DC + _noise(rng), FS))
    assert an.signal.mode == "cw" and an.signal.carrier_offset_hz == pytest.approx(0.0, abs=0.05)
    x = _DC + tone(1000.0, _A40) + _noise(rng)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="cw", carrier_hz=0.0))
    assert an.signal.carrier_offset_hz == 0.0
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="cw"))
    assert an.signal.carrier_offset_hz == pytest.approx(1000.0, abs=0.05)


def test_split_dc_lines_rule() -> None:
    """The shared rule (also drift.plan_lines): within max(2 bins, 1 Hz) of 0 Hz."""
    from iqscope.dsp._lines import Peak, dc_tolerance_hz, split_dc_lines

    assert dc_tolerance_hz(0.1) == 1.0 and dc_tolerance_hz(3.0) == 6.0
    dc, other = Peak(0.4, 1.0, 0), Peak(500.0, 0.1, 100)
    s = split_dc_lines([dc, other], 0.5)
    assert s.kept == (other,) and s.dropped == (dc,) and not s.only_dc
    s = split_dc_lines([dc], 0.5)
    assert s.kept == (dc,) and s.only_dc
    s = split_dc_lines([dc], 0.5, signal_elsewhere=True)
    assert s.kept == () and s.dropped == (dc,)
    s = split_dc_lines([dc, other], 0.5, hints=(0.0,))
    assert s.kept == (dc, other) and not s.dropped
    assert split_dc_lines([Peak(1.5, 1.0, 3), other], 0.5).dropped == ()
