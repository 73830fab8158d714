"""AM modulation index from the lines and from the envelope.

Source: textbook AM (S. Haykin, *Communication Systems*, ch. on amplitude modulation;
REFERENCES.md item 7): s(t) = Ac [1 + m cos(wm t)] e^{j wc t} has a carrier of amplitude
Ac and two sidebands of amplitude m Ac / 2, i.e. 20 log10(m/2) dBc each; the envelope
extremes are Ac (1 +/- m), so (Emax - Emin)/(Emax + Emin) = m. Tolerance 0.01 in m (the
project's acceptance target: finer than a builder can set a drive control).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from iqscope.io import ArrayRecording
from iqscope.measure import AnalysisRequest, analyse
from iqscope.measure.modulation import index_from_powers

FS = 48_000.0


def am(rng: np.random.Generator, n: int, fc: float, fm: float, m: float, ac: float = 0.3) -> np.ndarray:
    t = np.arange(n) / FS
    x = ac * (1 + m * np.cos(2 * np.pi * fm * t + rng.uniform(0, 6.28))) * np.exp(2j * np.pi * fc * t)
    return x + np.sqrt(1e-9 / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


@pytest.mark.parametrize("m", [0.1, 0.3, 0.63, 0.95])
def test_am_index_lines_and_envelope(rng: np.random.Generator, m: float) -> None:
    fc = rng.uniform(-15_000, 15_000)
    fm = rng.uniform(300, 3000)
    an = analyse(ArrayRecording(am(rng, 1 << 17, fc, fm, m), FS))
    assert an.signal.mode == "am"
    assert an.signal.carrier_offset_hz == pytest.approx(fc, abs=0.05)
    mi = an.measurements["modulation_index"]
    assert mi.value == pytest.approx(m, abs=0.01)
    d = mi.details
    assert d["index_envelope"] == pytest.approx(m, abs=0.01)
    assert d["positive_peak"] == pytest.approx(m, abs=0.01)
    assert d["negative_peak"] == pytest.approx(m, abs=0.01)
    assert an.measurements["sideband_balance_db"].value == pytest.approx(0.0, abs=0.1)
    assert "carrier_suppression_db" not in an.measurements


def test_sideband_level_relation() -> None:
    """Each sideband 20 log10(m/2) dBc: powers (m/2)^2 give back m (REFERENCES.md item 7)."""
    for m in (0.1, 0.5, 1.0):
        p_sb = 10 ** (20 * math.log10(m / 2) / 10)
        assert index_from_powers(p_sb, p_sb, 1.0) == pytest.approx(m)
    assert math.isnan(index_from_powers(1.0, 1.0, 0.0))


def test_asymmetric_modulation_peaks(rng: np.random.Generator) -> None:
    """Envelope Ac (1 + 0.8 c + 0.2 c^2)-like shapes: positive and negative peaks differ."""
    n = 1 << 16
    t = np.arange(n) / FS
    c = np.cos(2 * np.pi * 700.0 * t)
    env = 0.3 * (1 + 0.6 * c + 0.2 * (c * c - 0.5))  # mean of c^2 - 0.5 is 0: Ec = 0.3
    x = env * np.exp(2j * np.pi * 2500.0 * t)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="am"))
    d = an.measurements["modulation_index"].details
    # Emax/Ec - 1 = 0.6 + 0.1 = 0.7, 1 - Emin/Ec = 0.6 - 0.1 = 0.5
    assert d["positive_peak"] == pytest.approx(0.7, abs=0.01)
    assert d["negative_peak"] == pytest.approx(0.5, abs=0.01)


def test_index_absent_for_other_modes(rng: np.random.Generator) -> None:
    t = np.arange(1 << 15) / FS
    x = 0.3 * np.exp(2j * np.pi * 1000.0 * t)
    an = analyse(ArrayRecording(x, FS))
    assert "modulation_index" not in an.measurements


def test_over_modulation_seen_by_the_signed_envelope(rng: np.random.Generator) -> None:
    """Linear AM with m = 1.2: the carrier goes through zero; lines and signed envelope give 1.2."""
    x = am(rng, 1 << 17, 2222.2, 800.0, 1.2)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(mode="am"))
    mi = an.measurements["modulation_index"]
    assert mi.value == pytest.approx(1.2, abs=0.01)
    assert mi.details["index_envelope"] == pytest.approx(1.2, abs=0.01)
    assert mi.details["negative_peak"] == pytest.approx(1.2, abs=0.01)
    assert "over-modulation" in mi.note
