"""Calibrated, streaming, averaged periodograms of complex baseband (Welch's method).

A :class:`SpectrumAccumulator` takes sample blocks of any length, cuts them into
windowed segments of ``nfft`` samples overlapping by ``overlap``, and adds their
periodograms; :meth:`SpectrumAccumulator.result` returns the two-sided power spectral
density in full-scale units squared per hertz (FS^2/Hz, ``|x| = 1`` is 0 dBFS), scaled as
in Heinzel et al. 2002 section 9 [1]_ for complex data (no factor 2):

.. math:: \\mathrm{PSD}_m = \\frac{\\langle |Y_m|^2 \\rangle}{f_s\\,S_2},
          \\qquad \\mathrm{PS}_m = \\frac{\\langle |Y_m|^2 \\rangle}{S_1^2}
          = \\mathrm{PSD}_m \\cdot \\mathrm{ENBW},
          \\qquad \\mathrm{ENBW} = \\frac{f_s S_2}{S_1^2}

with ``Y_m`` the DFT of a windowed segment, ``S1 = sum w`` and ``S2 = sum w^2``. Summing
``PSD * fs / nfft`` over all bins gives the mean power (Parseval), whatever the window, so
a line's power is its PSD integrated over the window's main lobe. Segments are not
detrended: a receiver's DC offset is something we want to see.

Speed: many segments go through one batched complex64 FFT (``scipy.fft`` with worker
threads) over a strided view of the block, and their squared magnitudes are summed in
float32 per batch, in float64 across batches.

References
----------
.. [1] G. Heinzel, A. Ruediger, R. Schilling, "Spectrum and spectral density estimation
   by the Discrete Fourier transform (DFT), including a comprehensive list of window
   functions and some new flat-top windows", Max-Planck-Institut fuer
   Gravitationsphysik, Hannover, 2002, section 9 (scaling), section 10 (overlap).
.. [2] P. D. Welch, "The use of fast Fourier transform for the estimation of power
   spectra: a method based on time averaging over short, modified periodograms",
   IEEE Trans. Audio Electroacoust., vol. AU-15, no. 2, pp. 70-73, June 1967.
.. [3] D. B. Percival and A. T. Walden, *Spectral Analysis for Physical Applications*,
   Cambridge University Press, 1993, section 6.17 (equivalent degrees of freedom of
   Welch's overlapped segment averaging, eq. 292b).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Final

import numpy as np
import numpy.typing as npt
from scipy import fft as sp_fft

from ._types import Spectrum
from ._windows import get_window

__all__ = [
    "AveragedSpectrum",
    "SpectrumAccumulator",
    "SubbandCapture",
    "subband_decimation",
    "averaged_spectrum",
    "equivalent_averages",
    "n_segments",
]

#: Samples per batched FFT call (complex64: 16 MB of input per call).
_BATCH_SAMPLES: Final = 1 << 21


@dataclass(frozen=True)
class AveragedSpectrum(Spectrum):
    """A :class:`Spectrum` that also knows how its averages overlapped.

    ``equivalent_averages`` is the number of independent periodograms the average is
    worth (Welch 1967 [2]_, Percival and Walden 1993 [3]_ eq. 292b): the chi-square
    degrees of freedom of each PSD bin are ``2 * equivalent_averages``.
    """

    overlap: float = 0.0
    """Fraction of ``nfft`` by which consecutive segments overlap."""
    equivalent_averages: float = 0.0
    """Independent-equivalent number of averages (0: unknown, use ``n_averages``)."""
    nfft: int = 0
    """Segment (FFT) length, samples."""

    @property
    def dof_averages(self) -> float:
        """Equivalent averages if known, else the raw count (at least 1)."""
        k = self.equivalent_averages if self.equivalent_averages > 0 else float(self.n_averages)
        return max(1.0, k)


def n_segments(n_samples: int, nfft: int, overlap: float = 0.5) -> int:
    """Number of whole segments of ``nfft`` samples a run of ``n_samples`` gives."""
    step = _step(nfft, overlap)
    if n_samples < nfft:
        return 0
    return (n_samples - nfft) // step + 1


def _step(nfft: int, overlap: float) -> int:
    if not 0.0 <= overlap < 1.0:
        raise ValueError(f"{overlap=} must be in [0, 1)")
    return max(1, int(round(nfft * (1.0 - overlap))))


def equivalent_averages(n_averages: int, window: str, nfft: int, overlap: float) -> float:
    """Independent-equivalent number of averaged periodograms of a white-noise input.

    .. math:: K_{eq} = K \\Big/ \\Big(1 + 2\\sum_{j=1}^{K-1}(1 - j/K)\\,\\rho^2(j)\\Big)

    with ``rho(j) = sum w[n] w[n + j s] / S2`` the window's overlap correlation at a shift
    of ``j`` steps ``s`` (Welch 1967 [2]_; Percival and Walden 1993 [3]_ eq. 292b).

    Parameters
    ----------
    n_averages : int
        Number of segments averaged, K.
    window, nfft, overlap
        Window name, segment length and overlap fraction.

    Returns
    -------
    float
        ``K_eq`` (equal to ``K`` without overlap); 0 when ``K`` is 0.

    Examples
    --------
    >>> round(equivalent_averages(100, "hann", 1024, 0.5), 2)   # rho(1) = 0.1667
    94.79
    """
    k = int(n_averages)
    if k <= 0:
        return 0.0
    w = get_window(window, nfft)
    step = _step(nfft, overlap)
    s2 = float(np.dot(w, w))
    total = 0.0
    j = 1
    while j < k and j * step < nfft:
        shift = j * step
        rho = float(np.dot(w[: nfft - shift], w[shift:])) / s2
        total += (1.0 - j / k) * rho * rho
        j += 1
    return k / (1.0 + 2.0 * total)


def subband_decimation(nfft: int, step: int, sample_rate_hz: float, min_rate_hz: float) -> int:
    """Largest decimation ``D`` a :class:`SubbandCapture` can use with output rate >= ``min_rate_hz``.

    ``D`` must divide the segment step (half the segment: 50 % overlap) so that ``nfft / D``
    bins are an even number; 0 when no ``D >= 2`` fits.
    """
    if 2 * step != nfft:
        return 0
    best = 0
    for d in range(2, step + 1):
        if sample_rate_hz / d < min_rate_hz:
            break
        if step % d == 0:
            best = d
    return best


class SubbandCapture:
    """A narrow band of the recording, decimated, rebuilt from a Welch pass's FFTs.

    The pass cuts the stream into segments of ``N`` samples overlapping by half
    (``step = N/2``), windows them with a periodic cosine-sum window ``w`` and takes their
    DFTs ``Y_m[k]``. For a band of ``M = N/D`` bins centred on bin ``k_c`` the inverse
    ``M``-point DFT of those bins, divided by ``D``, is the windowed segment
    ``w[n] x[m N/2 + n]`` band-limited to the ``M`` bins, mixed down by ``k_c`` bins and
    sampled every ``D`` samples (exact when the windowed segment has nothing outside
    the band). Overlap-adding the segments gives ``x(n) c(n)`` with
    ``c(n) = w(n) + w(n + N/2)`` (for Blackman-Harris between 0.44 and 1: never near
    zero), so dividing by ``c`` gives the band of ``x`` itself — weighted overlap-add
    synthesis of a short-time Fourier transform (Crochiere 1980; Allen and Rabiner 1977).

    What comes out: ``x`` mixed down by ``centre_hz`` (the centre bin's frequency) at
    ``sample_rate_hz / D``, from sample ``N/2`` of the pass on (before it only one
    segment covers a sample, and ``w`` is near zero at the start). A component of ``x``
    more than the window's main-lobe half-width (4 bins for Blackman-Harris) inside the
    band edges comes out with gain 1; one more than that outside them is rejected by
    the window's sidelobes (-92 dB for Blackman-Harris); in between it is distorted. It
    costs one ``M``-point inverse FFT per segment on top of the pass.

    Parameters
    ----------
    nfft : int
        Segment length ``N`` of the pass (even).
    sample_rate_hz : float
        Sample rate of the pass, Hz.
    window : str
        The pass's window (periodic; see :func:`iqscope.dsp.get_window`).
    centre_hz : float
        Frequency (Hz offset) to centre the band on; rounded to a bin.
    decimation : int
        ``D``: divides ``N/2`` (see :func:`subband_decimation`).
    capacity : int
        Output samples to reserve at once (e.g. the recording's length / ``D``): the
        band is then written in place instead of joined from pieces at the end.

    References
    ----------
    .. [1] R. E. Crochiere, "A weighted overlap-add method of short-time Fourier
       analysis/synthesis", IEEE Trans. ASSP 28(1):99-102, 1980 (from memory).
    .. [2] J. B. Allen and L. R. Rabiner, "A unified approach to short-time Fourier
       analysis and synthesis", Proc. IEEE 65(11):1558-1564, 1977 (from memory).
    """

    def __init__(self, nfft: int, sample_rate_hz: float, window: str, centre_hz: float, decimation: int,
                 capacity: int = 0) -> None:
        n, d = int(nfft), int(decimation)
        if n % 2 or d < 1 or (n // 2) % d:
            raise ValueError(f"decimation {d} must divide nfft/2 = {n / 2:g}")
        self.nfft = n
        self.decimation = d
        self.n_bins = n // d
        self.bin_hz = float(sample_rate_hz) / n
        self.sample_rate_hz = float(sample_rate_hz) / d
        k_c = int(round(float(centre_hz) / self.bin_hz))
        self.centre_hz = k_c * self.bin_hz
        self._k_c = k_c
        offs = np.rint(np.fft.fftfreq(self.n_bins, 1.0 / self.n_bins)).astype(np.int64)
        self.bins = (k_c + offs) % n
        """FFT (unshifted) indices of the band, in inverse-FFT order."""
        w = get_window(window, n)
        half = self.n_bins // 2
        c = w[: n // 2 : d] + w[n // 2 :: d]
        self._inv_c = (1.0 / (d * c)).astype(np.float32)[:half]
        self._prev: npt.NDArray[np.complex64] | None = None
        self._parts: list[npt.NDArray[np.complex64]] = []
        self._store = np.empty(max(0, int(capacity)), np.complex64)
        self._filled = 0
        self.start_sample = n // 2
        """Pass sample at which the output starts."""

    @property
    def n_samples(self) -> int:
        """Output samples so far."""
        return self._filled + sum(p.size for p in self._parts)

    def _emit(self, out: npt.NDArray[np.complex64]) -> None:
        flat = out.ravel()
        if not self._parts and self._filled + flat.size <= self._store.size:
            self._store[self._filled : self._filled + flat.size] = flat
            self._filled += flat.size
        else:
            self._parts.append(flat)

    def add(self, bins: npt.NDArray[np.complex64], first_segment: int) -> None:
        """Add the band bins (rows: consecutive segments from ``first_segment``)."""
        b = bins.shape[0]
        if b == 0:
            return
        u = sp_fft.ifft(bins, axis=1, workers=1).astype(np.complex64, copy=False)
        if self._k_c % 2:
            # segment m starts at m N/2: its local mix differs from the global one by (-1)^(k_c m)
            sign = np.where((first_segment + np.arange(b)) % 2 == 1, -1.0, 1.0).astype(np.float32)
            u *= sign[:, None]
        half = self.n_bins // 2
        h1, h2 = u[:, :half], u[:, half:]
        out = h1.copy()
        if self._prev is not None:
            out[0] += self._prev
            out[1:] += h2[:-1]
            out *= self._inv_c
            self._emit(out)
        elif b > 1:
            out = out[1:]
            out += h2[:-1]
            out *= self._inv_c
            self._emit(out)
        self._prev = h2[-1].copy()

    def samples(self) -> npt.NDArray[np.complex64]:
        """The band so far, complex64 at ``sample_rate_hz`` (see the class notes)."""
        head = self._store[: self._filled]
        if not self._parts:
            return head
        self._parts = [np.concatenate([head, *self._parts])]
        self._store, self._filled = np.empty(0, np.complex64), 0
        return self._parts[0]


class SpectrumAccumulator:
    """Streaming Welch estimate of the two-sided PSD of complex baseband.

    Parameters
    ----------
    nfft : int
        Segment length (samples); the bin spacing is ``sample_rate_hz / nfft``.
    sample_rate_hz : float
        Sample rate, Hz.
    window : str
        Window name (default ``"blackmanharris"``: 4-term Blackman-Harris, -92 dB
        sidelobes, Harris 1978).
    overlap : float
        Fraction of a segment shared with the next, in [0, 1) (default 0.5).
    workers : int
        Threads for ``scipy.fft`` (-1: all cores).

    Notes
    -----
    ``update`` keeps the samples that do not yet fill a segment, so the result does
    not depend on how the stream is cut into blocks. A trailing part shorter than one
    segment is not used. ``take_partial`` returns the periodogram sum since its last
    call, which is how the pipeline builds a spectrogram from the same FFTs.

    Examples
    --------
    >>> import numpy as np
    >>> acc = SpectrumAccumulator(256, 1000.0, window="hann")
    >>> n = np.arange(4096)
    >>> acc.update(0.5 * np.exp(2j * np.pi * 125.0 * n / 1000.0))   # tone on a bin centre
    31
    >>> s = acc.result()
    >>> round(float(s.psd.max() * s.enbw_hz), 6)   # its power, 0.5^2
    0.25
    """

    def __init__(
        self,
        nfft: int,
        sample_rate_hz: float,
        window: str = "blackmanharris",
        overlap: float = 0.5,
        workers: int = -1,
    ) -> None:
        if int(nfft) != nfft or nfft < 1:
            raise ValueError(f"{nfft=} must be an integer >= 1")
        if not (math.isfinite(sample_rate_hz) and sample_rate_hz > 0):
            raise ValueError(f"{sample_rate_hz=} must be finite and > 0")
        self.nfft = int(nfft)
        self.sample_rate_hz = float(sample_rate_hz)
        self.window = window
        self.overlap = float(overlap)
        self.step = _step(self.nfft, self.overlap)
        self.workers = workers
        w = get_window(window, self.nfft)
        self._w32 = w.astype(np.float32)
        self._s1 = float(w.sum())
        self._s2 = float(np.dot(w, w))
        self._sum = np.zeros(self.nfft, np.float64)
        self._partial = np.zeros(self.nfft, np.float64)
        self._partial_count = 0
        self._count = 0
        self._tail = np.zeros(0, np.complex64)
        self._batch = max(1, _BATCH_SAMPLES // self.nfft)
        self._captures: list[SubbandCapture] = []
        self._buf = np.zeros((0, self.nfft), np.complex64)

    def capture(self, band: SubbandCapture) -> None:
        """Feed ``band`` with the DFTs of every segment from now on (see :class:`SubbandCapture`)."""
        if band.nfft != self.nfft or abs(band.bin_hz - self.bin_hz) > 1e-9 * self.bin_hz:
            raise ValueError("the band's segment length differs from the accumulator's")
        self._captures.append(band)

    @property
    def n_averages(self) -> int:
        """Segments accumulated so far."""
        return self._count

    @property
    def bin_hz(self) -> float:
        return self.sample_rate_hz / self.nfft

    @property
    def enbw_hz(self) -> float:
        """Equivalent noise bandwidth ``fs S2 / S1^2`` of the window, Hz."""
        return self.sample_rate_hz * self._s2 / self._s1**2

    def update(self, block: npt.ArrayLike) -> int:
        """Add the segments that ``block`` completes; return how many were added."""
        x = np.asarray(block)
        if x.dtype != np.complex64:
            x = x.astype(np.complex64)
        x = x.ravel()
        if self._tail.size:
            x = np.concatenate((self._tail, x))
        nfft, step = self.nfft, self.step
        if x.size < nfft:
            self._tail = x.copy()
            return 0
        nseg = (x.size - nfft) // step + 1
        view = np.lib.stride_tricks.sliding_window_view(x, nfft)[::step]
        rows = min(self._batch, nseg)
        if self._buf.shape[0] < rows:
            # reused between calls: fresh multi-megabyte arrays cost page faults each time
            self._buf = np.empty((rows, nfft), np.complex64)
        for s in range(0, nseg, self._batch):
            seg = view[s : s + self._batch]
            y = np.multiply(seg, self._w32, out=self._buf[: seg.shape[0]])
            y = sp_fft.fft(y, axis=1, workers=self.workers, overwrite_x=True)
            for band in self._captures:
                band.add(y[:, band.bins], self._count + s)
            # |Y|^2 summed over the batch: square the float32 view in place, sum the rows,
            # then add the real and imaginary halves
            f = y.view(np.float32)
            np.multiply(f, f, out=f)
            col = f.sum(axis=0)
            self._partial += col[0::2]
            self._partial += col[1::2]
        self._count += nseg
        self._partial_count += nseg
        rest = x[nseg * step :]
        self._tail = rest.copy() if rest.size else np.zeros(0, np.complex64)
        return nseg

    def _flush_partial(self) -> None:
        if self._partial_count:
            self._sum += self._partial
            self._partial[:] = 0.0

    def take_partial(self) -> tuple[npt.NDArray[np.float64], int]:
        """Return (PSD of the segments added since the last call, their number).

        The PSD is scaled like :meth:`result` (FS^2/Hz) and fftshifted; an all-zero array
        with count 0 when nothing was added.
        """
        count = self._partial_count
        part = self._partial.copy()
        self._flush_partial()
        self._partial_count = 0
        if count == 0:
            return np.zeros(self.nfft), 0
        return np.fft.fftshift(part / (count * self.sample_rate_hz * self._s2)), count

    def result(self) -> AveragedSpectrum:
        """The averaged PSD so far (an all-zero PSD with ``n_averages = 0`` if empty)."""
        total = self._sum + (self._partial if self._partial_count else 0.0)
        k = self._count
        psd = total / (k * self.sample_rate_hz * self._s2) if k else np.zeros(self.nfft)
        freqs = np.fft.fftshift(np.fft.fftfreq(self.nfft, d=1.0 / self.sample_rate_hz))
        return AveragedSpectrum(
            freqs_hz=freqs.astype(np.float64),
            psd=np.fft.fftshift(psd).astype(np.float64),
            bin_hz=self.bin_hz,
            enbw_hz=self.enbw_hz,
            window=self.window,
            n_averages=k,
            sample_rate_hz=self.sample_rate_hz,
            overlap=self.overlap,
            equivalent_averages=equivalent_averages(k, self.window, self.nfft, self.overlap),
            nfft=self.nfft,
        )


def averaged_spectrum(
    blocks: Iterable[npt.ArrayLike] | npt.ArrayLike,
    nfft: int,
    sample_rate_hz: float,
    window: str = "blackmanharris",
    overlap: float = 0.5,
    workers: int = -1,
) -> AveragedSpectrum:
    """Averaged two-sided PSD (FS^2/Hz) of an array or of an iterable of blocks.

    Equivalent to ``scipy.signal.welch(x, fs, window, nperseg=nfft,
    noverlap=round(overlap * nfft), detrend=False, return_onesided=False)`` followed by
    ``fftshift`` (checked in tests/test_spectrum.py), but streaming and faster.

    See :class:`SpectrumAccumulator` for the parameters and the scaling.
    """
    acc = SpectrumAccumulator(nfft, sample_rate_hz, window=window, overlap=overlap, workers=workers)
    if isinstance(blocks, np.ndarray):
        acc.update(blocks)
    elif isinstance(blocks, Iterable):
        for b in blocks:
            acc.update(b)
    else:
        acc.update(np.asarray(blocks))
    return acc.result()
