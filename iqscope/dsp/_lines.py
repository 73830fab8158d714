"""Line and band powers from an averaged spectrum, with noise subtracted and tested.

A discrete line's power is its PSD integrated over the window's main lobe (Heinzel et
al. 2002 section 9 [1]_: the integral of the PSD over all bins is the mean power, and a
line puts all but a sidelobe's worth of its power in the main lobe), minus the noise
floor's share of those bins. Its frequency is the power centroid of the lobe: for a
window whose squared spectrum is sampled at integer bins the centroid of the sampled
kernel equals the true offset (Poisson summation: the transform of ``|W|^2`` is the
window's autocorrelation, shorter than the period), so it needs no per-window
interpolation table; only the noise and the -92 dB sidelobes outside the lobe move it.

Uncertainty of a line power ``P`` measured against a floor ``N0`` (FS^2/Hz) with ``m``
bins of width ``df`` and ``K`` independent-equivalent averages:

.. math:: \\sigma_P^2 = \\frac{2 P N_0\\, df\\, \\gamma + (N_0 df)^2 R_m}{K}
          + (m\\, df\\, \\sigma_{N_0})^2

with ``gamma = N sum w^4 / S2^2`` (signal x noise cross term) and ``R_m`` the summed bin
correlations (noise x noise term), see :mod:`iqscope.dsp._noise` and
docs/measurements.md. A line counts as detected when ``P`` exceeds
``DETECTION_SIGMAS`` times the noise-only standard deviation; otherwise the figure is
noise-limited and the power is bounded above by ``max(P, 0) + BOUND_SIGMAS * sigma``.

References
----------
.. [1] G. Heinzel, A. Ruediger, R. Schilling, "Spectrum and spectral density estimation
   by the DFT ...", MPI Gravitationsphysik, Hannover, 2002, section 9.
.. [2] D. B. Percival and A. T. Walden, *Spectral Analysis for Physical Applications*,
   Cambridge University Press, 1993, section 6.17.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Final, Generic, Protocol, TypeVar

import numpy as np
import numpy.typing as npt
from scipy.ndimage import maximum_filter1d
from scipy.stats import gamma as _gamma

from ._noise import (
    averaged_quantile_bias,
    bin_correlation,
    cross_term_factor,
    realized_power_factor,
    spectrum_dof,
    sum_variance_factor,
)
from ._types import Spectrum
from ._windows import window_figures

__all__ = [
    "DETECTION_SIGMAS",
    "BOUND_SIGMAS",
    "LinePower",
    "BandPower",
    "Peak",
    "lobe_half_width_bins",
    "line_power",
    "band_power",
    "local_floor",
    "find_peaks",
    "bin_index",
    "LineTrack",
    "track_line",
    "dc_tolerance_hz",
    "DcSplit",
    "split_dc_lines",
]

#: A line is detected when its noise-subtracted power exceeds this many noise-only sigmas
#: (one-sided false-alarm probability ~1.3e-3 for a Gaussian sum of many bins).
DETECTION_SIGMAS: Final = 3.0
#: An undetected line's power is bounded above by its estimate plus this many sigmas
#: (one-sided ~97.7 % confidence).
BOUND_SIGMAS: Final = 2.0
#: Bins on each side of the lobe used for the local noise floor.
_ANNULUS: Final = 16


def _nfft(spectrum: Spectrum) -> int:
    return int(getattr(spectrum, "nfft", 0) or spectrum.psd.size)


def lobe_half_width_bins(spectrum: Spectrum) -> int:
    """Half-width (bins) of the band integrated for a line: main lobe + 1 bin for an off-centre line.

    4-term Blackman-Harris: first null at 4 bins, so 5.
    """
    try:
        lobe = window_figures(spectrum.window, 256).main_lobe_half_width_bins
    except ValueError:
        lobe = 4.0
    return int(math.ceil(lobe)) + 1


def bin_index(spectrum: Spectrum, freq_hz: float) -> int:
    """Index of the bin nearest ``freq_hz`` (clipped to the spectrum)."""
    f = spectrum.freqs_hz
    if f.size == 0:
        return 0
    i = int(round((freq_hz - float(f[0])) / spectrum.bin_hz))
    return min(max(i, 0), f.size - 1)


@dataclass(frozen=True)
class LinePower:
    """Power of one discrete line, noise subtracted."""

    frequency_hz: float
    """Power centroid of the main lobe, Hz offset (the search frequency if not detected)."""
    power: float
    """Noise-subtracted power, FS^2 (may be <= 0 when not detected)."""
    sigma: float
    """1-sigma uncertainty of ``power``, FS^2."""
    noise_sigma: float
    """1-sigma of the noise-only sum over the lobe, FS^2 (the detection scale)."""
    floor_psd: float
    """Noise floor used, FS^2/Hz (the larger of the global and the local estimate)."""
    detected: bool
    """True when ``power > DETECTION_SIGMAS * noise_sigma``."""
    upper_bound: float
    """Power the line is below with ~97.7 % confidence, FS^2 (``power`` if detected)."""
    frequency_sigma_hz: float
    """1-sigma of ``frequency_hz`` from the noise, Hz (NaN if not detected)."""
    index: int
    """Bin of the lobe centre."""

    @property
    def level(self) -> float:
        """The power if detected, else its upper bound, FS^2."""
        return self.power if self.detected else self.upper_bound

    @property
    def snr(self) -> float:
        """Line power over the noise in one ENBW (linear)."""
        return self.power / max(self.noise_sigma, 1e-300)


@dataclass(frozen=True)
class BandPower:
    """Power in a band of bins, noise subtracted."""

    lo_hz: float
    hi_hz: float
    power: float
    """Noise-subtracted power, FS^2."""
    sigma: float
    """1-sigma uncertainty, FS^2."""
    noise_sigma: float
    """1-sigma of the noise-only sum, FS^2."""
    detected: bool
    upper_bound: float
    n_bins: int

    @property
    def level(self) -> float:
        return self.power if self.detected else self.upper_bound


def local_floor(spectrum: Spectrum, center: int, half_width: int, global_floor: float) -> float:
    """Noise floor next to a lobe: lower quartile of ``_ANNULUS`` bins each side, bias corrected.

    Returns it when it is more than 3 of its own sigmas above ``global_floor`` (a line on
    a raised pedestal, e.g. a carrier among speech sidebands, is judged against the
    pedestal), else ``global_floor``.
    """
    psd = spectrum.psd
    n = psd.size
    lo = np.arange(max(center - half_width - _ANNULUS, 0), max(center - half_width, 0))
    hi = np.arange(min(center + half_width + 1, n), min(center + half_width + 1 + _ANNULUS, n))
    idx = np.concatenate((lo, hi))
    if idx.size < 8:
        return global_floor
    k = spectrum_dof(spectrum)
    bias = averaged_quantile_bias(k, 0.25)
    est = float(np.quantile(psd[idx], 0.25)) / bias
    if not math.isfinite(global_floor):
        return est
    # Use the local estimate only when it is significantly (3 sigma) above the global
    # one: taking the larger of two noisy estimates would bias the floor upwards.
    rho = bin_correlation(spectrum.window, _nfft(spectrum), 16)
    m_eq = max(idx.size / float(rho[0] + 2.0 * rho[1:].sum()), 1.0)
    xq = bias * k
    dens = float(_gamma.pdf(xq, k))
    sig = math.sqrt(0.25 * 0.75 / m_eq) / (dens * xq) if dens > 0 else math.inf
    return est if est > global_floor * (1.0 + 3.0 * sig) else global_floor


def _noise_var(spectrum: Spectrum, m: int, floor: float, k: float) -> float:
    r = sum_variance_factor(spectrum.window, _nfft(spectrum), m)
    return (floor * spectrum.bin_hz) ** 2 * r / k


def line_power(
    spectrum: Spectrum,
    freq_hz: float,
    floor_psd: float,
    *,
    search_bins: int = 2,
    floor_sigma_rel: float = 0.0,
    use_local_floor: bool = True,
    half_width: int | None = None,
) -> LinePower:
    """Power of the line nearest ``freq_hz``: main-lobe integral minus noise.

    Parameters
    ----------
    spectrum : Spectrum
        Averaged PSD, FS^2/Hz.
    freq_hz : float
        Where the line is expected, Hz offset.
    floor_psd : float
        Global noise floor, FS^2/Hz.
    search_bins : int
        The lobe is centred on the largest bin within this many bins of ``freq_hz``.
    floor_sigma_rel : float
        Relative 1-sigma of the floor (adds ``(m df floor sigma)^2`` to the variance).
    use_local_floor : bool
        Judge the line against the local floor (lower quartile next to the lobe) when it
        is higher than the global one.
    half_width : int, optional
        Lobe half-width in bins (default :func:`lobe_half_width_bins`).

    Returns
    -------
    LinePower

    References
    ----------
    Heinzel 2002 [1]_ section 9; the variance is derived in docs/measurements.md.
    """
    psd = spectrum.psd
    n = psd.size
    df = spectrum.bin_hz
    if n == 0 or spectrum.n_averages <= 0:
        nan = float("nan")
        return LinePower(freq_hz, nan, nan, nan, nan, False, nan, nan, 0)
    h = lobe_half_width_bins(spectrum) if half_width is None else int(half_width)
    i0 = bin_index(spectrum, freq_hz)
    s_lo, s_hi = max(i0 - search_bins, 0), min(i0 + search_bins + 1, n)
    c = s_lo + int(np.argmax(psd[s_lo:s_hi]))
    a, b = max(c - h, 0), min(c + h + 1, n)
    m = b - a
    k = spectrum_dof(spectrum)
    floor = floor_psd if math.isfinite(floor_psd) else 0.0
    if use_local_floor:
        floor = local_floor(spectrum, c, h, floor)
    seg = psd[a:b]
    total = float(seg.sum()) * df
    p = total - m * floor * df
    noise_var = _noise_var(spectrum, m, floor, k)
    gamma = cross_term_factor(spectrum.window, _nfft(spectrum))
    var = (2.0 * max(p, 0.0) * floor * df * gamma) / k + noise_var + (m * df * floor * floor_sigma_rel) ** 2
    sigma = math.sqrt(max(var, 0.0))
    noise_sigma = math.sqrt(max(noise_var, 0.0))
    detected = p > DETECTION_SIGMAS * noise_sigma and p > 0
    excess = seg - floor
    if detected and excess.sum() > 0:
        fr = spectrum.freqs_hz[a:b]
        wsum = float(excess.sum())
        f = float(np.dot(fr, excess) / wsum)
        # Centroid variance, bins taken as independent: sum (f_i - f)^2 var_i / W^2 with
        # var_i = (2 s_i N0 + N0^2) / K the variance of one averaged bin (PSD units).
        var_i = (2.0 * np.maximum(excess, 0.0) * floor + floor**2) / k
        fsig = float(math.sqrt(float(np.sum((fr - f) ** 2 * var_i))) / wsum)
    else:
        f = float(spectrum.freqs_hz[c])
        fsig = float("nan")
    ub = p if detected else max(p, 0.0) + BOUND_SIGMAS * sigma
    return LinePower(
        frequency_hz=f,
        power=p,
        sigma=sigma,
        noise_sigma=noise_sigma,
        floor_psd=floor,
        detected=bool(detected),
        upper_bound=ub,
        frequency_sigma_hz=fsig,
        index=c,
    )


def band_power(
    spectrum: Spectrum,
    lo_hz: float,
    hi_hz: float,
    floor_psd: float,
    *,
    floor_sigma_rel: float = 0.0,
    random_signal: bool = True,
    exclude: npt.NDArray[np.bool_] | None = None,
) -> BandPower:
    """Noise-subtracted power of the bins whose centres lie in ``[lo_hz, hi_hz]``.

    Parameters
    ----------
    spectrum : Spectrum
        Averaged PSD, FS^2/Hz.
    lo_hz, hi_hz : float
        Band edges, Hz offset.
    floor_psd : float
        Noise floor, FS^2/Hz.
    floor_sigma_rel : float
        Relative 1-sigma of the floor.
    random_signal : bool
        Treat the signal in the band as a random process (speech, noise): adds the
        estimation variance of its own spectrum, ``c df^2 sum_ij rho(i-j) s_i s_j / K``,
        with ``c = realized_power_factor(...)`` so that the error is counted relative to
        the power the recording contains (not the modulation's long-run mean).
        Use False for deterministic lines (tones), whose only variance is the noise's.
    exclude : ndarray of bool, optional
        Bins to leave out (e.g. a carrier lobe, a receiver artefact).

    Returns
    -------
    BandPower
    """
    psd = spectrum.psd
    f = spectrum.freqs_hz
    df = spectrum.bin_hz
    sel = (f >= lo_hz) & (f <= hi_hz)
    if exclude is not None:
        sel &= ~exclude
    m = int(sel.sum())
    if m == 0 or spectrum.n_averages <= 0:
        return BandPower(lo_hz, hi_hz, 0.0, 0.0, 0.0, False, 0.0, 0)
    floor = floor_psd if math.isfinite(floor_psd) else 0.0
    k = spectrum_dof(spectrum)
    vals = psd[sel]
    p = float(vals.sum()) * df - m * floor * df
    noise_var = _noise_var(spectrum, m, floor, k)
    gamma = cross_term_factor(spectrum.window, _nfft(spectrum))
    var = 2.0 * max(p, 0.0) * floor * df * gamma / k + noise_var + (m * df * floor * floor_sigma_rel) ** 2
    if random_signal:
        s = np.maximum(vals - floor, 0.0)
        rho = bin_correlation(spectrum.window, _nfft(spectrum), 16)
        kern = np.concatenate((rho[:0:-1], rho))
        conv = np.convolve(s, kern)[rho.size - 1 : rho.size - 1 + s.size]
        c = realized_power_factor(spectrum.window, _nfft(spectrum), float(getattr(spectrum, "overlap", 0.5)))
        var += c * float(np.dot(s, conv)) * df * df / k
    sigma = math.sqrt(max(var, 0.0))
    noise_sigma = math.sqrt(max(noise_var, 0.0))
    detected = p > DETECTION_SIGMAS * noise_sigma and p > 0
    ub = p if detected else max(p, 0.0) + BOUND_SIGMAS * sigma
    return BandPower(lo_hz, hi_hz, p, sigma, noise_sigma, bool(detected), ub, m)


@dataclass(frozen=True)
class Peak:
    """A local maximum of the spectrum standing above the noise."""

    frequency_hz: float
    """Power centroid of the lobe, Hz offset."""
    power: float
    """Noise-subtracted lobe power, FS^2."""
    index: int
    """Bin of the maximum."""


def find_peaks(
    spectrum: Spectrum,
    floor_psd: float,
    *,
    max_peaks: int = 32,
    min_snr_sigmas: float = 6.0,
    lo_hz: float | None = None,
    hi_hz: float | None = None,
) -> list[Peak]:
    """Lines standing out of the noise, strongest first, with sub-bin frequencies.

    A bin is a candidate when it is the largest within one lobe half-width on each side
    and its lobe power exceeds ``min_snr_sigmas`` noise sigmas. Frequencies are lobe
    power centroids (see the module docstring).
    """
    psd = spectrum.psd
    n = psd.size
    if n < 3 or spectrum.n_averages <= 0 or not math.isfinite(floor_psd):
        return []
    h = lobe_half_width_bins(spectrum)
    df = spectrum.bin_hz
    k = spectrum_dof(spectrum)
    m = 2 * h + 1
    noise_sigma = math.sqrt(_noise_var(spectrum, m, floor_psd, k))
    # Lobe sums by a moving window.
    c = np.concatenate(([0.0], np.cumsum(psd - floor_psd)))
    idx = np.arange(n)
    a = np.clip(idx - h, 0, n)
    b = np.clip(idx + h + 1, 0, n)
    lobe = (c[b] - c[a]) * df
    local_max = maximum_filter1d(psd, size=2 * h + 1, mode="nearest") == psd
    cand = local_max & (lobe > min_snr_sigmas * noise_sigma)
    if lo_hz is not None:
        cand &= spectrum.freqs_hz >= lo_hz
    if hi_hz is not None:
        cand &= spectrum.freqs_hz <= hi_hz
    where = np.nonzero(cand)[0]
    if where.size == 0:
        return []
    order = where[np.argsort(lobe[where])[::-1]][:max_peaks]
    out: list[Peak] = []
    for i in order:
        i = int(i)
        lo, hi = max(i - h, 0), min(i + h + 1, n)
        ex = np.maximum(psd[lo:hi] - floor_psd, 0.0)
        wsum = float(ex.sum())
        f = float(np.dot(spectrum.freqs_hz[lo:hi], ex) / wsum) if wsum > 0 else float(spectrum.freqs_hz[i])
        out.append(Peak(frequency_hz=f, power=float(lobe[i]), index=i))
    return out


class _HasFrequency(Protocol):
    @property
    def frequency_hz(self) -> float: ...


_L = TypeVar("_L", bound=_HasFrequency)


def dc_tolerance_hz(bin_hz: float) -> float:
    """How close to 0 Hz (the capture centre) a line counts as the receiver's DC line, Hz.

    ``max(2 bins, 1 Hz)``: a DC offset's line is centred on bin 0 to within the noise's
    pull on the lobe centroid (a fraction of a bin); 1 Hz keeps the rule meaningful on
    very fine resolutions.
    """
    return max(2.0 * float(bin_hz), 1.0)


@dataclass(frozen=True)
class DcSplit(Generic[_L]):
    """Lines split into the ones to use and the ones taken as the receiver's DC line."""

    kept: tuple[_L, ...]
    """Lines to classify and follow (order preserved)."""
    dropped: tuple[_L, ...]
    """Lines at the capture centre left out (the receiver's DC offset / LO leakage)."""
    only_dc: bool
    """True when lines sit at the capture centre and were kept only because nothing else
    stands above the noise (they may be the receiver's rather than the transmitter's)."""


def split_dc_lines(
    lines: Sequence[_L],
    bin_hz: float,
    *,
    hints: Iterable[float | None] = (),
    hint_tol_hz: float = 0.0,
    signal_elsewhere: bool = False,
) -> DcSplit[_L]:
    """Leave out lines at 0 Hz (a receiver's DC line) before classifying or following lines.

    A direct-conversion receiver's DC offset and LO leakage put a line at the capture
    centre that can be stronger than the emission (DESIGN.md section 3, receiver
    artefacts). Lines within :func:`dc_tolerance_hz` of 0 Hz are dropped unless a hint
    (``--carrier``, a line the user names) lies within ``hint_tol_hz`` of 0 Hz, or they
    are the only lines and ``signal_elsewhere`` is False (nothing else stands above the
    noise): then they are kept and ``only_dc`` says so.

    Parameters
    ----------
    lines : sequence
        Lines with a ``frequency_hz`` attribute (Hz offset from the capture centre).
    bin_hz : float
        Spectrum bin width, Hz.
    hints : iterable of float or None
        Frequencies (Hz offset) the user pointed at; None entries are ignored.
    hint_tol_hz : float
        How far from 0 Hz a hint still points at the DC line, Hz.
    signal_elsewhere : bool
        Power stands above the noise away from 0 Hz even if no other discrete line does
        (a continuum such as speech): the DC lines are dropped then too.

    Returns
    -------
    DcSplit

    References
    ----------
    Direct-conversion receivers' DC offset from LO self-mixing: B. Razavi, "Design
    considerations for direct-conversion receivers", IEEE Trans. Circuits Syst. II 44(6),
    1997, section III (from memory).
    """
    tol = dc_tolerance_hz(bin_hz)
    at_dc = tuple(ln for ln in lines if abs(ln.frequency_hz) <= tol)
    if not at_dc:
        return DcSplit(tuple(lines), (), False)
    if any(h is not None and abs(h) <= max(hint_tol_hz, tol) for h in hints):
        return DcSplit(tuple(lines), (), False)
    rest = tuple(ln for ln in lines if abs(ln.frequency_hz) > tol)
    if rest or signal_elsewhere:
        return DcSplit(rest, at_dc, False)
    return DcSplit(tuple(lines), (), True)


@dataclass(frozen=True)
class LineTrack:
    """A line followed through consecutive block spectra."""

    frequency_hz: npt.NDArray[np.float64]
    """Lobe power centroid per block, Hz offset (NaN where not detected)."""
    sigma_hz: npt.NDArray[np.float64]
    """1-sigma of each frequency, Hz (NaN where not detected)."""
    power: npt.NDArray[np.float64]
    """Noise-subtracted lobe power per block, FS^2."""
    detected: npt.NDArray[np.bool_]
    """Line above ``DETECTION_SIGMAS`` noise sigmas in that block."""


def track_line(
    block_psd: npt.NDArray[np.floating],
    spectrum: Spectrum,
    freq_hz: float,
    floor_psd: float,
    counts: npt.NDArray[np.integer],
    *,
    search_bins: int = 3,
    follow: bool = True,
) -> LineTrack:
    """Follow the line near ``freq_hz`` through block spectra (rows of ``block_psd``).

    Each row is a PSD on the bins of ``spectrum`` averaged over ``counts[i]`` segments
    (the pipeline's ``ctx.stats.block_psd``). In each row the lobe is centred on the
    largest bin within ``search_bins`` of where the line was last seen (``follow``) or of
    ``freq_hz``; its frequency is the lobe power centroid (exact for a sampled ``|W|^2``
    kernel, see the module docstring) and its 1-sigma
    ``sqrt(sum (f_i - f)^2 var_i) / W``, ``var_i = (2 s_i N0 + N0^2) / K`` with ``K`` the
    row's equivalent averages (docs/measurements.md section 3).

    Returns
    -------
    LineTrack
    """
    from ._spectrum import equivalent_averages

    rows = np.asarray(block_psd, dtype=np.float64)
    nr = rows.shape[0] if rows.ndim == 2 else 0
    nan = np.full(nr, np.nan)
    out_f, out_s, out_p = nan.copy(), nan.copy(), np.zeros(nr)
    det = np.zeros(nr, bool)
    if nr == 0 or rows.shape[1] != spectrum.psd.size or not math.isfinite(floor_psd):
        return LineTrack(out_f, out_s, out_p, det)
    h = lobe_half_width_bins(spectrum)
    df = spectrum.bin_hz
    f = spectrum.freqs_hz
    n = f.size
    nfft = _nfft(spectrum)
    overlap = float(getattr(spectrum, "overlap", 0.5))
    m = 2 * h + 1
    r_m = sum_variance_factor(spectrum.window, nfft, m)
    centre = bin_index(spectrum, freq_hz)
    for i in range(nr):
        k = max(equivalent_averages(int(counts[i]), spectrum.window, nfft, overlap), 1.0)
        row = rows[i]
        lo, hi = max(centre - search_bins, 0), min(centre + search_bins + 1, n)
        c = lo + int(np.argmax(row[lo:hi]))
        a, b = max(c - h, 0), min(c + h + 1, n)
        ex = row[a:b] - floor_psd
        p = float(ex.sum()) * df
        out_p[i] = p
        noise_sigma = floor_psd * df * math.sqrt(r_m / k)
        if p > DETECTION_SIGMAS * noise_sigma and p > 0:
            w = float(ex.sum())
            fr = f[a:b]
            fc = float(np.dot(fr, ex) / w)
            var_i = (2.0 * np.maximum(ex, 0.0) * floor_psd + floor_psd**2) / k
            out_f[i] = fc
            out_s[i] = math.sqrt(float(np.sum((fr - fc) ** 2 * var_i))) / w
            det[i] = True
            if follow:
                centre = c
    return LineTrack(out_f, out_s, out_p, det)
