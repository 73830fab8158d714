"""A recording whose samples sit in byte runs of a file, read on demand with ``pread``.

Every binary reader (SigMF, SigMF archive, WAV, raw) describes where its samples are as
one or more :class:`ByteRun` s and hands them to :class:`FileRecording`. Reads go
through positioned reads of just the bytes needed, so memory stays flat whatever the
file size (no memory map: mapped pages would count against the process's resident
memory on a long pass). The file is opened read-only and never written.
"""

from __future__ import annotations

import os
import weakref
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from ..errors import FormatError, InputMissingError
from ._common import regular_file_stat
from ._formats import SampleFormat
from ._recording import Annotation, Recording, Segment

__all__ = ["ByteRun", "FileRecording", "open_readonly", "file_size"]

#: Largest single positioned read (bytes); longer reads are split.
_MAX_READ_BYTES = 1 << 24


@dataclass(frozen=True)
class ByteRun:
    """``n_samples`` consecutive samples (frames) stored from ``byte_offset`` on."""

    first_sample: int
    """Index of the run's first sample in the recording."""
    byte_offset: int
    """Byte position of that sample in the file."""
    n_samples: int
    """Number of samples (frames of all channels) in the run."""


def open_readonly(path: Path) -> int:
    """Open ``path`` read-only and return the descriptor, translating OS errors."""
    flags = os.O_RDONLY | getattr(os, "O_BINARY", 0)
    try:
        fd = os.open(path, flags)
    except FileNotFoundError as exc:
        raise InputMissingError("file not found", path) from exc
    except IsADirectoryError as exc:
        raise InputMissingError("is a folder, not a recording file", path) from exc
    except OSError as exc:
        raise InputMissingError(f"cannot open: {exc.strerror or exc}", path) from exc
    return fd


def file_size(path: Path) -> int:
    """Size in bytes of a regular file; raise :class:`InputMissingError` otherwise."""
    return regular_file_stat(path, what=", not a recording file").st_size


def _pread(fd: int, size: int, offset: int) -> bytes:
    if hasattr(os, "pread"):
        parts: list[bytes] = []
        got = 0
        while got < size:
            chunk = os.pread(fd, min(size - got, 1 << 30), offset + got)
            if not chunk:
                break
            parts.append(chunk)
            got += len(chunk)
        return b"".join(parts)
    os.lseek(fd, offset, os.SEEK_SET)  # pragma: no cover - platforms without pread
    return os.read(fd, size)  # pragma: no cover


class FileRecording(Recording):
    """Samples of one :class:`SampleFormat` stored in byte runs of one file.

    Args:
        data_path: the file holding the samples (opened read-only).
        sample_format: how each component is stored.
        runs: where the samples are; consecutive and starting at sample 0.
        n_channels: interleaved channels per frame (only ``channel`` is returned).
        channel: which channel to return.
        **kwargs: passed to :class:`Recording` (path, format, sample_rate_hz ...).
    """

    def __init__(
        self,
        *,
        data_path: Path,
        sample_format: SampleFormat,
        runs: Sequence[ByteRun],
        n_channels: int = 1,
        channel: int = 0,
        path: str | Path | None,
        format: str,
        sample_rate_hz: float,
        center_frequency_hz: float | None = None,
        metadata: Mapping[str, Any] | None = None,
        segments: tuple[Segment, ...] | None = None,
        annotations: tuple[Annotation, ...] = (),
        warnings: tuple[str, ...] = (),
    ) -> None:
        n = sum(r.n_samples for r in runs)
        super().__init__(
            path=path,
            format=format,
            datatype=sample_format.name,
            sample_rate_hz=sample_rate_hz,
            n_samples=n,
            center_frequency_hz=center_frequency_hz,
            metadata=metadata,
            segments=segments,
            annotations=annotations,
            warnings=warnings,
        )
        self.data_path = Path(data_path)
        self.sample_format = sample_format
        self._runs = tuple(r for r in runs if r.n_samples > 0)
        self._n_channels = int(n_channels)
        self._channel = int(channel)
        self._fd: int | None = None
        self._finalizer: weakref.finalize[Any, Any] | None = None

    def _descriptor(self) -> int:
        if self._fd is None:
            self._fd = open_readonly(self.data_path)
            self._finalizer = weakref.finalize(self, os.close, self._fd)
        return self._fd

    def _read(self, start: int, count: int) -> npt.NDArray[np.complex64]:
        fmt = self.sample_format
        frame = fmt.sample_bytes * self._n_channels
        stop = start + count
        pieces: list[npt.NDArray[np.complex64]] = []
        fd = self._descriptor()
        per_read = max(1, _MAX_READ_BYTES // frame)  # bounded memory with many channels
        for run in self._runs:
            lo = max(start, run.first_sample)
            hi = min(stop, run.first_sample + run.n_samples)
            while lo < hi:
                n = min(hi - lo, per_read)
                pieces.append(self._read_frames(fd, run.byte_offset + (lo - run.first_sample) * frame, n))
                lo += n
        if len(pieces) == 1:
            return pieces[0]
        return np.concatenate(pieces) if pieces else np.zeros(0, np.complex64)

    def _read_frames(self, fd: int, offset: int, n: int) -> npt.NDArray[np.complex64]:
        fmt = self.sample_format
        frame = fmt.sample_bytes * self._n_channels
        nbytes = n * frame
        try:
            raw = _pread(fd, nbytes, offset)
        except OSError as exc:
            raise FormatError(f"read failed: {exc.strerror or exc}", self.data_path) from exc
        if len(raw) != nbytes:
            raise FormatError("the file ended early (was it truncated while being read?)", self.data_path)
        if self._n_channels == 1:
            return fmt.decode(raw)
        frames = np.frombuffer(raw, np.uint8).reshape(-1, frame)
        c0 = self._channel * fmt.sample_bytes
        return fmt.decode(np.ascontiguousarray(frames[:, c0 : c0 + fmt.sample_bytes]).ravel())

    def close(self) -> None:
        if self._finalizer is not None:
            self._finalizer()
            self._finalizer = None
        self._fd = None
