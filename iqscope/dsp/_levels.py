"""Signal levels of complex baseband, accumulated block by block (pure, no I/O).

Full scale: ``|x| = 1`` is 0 dBFS, so a level in dBFS is ``10 log10(power)`` with the
power in full-scale units squared. For a long recording feed successive blocks to a
:class:`LevelAccumulator` (or call :func:`levels_of_blocks`); the result does not depend
on how the samples are split into blocks (up to float rounding).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

__all__ = ["Levels", "LevelAccumulator", "levels_of_blocks", "power_to_dbfs", "RailTracker", "Plateau", "IqCorrelation"]


def power_to_dbfs(power: float) -> float | None:
    """``10 log10(power)`` in dBFS, or None for zero power (no finite level)."""
    if not power > 0.0 or not math.isfinite(power):
        return None
    return 10.0 * math.log10(power)


#: Histogram bins of a positive float32 value: its bit pattern shifted right by this many
#: bits (8 exponent + 10 mantissa bits: relative bin width 2**-10, about 0.1 %).
_HIST_SHIFT = 13
_HIST_BINS = 1 << (31 - _HIST_SHIFT)
#: A plateau needs at least this many values on it ...
PLATEAU_MIN_COUNT = 16
#: ... and at least this fraction of the count in the window just below it. An unclipped
#: quantised sinusoid of any amplitude (the hardest case: its samples crowd near the
#: peak, arcsine law) has at most 0.33 of the window's count on its top value when the
#: window spans 16 values; clipping puts far more there (a tone 1 % over the rail: 2.6).
PLATEAU_RATIO = 0.6
#: The window below the top: 1 % of the top value, widened to hold 16 populated bins.
_WINDOW_FRACTION = 0.01
_WINDOW_MIN_BINS = 16


@dataclass(frozen=True)
class Plateau:
    """A rail of the samples: the extreme value, how many values sit on it, and whether
    that is a clipping plateau (see :class:`RailTracker`)."""

    value: float
    """The extreme value (largest component, most negative component, or largest |x|^2)."""
    count: int
    """Values exactly on it (for the envelope: within its top histogram bin, 0.1 %)."""
    below: int
    """Values in the window just below it."""
    is_plateau: bool
    """True when the values pile up on the rail: a sign of clipping."""


class RailTracker:
    """Finds clipping from the data: many values sharing the extreme value (a plateau).

    Saturation (an ADC at its end code, a converter clipping floats to a limit) gives one
    extreme value shared by many samples, and much more often than the values just below
    it. A signal that merely reaches its peak does not: its top value is shared by few
    samples (noise), or, for a noise-free quantised sinusoid, by fewer than a third of
    the samples in the window just below (arcsine amplitude law). The test is therefore
    relative, not against any full-scale value: a float file in ADC counts (|I| up to
    2047) is judged the same way as one scaled to 1.

    It tracks the largest component (positive rail), the most negative one (negative
    rail) and optionally the largest power |x|^2 (the flat top of the envelope) in one
    streaming pass: an exact count at each running extreme, and a histogram of the top
    two octaves of values (float32 bit patterns, bins of 0.1 %), bounded memory.

    The envelope test also asks that the plateau holds at most half the samples and that
    at least as many samples lie well below it (0.1 to 0.9 of the peak power): a
    constant-envelope signal (an unmodulated or keyed carrier without noise) is flat on
    top by nature, not clipped.
    """

    def __init__(self, envelope: bool = True) -> None:
        self._envelope = envelope
        self._hist = [np.zeros(_HIST_BINS, np.int64) for _ in range(3 if envelope else 2)]
        self._top = [0.0, 0.0, 0.0]
        self._n_top = [0, 0, 0]
        self._body = 0  # envelope samples in [0.1, 0.9] of the running peak, when it was seen
        self._n_values = 0

    def _add(self, k: int, v: npt.NDArray[np.float32], vmax: float) -> None:
        if not vmax > 0:
            return
        if vmax > self._top[k]:
            self._top[k] = vmax
            self._n_top[k] = int(np.count_nonzero(v == np.float32(vmax)))
        elif vmax == self._top[k]:
            self._n_top[k] += int(np.count_nonzero(v == np.float32(vmax)))
        thr = np.float32(self._top[k] / 4.0)
        sel = v[v >= thr]
        if sel.size:
            bins = np.ascontiguousarray(sel, dtype=np.float32).view(np.int32) >> _HIST_SHIFT
            lo = int(bins.min())
            counts = np.bincount(bins - lo)
            self._hist[k][lo : lo + counts.size] += counts

    def update_components(self, v: npt.NDArray[np.float32]) -> None:
        """Add the interleaved I/Q components of a block (float32, finite)."""
        if v.size == 0:
            return
        self._n_values += v.size
        vmax = float(v.max())
        vmin = float(v.min())
        self._add(0, v, vmax)
        if vmin < 0:
            self._add(1, -v, -vmin)

    def update_power(self, p: npt.NDArray[np.float32]) -> None:
        """Add the instantaneous powers |x|^2 of a block (float32)."""
        if not self._envelope or p.size == 0:
            return
        pmax = float(p.max())
        self._add(2, p, pmax)
        top = self._top[2]
        if top > 0:
            self._body += int(np.count_nonzero((p >= np.float32(0.1 * top)) & (p <= np.float32(0.9 * top))))

    def _rail(self, k: int, exact: bool) -> Plateau | None:
        top = self._top[k]
        if not top > 0:
            return None
        hist = self._hist[k]
        tb = int(np.float32(top).view(np.int32)) >> _HIST_SHIFT
        count = self._n_top[k] if exact else int(hist[tb])
        # the window below: 1 % of the top, widened to hold 16 populated bins
        lo_b = int(np.float32(top * (1.0 - _WINDOW_FRACTION)).view(np.int32)) >> _HIST_SHIFT
        populated = np.flatnonzero(hist[max(0, tb - 4096) : tb]) + max(0, tb - 4096)
        if populated.size >= _WINDOW_MIN_BINS:
            lo_b = min(lo_b, int(populated[-_WINDOW_MIN_BINS]))
        elif populated.size:
            lo_b = min(lo_b, int(populated[0]))
        below = int(hist[lo_b : tb + 1].sum()) - count
        ok = count >= PLATEAU_MIN_COUNT and count >= PLATEAU_RATIO * max(below, 0)
        return Plateau(value=top, count=count, below=max(below, 0), is_plateau=bool(ok))

    def positive_rail(self) -> Plateau | None:
        """The largest component and its plateau test (None when no positive value)."""
        return self._rail(0, True)

    def negative_rail(self) -> Plateau | None:
        """The most negative component (as a magnitude) and its plateau test."""
        return self._rail(1, True)

    def envelope_top(self, n_samples: int) -> Plateau | None:
        """The peak power and the flat-top test of the envelope (None without envelope)."""
        if not self._envelope:
            return None
        r = self._rail(2, False)
        if r is None:
            return None
        flat = r.is_plateau and r.count <= 0.5 * max(n_samples, 1) and self._body >= r.count
        return Plateau(value=r.value, count=r.count, below=r.below, is_plateau=bool(flat))

    def clipped_values(self, n_samples: int) -> tuple[int, float | None, str]:
        """How many samples sit on a detected plateau, the rail's level, and which rail.

        Returns ``(count, level, what)``: ``level`` is the (smallest) component magnitude
        of a plateau rail, or None when only the envelope is flat on top (then ``level``
        is the peak amplitude); ``what`` is ``"component"``, ``"envelope"`` or ``""``.
        The component count adds both rails' counts (a sample with I and Q both on a rail
        counts twice; capped at ``n_samples``).
        """
        rails = [r for r in (self.positive_rail(), self.negative_rail()) if r is not None and r.is_plateau]
        if rails:
            return min(n_samples, sum(r.count for r in rails)), min(r.value for r in rails), "component"
        env = self.envelope_top(n_samples)
        if env is not None and env.is_plateau:
            return min(n_samples, env.count), math.sqrt(env.value), "envelope"
        return 0, None, ""

    @property
    def max_component(self) -> float:
        """Largest component magnitude seen."""
        return max(self._top[0], self._top[1])


class IqCorrelation:
    """Streaming test of whether I and Q carry one real signal (Q = 0, I = Q, Q = k I + c).

    Sums of I, Q, I^2, Q^2 and IQ in float64 (each float32 product is exact in float64),
    in sub-blocks so memory stays bounded. :meth:`real_only` regresses the weaker channel
    on the stronger one (least squares with an intercept) and compares the residual power
    with what rounding alone leaves.
    """

    _SUB = 1 << 16

    def __init__(self) -> None:
        self.n = 0
        self.s = np.zeros(5, np.float64)  # I, Q, II, QQ, IQ

    def update(self, v: npt.NDArray[np.float32]) -> None:
        """Add interleaved float32 I/Q components."""
        for i in range(0, v.size, 2 * self._SUB):
            part = v[i : i + 2 * self._SUB].astype(np.float64)
            re, im = part[0::2], part[1::2]
            self.n += re.size
            self.s += (re.sum(), im.sum(), re @ re, im @ im, re @ im)

    def moments(self) -> tuple[float, float, float]:
        """Centred ``(var I, var Q, cov IQ)`` per sample (0s when empty)."""
        if self.n == 0:
            return 0.0, 0.0, 0.0
        n = float(self.n)
        si, sq, sii, sqq, siq = (float(x) for x in self.s)
        return max(sii / n - (si / n) ** 2, 0.0), max(sqq / n - (sq / n) ** 2, 0.0), siq / n - si * sq / n**2

    def real_only(self, quantisation_step: float = 0.0) -> tuple[bool, str, float]:
        """``(is_real_only, dominant, k)``: True when one channel is (up to a constant) k
        times the other (k = 0: a dead channel), to within float rounding (residual power
        at most 1e-12 of the dominant channel's, -120 dB: float32 storage of k I
        leaves about 1e-15) or, for integer data, the rounding of both
        channels (``2 (1 + k^2) q^2 / 12`` for a step ``q``: twice the power of two
        independent uniform roundings). ``dominant`` is ``"real"`` (I) or ``"imag"`` (Q).

        A complex receiver's independent noise in I and Q keeps the residual far above
        this, even for a signal that is conjugate-symmetric about the capture centre.
        """
        vi, vq, c = self.moments()
        dom, vd, vo = ("real", vi, vq) if vi >= vq else ("imag", vq, vi)
        if not vd > 0:
            return False, dom, 0.0
        k = c / vd
        resid = max(vo - c * c / vd, 0.0)
        allowance = 1e-12 * vd + 2.0 * (1.0 + k * k) * quantisation_step**2 / 12.0
        return bool(resid <= allowance), dom, k


@dataclass(frozen=True)
class Levels:
    """Levels of a run of complex samples (full scale 1 = 0 dBFS).

    The power figures are over the finite samples only; non-finite samples (NaN/Inf) are
    counted apart and left out.
    """

    n_samples: int
    """Samples seen, finite or not."""
    n_nonfinite: int
    """Samples with a NaN or Inf component (left out of every other figure)."""
    peak_power: float
    """Largest instantaneous power ``max |x|^2``, FS^2 (0 when no finite sample)."""
    mean_power: float
    """Mean power ``mean |x|^2``, FS^2."""
    dc_power: float
    """Power of the mean (the DC offset) ``|mean x|^2``, FS^2."""
    n_clipped: int
    """Samples with ``|Re x|`` or ``|Im x|`` at or above the clip level."""
    clip_level: float
    """Component magnitude counted as clipped (e.g. 32767/32768 for 16-bit data)."""
    n_plateau: int = 0
    """Values on a clipping plateau found in the data (:class:`RailTracker`); for float
    data this, not ``|x| >= clip_level``, is what :attr:`n_clipped` counts."""
    plateau_level: float | None = None
    """Magnitude of the plateau (the clipping rail), when one was found."""
    max_component: float = 0.0
    """Largest |Re x| or |Im x| seen."""

    @property
    def n_finite(self) -> int:
        """Samples that entered the power figures."""
        return self.n_samples - self.n_nonfinite

    @property
    def peak_dbfs(self) -> float | None:
        """Peak instantaneous power, dBFS (None when there is no power)."""
        return power_to_dbfs(self.peak_power)

    @property
    def mean_dbfs(self) -> float | None:
        """Mean power, dBFS (None when there is no power)."""
        return power_to_dbfs(self.mean_power)

    @property
    def dc_offset_dbfs(self) -> float | None:
        """Power of the DC offset ``|mean x|^2``, dBFS (None when exactly zero)."""
        return power_to_dbfs(self.dc_power)

    @property
    def clipped_fraction(self) -> float | None:
        """Fraction of finite samples at the clip level (None when there are none)."""
        if self.n_finite == 0:
            return None
        return self.n_clipped / self.n_finite


class LevelAccumulator:
    """Streaming peak, mean, DC and clipping statistics over complex blocks.

    Parameters
    ----------
    clip_level : float
        Component magnitude at or above which a sample counts as clipped; use the
        recording's ``clip_level`` (``(2**(b-1) - 1) / 2**(b-1)`` for b-bit integers, 1.0
        for float data).
    float_data : bool
        The samples come from a float file (``recording.is_float``): then only a plateau
        found in the data counts as clipping (:class:`RailTracker`), never a magnitude at
        or above ``clip_level`` alone (a float file may hold ADC counts). For integer data
        the end codes count, and so does a plateau below them (a 12-bit ADC in a 16-bit
        container).

    Notes
    -----
    complex64 blocks are worked on in float32 (``|x|^2`` to a relative 2**-23) and summed
    in float64, so the mean power carries a relative rounding error of order 1e-7; other
    blocks are worked on in float64.

    Examples
    --------
    A full-scale complex tone ``exp(j w n)`` has ``|x|^2 = 1``: peak and mean 0 dBFS.

    >>> import numpy as np
    >>> acc = LevelAccumulator(clip_level=1.0)
    >>> acc.update(np.exp(1j * 0.1 * np.arange(1000)))
    >>> round(acc.result().mean_dbfs, 6) + 0.0
    0.0
    """

    def __init__(self, clip_level: float = 1.0, *, float_data: bool = False) -> None:
        if not clip_level > 0:
            raise ValueError(f"{clip_level=} must be > 0")
        self.clip_level = float(clip_level)
        self.float_data = bool(float_data)
        self._rails = RailTracker()
        self._n = 0
        self._bad = 0
        self._peak = 0.0
        self._sum_power = 0.0
        self._sum = 0j
        self._clipped = 0

    def update(self, block: npt.ArrayLike) -> None:
        """Add one block of complex samples."""
        x = np.asarray(block).ravel()
        if x.size == 0:
            return
        self._n += x.size
        finite = np.isfinite(x)
        if not finite.all():
            self._bad += int(x.size - np.count_nonzero(finite))
            x = x[finite]
            if x.size == 0:
                return
        if x.dtype == np.complex64:
            parts = x.view(np.float32).reshape(-1, 2)  # no copy: (re, im) pairs
        else:
            parts = np.empty((x.size, 2), np.float64)
            parts[:, 0] = x.real
            parts[:, 1] = x.imag if np.iscomplexobj(x) else 0.0
        re, im = parts[:, 0], parts[:, 1]
        p = re * re + im * im
        self._peak = max(self._peak, float(p.max()))
        self._sum_power += float(p.sum(dtype=np.float64))
        self._sum += complex(float(re.sum(dtype=np.float64)), float(im.sum(dtype=np.float64)))
        over = np.abs(parts) >= parts.dtype.type(self.clip_level)
        self._clipped += int(np.count_nonzero(over[:, 0] | over[:, 1]))
        self._rails.update_components(np.asarray(parts, dtype=np.float32).ravel())
        self._rails.update_power(np.asarray(p, dtype=np.float32))

    def result(self) -> Levels:
        """The levels of everything added so far."""
        nf = self._n - self._bad
        mean_power = self._sum_power / nf if nf else 0.0
        dc = abs(self._sum / nf) ** 2 if nf else 0.0
        n_plateau, level, _ = self._rails.clipped_values(nf)
        clipped = n_plateau if self.float_data else max(self._clipped, n_plateau)
        return Levels(
            n_samples=self._n,
            n_nonfinite=self._bad,
            peak_power=self._peak,
            mean_power=mean_power,
            dc_power=dc,
            n_clipped=clipped,
            clip_level=self.clip_level,
            n_plateau=n_plateau,
            plateau_level=level,
            max_component=self._rails.max_component,
        )


def levels_of_blocks(blocks: Iterable[npt.ArrayLike], clip_level: float = 1.0) -> Levels:
    """Levels of the concatenation of ``blocks`` (see :class:`LevelAccumulator`).

    Parameters
    ----------
    blocks : iterable of array_like
        Complex samples, full scale 1, in order; e.g. ``recording.chunks(65536)``.
    clip_level : float
        Component magnitude counted as clipped (``recording.clip_level``).

    Returns
    -------
    Levels
        Peak and mean power, DC offset power, clipped and non-finite counts.

    References
    ----------
    .. [1] dBFS for complex baseband with full scale ``|x| = 1``: iqscope DESIGN.md §3
       (common practice: 0 dBFS is the power of a full-scale complex sinusoid).
    """
    acc = LevelAccumulator(clip_level)
    for b in blocks:
        acc.update(b)
    return acc.result()
