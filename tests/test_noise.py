"""Noise floor, line and band powers: bias corrections and stated uncertainties.

References:
- Percival and Walden 1993, section 6.17: an averaged periodogram bin of white noise is
  mean x chi^2(2K)/(2K), i.e. Gamma(K) with mean 1 -> its median over mean is
  gamma.ppf(0.5, K)/K (ln 2 for K = 1, the median bias scipy's ``_median_bias`` corrects
  for a single periodogram; scipy.stats is the reference library).
- Closed forms for the Hann window: bin-power correlation rho(1) = (2/3)^2,
  rho(2) = (1/6)^2 (from w^2 = 3/8 - cos/2 + cos2/8), cross-term factor
  N sum w^4 / S2^2 = 35/18.
- Monte Carlo: a stated 1-sigma should cover about 68 % of repeated estimates; 200
  trials give a binomial 1-sigma of 3.3 %, so 55-80 % is a >3-sigma acceptance band.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from iqscope.dsp import (
    averaged_quantile_bias,
    averaged_spectrum,
    band_power,
    bin_correlation,
    cross_term_factor,
    find_peaks,
    realized_power_factor,
    line_power,
    noise_floor,
    sum_variance_factor,
)


def _noise(rng: np.random.Generator, n: int, var: float) -> np.ndarray:
    return np.sqrt(var / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def test_quantile_bias_closed_forms() -> None:
    """K = 1: ln 2 (median of an exponential over its mean); large K: ~1 - 1/(3K) (Gamma median)."""
    assert averaged_quantile_bias(1.0) == pytest.approx(math.log(2), rel=1e-9)
    assert averaged_quantile_bias(500.0) == pytest.approx(1 - 1 / (3 * 500), rel=1e-5)
    assert averaged_quantile_bias(10.0, 0.25) == pytest.approx(stats.gamma.ppf(0.25, 10) / 10)


def test_hann_closed_forms() -> None:
    r = bin_correlation("hann", 1024, 3)
    assert r[0] == pytest.approx(1.0)
    assert r[1] == pytest.approx((2 / 3) ** 2)
    assert r[2] == pytest.approx((1 / 6) ** 2)
    assert r[3] == pytest.approx(0.0, abs=1e-20)
    assert cross_term_factor("hann", 1024) == pytest.approx(35 / 18)
    assert sum_variance_factor("hann", 1024, 1) == pytest.approx(1.0)
    assert sum_variance_factor("hann", 1024, 2) == pytest.approx(2 + 2 * (2 / 3) ** 2)


def test_noise_floor_unbiased_and_sigma_covers(rng: np.random.Generator) -> None:
    """White noise of PSD N0 = var / fs: the floor estimate is unbiased and its sigma honest."""
    fs, var = 48_000.0, 1e-6
    truth = var / fs
    hits, est = 0, []
    trials = 60
    for _ in range(trials):
        s = averaged_spectrum(_noise(rng, 1 << 15, var), 512, fs)
        nf = noise_floor(s)
        est.append(nf.psd / truth)
        hits += abs(nf.psd / truth - 1) <= nf.sigma_rel
    assert np.mean(est) == pytest.approx(1.0, abs=0.005)
    assert 0.5 <= hits / trials <= 0.85  # 60 trials: binomial sigma 6 %


def test_noise_floor_ignores_a_strong_signal(rng: np.random.Generator) -> None:
    fs = 48_000.0
    n = 1 << 16
    t = np.arange(n) / fs
    x = _noise(rng, n, 1e-6) + 0.5 * np.exp(2j * np.pi * 3000.3 * t)
    nf = noise_floor(averaged_spectrum(x, 4096, fs))
    assert nf.psd == pytest.approx(1e-6 / fs, rel=0.03)


def test_line_power_monte_carlo_coverage() -> None:
    """A tone at random sub-bin offsets and phases: power unbiased, sigma covers ~68 %."""
    rng = np.random.default_rng(12345)
    fs, n = 48_000.0, 1 << 15
    t = np.arange(n) / fs
    a2 = 1e-7  # tone power; noise variance 1e-6 -> a line ~20 dB above the lobe noise
    hits, ratios = 0, []
    trials = 200
    for _ in range(trials):
        f = 1000.0 + rng.uniform(-3, 3)
        x = math.sqrt(a2) * np.exp(2j * np.pi * f * t + 1j * rng.uniform(0, 2 * np.pi)) + _noise(rng, n, 1e-6)
        s = averaged_spectrum(x, 2048, fs)
        nf = noise_floor(s)
        lp = line_power(s, 1000.0, nf.psd, floor_sigma_rel=nf.sigma_rel)
        assert lp.detected
        hits += abs(lp.power - a2) <= lp.sigma
        ratios.append(lp.power / a2)
    assert np.mean(ratios) == pytest.approx(1.0, abs=0.01)
    assert 0.55 <= hits / trials <= 0.80


def test_undetected_line_gives_upper_bound(rng: np.random.Generator) -> None:
    """A line far below the noise is not detected; its bound lies above the true power."""
    fs, n = 48_000.0, 1 << 16
    t = np.arange(n) / fs
    a2 = 1e-14
    x = math.sqrt(a2) * np.exp(2j * np.pi * 2000.0 * t) + _noise(rng, n, 1e-6)
    s = averaged_spectrum(x, 4096, fs)
    nf = noise_floor(s)
    lp = line_power(s, 2000.0, nf.psd)
    assert not lp.detected
    assert lp.upper_bound > a2
    assert lp.level == lp.upper_bound
    assert math.isfinite(lp.upper_bound)


def test_band_power_of_band_limited_noise(rng: np.random.Generator) -> None:
    """Band-limited noise of known power (FFT-shaped): band power within 3 sigma."""
    fs, n = 48_000.0, 1 << 17
    w = np.fft.fft(_noise(rng, n, 1.0))
    f = np.fft.fftfreq(n, 1 / fs)
    w[(f < 1000) | (f > 4000)] = 0
    sig = np.fft.ifft(w) * 0.01
    p_true = float(np.mean(np.abs(sig) ** 2))
    x = sig + _noise(rng, n, 1e-8)
    s = averaged_spectrum(x, 4096, fs)
    nf = noise_floor(s)
    bp = band_power(s, 900, 4100, nf.psd, floor_sigma_rel=nf.sigma_rel)
    assert bp.detected
    assert abs(bp.power - p_true) <= 3 * bp.sigma + 0.002 * p_true


def test_find_peaks_sub_bin_frequencies(rng: np.random.Generator) -> None:
    """Lobe power centroids find non-round tone frequencies to a small fraction of a bin."""
    fs, n = 48_000.0, 1 << 16
    t = np.arange(n) / fs
    freqs = (-7345.678, 1234.5678, 9000.123)
    x = sum(0.1 * np.exp(2j * np.pi * f * t) for f in freqs) + _noise(rng, n, 1e-8)
    s = averaged_spectrum(x, 4096, fs)
    peaks = find_peaks(s, noise_floor(s).psd)
    got = sorted(p.frequency_hz for p in peaks[:3])
    np.testing.assert_allclose(got, sorted(freqs), atol=0.01 * s.bin_hz)


def test_realized_power_factor_closed_forms() -> None:
    """Rectangle at any overlap and Hann at 75 % sum to a constant (no weighting ripple): 0.
    Blackman-Harris with no overlap: r = N sum w^4 / S2^2 = gamma, factor (gamma - 1)/gamma."""
    from iqscope.dsp import realized_power_factor

    assert realized_power_factor("rect", 1024, 0.5) == pytest.approx(0.0, abs=1e-12)
    assert realized_power_factor("hann", 1024, 0.75) == pytest.approx(0.0, abs=1e-9)
    g = cross_term_factor("blackmanharris", 1024)
    assert realized_power_factor("blackmanharris", 1024, 0.0) == pytest.approx((g - 1) / g, rel=1e-9)


def test_band_power_sigma_covers_the_recorded_power() -> None:
    """Band-limited Gaussian noise: the stated sigma covers ~68 % of |estimate - power the
    recording contains| (80 trials: binomial sigma 5 %, accept 55-80 %)."""
    rng = np.random.default_rng(4321)
    fs, n = 48_000.0, 1 << 16
    f = np.fft.fftfreq(n, 1 / fs)
    hits = 0
    trials = 80
    for _ in range(trials):
        spec = rng.standard_normal(n) + 1j * rng.standard_normal(n)
        spec[(f < 300) | (f > 2700)] = 0
        z = np.fft.ifft(spec) * 20
        x = z + _noise(rng, n, 1e-12)
        s = averaged_spectrum(x, 7680, fs)
        nf = noise_floor(s)
        bp = band_power(s, 250, 2750, nf.psd, floor_sigma_rel=nf.sigma_rel)
        hits += abs(bp.power - float(np.mean(np.abs(z) ** 2))) <= bp.sigma
    assert 0.55 <= hits / trials <= 0.80
