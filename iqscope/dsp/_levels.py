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

__all__ = ["Levels", "LevelAccumulator", "levels_of_blocks", "power_to_dbfs"]


def power_to_dbfs(power: float) -> float | None:
    """``10 log10(power)`` in dBFS, or None for zero power (no finite level)."""
    if not power > 0.0 or not math.isfinite(power):
        return None
    return 10.0 * math.log10(power)


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

    def __init__(self, clip_level: float = 1.0) -> None:
        if not clip_level > 0:
            raise ValueError(f"{clip_level=} must be > 0")
        self.clip_level = float(clip_level)
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

    def result(self) -> Levels:
        """The levels of everything added so far."""
        nf = self._n - self._bad
        mean_power = self._sum_power / nf if nf else 0.0
        dc = abs(self._sum / nf) ** 2 if nf else 0.0
        return Levels(
            n_samples=self._n,
            n_nonfinite=self._bad,
            peak_power=self._peak,
            mean_power=mean_power,
            dc_power=dc,
            n_clipped=self._clipped,
            clip_level=self.clip_level,
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
