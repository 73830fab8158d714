"""Single-tone frequency estimation near the Cramér–Rao bound, and line finding.

Pure array functions (no I/O). The estimator is the maximum-likelihood one for a single
complex exponential in white Gaussian noise: the frequency that maximises the
periodogram of the (rectangular-windowed) block. It is found in two steps:

1. a coarse search over a zero-padded FFT, optionally restricted to ``center_hz +/- span_hz``
   so that a tracker can follow one line among several;
2. a fine refinement by Newton steps on the periodogram ``P(w) = |sum x[n] e^{-jwn}|^2``
   using its analytic first and second derivatives (each step is O(N)).

Above the threshold SNR this reaches the Rife–Boorstyn bound [1]_:

.. math:: \\operatorname{var}(\\hat f) \\ge \\frac{6 f_s^2}{(2\\pi)^2\\,\\mathrm{SNR}\\,N(N^2-1)}

with ``SNR = A^2 / E|w|^2`` (complex tone amplitude ``A``, total complex noise variance).

References
----------
.. [1] D. C. Rife and R. R. Boorstyn, "Single-tone parameter estimation from
   discrete-time observations", IEEE Trans. Inf. Theory, vol. IT-20, no. 5,
   pp. 591-598, Sept. 1974 (REFERENCES.md item 8).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
from scipy import fft as sp_fft

#: Taper of the fine estimate: ``"rect"`` is the maximum-likelihood periodogram (reaches
#: the bound); ``"hann"`` trades efficiency (variance ~2.4x the bound) for far less
#: leakage from strong neighbouring lines.
Window = Literal["rect", "hann"]

#: Standard-deviation factor of the Hann-tapered estimate over the bound: sqrt(2.4),
#: measured by Monte Carlo (N = 256, SNR 10 dB, 2000 trials) in tests/test_tone.py.
_HANN_LOSS = math.sqrt(2.4)

__all__ = [
    "Window",
    "ToneEstimate",
    "LinePeak",
    "crlb_frequency_std",
    "estimate_tone",
    "estimate_tones",
    "estimate_rows",
    "same_search",
    "find_lines",
]


@dataclass(frozen=True)
class ToneEstimate:
    """The frequency, amplitude and SNR of one line in one block of samples."""

    frequency_hz: float
    """Estimated frequency, Hz (offset from the capture centre, in [-fs/2, fs/2))."""
    sigma_hz: float
    """1-sigma uncertainty, Hz: the Cramér–Rao bound evaluated at the estimated SNR.
    It is optimistic below the threshold SNR (see ``detected``)."""
    amplitude: float
    """Amplitude of the complex exponential, full-scale units (|x| = 1 is 0 dBFS)."""
    phase_rad: float
    """Phase at the block centre, radians."""
    snr: float
    """Signal-to-noise ratio per sample, linear: A^2 / (total complex noise variance)."""
    noise_power: float
    """Total complex noise variance per sample, FS^2 (estimated, or as given)."""
    n_samples: int
    """Block length N."""
    detected: bool
    """True when the peak stands clear of the noise: N*SNR exceeds both 20 and ln(M) + 12,
    the level the largest of M searched pure-noise bins (exponential, mean 1) passes with
    probability M exp(-t) ~ 6e-6."""

    @property
    def snr_db(self) -> float:
        """SNR per sample in dB (-inf for no signal)."""
        return 10.0 * math.log10(self.snr) if self.snr > 0 else -math.inf

    @property
    def level_dbfs(self) -> float:
        """Line power in dBFS (20 log10 amplitude)."""
        return 20.0 * math.log10(self.amplitude) if self.amplitude > 0 else -math.inf


@dataclass(frozen=True)
class LinePeak:
    """A discrete line found in an averaged power spectral density."""

    frequency_hz: float
    """Peak location (parabolic interpolation on dB), Hz."""
    power: float
    """Line power, FS^2: PSD summed over the peak's +/-``lobe_bins`` times the bin width,
    minus the noise in those bins."""
    ratio_db: float
    """Peak PSD over the noise floor PSD, dB."""


def crlb_frequency_std(n_samples: int, snr: float, sample_rate_hz: float) -> float:
    """Cramér–Rao lower bound on the standard deviation of a single tone's frequency.

    Parameters
    ----------
    n_samples : int
        Number of samples N (>= 2).
    snr : float
        Per-sample SNR, linear, ``A^2 / E|w|^2`` for a complex tone of amplitude A in
        complex white Gaussian noise w.
    sample_rate_hz : float
        Sample rate fs, Hz.

    Returns
    -------
    float
        Bound on the 1-sigma frequency error, Hz (``inf`` when ``snr <= 0``).

    Notes
    -----
    ``var(f) >= 6 fs^2 / ((2 pi)^2 SNR N (N^2 - 1))`` (Rife and Boorstyn 1974 [1]_,
    rewritten in Hz with the total complex noise variance).

    References
    ----------
    .. [1] D. C. Rife and R. R. Boorstyn, IEEE Trans. Inf. Theory IT-20(5):591-598, 1974.

    Examples
    --------
    N = 256, SNR = 10 dB, fs = 48 kHz gives 1.4447 Hz (REFERENCES.md item 8):

    >>> round(crlb_frequency_std(256, 10.0, 48000.0), 4)
    1.4447
    """
    if n_samples < 2:
        raise ValueError(f"{n_samples=} must be >= 2")
    if not (snr > 0 and math.isfinite(snr)):
        return math.inf
    n = float(n_samples)
    var = 6.0 * sample_rate_hz**2 / ((2.0 * math.pi) ** 2 * snr * n * (n * n - 1.0))
    return math.sqrt(var)


def _wrap_hz(f: npt.NDArray[np.float64] | float, fs: float) -> npt.NDArray[np.float64]:
    """Wrap frequencies into [-fs/2, fs/2)."""
    return np.asarray((np.asarray(f, dtype=np.float64) + fs / 2.0) % fs - fs / 2.0)


@functools.lru_cache(maxsize=32)
def _grid(
    n: int, pad: int, fs: float
) -> tuple[
    npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[np.float64], float, npt.NDArray[np.float64]
]:
    """Cached per-block-length arrays: padded bin frequencies (wrapped), centred time
    index, Hann taper (symmetric about the block centre) and its sum of squares, and the
    bin frequencies of the (FFT-friendly) noise periodogram.

    FFT lengths are rounded up to 5-smooth sizes (``next_fast_len``): zero padding leaves
    each bin's marginal distribution unchanged, which is all the median needs."""
    nfft = sp_fft.next_fast_len(pad * n)
    freqs = _wrap_hz(np.arange(nfft) * (fs / nfft), fs)
    m = np.arange(n, dtype=np.float64) - (n - 1) / 2.0
    hann = np.sin(np.pi * (np.arange(n) + 0.5) / n) ** 2
    n_noise = sp_fft.next_fast_len(n)
    nat_f = _wrap_hz(np.arange(n_noise) * (fs / n_noise), fs)
    for a in (freqs, m, hann, nat_f):
        a.flags.writeable = False
    return freqs, m, hann, float(np.sum(hann * hann)), nat_f


