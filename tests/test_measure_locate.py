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
