"""The :class:`Recording` type every reader returns, and an in-memory recording.

A recording is a sequence of complex baseband samples with the facts needed to put
them on a frequency axis: sample rate, centre frequency (if known), capture segments
and annotations. Samples are read on demand as complex64 blocks scaled so that
``|x| = 1`` is full scale (0 dBFS); nothing loads a whole file.

Non-finite samples (NaN or Inf in a float file) are never handed on: :meth:`Recording.read`
replaces each such sample by 0 and counts it (:attr:`Recording.nonfinite_count`); once a
read has met one, :attr:`Recording.warnings` says how many were replaced so far. A float
component beyond :data:`MAX_FLOAT_COMPONENT` (200 dB above full scale, which no receiver
delivers; damaged or mis-typed data does) is treated the same way, so that the float32
powers and spectra computed from the blocks cannot overflow to Inf/NaN.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from ..errors import MetadataError

__all__ = ["Annotation", "Segment", "Recording", "ArrayRecording", "check_sample_rate"]

#: Upper bound on a believable sample rate (Hz). No receiver we serve comes near it.
MAX_SAMPLE_RATE_HZ = 1e11
#: Lower bound (Hz): below it durations and bin counts overflow (a rate of 1e-300 Hz
#: ended in OverflowError tracebacks); no I/Q recording comes near it.
MIN_SAMPLE_RATE_HZ = 1e-3
#: Largest believable magnitude of a float sample component (full scale is 1): 1e10 is
#: 200 dB above full scale. Larger components are replaced by 0 and counted like NaN/Inf;
#: below it a 2^24-point FFT's power (<= (2^24 * 1e10)^2 ~ 3e34) stays inside float32.
MAX_FLOAT_COMPONENT = 1e10


def _suggested_full_scale(max_component: float) -> int | None:
    """A power of two when ``max_component`` looks like ADC counts (within two counts below
    ``2**k``, k = 7 .. 24): the full scale to suggest; None otherwise."""
    for k in range(7, 25):
        fs = 1 << k
        if fs - 2 <= max_component <= fs:
            return fs
    return None


@dataclass(frozen=True)
class Segment:
    """A capture segment: a run of samples taken with one receiver setting."""

    start: int
    """Index of the first sample of the segment."""
    center_frequency_hz: float | None = None
    """Receiver centre frequency during the segment, Hz (None when unknown)."""
    datetime: str | None = None
    """UTC start time as an ISO-8601 string, when known."""


@dataclass(frozen=True)
class Annotation:
    """A labelled region of a recording (SigMF annotation, or our own results)."""

    start: int
    """Index of the first sample."""
    count: int | None = None
    """Number of samples (None: to the end)."""
    freq_lower_hz: float | None = None
    """Lower edge, Hz (RF when the centre frequency is known)."""
    freq_upper_hz: float | None = None
    """Upper edge, Hz."""
    label: str = ""
    """Short label."""
    comment: str = ""
    """Free text."""
    extra: Mapping[str, Any] = field(default_factory=dict)
    """Any other keys the source carried."""


def check_sample_rate(rate: Any, path: str | Path | None = None) -> float:
    """Return ``rate`` as a float if it is a believable sample rate, else raise.

    Raises:
        MetadataError: missing, non-numeric, NaN, zero, negative, below 1 mHz or above 100 GHz.
    """
    if rate is None:
        raise MetadataError("no sample rate in the metadata; give it with --rate HZ", path)
    if isinstance(rate, bool):
        raise MetadataError(f"sample rate {rate!r} is not a number", path)
    try:
        value = float(rate)
    except (TypeError, ValueError):
        raise MetadataError(f"sample rate {rate!r} is not a number", path) from None
    if not math.isfinite(value) or value <= 0 or value > MAX_SAMPLE_RATE_HZ:
        raise MetadataError(f"sample rate {rate!r} Hz is not usable (must be > 0 and finite)", path)
    if value < MIN_SAMPLE_RATE_HZ:
        raise MetadataError(f"sample rate {rate!r} Hz is not usable (below {MIN_SAMPLE_RATE_HZ:g} Hz)", path)
    return value


class Recording:
    """Complex baseband samples with their sample rate and centre frequency.

    Subclasses implement :meth:`_read`; everything else is shared. Use a recording as a
    context manager, or call :meth:`close`, to release file handles.

    Attributes:
        path: the file the samples come from (None for in-memory recordings).
        format: reader name, e.g. ``"sigmf"``, ``"wav"``, ``"raw"``, ``"hdf5"``, ``"array"``.
        datatype: sample format in SigMF notation, e.g. ``"ci16_le"``, ``"cf32_le"``.
        sample_rate_hz: samples per second.
        center_frequency_hz: receiver centre frequency of the first segment (None if unknown).
        n_samples: number of complex samples.
        metadata: the reader's own metadata (read-only view; format-specific).
        segments: capture segments, at least one.
        annotations: annotations carried by the file.
        full_scale: the full scale stated with :meth:`set_full_scale` (``--full-scale``), in
            the file's own units (codes for integers, the stored value for floats); None
            when the datatype's own full scale is used (``2**(bits-1)`` codes, 1.0 for floats).
        swap_iq: True when I and Q are swapped on reading (:meth:`set_swap_iq`, ``--swap-iq``).
    """

    _warnings: tuple[str, ...] = ()
    _scale: float = 1.0
    _max_component: float = 0.0
    full_scale: float | None = None
    swap_iq: bool = False
    _nonfinite: int = 0
    _nonfinite_until: int = 0

    def __init__(
        self,
        *,
        path: str | Path | None,
        format: str,
        datatype: str,
        sample_rate_hz: float,
        n_samples: int,
        center_frequency_hz: float | None = None,
        metadata: Mapping[str, Any] | None = None,
        segments: tuple[Segment, ...] | None = None,
        annotations: tuple[Annotation, ...] = (),
        warnings: tuple[str, ...] = (),
    ) -> None:
        self.path = None if path is None else Path(path)
        self.format = format
        self.datatype = datatype
        self.sample_rate_hz = check_sample_rate(sample_rate_hz, path)
        if n_samples < 0:
            raise MetadataError(f"negative sample count {n_samples}", path)
        self.n_samples = int(n_samples)
        if center_frequency_hz is not None:
            cf = float(center_frequency_hz)
            if not math.isfinite(cf):
                raise MetadataError(f"centre frequency {center_frequency_hz!r} is not finite", path)
            center_frequency_hz = cf
        self.center_frequency_hz = center_frequency_hz
        self.metadata: Mapping[str, Any] = dict(metadata or {})
        self.segments = segments or (Segment(0, center_frequency_hz),)
        self.annotations = annotations
        #: Soft problems found while opening (e.g. a trailing partial sample ignored).
        self.warnings = warnings

    @property
    def warnings(self) -> tuple[str, ...]:
        """Soft problems, one sentence each: found while opening (a trailing partial sample
        ignored, a data chunk shorter than its header says ...) and, once a read met them,
        the number of non-finite samples replaced by 0."""
        out = self._warnings
        if self._nonfinite:
            out = (
                *out,
                f"{self._nonfinite} non-finite sample(s) (NaN/Inf, or a component beyond "
                f"{MAX_FLOAT_COMPONENT:.0e} x full scale) replaced by 0 in the samples read so far",
            )
        scale = self.scale_warning()
        if scale is not None:
            out = (*out, scale)
        return out

    @warnings.setter
    def warnings(self, value: tuple[str, ...]) -> None:
        self._warnings = tuple(value)

    @property
    def max_component(self) -> float:
        """Largest finite |I| or |Q| of a float file in the samples read so far, as stored
        (before any stated full scale); 0 for integer datatypes."""
        return self._max_component

    def scale_warning(self) -> str | None:
        """The warning for a float file whose samples reach beyond 1.0 when no full scale is
        stated (``--full-scale``), once a read has met such a sample; None otherwise.

        Such a file holds ADC counts or some other scale: its dBFS levels are then relative
        to 1.0, not to the receiver's full scale. Relative figures (dB, dBc, Hz) are not
        affected, and it is not judged clipped for it (clipping is looked for in the data).
        """
        m = self._max_component
        if not self.is_float or self.full_scale is not None or not m > 1.0:
            return None
        hint = _suggested_full_scale(m)
        say = f"--full-scale {hint}" if hint is not None else "--full-scale VALUE"
        return (
            f"float samples reach {m:.6g}, beyond 1.0: the file is not scaled to full scale 1 (ADC counts?); "
            f"dBFS levels are relative to 1.0, not to the receiver's full scale (give {say} to state it); "
            "dB, dBc and Hz figures are unaffected"
        )

    def set_swap_iq(self, on: bool = True) -> None:
        """Swap I and Q on reading (``--swap-iq``): ``Q + jI``, which is ``j conj(x)``, the
        spectrum mirrored about the capture centre. For receivers (often sound-card ones)
        that deliver the two channels the other way round."""
        self.swap_iq = bool(on)

    def set_full_scale(self, value: float | None) -> None:
        """State the full scale of the samples (``--full-scale VALUE``), in the file's units.

        For a float datatype ``VALUE`` is the stored magnitude that is full scale (2048 for
        a file in 12-bit ADC counts): samples are divided by it. For an integer datatype it
        is a number of codes (2048 for a 12-bit ADC in a 16-bit container): samples are
        scaled by ``2**(bits-1) / VALUE``. None restores the datatype's own full scale.
        Relative figures (dBc, dB, Hz) do not depend on it; only dBFS levels do.

        Raises:
            ValueError: ``value`` is not a finite number above 0.
        """
        if value is None:
            self.full_scale, self._scale = None, 1.0
            return
        v = float(value)
        if not (math.isfinite(v) and v > 0):
            raise ValueError(f"full scale {value!r} must be a finite number above 0")
        self.full_scale = v
        self._scale = self._native_full_scale() / v

    def _native_full_scale(self) -> float:
        from ._formats import parse_datatype

        try:
            return parse_datatype(self.datatype).full_scale
        except ValueError:
            return 1.0

    @property
    def is_float(self) -> bool:
        """True for a float datatype (``cf32``, ``cf64``, ``rf32`` ...)."""
        return self.datatype[1:2] == "f"

    @property
    def clip_level(self) -> float:
        """Component magnitude (full scale 1) at or above which a sample counts as clipped.

        For integer datatypes the largest positive code scaled (32767/32768 for ``ci16``);
        for float datatypes 1.0. See :attr:`iqscope.io.SampleFormat.clip_level`. With a
        stated full scale (:meth:`set_full_scale`) the same codes in the new units. A
        float file is never judged clipped from this level alone: the pass looks for a
        plateau in the data (:class:`iqscope.dsp.RailTracker`).
        """
        from ._formats import parse_datatype

        try:
            level = parse_datatype(self.datatype).clip_level
        except ValueError:
            level = 1.0
        return level * self._scale

    @property
    def nonfinite_count(self) -> int:
        """Non-finite samples met (and replaced by 0) in the samples read so far.

        Counted once per sample when the recording is read front to back (as
        :meth:`chunks` does, overlaps included); exact after one full pass.
        """
        return self._nonfinite

    # -- facts -----------------------------------------------------------------------
    @property
    def duration_s(self) -> float:
        """Length of the recording in seconds."""
        return self.n_samples / self.sample_rate_hz

    @property
    def name(self) -> str:
        """A short name for messages: the file name, or ``"<array>"``."""
        return "<array>" if self.path is None else self.path.name

    def __repr__(self) -> str:
        return (
            f"{type(self).__name__}(path={str(self.path)!r}, format={self.format!r}, "
            f"datatype={self.datatype!r}, sample_rate_hz={self.sample_rate_hz!r}, "
            f"center_frequency_hz={self.center_frequency_hz!r}, n_samples={self.n_samples})"
        )

    # -- samples ---------------------------------------------------------------------
    def _read(self, start: int, count: int) -> npt.NDArray[np.complex64]:
        """Return samples ``[start, start + count)``; bounds are already checked."""
        raise NotImplementedError

    def read(self, start: int = 0, count: int | None = None) -> npt.NDArray[np.complex64]:
        """Read ``count`` samples from ``start`` as complex64 scaled to full scale 1.

        ``count=None`` reads to the end (mind the memory on a large file). Reads past the
        end are shortened; a negative start or count raises ``ValueError``. NaN/Inf samples
        (and float components beyond :data:`MAX_FLOAT_COMPONENT`) come back as 0 and are
        counted in :attr:`nonfinite_count`.
        """
        if start < 0:
            raise ValueError(f"{start=} must be >= 0")
        if count is None:
            count = self.n_samples - start
        if count < 0:
            raise ValueError(f"{count=} must be >= 0")
        stop = min(self.n_samples, start + count)
        if start >= stop:
            return np.zeros(0, np.complex64)
        out = np.asarray(self._read(start, stop - start), dtype=np.complex64)
        if self.is_float:
            v = np.ascontiguousarray(out).view(np.float32)
            # NaN propagates through max/min and fails the comparison: two cheap
            # reductions in the common case (faster than isfinite)
            bad: npt.NDArray[np.bool_]
            vmax, vmin = float(v.max()), float(v.min())
            if vmax <= MAX_FLOAT_COMPONENT and vmin >= -MAX_FLOAT_COMPONENT:
                bad = np.zeros(0, bool)
                self._max_component = max(self._max_component, vmax, -vmin)
            else:
                bad = np.asarray(~(np.abs(v) <= MAX_FLOAT_COMPONENT).reshape(-1, 2).all(axis=1))
            if bad.any():
                # count each bad sample once on a front-to-back pass (overlaps not re-counted)
                lo = max(start, self._nonfinite_until) - start
                if start <= self._nonfinite_until:
                    self._nonfinite += int(np.count_nonzero(bad[lo:]))
                    self._nonfinite_until = max(self._nonfinite_until, stop)
                out = np.where(bad, np.complex64(0), out)
                good = np.abs(v).reshape(-1, 2)[~bad]
                if good.size:
                    self._max_component = max(self._max_component, float(good.max()))
            elif start <= self._nonfinite_until:
                self._nonfinite_until = max(self._nonfinite_until, stop)
        if self._scale != 1.0:
            out = (out * np.float32(self._scale)).astype(np.complex64, copy=False)
        if self.swap_iq:
            # Q + jI = j * conj(I + jQ): the spectrum mirrored about the capture centre.
            pair = np.ascontiguousarray(out, dtype=np.complex64).view(np.float32).reshape(-1, 2)
            out = np.ascontiguousarray(pair[:, ::-1]).view(np.complex64).ravel()
        return out

    def chunks(
        self,
        size: int,
        overlap: int = 0,
        start: int = 0,
        stop: int | None = None,
    ) -> Iterator[npt.NDArray[np.complex64]]:
        """Yield successive blocks of ``size`` samples, each overlapping the last by ``overlap``.

        The last block may be shorter. Concatenating the blocks with the overlap removed
        gives exactly ``read(start, stop - start)``.
        """
        if size <= 0:
            raise ValueError(f"{size=} must be > 0")
        if not 0 <= overlap < size:
            raise ValueError(f"{overlap=} must be in [0, size)")
        stop = self.n_samples if stop is None else min(stop, self.n_samples)
        step = size - overlap
        pos = max(0, start)
        while pos < stop:
            block = self.read(pos, min(size, stop - pos))
            if block.size == 0:
                return
            yield block
            if pos + size >= stop:
                return
            pos += step

    # -- lifetime --------------------------------------------------------------------
    def close(self) -> None:
        """Release file handles (idempotent)."""

    def __enter__(self) -> Recording:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class ArrayRecording(Recording):
    """A recording held in memory: synthesized signals, tests, small captures."""

    def __init__(
        self,
        samples: npt.ArrayLike,
        sample_rate_hz: float,
        center_frequency_hz: float | None = None,
        *,
        path: str | Path | None = None,
        metadata: Mapping[str, Any] | None = None,
        annotations: tuple[Annotation, ...] = (),
    ) -> None:
        data = np.ascontiguousarray(np.asarray(samples), dtype=np.complex64).ravel()
        data.flags.writeable = False
        self._data = data
        super().__init__(
            path=path,
            format="array",
            datatype="cf32_le",
            sample_rate_hz=sample_rate_hz,
            n_samples=data.size,
            center_frequency_hz=center_frequency_hz,
            metadata=metadata,
            annotations=annotations,
        )

    def _read(self, start: int, count: int) -> npt.NDArray[np.complex64]:
        return self._data[start : start + count]