def _periodogram_derivs(
    x: npt.NDArray[np.complex128], m: npt.NDArray[np.float64], w: float
) -> tuple[complex, float, float]:
    """X(w), dP/dw and d2P/dw2 of P(w) = |sum x[n] exp(-j w m[n])|^2."""
    z = x * np.exp(-1j * w * m)
    # the three sums sum z, sum m z, sum m^2 z as one small matrix product
    r = _moments(m) @ z.view(np.float64).reshape(-1, 2)
    x0 = complex(r[0, 0], r[0, 1])
    x1 = complex(r[1, 1], -r[1, 0])  # -j sum m z
    x2 = complex(-r[2, 0], -r[2, 1])  # -sum m^2 z
    d1 = 2.0 * (x0.conjugate() * x1).real
    d2 = 2.0 * (abs(x1) ** 2 + (x0.conjugate() * x2).real)
    return x0, d1, d2


_MOMENTS: dict[int, tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]] = {}


def _moments(m: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    """Rows 1, m, m^2 (cached for the last few time grids)."""
    hit = _MOMENTS.get(id(m))
    if hit is not None and hit[0] is m:
        return hit[1]
    if len(_MOMENTS) > 64:
        _MOMENTS.clear()
    out = np.ascontiguousarray(np.stack((np.ones_like(m), m, m * m)))
    _MOMENTS[id(m)] = (m, out)
    return out


def _wrap1(f: float, fs: float) -> float:
    """Wrap one frequency into [-fs/2, fs/2)."""
    return (f + fs / 2.0) % fs - fs / 2.0


def _refine(
    x: npt.NDArray[np.complex128],
    m: npt.NDArray[np.float64],
    w0: float,
    lo: float,
    hi: float,
    iterations: int,
) -> tuple[float, complex]:
    """Newton ascent on the periodogram from ``w0``, kept inside [lo, hi] (rad/sample)."""
    n = x.size
    bin_w = 2.0 * math.pi / n
    w = w0
    x0, d1, d2 = _periodogram_derivs(x, m, w)
    p = abs(x0) ** 2
    for _ in range(iterations):
        if d2 < 0:
            step = -d1 / d2
        else:  # not concave here: move uphill by a small fixed step
            step = math.copysign(0.05 * bin_w, d1)
        step = max(-0.5 * bin_w, min(0.5 * bin_w, step))
        accepted = False
        for _halving in range(6):
            w_new = min(hi, max(lo, w + step))
            x0n, d1n, d2n = _periodogram_derivs(x, m, w_new)
            pn = abs(x0n) ** 2
            if pn >= p:
                w, x0, d1, d2, p = w_new, x0n, d1n, d2n, pn
                accepted = True
                break
            step *= 0.5
        if not accepted or abs(step) < 1e-9 * bin_w:
            break
    return w, x0


def estimate_tones(
    x: npt.ArrayLike,
    sample_rate_hz: float,
    centers_hz: Sequence[float | None],
    *,
    span_hz: float | Sequence[float | None] | None = None,
    pad: int = 2,
    iterations: int = 4,
    noise_power: float | None = None,
    window: Window = "rect",
    noise_band_hz: tuple[float, float] | None = None,
) -> list[ToneEstimate]:
    """Estimate several lines in one block, sharing one FFT.

    Parameters
    ----------
    x : array_like of complex
        One block of complex baseband samples (full-scale units), N >= 8.
    sample_rate_hz : float
        Sample rate fs, Hz.
    centers_hz : sequence of float or None
        For each line, the frequency (Hz offset from the capture centre) around which to
        search; None searches the whole band.
    span_hz : float, sequence or None
        Half-width of each search band, Hz (None: the whole band). The coarse peak is
        taken only within ``center +/- span`` and the refinement stays within it (plus
        one bin).
    pad : int
        Zero-padding factor of the coarse FFT (>= 1).
    iterations : int
        Maximum Newton steps of the fine refinement.
    noise_power : float, optional
        Known total complex noise variance per sample, FS^2. By default it is estimated
        from the median of the block's periodogram (robust to a few lines).
    window : {"rect", "hann"}
        Taper for the coarse search and the fine refinement. ``"rect"`` (default) is the
        maximum-likelihood estimator; ``"hann"`` resists strong neighbouring lines at
        about 2.4x the variance (its ``sigma_hz`` includes that factor).
    noise_band_hz : (float, float), optional
        ``(centre, half_width)``: estimate the noise only from bins within this band
        (e.g. the flat part of a decimated channel's passband). Default: the whole block.

    Returns
    -------
    list of ToneEstimate
        One per entry of ``centers_hz``.

    Notes
    -----
    The noise variance comes from the median of a Hann-windowed, unpadded periodogram of
    the block: for white complex Gaussian noise ``|X_k|^2`` is exponential with mean
    ``sigma^2 sum(w^2)``, whose median is ``ln 2`` times the mean. Bins within 4 bins of
    a found line are excluded; bins within the search band are used when there are at
    least 128 of them (the median of 128 bins is good to about 11 %), else the whole
    block (or the ``noise_band_hz`` band).

    References
    ----------
    .. [1] D. C. Rife and R. R. Boorstyn, IEEE Trans. Inf. Theory IT-20(5):591-598, 1974.
    """
    fs = float(sample_rate_hz)
    if not (fs > 0 and math.isfinite(fs)):
        raise ValueError(f"{sample_rate_hz=} must be positive and finite")
    if pad < 1:
        raise ValueError(f"{pad=} must be >= 1")
    data = np.asarray(x, dtype=np.complex128).ravel()
    n = data.size
    if n < 8:
        raise ValueError(f"block of {n} samples is too short (need >= 8)")
    if isinstance(span_hz, Sequence):
        spans: list[float | None] = list(span_hz)
        if len(spans) != len(centers_hz):
            raise ValueError("span_hz must have one entry per centre")
    else:
        spans = [span_hz] * len(centers_hz)

    if window == "rect":
        taper = None
        xw = data
    elif window == "hann":
        taper = _grid(n, pad, fs)[2]
        xw = data * taper
    else:
        raise ValueError(f"{window=} must be 'rect' or 'hann'")
    freqs, m, hann, hann_s2, nat_f = _grid(n, pad, fs)
    nfft = freqs.size
    spec = sp_fft.fft(xw, nfft)
    power = spec.real**2 + spec.imag**2
    gain = float(n if taper is None else taper.sum())  # coherent gain x N

    picks: list[tuple[int, float, float, float, int]] = []  # k, lo_w, hi_w, w_ref, n_searched
    for center, span in zip(centers_hz, spans):
        if center is None or span is None or span * 2 >= fs:
            region = np.arange(nfft)
            lo_w, hi_w = -math.inf, math.inf
            w_ref = 0.0
        else:
            c = _wrap1(float(center), fs)
            dist = np.abs(_wrap_hz(freqs - c, fs))
            region = np.flatnonzero(dist <= max(float(span), fs / nfft))
            if region.size == 0:
                region = np.array([int(np.argmin(dist))])
            w_ref = 2 * math.pi * c / fs
            half = 2 * math.pi * (float(span) + fs / n) / fs
            lo_w, hi_w = w_ref - half, w_ref + half
        k = int(region[np.argmax(power[region])])
        picks.append((k, lo_w, hi_w, w_ref, max(1, (region.size * n) // nfft)))

    # Noise from a Hann-windowed unpadded periodogram (low leakage from strong lines):
    # for white noise E|X_k|^2 = sigma^2 sum(w^2) and |X_k|^2 is exponential, median ln 2.
    if noise_power is None:
        nspec = sp_fft.fft(data * hann, nat_f.size)
        npow = (nspec.real**2 + nspec.imag**2) / (hann_s2 * math.log(2.0))
        if noise_band_hz is None:
            keep = np.ones(nat_f.size, dtype=bool)
        else:
            keep = np.abs(_wrap_hz(nat_f - noise_band_hz[0], fs)) <= noise_band_hz[1]
        for k, *_ in picks:
            keep &= np.abs(_wrap_hz(nat_f - freqs[k], fs)) > 4.0 * fs / n
        noise_global = float(np.median(npow[keep] if keep.sum() >= 16 else npow))
    else:
        noise_global = float(noise_power)

    out: list[ToneEstimate] = []
    for (k, lo_w, hi_w, w_ref, n_searched), center, span in zip(picks, centers_hz, spans):
        # Coarse: parabolic interpolation of |X| around the padded peak.
        km, kp = (k - 1) % nfft, (k + 1) % nfft
        a, b, c3 = math.sqrt(power[km]), math.sqrt(power[k]), math.sqrt(power[kp])
        den = a - 2 * b + c3
        delta = 0.5 * (a - c3) / den if den < 0 else 0.0
        delta = max(-0.5, min(0.5, delta))
        f0 = _wrap1(float(freqs[k]) + delta * fs / nfft, fs)
        w0 = 2 * math.pi * f0 / fs
        # keep the search window continuous around w_ref (wrap-around of the band)
        if math.isfinite(lo_w):
            w0 = w_ref + math.remainder(w0 - w_ref, 2 * math.pi)
        w, x0 = _refine(xw, m, w0, lo_w, hi_w, iterations)
        f = _wrap1(w * fs / (2 * math.pi), fs)
        amp = abs(x0) / gain
        noise = noise_global
        if noise_power is None and center is not None and span is not None:
            local = np.abs(_wrap_hz(nat_f - float(center), fs)) <= float(span)
            local &= np.abs(_wrap_hz(nat_f - f, fs)) > 4.0 * fs / n
            if local.sum() >= 128:
                noise = float(np.median(npow[local]))
        noise = max(noise, 1e-300)
        snr = amp**2 / noise
        sigma = crlb_frequency_std(n, snr, fs) * (1.0 if taper is None else _HANN_LOSS)
        threshold = max(20.0, math.log(n_searched) + 12.0)
        out.append(
            ToneEstimate(
                frequency_hz=f,
                sigma_hz=sigma,
                amplitude=amp,
                phase_rad=float(np.angle(x0)),
                snr=snr,
                noise_power=noise,
                n_samples=n,
                detected=bool(n * snr >= threshold),
            )
        )
    return out


def _row_median(values: npt.NDArray[np.float64], mask: npt.NDArray[np.bool_]) -> npt.NDArray[np.float64]:
    """Median of each row's masked entries (as ``np.median``: mean of the middle two)."""
    v = np.where(mask, values, np.inf)
    v.sort(axis=1)
    c = mask.sum(axis=1)
    r = np.arange(v.shape[0])
    lo = v[r, np.maximum(c - 1, 0) // 2]
    hi = v[r, c // 2 if v.shape[1] else 0]
    return np.asarray(0.5 * (lo + hi), dtype=np.float64)


def _derivs_rows(
    x: npt.NDArray[np.complex128], m: npt.NDArray[np.float64], w: npt.NDArray[np.float64]
) -> tuple[npt.NDArray[np.complex128], npt.NDArray[np.float64], npt.NDArray[np.float64]]:
    """:func:`_periodogram_derivs` for each row of ``x`` at its own ``w``."""
    n = m.size
    step = 32
    q = -(-n // step)
    # exp(-j w m[i]) with m[i] = m[0] + step a + b: two small exponentials, one product
    coarse = np.exp(-1j * w[:, None] * (m[0] + step * np.arange(q))[None, :])
    fine = np.exp(-1j * w[:, None] * np.arange(step)[None, :])
    e = (coarse[:, :, None] * fine[:, None, :]).reshape(w.size, q * step)[:, :n]
    z = x * e
    r = np.matmul(_moments(m), z.view(np.float64).reshape(z.shape[0], -1, 2))  # (rows, 3, 2)
    x0 = r[:, 0, 0] + 1j * r[:, 0, 1]
    x1 = r[:, 1, 1] - 1j * r[:, 1, 0]
    x2 = -(r[:, 2, 0] + 1j * r[:, 2, 1])
    d1 = 2.0 * (x0.conj() * x1).real
    d2 = 2.0 * (np.abs(x1) ** 2 + (x0.conj() * x2).real)
    return x0, d1, d2


def estimate_rows(
    x: npt.ArrayLike,
    sample_rate_hz: float,
    centers_hz: npt.ArrayLike,
    span_hz: float,
    *,
    pad: int = 2,
    iterations: int = 4,
    window: Window = "rect",
    noise_band_hz: tuple[float, float] | None = None,
) -> dict[str, npt.NDArray[Any]]:
    """:func:`estimate_tones` for one line in each of many blocks at once.

    Row ``i`` of ``x`` (blocks of equal length N) is searched within
    ``centers_hz[i] +/- span_hz``; every step is the same as :func:`estimate_tones`'s
    (coarse padded FFT peak, parabolic interpolation, Newton steps with the same
    step-halving and stopping rules, the same noise medians and detection threshold),
    vectorised over the rows.

    Returns
    -------
    dict of ndarray
        ``frequency_hz``, ``sigma_hz``, ``amplitude``, ``phase_rad``, ``snr``,
        ``noise_power`` (one value per row), ``detected`` (bool) and ``n_samples`` (int);
        and what the result depends on the centre through: ``region_cols`` (a window of
        padded-FFT bins around the centre) with ``region_inside`` (those searched) and ``tried_lo_hz`` / ``tried_hi_hz`` (the range
        of frequencies the Newton steps asked for, before clamping to the search band).

    References
    ----------
    .. [1] D. C. Rife and R. R. Boorstyn, IEEE Trans. Inf. Theory IT-20(5):591-598, 1974.
    """
    fs = float(sample_rate_hz)
    data = np.asarray(x, dtype=np.complex128)
    if data.ndim != 2 or data.shape[1] < 8:
        raise ValueError("x must be 2-D with blocks of >= 8 samples")
    rows, n = data.shape
    cen = np.asarray(centers_hz, dtype=np.float64).reshape(rows)
    span = float(span_hz)
    if not (0 < span and span * 2 < fs):
        raise ValueError(f"{span_hz=} must be positive and under fs/2")
    freqs, m, hann, hann_s2, nat_f = _grid(n, pad, fs)
    if window == "rect":
        taper = None
        xw = data
    elif window == "hann":
        taper = hann
        xw = data * taper
    else:
        raise ValueError(f"{window=} must be 'rect' or 'hann'")
    nfft = freqs.size
    spec = sp_fft.fft(xw, nfft, axis=1)
    gain = float(n if taper is None else taper.sum())
    r = np.arange(rows)
    c = (cen + fs / 2.0) % fs - fs / 2.0
    # the search region: the exact |wrap(f - c)| <= reach test, evaluated only on a
    # window of columns around each centre (the grid is uniform: everything else is out)
    reach = max(span, fs / nfft)
    half_cols = int(math.ceil(reach * nfft / fs)) + 2
    cols = (np.rint(c * nfft / fs).astype(np.int64)[:, None] + np.arange(-half_cols, half_cols + 1)[None, :]) % nfft
    inside = np.abs(_wrap_hz(freqs[cols] - c[:, None], fs)) <= reach
    g = spec[r[:, None], cols]
    gpow = g.real**2 + g.imag**2
    n_region = inside.sum(axis=1)
    k = cols[r, np.argmax(np.where(inside, gpow, -np.inf), axis=1)]
    empty = n_region == 0
    if empty.any():  # no bin within reach: the nearest one
        k[empty] = cols[empty, np.argmin(np.abs(_wrap_hz(freqs[cols[empty]] - c[empty, None], fs)), axis=1)]
    n_searched = np.maximum(1, (np.maximum(n_region, 1) * n) // nfft)
    w_ref = 2 * math.pi * c / fs
    half = 2 * math.pi * (span + fs / n) / fs
    lo_w, hi_w = w_ref - half, w_ref + half

    nspec = sp_fft.fft(data * hann, nat_f.size, axis=1)
    npow = (nspec.real**2 + nspec.imag**2) / (hann_s2 * math.log(2.0))
    n_nat = nat_f.size
    band = np.ones(n_nat, dtype=bool) if noise_band_hz is None else \
        np.abs(_wrap_hz(nat_f - noise_band_hz[0], fs)) <= noise_band_hz[1]
    keep = np.broadcast_to(band, (rows, n_nat)).copy()
    # bins within 4 natural bins of the found line are left out (exact test, near columns only)
    near = (np.rint(freqs[k] * n_nat / fs).astype(np.int64)[:, None] + np.arange(-7, 8)[None, :]) % n_nat
    keep[r[:, None], near] &= np.abs(_wrap_hz(nat_f[near] - freqs[k][:, None], fs)) > 4.0 * fs / n
    enough = keep.sum(axis=1) >= 16
    noise = np.where(enough, _row_median(npow, keep), np.median(npow, axis=1))

    def pw(j: npt.NDArray[np.int64]) -> npt.NDArray[np.float64]:
        v = spec[r, j % nfft]
        return np.asarray(np.sqrt(v.real**2 + v.imag**2), dtype=np.float64)

    a, b, c3 = pw(k - 1), pw(k), pw(k + 1)
    den = a - 2 * b + c3
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = np.where(den < 0, 0.5 * (a - c3) / np.where(den < 0, den, -1.0), 0.0)
    delta = np.clip(delta, -0.5, 0.5)
    f0 = freqs[k] + delta * fs / nfft
    f0 = (f0 + fs / 2.0) % fs - fs / 2.0
    w0 = 2 * math.pi * f0 / fs
    d = w0 - w_ref
    w0 = w_ref + (d - 2 * math.pi * np.round(d / (2 * math.pi)))  # math.remainder, vectorised

    # Newton ascent (as _refine, row by row)
    bin_w = 2.0 * math.pi / n
    w = w0.copy()
    tried_lo, tried_hi = w0.copy(), w0.copy()  # every w asked for, before clamping
    x0, d1, d2 = _derivs_rows(xw, m, w)
    p = np.abs(x0) ** 2
    active = np.ones(rows, dtype=bool)
    for _ in range(iterations):
        if not active.any():
            break
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(d2 < 0, -d1 / np.where(d2 < 0, d2, -1.0), np.copysign(0.05 * bin_w, d1))
        step = np.clip(step, -0.5 * bin_w, 0.5 * bin_w)
        accepted = np.zeros(rows, dtype=bool)
        pending = active.copy()
        for _halving in range(6):
            idx = np.flatnonzero(pending)
            if idx.size == 0:
                break
            want = w[idx] + step[idx]
            tried_lo[idx] = np.minimum(tried_lo[idx], want)
            tried_hi[idx] = np.maximum(tried_hi[idx], want)
            w_new = np.minimum(hi_w[idx], np.maximum(lo_w[idx], want))
            x0n, d1n, d2n = _derivs_rows(xw[idx], m, w_new)
            pn = np.abs(x0n) ** 2
            ok = pn >= p[idx]
            good = idx[ok]
            w[good], x0[good], d1[good], d2[good], p[good] = w_new[ok], x0n[ok], d1n[ok], d2n[ok], pn[ok]
            accepted[good] = True
            pending[good] = False
            step[idx[~ok]] *= 0.5
        active &= accepted & (np.abs(step) >= 1e-9 * bin_w)

    f = (w * fs / (2 * math.pi) + fs / 2.0) % fs - fs / 2.0
    amp = np.abs(x0) / gain
    if 2.0 * span * n_nat / fs + 1.0 >= 128:  # else no row can have 128 local bins
        local = np.abs(_wrap_hz(nat_f[None, :] - cen[:, None], fs)) <= span
        local &= np.abs(_wrap_hz(nat_f[None, :] - f[:, None], fs)) > 4.0 * fs / n
        wide = local.sum(axis=1) >= 128
        if wide.any():
            noise = np.where(wide, _row_median(npow, local), noise)
    noise = np.maximum(noise, 1e-300)
    snr = amp**2 / noise
    sigma = np.sqrt(6.0 * fs**2 / ((2.0 * math.pi) ** 2 * snr * n * (n * n - 1.0)))
    sigma = sigma * (1.0 if taper is None else _HANN_LOSS)
    threshold = np.maximum(20.0, np.log(n_searched) + 12.0)
    return {
        "frequency_hz": f,
        "sigma_hz": sigma,
        "amplitude": amp,
        "phase_rad": np.angle(x0),
        "snr": snr,
        "noise_power": noise,
        "detected": n * snr >= threshold,
        "n_samples": np.full(rows, n),
        "region_cols": cols,
        "region_inside": inside,
        "tried_lo_hz": tried_lo * fs / (2 * math.pi),
        "tried_hi_hz": tried_hi * fs / (2 * math.pi),
    }


def same_search(
    result: dict[str, npt.NDArray[Any]],
    sample_rate_hz: float,
    n: int,
    old_hz: npt.NDArray[np.float64],
    new_hz: npt.NDArray[np.float64],
    span_hz: float,
    pad: int = 2,
) -> npt.NDArray[np.bool_]:
    """Rows of an :func:`estimate_rows` result that searching around ``new_hz`` instead
    of ``old_hz`` would leave unchanged: the same searched bins (same column window and
    the same bins inside it) and no Newton step reaching either search band's edge
    (then every number computed is the same)."""
    fs = float(sample_rate_hz)
    freqs, _, _, _, nat_f = _grid(n, pad, fs)
    nfft = freqs.size
    if 2.0 * float(span_hz) * nat_f.size / fs + 1.0 >= 128:  # the local noise depends on the centre
        return np.zeros(np.asarray(old_hz).size, dtype=bool)
    reach = max(float(span_hz), fs / nfft)
    c_old = (np.asarray(old_hz, dtype=np.float64) + fs / 2.0) % fs - fs / 2.0
    c_new = (np.asarray(new_hz, dtype=np.float64) + fs / 2.0) % fs - fs / 2.0
    same = np.rint(c_new * nfft / fs) == np.rint(c_old * nfft / fs)  # same column window
    cols = result["region_cols"]
    inside_new = np.abs(_wrap_hz(freqs[cols] - c_new[:, None], fs)) <= reach
    same &= np.all(inside_new == result["region_inside"], axis=1)
    half = float(span_hz) + fs / n
    for c in (c_old, c_new):
        same &= (result["tried_lo_hz"] > c - half) & (result["tried_hi_hz"] < c + half)
    return np.asarray(same, dtype=bool)


def estimate_tone(
    x: npt.ArrayLike,
    sample_rate_hz: float,
    *,
    center_hz: float | None = None,
    span_hz: float | None = None,
    pad: int = 2,
    iterations: int = 4,
    noise_power: float | None = None,
    window: Window = "rect",
) -> ToneEstimate:
    """Estimate the frequency of the strongest line (optionally within a band).

    Parameters
    ----------
    x : array_like of complex
        One block of complex baseband samples, full-scale units, N >= 8.
    sample_rate_hz : float
        Sample rate fs, Hz.
    center_hz, span_hz : float, optional
        Search only within ``center_hz +/- span_hz`` (Hz offsets from the capture centre);
        both None searches the whole band.
    pad : int
        Zero-padding factor of the coarse FFT.
    iterations : int
        Maximum Newton steps.
    noise_power : float, optional
        Known total complex noise variance per sample (FS^2); estimated when None.
    window : {"rect", "hann"}
        Taper; see :func:`estimate_tones`.

    Returns
    -------
    ToneEstimate
        Frequency (Hz), its 1-sigma from the Cramér–Rao bound at the estimated SNR,
        amplitude, phase, SNR and a detection flag.

    Notes
    -----
    Coarse zero-padded periodogram peak, parabolic interpolation, then Newton steps
    maximising the periodogram (the maximum-likelihood estimate for one tone in white
    Gaussian noise, Rife and Boorstyn 1974 [1]_). Its variance meets the bound above the
    threshold SNR (a Monte-Carlo test in ``tests/test_tone.py`` checks within 2x).

    References
    ----------
    .. [1] D. C. Rife and R. R. Boorstyn, "Single-tone parameter estimation from
       discrete-time observations", IEEE Trans. Inf. Theory IT-20(5):591-598, 1974.

    Examples
    --------
    >>> import numpy as np
    >>> fs = 8000.0
    >>> t = np.arange(4000) / fs
    >>> est = estimate_tone(np.exp(2j * np.pi * 1234.567 * t), fs, noise_power=1e-6)
    >>> round(est.frequency_hz, 3)
    1234.567
    """
    if (center_hz is None) != (span_hz is None) and span_hz is not None:
        raise ValueError("span_hz needs center_hz")
    return estimate_tones(
        x,
        sample_rate_hz,
        [center_hz],
        span_hz=span_hz if center_hz is not None else None,
        pad=pad,
        iterations=iterations,
        noise_power=noise_power,
        window=window,
    )[0]


def find_lines(
    freqs_hz: npt.ArrayLike,
    psd: npt.ArrayLike,
    noise_psd: float,
    *,
    min_ratio_db: float = 15.0,
    max_lines: int = 16,
    lobe_bins: int = 3,
    min_contrast_db: float | None = None,
    contrast_bins: int = 25,
) -> list[LinePeak]:
    """Discrete lines in an averaged PSD, strongest first.

    Parameters
    ----------
    freqs_hz : array_like
        Ascending bin frequencies, Hz.
    psd : array_like
        Power spectral density, linear FS^2/Hz, same length.
    noise_psd : float
        Noise floor PSD, FS^2/Hz (> 0).
    min_ratio_db : float
        A local maximum counts as a line when its PSD is at least this far above the
        noise floor, dB.
    max_lines : int
        At most this many lines are returned.
    lobe_bins : int
        Half-width (bins) over which a line's power is summed, and the minimum spacing
        between two reported lines.
    min_contrast_db : float, optional
        Also require the peak to stand this far above the median PSD of its surroundings
        on each side (``lobe_bins`` .. ``contrast_bins`` bins away): a discrete line does;
        a local maximum of a continuous spectrum (voice, noise modulation) or the top of a
        filter's band edge does not.
    contrast_bins : int
        Outer half-width of those surroundings, bins.

    Returns
    -------
    list of LinePeak
        Strongest first.
    """
    f = np.asarray(freqs_hz, dtype=np.float64)
    p = np.asarray(psd, dtype=np.float64)
    if f.shape != p.shape or f.ndim != 1:
        raise ValueError("freqs_hz and psd must be 1-D arrays of the same length")
    if not noise_psd > 0:
        raise ValueError(f"{noise_psd=} must be > 0")
    if p.size < 3:
        return []
    bin_hz = float(np.median(np.diff(f)))
    thresh = noise_psd * 10 ** (min_ratio_db / 10.0)
    inner = (p[1:-1] > p[:-2]) & (p[1:-1] >= p[2:]) & (p[1:-1] >= thresh)
    cand = np.flatnonzero(inner) + 1
    cand = cand[np.argsort(p[cand])[::-1]]
    taken: list[int] = []
    out: list[LinePeak] = []
    for k in cand:
        if any(abs(int(k) - j) <= 2 * lobe_bins for j in taken):
            continue
        if min_contrast_db is not None:
            left = p[max(0, k - contrast_bins) : max(0, k - lobe_bins)]
            right = p[k + lobe_bins + 1 : k + contrast_bins + 1]
            level = max((float(np.median(side)) for side in (left, right) if side.size), default=0.0)
            if p[k] < level * 10 ** (min_contrast_db / 10.0):
                continue
        taken.append(int(k))
        lo, hi = max(0, k - lobe_bins), min(p.size, k + lobe_bins + 1)
        power = float((p[lo:hi] - noise_psd).clip(min=0).sum() * bin_hz)
        ya, yb, yc = (10 * np.log10(max(v, 1e-300)) for v in p[k - 1 : k + 2])
        den = ya - 2 * yb + yc
        delta = 0.5 * (ya - yc) / den if den < 0 else 0.0
        out.append(
            LinePeak(
                frequency_hz=float(f[k] + max(-0.5, min(0.5, delta)) * bin_hz),
                power=power,
                ratio_db=float(10 * np.log10(p[k] / noise_psd)),
            )
        )
        if len(out) >= max_lines:
            break
    return out
