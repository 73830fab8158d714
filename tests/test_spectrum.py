"""Streaming averaged spectrum: scaling against scipy.signal.welch and Parseval.

Reference library: scipy.signal.welch (scipy 1.17) with ``detrend=False``,
``return_onesided=False``: the same Welch estimator, so the PSD must agree to float32
rounding (relative 1e-5). Scaling per Heinzel et al. 2002 section 9 for complex data
(REFERENCES.md item 2a): PSD = |Y|^2 / (fs S2), PS = |Y|^2 / S1^2 = PSD x ENBW.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal as ss

from iqscope.dsp import AveragedSpectrum, SpectrumAccumulator, averaged_spectrum, equivalent_averages, get_window
from iqscope.dsp import n_segments


def _noisy_tone(rng: np.random.Generator, n: int, fs: float, f: float, a: float, s: float) -> np.ndarray:
    t = np.arange(n) / fs
    x = a * np.exp(2j * np.pi * f * t) + s / np.sqrt(2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return x.astype(np.complex64)


@pytest.mark.parametrize("window", ["hann", "blackmanharris", "hft95", "rect"])
@pytest.mark.parametrize("overlap", [0.0, 0.5, 0.75])
def test_psd_matches_scipy_welch(rng: np.random.Generator, window: str, overlap: float) -> None:
    """PSD (density) equals scipy.signal.welch two-sided, fftshifted (float32 rounding)."""
    fs, nfft = 48_000.0, 1024
    x = _noisy_tone(rng, 50_000, fs, 1234.567, 0.3, 0.01)
    ours = averaged_spectrum(x, nfft, fs, window=window, overlap=overlap)
    w = get_window(window, nfft)
    f, p = ss.welch(x, fs, window=w, nperseg=nfft, noverlap=int(round(overlap * nfft)), detrend=False,
                    return_onesided=False)
    np.testing.assert_allclose(ours.psd, np.fft.fftshift(p), rtol=2e-5, atol=1e-12 * p.max())
    np.testing.assert_allclose(ours.freqs_hz, np.fft.fftshift(f))
    assert ours.n_averages == n_segments(x.size, nfft, overlap)


def test_power_spectrum_scaling_matches_welch_spectrum(rng: np.random.Generator) -> None:
    """PSD x ENBW equals welch(scaling='spectrum'); a bin-centred complex tone of amplitude A reads A^2."""
    fs, nfft, a = 10_000.0, 1000, 0.5
    x = _noisy_tone(rng, 20_000, fs, 1000.0, a, 1e-4)  # 1000 Hz: bin 100
    ours = averaged_spectrum(x, nfft, fs, window="hann")
    f, ps = ss.welch(x, fs, window="hann", nperseg=nfft, detrend=False, return_onesided=False, scaling="spectrum")
    np.testing.assert_allclose(ours.psd * ours.enbw_hz, np.fft.fftshift(ps), rtol=2e-5, atol=1e-12)
    assert float((ours.psd * ours.enbw_hz).max()) == pytest.approx(a * a, rel=1e-4)
    assert ours.enbw_hz == pytest.approx(15.0)  # Hann, N = 1000, fs = 10 kHz (REFERENCES.md item 1)


def test_parseval_total_power(rng: np.random.Generator) -> None:
    """Sum of PSD x bin width is the mean power, whatever the window (Heinzel 2002 section 9)."""
    fs = 8000.0
    x = _noisy_tone(rng, 64 * 512, fs, 777.7, 0.2, 0.05)
    for win in ("blackmanharris", "hft116d", "hann"):
        s = averaged_spectrum(x, 512, fs, window=win, overlap=0.0)
        total = float(np.sum(s.psd) * s.bin_hz)
        # Exact per segment for the windowed power; the window modulates the noise
        # sampled, so compare with the window-weighted mean power, which is within
        # 1 % of the plain mean power for stationary data.
        assert total == pytest.approx(float(np.mean(np.abs(x) ** 2)), rel=0.01)


def test_streaming_independent_of_block_cuts(rng: np.random.Generator) -> None:
    fs = 48_000.0
    x = _noisy_tone(rng, 30_001, fs, -5000.3, 0.1, 0.01)
    whole = averaged_spectrum(x, 2048, fs)
    acc = SpectrumAccumulator(2048, fs)
    cuts = np.cumsum(rng.integers(1, 5000, 40))
    for part in np.split(x, cuts[cuts < x.size]):
        acc.update(part)
    res = acc.result()
    np.testing.assert_allclose(res.psd, whole.psd, rtol=1e-6)
    assert res.n_averages == whole.n_averages


def test_take_partial_adds_up(rng: np.random.Generator) -> None:
    fs = 1000.0
    x = _noisy_tone(rng, 20_000, fs, 100.0, 1.0, 0.1)
    acc = SpectrumAccumulator(256, fs)
    parts, counts = [], []
    for blk in np.array_split(x, 7):
        acc.update(blk)
        p, c = acc.take_partial()
        if c:
            parts.append(p * c)
            counts.append(c)
    total = acc.result()
    np.testing.assert_allclose(np.sum(parts, axis=0) / np.sum(counts), total.psd, rtol=1e-9)
    assert acc.take_partial()[1] == 0


def test_equivalent_averages() -> None:
    """No overlap: K exactly; 50 % Hann: K / (1 + 2 (1 - 1/K) rho(1)^2), rho(1) = 1/6 (Harris OC 16.7 %)."""
    assert equivalent_averages(100, "hann", 1024, 0.0) == pytest.approx(100.0)
    k = 100
    rho = 1 / 6
    assert equivalent_averages(k, "hann", 1024, 0.5) == pytest.approx(k / (1 + 2 * (1 - 1 / k) * rho**2), rel=1e-3)
    assert equivalent_averages(0, "hann", 1024, 0.5) == 0.0


def test_empty_and_short_input() -> None:
    acc = SpectrumAccumulator(64, 1000.0)
    acc.update(np.zeros(0, np.complex64))
    acc.update(np.ones(10, np.complex64))
    s = acc.result()
    assert isinstance(s, AveragedSpectrum)
    assert s.n_averages == 0
    assert np.all(s.psd == 0)
    with pytest.raises(ValueError):
        SpectrumAccumulator(0, 1000.0)
    with pytest.raises(ValueError):
        SpectrumAccumulator(64, float("nan"))


@pytest.mark.parametrize("capacity", [0, 1000, 10_000])  # pieces joined, overflowing, in place
def test_subband_capture_rebuilds_the_band(rng: np.random.Generator, capacity: int) -> None:
    """A band rebuilt from the pass's FFTs (weighted overlap-add, Crochiere 1980) equals the
    closed-form mix-down of the in-band tone, decimated (here D = 30: 1600 S/s), and a
    strong tone outside the band is rejected by the window's sidelobes (Blackman-Harris:
    -92 dB, Harris 1978 Table 1). Tolerances: float32 arithmetic (~1e-6 relative) plus
    the -92 dB sidelobe leakage of the out-of-band tone, 10x its amplitude -> < 1e-3."""
    from iqscope.dsp._spectrum import SubbandCapture, subband_decimation

    fs, nfft = 48_000.0, 7680
    n = int(fs * 6)
    t = np.arange(n) / fs
    phase = 2 * np.pi * np.cumsum(1234.567 + 0.5 * t) / fs  # drifting in-band line
    x = 0.1 * np.exp(1j * phase) + 1.0 * np.exp(2j * np.pi * 2100.0 * t)  # 866 Hz away: outside
    x = (x + 1e-6 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))).astype(np.complex64)
    d = subband_decimation(nfft, nfft // 2, fs, 1600.0)
    assert d == 30
    acc = SpectrumAccumulator(nfft, fs)
    band = SubbandCapture(nfft, fs, "blackmanharris", 1234.567, d, capacity=capacity)
    acc.capture(band)
    for i in range(0, n, 100_003):  # cuts independent of the segments
        acc.update(x[i : i + 100_003])
    u = band.samples()
    assert band.sample_rate_hz == 1600.0 and band.start_sample == nfft // 2
    assert u.size == (acc.n_averages - 1) * (nfft // 2) // d
    idx = band.start_sample + d * np.arange(u.size)
    ref = 0.1 * np.exp(1j * phase[idx]) * np.exp(-2j * np.pi * band.centre_hz * idx / fs)
    assert float(np.max(np.abs(u - ref))) / 0.1 < 1e-3
    assert float(np.sqrt(np.mean(np.abs(u - ref) ** 2))) / 0.1 < 1e-4


def test_subband_decimation_rules() -> None:
    """D divides the half-segment step and keeps the rate >= the minimum; 0 when the
    segments do not overlap by half."""
    from iqscope.dsp._spectrum import subband_decimation

    assert subband_decimation(7680, 3840, 48_000.0, 1000.0) == 48
    assert subband_decimation(7680, 7680, 48_000.0, 1000.0) == 0
    assert subband_decimation(320, 160, 2000.0, 1600.0) == 0
