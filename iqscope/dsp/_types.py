"""Plain data types shared by the dsp functions and their callers."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

__all__ = ["Spectrum"]


@dataclass(frozen=True)
class Spectrum:
    """An averaged, calibrated, two-sided power spectral density of complex baseband.

    Frequencies are offsets from the capture centre, ascending (fftshifted). Integrating
    ``psd`` (linear, FS²/Hz) times ``bin_hz`` over all bins gives the mean power in FS²
    (``|x| = 1`` is 0 dBFS). A line's power is the PSD integrated over the window's main
    lobe, or ``peak PSD x enbw_hz`` for a line on a bin centre.
    """

    freqs_hz: npt.NDArray[np.float64]
    """Bin centre frequencies, Hz offset from the capture centre, ascending."""
    psd: npt.NDArray[np.float64]
    """Power spectral density, linear, full-scale² per Hz (0 dBFS/Hz = 1)."""
    bin_hz: float
    """Bin spacing fs/N, Hz."""
    enbw_hz: float
    """Equivalent noise bandwidth of the window, Hz (the resolution bandwidth)."""
    window: str
    """Window name."""
    n_averages: int
    """Number of periodograms averaged (sets the estimate's variance)."""
    sample_rate_hz: float
    """Sample rate of the data, Hz."""

    @property
    def psd_dbfs_per_hz(self) -> npt.NDArray[np.float64]:
        """The PSD in dBFS/Hz (floors at -400 dB instead of -inf)."""
        return 10.0 * np.log10(np.maximum(self.psd, 1e-40))
