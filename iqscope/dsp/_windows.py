"""Window functions for spectral analysis and their figures of merit.

All windows are the periodic ("DFT-even") form used for spectrum estimation: a cosine
sum ``w[j] = sum_k (-1)^k c_k cos(2 pi k j / N)``, ``j = 0 .. N-1``. The default window of
iqscope's spectra is the 4-term Blackman-Harris window (highest sidelobe -92 dB), so a
carrier 60 dB down can be seen next to strong sidebands; the Heinzel flat-top windows
(HFT95, HFT90D, HFT116D, HFT144D) read line amplitudes with less than 0.005 dB scallop
error.

Figures of merit (Harris 1978 [1]_ section IV, Heinzel et al. 2002 [2]_ section 9):

- coherent gain ``CG = S1 / N`` with ``S1 = sum w``, ``S2 = sum w^2``;
- normalised equivalent noise bandwidth ``NENBW = N S2 / S1^2`` bins
  (ENBW in Hz = ``fs S2 / S1^2``);
- scallop loss ``-20 log10(|W(0.5 bin)| / |W(0)|)`` dB;
- worst-case processing loss ``scallop + 10 log10(NENBW)`` dB;
- highest sidelobe level relative to the main-lobe peak, dB;
- W3dB, the main-lobe width at -3.00 dB (Heinzel) or at half power (-3.0103 dB), bins;
- amplitude flatness ``emax``, the signed amplitude error of largest magnitude within
  +/- 0.5 bin (Heinzel), dB;
- overlap correlation ``c(r) = sum w[n] w[n + rN] / S2`` (Harris).

References
----------
.. [1] F. J. Harris, "On the use of windows for harmonic analysis with the discrete
   Fourier transform", Proc. IEEE, vol. 66, no. 1, pp. 51-83, Jan. 1978.
.. [2] G. Heinzel, A. Ruediger, R. Schilling, "Spectrum and spectral density estimation
   by the Discrete Fourier transform (DFT), including a comprehensive list of window
   functions and some new flat-top windows", Max-Planck-Institut fuer
   Gravitationsphysik, Hannover, 15 Feb 2002. Appendix C and Table 2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Final, Literal

import numpy as np
import numpy.typing as npt
from scipy import optimize

__all__ = [
    "WindowName",
    "WINDOW_COEFFICIENTS",
    "WindowFigures",
    "window_names",
    "get_window",
    "coherent_gain",
    "nenbw_bins",
    "enbw_hz",
    "scallop_loss_db",
    "overlap_correlation",
    "window_figures",
]

#: Names of the windows iqscope knows (aliases are accepted by :func:`get_window`).
WindowName = Literal[
    "rect",
    "hann",
    "hamming",
    "blackman",
    "blackmanharris",
    "nuttall4",
    "hft95",
    "hft90d",
    "hft116d",
    "hft144d",
]

#: Cosine-sum coefficients ``c_k`` (signs alternate in the sum). Sources: Harris 1978
#: (Hann, Hamming, Blackman, 4-term Blackman-Harris -92 dB) and Heinzel 2002 Appendix C
#: (Nuttall4, HFT95, HFT90D, HFT116D, HFT144D), printed digits.
WINDOW_COEFFICIENTS: Final[dict[str, tuple[float, ...]]] = {
    "rect": (1.0,),
    "hann": (0.5, 0.5),
    "hamming": (0.54, 0.46),
    "blackman": (0.42, 0.50, 0.08),
    "blackmanharris": (0.35875, 0.48829, 0.14128, 0.01168),
    "nuttall4": (0.3125, 0.46875, 0.1875, 0.03125),
    "hft95": (1.0, 1.9383379, 1.3045202, 0.4028270, 0.0350665),
    "hft90d": (1.0, 1.942604, 1.340318, 0.440811, 0.043097),
    "hft116d": (1.0, 1.9575375, 1.4780705, 0.6367431, 0.1228389, 0.0066288),
    "hft144d": (1.0, 1.96760033, 1.57983607, 0.81123644, 0.22583558, 0.02773848, 0.00090360),
}

_ALIASES: Final[dict[str, str]] = {
    "rectangular": "rect",
    "boxcar": "rect",
    "none": "rect",
    "hanning": "hann",
    "bh92": "blackmanharris",
    "blackman-harris": "blackmanharris",
    "blackman_harris": "blackmanharris",
    "flattop": "hft95",
}


def window_names() -> tuple[str, ...]:
    """The canonical window names, in table order."""
    return tuple(WINDOW_COEFFICIENTS)


def _canonical(name: str) -> str:
    key = name.strip().lower()
    key = _ALIASES.get(key, key)
    if key not in WINDOW_COEFFICIENTS:
        raise ValueError(f"unknown window {name=}; known: {', '.join(WINDOW_COEFFICIENTS)}")
    return key


@lru_cache(maxsize=32)
def _cached_window(name: str, n: int) -> npt.NDArray[np.float64]:
    coeffs = WINDOW_COEFFICIENTS[name]
    if n == 1:
        w = np.ones(1)
    else:
        z = 2.0 * np.pi * np.arange(n) / n
        w = np.zeros(n)
        for k, c in enumerate(coeffs):
            w += (-1.0) ** k * c * np.cos(k * z)
    w.flags.writeable = False
    return w


def get_window(name: str, n: int) -> npt.NDArray[np.float64]:
    """Return the periodic window ``name`` of length ``n`` (float64, read-only).

    Parameters
    ----------
    name : str
        One of :data:`WindowName` or an alias (``"hanning"``, ``"bh92"``, ``"flattop"``
        for HFT95, ``"rectangular"``).
    n : int
        Number of samples, >= 1.

    Returns
    -------
    ndarray
        ``w[j] = sum_k (-1)^k c_k cos(2 pi k j / n)``; flat-top windows are not
        normalised (their peak is not 1), which changes no figure of merit.

    References
    ----------
    Harris 1978 [1]_ (eqs. for Hann, Hamming, Blackman, Blackman-Harris), Heinzel 2002
    [2]_ Appendix C (flat-tops), module docstring.

    Examples
    --------
    >>> w = get_window("hann", 8)
    >>> [round(float(v), 4) for v in w]
    [0.0, 0.1464, 0.5, 0.8536, 1.0, 0.8536, 0.5, 0.1464]
    """
    if int(n) != n or n < 1:
        raise ValueError(f"{n=} must be an integer >= 1")
    return _cached_window(_canonical(name), int(n))


def _as_window(window: str | npt.ArrayLike, n: int) -> npt.NDArray[np.float64]:
    if isinstance(window, str):
        return get_window(window, n)
    w = np.asarray(window, dtype=np.float64)
    if w.ndim != 1 or w.size < 1:
        raise ValueError("window must be a non-empty 1-D array")
    return w


def coherent_gain(window: str | npt.ArrayLike, n: int = 4096) -> float:
    """Coherent gain ``S1 / N`` (Harris 1978 section IV): 0.5 for Hann."""
    w = _as_window(window, n)
    return float(w.sum() / w.size)


def nenbw_bins(window: str | npt.ArrayLike, n: int = 4096) -> float:
    """Normalised equivalent noise bandwidth ``N S2 / S1^2`` in bins (Heinzel 2002 eq. 21).

    Examples
    --------
    >>> round(nenbw_bins("hann"), 4)
    1.5
    """
    w = _as_window(window, n)
    return float(w.size * np.sum(w * w) / np.sum(w) ** 2)


def enbw_hz(window: str | npt.ArrayLike, n: int, sample_rate_hz: float) -> float:
    """Equivalent noise bandwidth ``fs S2 / S1^2`` in Hz (Heinzel 2002 eq. 22)."""
    w = _as_window(window, n)
    return float(sample_rate_hz * np.sum(w * w) / np.sum(w) ** 2)


def _dtft_mag(w: npt.NDArray[np.float64], nu: float) -> float:
    """|W(nu)| at ``nu`` bins, by direct summation (exact, O(N))."""
    n = w.size
    ph = np.exp(-2j * np.pi * nu * np.arange(n) / n)
    return float(abs(np.dot(w, ph)))


def scallop_loss_db(window: str | npt.ArrayLike, n: int = 4096) -> float:
    """Scallop loss ``-20 log10(|W(0.5)| / |W(0)|)`` dB (Harris 1978 section IV).

    Examples
    --------
    >>> round(scallop_loss_db("hann"), 4)   # -20 log10(8 / (3 pi))
    1.4236
    """
    w = _as_window(window, n)
    return float(-20.0 * math.log10(_dtft_mag(w, 0.5) / abs(w.sum())))


def overlap_correlation(window: str | npt.ArrayLike, overlap: float, n: int = 4096) -> float:
    """Overlap correlation ``sum w[j] w[j + s] / sum w^2`` for a shift ``s = (1 - overlap) N``.

    Harris 1978 Table 1 gives it in percent for 75 % and 50 % overlap (Hann: 65.9 / 16.7).
    """
    w = _as_window(window, n)
    shift = int(round((1.0 - overlap) * w.size))
    if shift >= w.size or shift < 0:
        return 0.0
    return float(np.dot(w[: w.size - shift], w[shift:]) / np.dot(w, w))


@dataclass(frozen=True)
class WindowFigures:
    """Figures of merit of one window (all computed from its samples)."""

    name: str
    """Window name (or "custom")."""
    n: int
    """Window length used."""
    coherent_gain: float
    """S1 / N (amplitude gain for a bin-centred tone)."""
    nenbw_bins: float
    """N S2 / S1^2, bins."""
    scallop_loss_db: float
    """Amplitude loss half a bin off centre, dB (positive)."""
    worst_case_processing_loss_db: float
    """scallop + 10 log10(NENBW), dB."""
    highest_sidelobe_db: float
    """Peak sidelobe level relative to the main-lobe peak, dB (negative)."""
    w3db_bins: float
    """Main-lobe width at -3.00 dB (Heinzel's definition), bins."""
    half_power_bandwidth_bins: float
    """Main-lobe width at half power (-3.0103 dB), bins."""
    w6db_bins: float
    """Main-lobe width at -6.02 dB (half amplitude), bins."""
    emax_db: float
    """Signed amplitude error of largest magnitude within +/- 0.5 bin (Heinzel), dB."""
    main_lobe_half_width_bins: float
    """Distance from the peak to the first null (end of the main lobe), bins."""
    overlap_correlation_50: float
    """Overlap correlation at 50 % overlap (fraction)."""
    overlap_correlation_75: float
    """Overlap correlation at 75 % overlap (fraction)."""


def _width_at(w: npt.NDArray[np.float64], level_db: float, lobe_end: float) -> float:
    """Full width (bins) where |W| falls ``level_db`` below its peak, by root finding."""
    w0 = abs(float(w.sum()))
    target = w0 * 10.0 ** (level_db / 20.0)

    def f(nu: float) -> float:
        return float(_dtft_mag(w, nu) - target)

    # |W| falls monotonically from 0 to the first null for every window here except the
    # flat-tops' ripple, which stays within 0.005 dB of the peak (far above -3 dB).
    grid = np.linspace(0.0, lobe_end, 128)
    vals = np.array([f(g) for g in grid])
    idx = np.nonzero(vals < 0)[0]
    if idx.size == 0:
        return float("nan")
    i = int(idx[0])
    root: float = float(optimize.brentq(f, grid[i - 1], grid[i], xtol=1e-12))
    return 2.0 * root


@lru_cache(maxsize=64)
def _figures_cached(name: str, n: int, pad: int) -> WindowFigures:
    return _compute_figures(get_window(name, n), name, pad)


def _compute_figures(w: npt.NDArray[np.float64], name: str, pad: int) -> WindowFigures:
    n = w.size
    s1 = float(w.sum())
    s2 = float(np.dot(w, w))
    nenbw = n * s2 / s1**2
    scallop = -20.0 * math.log10(_dtft_mag(w, 0.5) / abs(s1))
    # Zero-padded spectrum for the sidelobes and the first null.
    m = n * pad
    mag = np.abs(np.fft.rfft(w, m))
    db = 20.0 * np.log10(np.maximum(mag, 1e-300) / abs(s1))
    # First local minimum below -20 dB: the end of the main lobe (flat-top ripple stays
    # near 0 dB and is skipped).
    lobe_end_idx = None
    for i in range(1, db.size - 1):
        if db[i] < -20.0 and db[i] <= db[i - 1] and db[i] <= db[i + 1]:
            lobe_end_idx = i
            break
    if lobe_end_idx is None:
        lobe_end_idx = db.size - 1
    lobe_end = lobe_end_idx / pad
    hsl = float(db[lobe_end_idx:].max()) if lobe_end_idx < db.size - 1 else float("nan")
    nus = np.linspace(-0.5, 0.5, 101)
    errs = np.array([20.0 * math.log10(_dtft_mag(w, nu) / abs(s1)) for nu in nus])
    emax = float(errs[np.argmax(np.abs(errs))])
    return WindowFigures(
        name=name,
        n=n,
        coherent_gain=s1 / n,
        nenbw_bins=nenbw,
        scallop_loss_db=scallop,
        worst_case_processing_loss_db=scallop + 10.0 * math.log10(nenbw),
        highest_sidelobe_db=hsl,
        w3db_bins=_width_at(w, -3.0, lobe_end),
        half_power_bandwidth_bins=_width_at(w, -10.0 * math.log10(2.0), lobe_end),
        w6db_bins=_width_at(w, -20.0 * math.log10(2.0), lobe_end),
        emax_db=emax,
        main_lobe_half_width_bins=lobe_end,
        overlap_correlation_50=overlap_correlation(w, 0.5),
        overlap_correlation_75=overlap_correlation(w, 0.75),
    )


def window_figures(window: str | npt.ArrayLike = "blackmanharris", n: int = 4096, pad: int = 64) -> WindowFigures:
    """Compute the figures of merit of a window from its samples.

    Parameters
    ----------
    window : str or array_like
        A window name (see :func:`get_window`) or the samples of a custom window.
    n : int
        Length when ``window`` is a name.
    pad : int
        Zero-padding factor of the FFT used to find sidelobes and the first null.

    Returns
    -------
    WindowFigures

    References
    ----------
    Harris 1978 [1]_ section IV and Table 1; Heinzel 2002 [2]_ section 9 and Table 2.

    Examples
    --------
    >>> f = window_figures("hft95")
    >>> round(f.nenbw_bins, 4), round(f.highest_sidelobe_db, 1)   # Heinzel 2002: 3.8112, -95.0
    (3.8112, -95.0)
    """
    if isinstance(window, str):
        return _figures_cached(_canonical(window), int(n), int(pad))
    return _compute_figures(_as_window(window, n), "custom", int(pad))
