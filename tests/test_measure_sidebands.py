"""Opposite-sideband suppression (SSB) and sideband balance (DSB) on synthesized truths.

Closed forms built here with numpy:
- SSB with a test tone: the wanted line of amplitude A at f0 + tone (USB) and the
  unwanted one at f0 - tone with amplitude A 10^(-S/20): suppression S dB exactly
  (DESIGN.md section 3 definition).
- SSB of band-limited noise: ``z + g conj(z)`` with z analytic (one-sided spectrum)
  puts a mirror copy g^2 below the wanted band: suppression -20 log10(g).
- The phasing-method image-rejection formula (standard result, e.g. Razavi, *RF
  Microelectronics*, memory high; REFERENCES.md item 11): gain ratio g = 1, phase error
  2 degrees gives 35.16 dB.
Tolerance 0.5 dB for 30 and 50 dB (the project's acceptance target, well above the stated
1-sigma at these SNRs), 0.1 dB for balance.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from iqscope.errors import UsageError
from iqscope.io import ArrayRecording
from iqscope.measure import AnalysisRequest, analyse

FS = 48_000.0


def _noise(rng: np.random.Generator, n: int, var: float) -> np.ndarray:
    return np.sqrt(var / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def ssb_tone(rng: np.random.Generator, n: int, f0: float, tone: float, sup_db: float, usb: bool = True) -> np.ndarray:
    t = np.arange(n) / FS
    s = 1.0 if usb else -1.0
    a = 0.4
    x = a * np.exp(2j * np.pi * (f0 + s * tone) * t) + a * 10 ** (-sup_db / 20) * np.exp(
        2j * np.pi * (f0 - s * tone) * t + 1j * rng.uniform(0, 6.28)
    )
    return x + _noise(rng, n, 1e-9)


@pytest.mark.parametrize("sup_db", [30.0, 50.0])
@pytest.mark.parametrize("usb", [True, False])
def test_ssb_tone_opposite_sideband(rng: np.random.Generator, sup_db: float, usb: bool) -> None:
    f0 = rng.uniform(-12_000, 12_000)
    tone = rng.uniform(500, 2500)
    x = ssb_tone(rng, 1 << 17, f0, tone, sup_db, usb)
    mode = "usb" if usb else "lsb"
    rec = ArrayRecording(x, FS)
    by_tone = analyse(rec, AnalysisRequest(mode=mode, tone_hz=tone))
    assert by_tone.signal.carrier_offset_hz == pytest.approx(f0, abs=0.05)
    m = by_tone.measurements["opposite_sideband_suppression_db"]
    assert m.value == pytest.approx(sup_db, abs=0.5)
    assert not m.limited_by_noise
    by_carrier = analyse(rec, AnalysisRequest(mode=mode, carrier_hz=f0))
    m2 = by_carrier.measurements["opposite_sideband_suppression_db"]
    assert m2.value == pytest.approx(sup_db, abs=0.5)
    assert "sideband_balance_db" not in by_tone.measurements


def test_ssb_band_limited_noise(rng: np.random.Generator) -> None:
    """Speech-like SSB (300-2700 Hz) with a mirror 30 dB down, located by --carrier."""
    n = 1 << 18
    f = np.fft.fftfreq(n, 1 / FS)
    spec = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    spec[(f < 300) | (f > 2700)] = 0
    z = np.fft.ifft(spec)
    z *= 0.2 / np.sqrt(np.mean(np.abs(z) ** 2))
    g = 10 ** (-30 / 20)
    f0 = -3456.7
    t = np.arange(n) / FS
    x = (z + g * np.conj(z)) * np.exp(2j * np.pi * f0 * t) + _noise(rng, n, 1e-9)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="usb", carrier_hz=f0))
    m = an.measurements["opposite_sideband_suppression_db"]
    assert m.value == pytest.approx(30.0, abs=0.5)
    assert m.uncertainty is not None and 0 < m.uncertainty < 0.5


def test_undetectable_opposite_sideband_is_bound(rng: np.random.Generator) -> None:
    x = ssb_tone(rng, 1 << 16, 2000.0, 1000.0, 150.0)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="usb", tone_hz=1000.0))
    m = an.measurements["opposite_sideband_suppression_db"]
    assert m.limited_by_noise and m.bound == "lower"
    assert 60 < m.value < 150


def test_phasing_image_rejection_vector(rng: np.random.Generator) -> None:
    """Phasing SSB with a 2 degree quadrature error: IRR = (1 + 2cos(phi) + 1)/(1 - 2cos(phi) + 1) = 35.16 dB."""
    n = 1 << 17
    t = np.arange(n) / FS
    tone, f0, phi = 1234.5, 4000.0, math.radians(2.0)
    # Audio I = cos, Q = sin with a phase error: the USB modulator output is I + jQ.
    audio = np.cos(2 * np.pi * tone * t) + 1j * np.sin(2 * np.pi * tone * t + phi)
    x = 0.3 * audio * np.exp(2j * np.pi * f0 * t) + _noise(rng, n, 1e-9)
    irr = 10 * math.log10((2 + 2 * math.cos(phi)) / (2 - 2 * math.cos(phi)))
    assert irr == pytest.approx(35.16, abs=0.01)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="usb", carrier_hz=f0))
    assert an.measurements["opposite_sideband_suppression_db"].value == pytest.approx(irr, abs=0.2)


def test_ssb_without_carrier_or_tone_is_a_usage_error(rng: np.random.Generator) -> None:
    x = ssb_tone(rng, 1 << 15, 2000.0, 1000.0, 40.0)
    with pytest.raises(UsageError, match="--carrier") as err:
        analyse(ArrayRecording(x, FS), AnalysisRequest(mode="usb"))
    assert "--tone" in str(err.value)


def test_ssb_carrier_at_capture_centre_notes_receiver_image(rng: np.random.Generator) -> None:
    x = ssb_tone(rng, 1 << 16, 0.0, 1000.0, 40.0)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="usb", carrier_hz=0.0))
    assert "receiver" in an.measurements["opposite_sideband_suppression_db"].note


@pytest.mark.parametrize("balance_db", [0.0, 1.5, -3.0, 6.0])
def test_dsb_sideband_balance(rng: np.random.Generator, balance_db: float) -> None:
    """Upper line amplitude a 10^(B/20), lower a: balance B dB (signed, upper over lower)."""
    n = 1 << 17
    t = np.arange(n) / FS
    f0, fm, a = rng.uniform(-9000, 9000), rng.uniform(400, 2000), 0.2
    x = a * 10 ** (balance_db / 20) * np.exp(2j * np.pi * (f0 + fm) * t) + a * np.exp(2j * np.pi * (f0 - fm) * t + 1j)
    x = x + _noise(rng, n, 1e-9)
    an = analyse(ArrayRecording(x, FS))
    assert an.signal.mode == "dsb"
    m = an.measurements["sideband_balance_db"]
    assert m.value == pytest.approx(balance_db, abs=0.1)
    assert an.markers["sideband_upper"] == pytest.approx(f0 + fm, abs=0.05)
    assert an.markers["sideband_lower"] == pytest.approx(f0 - fm, abs=0.05)
