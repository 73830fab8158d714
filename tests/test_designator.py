"""Emission designators: bandwidth codes and classification symbols.

Check values: 47 CFR 2.202(b) bandwidth-code examples, 47 CFR 2.202(g) / Rec. ITU-R
SM.1138 Annex 1 worked examples, ITU RR Appendix 1 section 4 symbols (REFERENCES.md
item 4).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from iqscope.measure.designator import (
    bandwidth_code,
    classification_symbols,
    emission_designator,
    occupied_bandwidth_from_spectrum,
    parse_bandwidth_code,
    ssb_carrier_level,
)

# Every example printed in 47 CFR 2.202(b) (REFERENCES.md item 4, "Found", high).
CFR_2_202_B = [
    (0.002, "H002"),
    (0.1, "H100"),
    (25.3, "25H3"),
    (400.0, "400H"),
    (2.4e3, "2K40"),
    (6e3, "6K00"),
    (12.5e3, "12K5"),
    (180.4e3, "180K"),
    (180.5e3, "181K"),
    (180.7e3, "181K"),
    (1.25e6, "1M25"),
    (2e6, "2M00"),
    (10e6, "10M0"),
    (202e6, "202M"),
    (5.65e9, "5G65"),
]


class TestBandwidthCode:
    @pytest.mark.parametrize(("hz", "code"), CFR_2_202_B)
    def test_official_examples(self, hz: float, code: str) -> None:
        """47 CFR 2.202(b): the official examples, exactly."""
        assert bandwidth_code(hz) == code

    @pytest.mark.parametrize(("hz", "code"), CFR_2_202_B)
    def test_parse_round_trip(self, hz: float, code: str) -> None:
        """Parsing the code gives the value rounded to three figures (relative 0.3 %)."""
        assert parse_bandwidth_code(code) == pytest.approx(hz, rel=3e-3)

    def test_rounding_to_next_unit(self) -> None:
        """A value rounding up to 1000 of a unit moves to the next unit (RR Ap. 1 section 2:
        1.00-999 kHz use K), and 9.996 -> 10.0 keeps three figures."""
        assert bandwidth_code(999.6) == "1K00"
        assert bandwidth_code(999.4) == "999H"
        assert bandwidth_code(9.996) == "10H0"
        assert bandwidth_code(999_999.0) == "1M00"

    def test_first_character_never_zero_or_unit_letter_except_h(self) -> None:
        """RR Ap. 1 section 2: the first character is neither 0 nor K, M or G."""
        rng = np.random.default_rng(7)
        for hz in 10 ** rng.uniform(-2.9, 11.9, 400):
            code = bandwidth_code(float(hz))
            assert len(code) == 4
            assert code[0] not in "0KMG"
            assert sum(c.isalpha() for c in code) == 1

    @pytest.mark.parametrize("bad", [0.0, -5.0, math.nan, math.inf, 1e-5, 1e13])
    def test_out_of_range(self, bad: float) -> None:
        with pytest.raises(ValueError):
            bandwidth_code(bad)


class TestClassification:
    def test_modes(self) -> None:
        """RR Ap. 1 section 4: A double sideband, H/R/J single sideband with full /
        reduced / suppressed carrier; 1 digital without sub-carrier, 3 analogue;
        A aural telegraphy, E telephony."""
        assert classification_symbols("cw") == "A1A"
        assert classification_symbols("am") == "A3E"
        assert classification_symbols("dsb") == "A3E"  # no separate DSB-SC symbol in Ap. 1
        assert classification_symbols("usb") == "J3E"
        assert classification_symbols("lsb", "reduced") == "R3E"
        assert classification_symbols("usb", "full") == "H3E"

    def test_unknown_mode(self) -> None:
        with pytest.raises(ValueError):
            classification_symbols("two-tone")

    def test_ssb_carrier_level_anchors(self) -> None:
        """47 CFR 80.207(c): H3E 3-6 dB below PEP, R3E 18 +/- 2 dB, J3E >= 40 dB."""
        assert ssb_carrier_level(3.0) == ssb_carrier_level(6.0) == "full"
        assert ssb_carrier_level(16.0) == ssb_carrier_level(20.0) == "reduced"
        assert ssb_carrier_level(40.0) == "suppressed"


class TestWorkedExamples:
    """SM.1138 Annex 1 / 47 CFR 2.202(g) worked examples (REFERENCES.md item 4)."""

    def test_morse_25_wpm(self) -> None:
        # Bn = B K with B = 20 baud, K = 5 (fading circuit) -> 100 Hz.
        assert emission_designator(20 * 5, "cw") == "100HA1A"

    def test_dsb_telephony(self) -> None:
        # Bn = 2 M, M = 3000 Hz.
        assert emission_designator(2 * 3000, "am") == "6K00A3E"

    def test_ssb_full_carrier(self) -> None:
        # Bn = M, M = 3000 Hz.
        assert emission_designator(3000, "usb", "full") == "3K00H3E"

    def test_ssb_suppressed_carrier(self) -> None:
        # Bn = M - lowest modulation frequency = 3000 - 300 Hz.
        assert emission_designator(3000 - 300, "lsb", "suppressed") == "2K70J3E"


class TestOccupiedBandwidth:
    def test_flat_band(self) -> None:
        """RR No. 1.153, beta = 99 %: a flat PSD of width B has OBW 0.99 B
        (REFERENCES.md item 3, computed: flat 300-2700 Hz -> 2376 Hz)."""
        f = np.arange(-5000.0, 5000.0, 1.0)
        psd = np.where((f >= 300) & (f < 2700), 1.0, 0.0)
        lo, hi = occupied_bandwidth_from_spectrum(f, psd, 1.0)
        # tolerance: one bin (1 Hz) of interpolation
        assert hi - lo == pytest.approx(2376.0, abs=1.0)

    def test_no_power(self) -> None:
        with pytest.raises(ValueError):
            occupied_bandwidth_from_spectrum(np.arange(5.0), np.zeros(5), 1.0)


# --------------------------------------------------------------------------------------
# The provider on synthesized recordings (spectra from iqscope.dsp.averaged_spectrum)
# --------------------------------------------------------------------------------------
FS = 48_000.0
N = 4 * 48_000
NOISE_PSD = 1e-12


def _band(rng: np.random.Generator, lo: float, hi: float, power: float) -> np.ndarray:
    """Flat band-limited complex noise between lo and hi (Hz offsets) of mean power ``power``."""
    x = np.zeros(N, complex)
    fr = np.fft.fftfreq(N, 1 / FS)
    sel = (fr >= lo) & (fr < hi)
    x[sel] = rng.standard_normal(sel.sum()) + 1j * rng.standard_normal(sel.sum())
    s = np.fft.ifft(x)
    return s * math.sqrt(power / np.mean(np.abs(s) ** 2))


def _figures(y: np.ndarray, mode: str, carrier: float = 0.0, peak_power: float | None = None):  # type: ignore[no-untyped-def]
    from iqscope.dsp import averaged_spectrum
    from iqscope.io._recording import ArrayRecording
    from iqscope.measure._analysis import SignalInfo
    from iqscope.measure._context import AnalysisContext, AnalysisRequest
    from iqscope.measure.designator import designator_figures

    y = y + (np.random.default_rng(1).standard_normal(N) + 1j * np.random.default_rng(2).standard_normal(N)) * math.sqrt(
        NOISE_PSD * FS / 2
    )
    p = np.abs(y) ** 2
    ctx = AnalysisContext(
        recording=ArrayRecording(y, FS, 14e6),
        request=AnalysisRequest(mode=mode),
        spectrum=averaged_spectrum(y, 8192, FS),
        signal=SignalInfo(mode, carrier, 14e6 + carrier),
        noise_floor_psd=NOISE_PSD,
        mean_power=float(p.mean()),
        signal_power=float(p.mean()),
        peak_power=float(p.max()) if peak_power is None else peak_power,
    )
    return designator_figures(ctx).measurements


class TestProvider:
    def test_ssb_voice_band(self, rng: np.random.Generator) -> None:
        """Flat 300-2700 Hz USB: 99 % OBW = 0.99 x 2400 = 2376 Hz (REFERENCES.md item 3)
        -> 2K38J3E (no carrier line: suppressed). Tolerance one bin (5.9 Hz)."""
        m = _figures(_band(rng, 300.0, 2700.0, 0.01), "usb")["necessary_bandwidth_hz"]
        assert m.value == pytest.approx(2376.0, abs=6.0)
        assert m.details["designator"] == "2K38J3E"

    def test_ssb_full_carrier(self, rng: np.random.Generator) -> None:
        """Carrier 5 dB below PEP: H3E (47 CFR 80.207(c): H3E 3-6 dB below PEP)."""
        y = _band(rng, 300.0, 2700.0, 0.01)
        pep = 0.2
        carrier = math.sqrt(pep * 10 ** (-5 / 10)) * np.ones(N)
        m = _figures(y + carrier, "usb", peak_power=pep)["necessary_bandwidth_hz"]
        assert m.details["classification"] == "H3E"

    def test_dsb(self, rng: np.random.Generator) -> None:
        """DSB, audio 300-3000 Hz about the carrier: about 2M = 6 kHz wide -> A3E."""
        y = _band(rng, -3000.0, -300.0, 0.005) + _band(rng, 300.0, 3000.0, 0.005)
        m = _figures(y, "dsb")["necessary_bandwidth_hz"]
        assert m.value == pytest.approx(0.99 * 6000.0, rel=0.02)
        assert m.details["designator"].endswith("A3E")

    def test_single_line_is_null(self) -> None:
        """An unmodulated carrier has no necessary bandwidth to estimate: value null, note."""
        y = 0.1 * np.exp(2j * np.pi * 1234.5 * np.arange(N) / FS)
        m = _figures(y, "cw", 1234.5)["necessary_bandwidth_hz"]
        assert m.value is None and "single line" in m.note

    def test_tone_modulated_am_is_null(self) -> None:
        """AM with a steady 1 kHz tone: three lines, a test signal, not a designator."""
        t = np.arange(N) / FS
        y = 0.1 * (1 + 0.8 * np.cos(2 * np.pi * 1000.0 * t)) * np.exp(2j * np.pi * 2000.3 * t)
        m = _figures(y, "am", 2000.3)["necessary_bandwidth_hz"]
        assert m.value is None and "discrete lines" in m.note

    def test_two_tone_and_noise_give_nothing(self, rng: np.random.Generator) -> None:
        assert _figures(_band(rng, 300.0, 2700.0, 0.01), "two-tone") == {}
        m = _figures(np.zeros(N, complex), "usb")["necessary_bandwidth_hz"]
        assert m.value is None
