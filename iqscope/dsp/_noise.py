"""Noise-floor estimation from an averaged periodogram, and the statistics behind it.

An averaged periodogram of complex white Gaussian noise has, in each bin, the
distribution of ``mean * chi^2(2 K) / (2 K)``, i.e. a Gamma distribution with shape
``K`` and mean ``mean``, where ``K`` is the number of independent-equivalent averages
(Welch 1967; Percival and Walden 1993 section 6.17). The noise floor is taken as a
quantile (default: the median) of all bins, divided by the same quantile of that Gamma
distribution: the bias correction scipy applies to median-averaged Welch spectra in
``scipy.signal._spectral_py._median_bias`` [1]_, here for a mean-averaged spectrum whose
bins are Gamma(K)-distributed instead of exponential. A quantile ignores the bins the
signal occupies as long as it fills less than ``1 - q`` of the band.

Neighbouring bins of a windowed DFT are correlated. For complex white noise the
correlation of the powers of bins ``i`` and ``j`` in one segment is

.. math:: \\rho(d) = \\frac{|\\sum_n w_n^2 e^{-2\\pi i d n/N}|^2}{S_2^2},\\quad d = i - j

(it follows from ``E[N_i N_j^*] = sigma^2 sum_n w_n^2 e^{-2 pi i d n / N}`` and the
Isserlis theorem), so the variance of a sum of ``m`` adjacent bins of an averaged
periodogram of noise with PSD ``N0`` is ``(N0 df)^2 R_m / K`` with
``R_m = sum_{i,j} rho(i - j)``.

References
----------
.. [1] P. Virtanen et al., "SciPy 1.0: fundamental algorithms for scientific computing
   in Python", Nature Methods 17, 261-272 (2020); ``scipy.signal.welch`` with
   ``average='median'`` and its ``_median_bias``.
.. [2] D. B. Percival and A. T. Walden, *Spectral Analysis for Physical Applications*,
   Cambridge University Press, 1993, section 6.17.
.. [3] G. Heinzel, A. Ruediger, R. Schilling, "Spectrum and spectral density estimation
   by the DFT ...", MPI Gravitationsphysik, Hannover, 2002, section 9.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import numpy.typing as npt
from scipy import stats

from ._types import Spectrum
from ._windows import get_window

__all__ = [
    "NoiseFloor",
    "averaged_quantile_bias",
    "bin_correlation",
    "sum_variance_factor",
    "cross_term_factor",
    "spectrum_dof",
    "noise_floor",
    "realized_power_factor",
]


def averaged_quantile_bias(k_eq: float, q: float = 0.5) -> float:
    """Quantile ``q`` of an averaged periodogram bin of pure noise, over its mean.

    The bin is Gamma-distributed with shape ``k_eq`` and mean 1, so this is
    ``gamma.ppf(q, k_eq) / k_eq``; for ``k_eq = 1`` and ``q = 0.5`` it is ``ln 2``,
    the median bias of a single periodogram.

    Examples
    --------
    >>> round(averaged_quantile_bias(1.0), 6)   # ln 2
    0.693147
    >>> round(averaged_quantile_bias(1000.0), 4)   # ~ 1 - 1/(3K)
    0.9997
    """
    k = max(float(k_eq), 1e-3)
    return float(stats.gamma.ppf(q, k) / k)


@lru_cache(maxsize=16)
def _bin_corr_cached(window: str, nfft: int, max_lag: int) -> npt.NDArray[np.float64]:
    w2 = get_window(window, nfft) ** 2
    c = np.abs(np.fft.fft(w2)) ** 2 / float(w2.sum()) ** 2
    lags = np.arange(max_lag + 1) % nfft
    out = c[lags]
    out.flags.writeable = False
    return out


def bin_correlation(window: str, nfft: int, max_lag: int = 16) -> npt.NDArray[np.float64]:
    """``rho(d)`` for ``d = 0 .. max_lag``: correlation of the noise powers of bins ``d`` apart.

    Examples
    --------
    >>> r = bin_correlation("hann", 1024, 2)
    >>> [round(float(v), 4) for v in r]   # Hann: 1, (2/3)^2, (1/6)^2
    [1.0, 0.4444, 0.0278]
    """
    return _bin_corr_cached(window, int(nfft), int(min(max_lag, max(nfft - 1, 0))))


def sum_variance_factor(window: str, nfft: int, m: int) -> float:
    """``R_m = sum_{i,j < m} rho(i - j)``: variance of a sum of ``m`` noise bins, in bin units.

    ``R_1 = 1``; for large ``m`` it tends to ``m * sum_d rho(d)`` (``m * NENBW``-like).
    """
    if m <= 0:
        return 0.0
    lag = min(m - 1, 64)
    rho = bin_correlation(window, nfft, lag)
    d = np.arange(1, lag + 1)
    return float(m * rho[0] + 2.0 * np.sum((m - d) * rho[1:]))


@lru_cache(maxsize=16)
def cross_term_factor(window: str, nfft: int) -> float:
    """``gamma = N sum w^4 / S2^2``: signal-times-noise variance factor of a line's power.

    A line of power ``P`` in noise of PSD ``N0`` measured by integrating its main lobe
    has, per segment, variance ``2 P N0 df gamma`` from the signal-noise cross term
    (derivation in docs/measurements.md). Hann: 35/18 = 1.944.
    """
    w = get_window(window, nfft)
    s2 = float(np.dot(w, w))
    return float(nfft * np.sum(w**4) / s2**2)


@lru_cache(maxsize=16)
def realized_power_factor(window: str, nfft: int, overlap: float) -> float:
    """Share ``(r - 1) / r`` of a random signal's band-power variance that is error
    relative to the power the recording actually contains.

    Averaged overlapped periodograms integrated over a band weigh the signal's power in
    time by ``g(n) = sum_j w^2(n - j step)``; for a random signal of bandwidth ``B`` over
    ``T`` seconds the estimate scatters about the ensemble mean with relative variance
    ``r / (B T)`` (``r = mean(g^2) / mean(g)^2``), but about the recording's own mean
    power only with ``(r - 1) / (B T)``: the rest is the signal's own variation, which the
    figure is about, not an error. 4-term Blackman-Harris at 50 % overlap: r = 1.387,
    factor 0.279 (checked by Monte Carlo in tests/test_noise.py); rectangular or Hann at
    75 %: 0 (a flat sum of windows weighs every sample alike).
    """
    w2 = get_window(window, nfft) ** 2
    step = max(1, int(round(nfft * (1.0 - overlap))))
    g = np.zeros(step)
    for j in range(0, nfft, step):
        seg = w2[j : j + step]
        g[: seg.size] += seg
    r = float(np.mean(g**2) / np.mean(g) ** 2)
    return max(r - 1.0, 0.0) / r


def spectrum_dof(spectrum: Spectrum) -> float:
    """Independent-equivalent averages of a spectrum (``equivalent_averages`` if it has one)."""
    k = float(getattr(spectrum, "equivalent_averages", 0.0) or 0.0)
    if k <= 0:
        k = float(spectrum.n_averages)
    return max(k, 1.0)


def _nfft(spectrum: Spectrum) -> int:
    return int(getattr(spectrum, "nfft", 0) or spectrum.psd.size)


@dataclass(frozen=True)
class NoiseFloor:
    """A noise-floor estimate of an averaged spectrum."""

    psd: float
    """Noise power spectral density, FS^2/Hz (bias corrected)."""
    sigma_rel: float
    """Relative 1-sigma statistical uncertainty of ``psd``."""
    quantile: float
    """The quantile of the bins used."""
    n_bins: int
    """Number of bins it was taken from."""

    @property
    def dbfs_per_hz(self) -> float:
        return 10.0 * math.log10(self.psd) if self.psd > 0 else float("-inf")

    @property
    def sigma_db(self) -> float:
        """1-sigma uncertainty in dB."""
        return 10.0 * math.log10(1.0 + self.sigma_rel) if self.sigma_rel < 1e6 else float("inf")


def noise_floor(
    spectrum: Spectrum,
    q: float = 0.5,
    mask: npt.NDArray[np.bool_] | None = None,
) -> NoiseFloor:
    """Estimate the noise floor of an averaged spectrum from a quantile of its bins.

    Parameters
    ----------
    spectrum : Spectrum
        Averaged PSD (FS^2/Hz).
    q : float
        Quantile of the bins, in (0, 1) (default the median). The estimate is unbiased
        as long as the signal and artefacts occupy less than ``1 - q`` of the bins.
    mask : ndarray of bool, optional
        Bins to use (default all).

    Returns
    -------
    NoiseFloor
        ``psd = quantile / averaged_quantile_bias(K, q)``. Its relative 1-sigma is the
        asymptotic standard error of a sample quantile, ``sqrt(q (1-q) / M_eq) / (f(x_q) x_q)``
        with ``f`` the Gamma(K) density and ``M_eq = M / NENBW``-like the number of
        independent bins (``M / sum_d rho(d)``).

    Notes
    -----
    The DC bin counts like any other bin: a receiver DC line occupies a few bins only.

    References
    ----------
    scipy ``_median_bias`` [1]_ (same idea for exponential bins); Percival and Walden
    1993 [2]_ section 6.17 (chi-square distribution of Welch estimates).
    """
    psd = np.asarray(spectrum.psd, dtype=np.float64)
    vals = psd if mask is None else psd[mask]
    vals = vals[np.isfinite(vals)]
    if vals.size == 0 or spectrum.n_averages <= 0:
        return NoiseFloor(psd=float("nan"), sigma_rel=float("nan"), quantile=q, n_bins=0)
    k = spectrum_dof(spectrum)
    raw = float(np.quantile(vals, q))
    bias = averaged_quantile_bias(k, q)
    floor = raw / bias
    nfft = _nfft(spectrum)
    rho = bin_correlation(spectrum.window, nfft, 32) if nfft > 1 else np.ones(1)
    spread = float(rho[0] + 2.0 * rho[1:].sum())
    m_eq = max(vals.size / max(spread, 1.0), 1.0)
    xq = bias * k  # quantile of Gamma(k, 1)
    dens = float(stats.gamma.pdf(xq, k))
    sigma_rel = math.sqrt(q * (1.0 - q) / m_eq) / (dens * xq) if dens > 0 else float("inf")
    return NoiseFloor(psd=floor, sigma_rel=sigma_rel, quantile=q, n_bins=int(vals.size))
