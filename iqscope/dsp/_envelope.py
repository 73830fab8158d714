"""Envelope statistics of complex baseband: block traces and AM envelope extremes.

The envelope of a complex baseband signal is ``|x(t)|``; it does not depend on where
the carrier sits. For an AM signal ``A (1 + m cos wt)`` the trapezoid (envelope) method
gives the modulation index ``m = (Emax - Emin) / (Emax + Emin)`` [1]_, its positive peak
``Emax / Ec - 1`` and its negative peak ``1 - Emin / Ec`` with ``Ec`` the carrier (mean)
envelope. Noise outside the signal's band would inflate ``Emax`` and deflate ``Emin``,
so :class:`EnvelopeExtremes` first shifts the carrier to 0 Hz and keeps only the band
``+/- half_bandwidth_hz`` (an FFT filter with raised-cosine edges on overlapping blocks
whose edges are discarded). The envelope is the component in phase with the carrier
(the signed envelope: it goes below zero when over-modulation drives the carrier
through zero, where ``|x|`` would fold back), and the extremes are the ``q`` and
``1 - q`` quantiles of each block:
for a sinusoidal modulation the envelope dwells at its extremes (arcsine density), so
the 0.1 % quantile sits within ``1 - cos(pi * 0.001) = 5e-6`` of the true extreme.

References
----------
.. [1] S. Haykin, *Communication Systems*, 4th ed., Wiley, 2001, section 3.1
   (amplitude modulation, the percentage modulation from the envelope); the trapezoid
   method is common practice in amateur handbooks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from scipy import fft as sp_fft

__all__ = [
    "BlockEnvelope",
    "block_envelope",
    "EnvelopeExtremes",
    "envelope_modulation_index",
]


@dataclass(frozen=True)
class BlockEnvelope:
    """Mean and peak power of consecutive blocks (an envelope trace for plots)."""

    mean_power: npt.NDArray[np.float64]
    """Mean |x|^2 per block, FS^2."""
    peak_power: npt.NDArray[np.float64]
    """Max |x|^2 per block, FS^2."""
    n_samples: npt.NDArray[np.int64]
    """Samples per block."""


def block_envelope(power: npt.NDArray[np.floating], n_blocks: int) -> BlockEnvelope:
    """Split instantaneous power ``|x|^2`` into ``n_blocks`` nearly equal blocks.

    Returns the mean and peak power of each (empty blocks are dropped).
    """
    p = np.asarray(power)
    n_blocks = max(1, min(int(n_blocks), p.size))
    if p.size == 0:
        z = np.zeros(0)
        return BlockEnvelope(z, z, np.zeros(0, np.int64))
    edges = np.linspace(0, p.size, n_blocks + 1).astype(np.int64)
    starts = edges[:-1]
    counts = np.diff(edges)
    keep = counts > 0
    starts, counts = starts[keep], counts[keep]
    sums = np.add.reduceat(p, starts, dtype=np.float64)
    peaks = np.maximum.reduceat(p, starts).astype(np.float64)
    return BlockEnvelope(sums / counts, peaks, counts.astype(np.int64))


def envelope_modulation_index(e_max: float, e_min: float) -> float:
    """Trapezoid-method modulation index ``(Emax - Emin) / (Emax + Emin)`` (Haykin [1]_).

    Examples
    --------
    >>> envelope_modulation_index(1.5, 0.5)
    0.5
    """
    s = e_max + e_min
    return (e_max - e_min) / s if s > 0 else float("nan")


class EnvelopeExtremes:
    """Streaming envelope extremes of a band around a carrier (AM trapezoid method).

    Parameters
    ----------
    sample_rate_hz : float
        Sample rate, Hz.
    carrier_hz : float
        Carrier offset from the capture centre, Hz.
    half_bandwidth_hz : float
        Keep ``carrier +/- half_bandwidth_hz``.
    q : float
        Quantile taken as each block's extreme (default 0.001).
    block : int
        FFT filter block length (samples); ``guard`` samples at each end are discarded.
    """

    def __init__(
        self,
        sample_rate_hz: float,
        carrier_hz: float,
        half_bandwidth_hz: float,
        q: float = 1e-3,
        block: int = 1 << 16,
        guard: int = 1 << 11,
    ) -> None:
        self.fs = float(sample_rate_hz)
        self.f0 = float(carrier_hz)
        self.half_bw = float(half_bandwidth_hz)
        self.q = float(q)
        self.block = int(block)
        self.guard = int(guard)
        f = sp_fft.fftfreq(self.block, d=1.0 / self.fs)
        # Raised-cosine edge over 10 % of the band (at least 2 bins) to shorten the response.
        edge = max(0.1 * self.half_bw, 2.0 * self.fs / self.block)
        a = np.abs(f)
        g = np.clip((self.half_bw + edge - a) / edge, 0.0, 1.0)
        self._gain = (0.5 - 0.5 * np.cos(np.pi * g)).astype(np.float32)
        self._phase = 0.0
        self._pos = 0
        self._hi = -math.inf
        self._lo = math.inf
        self._sum = 0.0
        self._n = 0

    @property
    def step(self) -> int:
        """Samples consumed per call of :meth:`update` (blocks overlap by 2 guards)."""
        return self.block - 2 * self.guard

    def update(self, x: npt.ArrayLike, start_index: int) -> None:
        """Add a run of samples beginning at sample ``start_index`` of the recording.

        Only the middle ``len(x) - 2 guard`` samples are used (the first and last guard
        samples are transients of the filter), unless ``len(x) <= 3 guard``; feed blocks
        overlapping by ``2 guard`` (``recording.chunks(block, overlap=2 * guard)``) so the
        used parts join up.
        """
        xb = np.asarray(x, dtype=np.complex64)
        n = xb.size
        if n == 0:
            return
        t = (np.arange(n, dtype=np.float64) + start_index) / self.fs
        mix = np.exp(-2j * np.pi * self.f0 * t).astype(np.complex64)
        y = xb * mix
        if n == self.block:
            gain = self._gain
        else:
            f = sp_fft.fftfreq(n, d=1.0 / self.fs)
            edge = max(0.1 * self.half_bw, 2.0 * self.fs / max(n, 1))
            g = np.clip((self.half_bw + edge - np.abs(f)) / edge, 0.0, 1.0)
            gain = (0.5 - 0.5 * np.cos(np.pi * g)).astype(np.float32)
        z = sp_fft.ifft(sp_fft.fft(y) * gain)
        # Discard the filter's transients at both ends (the circular FFT filter wraps);
        # a block too short for that is used whole.
        g0 = self.guard if n > 3 * self.guard else 0
        zz = z[g0 : n - g0] if g0 else z
        # Signed envelope: the component in phase with the carrier (the block's mean
        # phasor). It equals |z| for m <= 1 and goes negative when the modulation
        # over-drives the carrier through zero, which |z| would fold back.
        ref = complex(np.sum(zz))
        if abs(ref) > 0:
            env = (zz * (abs(ref) / ref)).real
        else:
            env = np.abs(zz)
        if env.size == 0:
            return
        self._hi = max(self._hi, float(np.quantile(env, 1.0 - self.q)))
        self._lo = min(self._lo, float(np.quantile(env, self.q)))
        self._sum += float(env.sum(dtype=np.float64))
        self._n += env.size

    @property
    def e_max(self) -> float:
        return self._hi

    @property
    def e_min(self) -> float:
        return self._lo

    @property
    def e_mean(self) -> float:
        """Mean envelope (the carrier amplitude for symmetric modulation)."""
        return self._sum / self._n if self._n else float("nan")

    @property
    def n_samples(self) -> int:
        return self._n
