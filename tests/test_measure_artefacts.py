"""Receiver artefacts: I/Q image, DC line, ADC clipping.

The receiver I/Q imbalance model is built here: I' = I, Q' = g (Q cos(phi) - I sin(phi))
gives y = x (1 + g e^{-j phi})/2 + conj(x) (1 - g e^{j phi})/2, so a line at +f has an
image at -f whose level below it is the standard image-rejection ratio
IRR = (1 + 2 g cos(phi) + g^2) / (1 - 2 g cos(phi) + g^2) (e.g. Razavi, *RF
Microelectronics*; REFERENCES.md item 11, vectors: g = 1, phi = 2 deg -> 35.16 dB;
g = 1.01, phi = 0 -> 46.06 dB). Tolerance 0.3 dB (line power estimates at high SNR).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from iqscope.io import ArrayRecording
from iqscope.measure import AnalysisRequest, analyse

FS = 48_000.0


def _noise(rng: np.random.Generator, n: int, var: float) -> np.ndarray:
    return np.sqrt(var / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def imbalance(x: np.ndarray, g: float, phi: float) -> np.ndarray:
    i, q = x.real, x.imag
    return i + 1j * g * (q * math.cos(phi) - i * math.sin(phi))


@pytest.mark.parametrize(("g", "phi_deg", "irr_db"), [(1.0, 2.0, 35.16), (1.01, 0.0, 46.06)])
def test_iq_image_flagged_at_its_level(rng: np.random.Generator, g: float, phi_deg: float, irr_db: float) -> None:
    phi = math.radians(phi_deg)
    irr = 10 * math.log10((1 + 2 * g * math.cos(phi) + g * g) / (1 - 2 * g * math.cos(phi) + g * g))
    assert irr == pytest.approx(irr_db, abs=0.01)
    n = 1 << 17
    t = np.arange(n) / FS
    f = 5123.4
    x = imbalance(0.4 * np.exp(2j * np.pi * f * t), g, phi) + _noise(rng, n, 1e-10)
    an = analyse(ArrayRecording(x, FS))
    images = [a for a in an.artefacts if a.kind == "iq_image"]
    assert len(images) == 1  # flagged once even if several providers see it
    img = images[0]
    assert img.offset_hz == pytest.approx(-f, abs=0.1)
    assert img.level_dbc == pytest.approx(-irr, abs=0.3)
    assert "receiver" in img.note


def test_dsb_image_flagged_and_figures_unchanged(rng: np.random.Generator) -> None:
    n = 1 << 17
    t = np.arange(n) / FS
    f0, fm, a, c = 6000.0, 1000.7, 0.25, 0.25 * math.sqrt(2) * 0.01  # carrier 40 dB down
    x = a * np.exp(2j * np.pi * (f0 + fm) * t) + a * np.exp(2j * np.pi * (f0 - fm) * t) + c * np.exp(2j * np.pi * f0 * t)
    y = imbalance(x, 1.0, math.radians(1.0)) + _noise(rng, n, 1e-10)
    an = analyse(ArrayRecording(y, FS))
    assert any(a.kind == "iq_image" for a in an.artefacts)
    assert an.measurements["carrier_suppression_db"].value == pytest.approx(40.0, abs=0.5)


def test_dc_line_flagged_and_left_out(rng: np.random.Generator) -> None:
    n = 1 << 17
    t = np.arange(n) / FS
    f0, fm, a = 1800.0, 1000.0, 0.25
    c = a * math.sqrt(2) * 10 ** (-45 / 20)
    x = a * np.exp(2j * np.pi * (f0 + fm) * t) + a * np.exp(2j * np.pi * (f0 - fm) * t) + c * np.exp(2j * np.pi * f0 * t)
    x = x + 3e-3 + _noise(rng, n, 1e-10)  # receiver DC offset, 38 dB below a sideband, inside the band
    an = analyse(ArrayRecording(x, FS))
    dcs = [a for a in an.artefacts if a.kind == "dc_line"]
    assert len(dcs) == 1 and abs(dcs[0].offset_hz) < 1.0
    assert an.measurements["carrier_suppression_db"].value == pytest.approx(45.0, abs=0.5)


def test_carrier_at_capture_centre_warns(rng: np.random.Generator) -> None:
    n = 1 << 16
    t = np.arange(n) / FS
    x = 0.25 * np.exp(2j * np.pi * 1000 * t) + 0.25 * np.exp(-2j * np.pi * 1000 * t) + 1e-3 + _noise(rng, n, 1e-10)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="dsb", carrier_hz=0.0))
    dcs = [a for a in an.artefacts if a.kind == "dc_line"]
    assert dcs and "carrier" in dcs[0].note
    assert "DC" in an.measurements["carrier_suppression_db"].note


def test_clipping_flagged_with_exact_count(rng: np.random.Generator) -> None:
    n = 1 << 16
    t = np.arange(n) / FS
    x = 1.2 * np.exp(2j * np.pi * 1234.0 * t)
    y = np.clip(x.real, -1, 1) + 1j * np.clip(x.imag, -1, 1)
    expected = int(np.count_nonzero((np.abs(y.real) >= 1) | (np.abs(y.imag) >= 1)))
    an = analyse(ArrayRecording(y, FS))
    m = an.measurements["clipped_fraction"]
    assert m.value == pytest.approx(expected / n)
    assert m.details["n_clipped"] == expected
    assert any(a.kind == "clipping" for a in an.artefacts)
