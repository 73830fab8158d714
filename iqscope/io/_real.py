"""Real recordings seen as complex baseband: the positive-frequency half, by fs/4 translation.

A real signal (a sound card's samples, a SigMF ``rf32_le`` / ``ri16_le`` / ``ru8`` ...
dataset, or one channel of an I/Q file whose other channel is dead) has a conjugate
symmetric spectrum: everything at ``+f`` has a mirror image at ``-f``. Analysed as I/Q, that
mirror would be graded as a second sideband, an image or a spur. :class:`RealAsComplex`
hands out instead the complex baseband of the band ``0 .. fs/2`` of the real signal, with
no mirror:

1. translate by ``-fs/4``: ``y[n] = r[n] exp(-j pi n / 2)`` (the factors are 1, -j, -1, j),
   which moves the band ``0 .. fs/2`` to ``-fs/4 .. fs/4``;
2. low-pass to ``|f| < fs/4`` with a linear-phase (zero-delay, centred) Kaiser-window FIR,
   which removes the mirror (now at ``-fs/2 .. -fs/4`` and ``fs/4 .. fs/2``);
3. keep every second sample (rate ``fs/2``) and double the amplitude, so that a real
   sinusoid ``A cos(w n)`` becomes the complex tone ``A exp(j w' n)``: a full-scale real
   sine reads 0 dBFS, as a full-scale complex tone does.

This is quadrature demodulation by ``fs/4`` translation (R. G. Lyons, *Understanding
Digital Signal Processing*, 3rd ed., Prentice Hall 2011, section 8.9, "fs/4 down-
conversion"); the FIR is a windowed-sinc design (``scipy.signal.firwin``, Kaiser window,
J. F. Kaiser 1974). With 255 taps and beta 10 the stopband is below -100 dB; the
transition band, about 0.03 fs wide, sits at the two edges of the new band (real
frequencies within about 0.015 fs of 0 Hz and of fs/2), where the figures are not
reliable.

Frequencies: the new capture centre is real ``fs/4``. When the real recording's centre
frequency is known (the RF frequency of its 0 Hz), the new centre is that plus ``fs/4``;
offsets given on the command line (``--carrier`` within +/- the new fs/2) are from the new
centre. Clipping is not looked for in the translated samples (the filter smooths the
converter's rails away).
"""

from __future__ import annotations

from functools import lru_cache
from typing import Final

import numpy as np
import numpy.typing as npt

from ._recording import Recording, Segment

__all__ = ["RealAsComplex", "FIR_TAPS", "as_complex_view"]

#: Length of the low-pass FIR (odd: a centred, zero-delay filter).
FIR_TAPS: Final = 255
#: Kaiser window parameter (stopband below -100 dB).
FIR_BETA: Final = 10.0
_HALF: Final = FIR_TAPS // 2


@lru_cache(maxsize=1)
def _taps() -> npt.NDArray[np.float64]:
    from scipy.signal import firwin

    h: npt.NDArray[np.float64] = np.asarray(firwin(FIR_TAPS, 0.5, window=("kaiser", FIR_BETA)), dtype=np.float64)
    return h


class RealAsComplex(Recording):
    """The complex baseband (rate fs/2, centre fs/4) of the positive-frequency half of a
    real recording (see the module docstring). ``inner`` hands out the real samples as the
    real part of complex samples (the imaginary part is ignored); ``channel`` picks the
    part to use (``"real"`` or ``"imag"``, for an I/Q file with one dead channel)."""

    def __init__(self, inner: Recording, *, channel: str = "real", datatype: str | None = None) -> None:
        self.inner = inner
        self._channel = channel
        fs = inner.sample_rate_hz
        center = None if inner.center_frequency_hz is None else inner.center_frequency_hz + fs / 4.0
        segments = tuple(
            Segment(s.start // 2, None if s.center_frequency_hz is None else s.center_frequency_hz + fs / 4.0,
                    s.datetime)
            for s in inner.segments
        )
        super().__init__(
            path=inner.path,
            format=inner.format,
            datatype=datatype or inner.datatype,
            sample_rate_hz=fs / 2.0,
            n_samples=inner.n_samples // 2,
            center_frequency_hz=center,
            metadata=inner.metadata,
            segments=segments,
            annotations=inner.annotations,
        )
        if datatype is None and inner.datatype.startswith("r"):
            self._warnings = (
                f"real samples ({inner.datatype}): analysed from their positive-frequency half, as complex "
                f"baseband at {fs / 2:g} Hz centred on real {fs / 4:g} Hz (fs/4 translation); offsets are from "
                "that centre",
            )

    @property
    def warnings(self) -> tuple[str, ...]:
        return (*self.inner.warnings, *self._warnings)

    @warnings.setter
    def warnings(self, value: tuple[str, ...]) -> None:
        self._warnings = tuple(value)

    @property
    def is_float(self) -> bool:
        return False  # the translated samples are filtered: no scale or rail test on them

    @property
    def clip_level(self) -> float:
        return float("inf")

    @property
    def nonfinite_count(self) -> int:
        return self.inner.nonfinite_count

    def set_full_scale(self, value: float | None) -> None:
        self.inner.set_full_scale(value)
        self.full_scale = self.inner.full_scale

    def _read(self, start: int, count: int) -> npt.NDArray[np.complex64]:
        h = _taps()
        lo = 2 * start - _HALF
        hi = 2 * (start + count - 1) + _HALF + 1
        a, b = max(0, lo), min(self.inner.n_samples, hi)
        raw = self.inner.read(a, b - a)
        part = raw.imag if self._channel == "imag" else raw.real
        r = np.zeros(hi - lo, np.float64)
        r[a - lo : a - lo + part.size] = part
        n = np.arange(lo, hi)
        rot = np.array([1.0, -1j, -1.0, 1j])[n % 4]  # exp(-j pi n / 2)
        y = r * rot
        from scipy.signal import oaconvolve

        out = oaconvolve(y, h, mode="valid")[::2] * 2.0
        return np.asarray(out[:count], dtype=np.complex64)

    def close(self) -> None:
        self.inner.close()


def as_complex_view(rec: Recording) -> Recording:
    """``rec`` itself for a complex datatype; its :class:`RealAsComplex` view for a real one."""
    if rec.datatype.startswith("r"):
        return RealAsComplex(rec)
    return rec
