"""Recordings: readers (SigMF, two-channel WAV, raw interleaved, HDF5) and writers.

Public API
----------
open_recording(path, *, format=None, rate=None, center=None) -> Recording
    Open any supported recording; the reader is chosen from :data:`READERS`.
write_sigmf(path, samples, sample_rate_hz, ...) -> Path
    Write ``.sigmf-meta`` + ``.sigmf-data`` (streams an iterable of blocks).
write_wav(path, samples, sample_rate_hz, *, bits=16, ...) -> Path
    Write a two-channel I/Q WAV (I left, Q right), centre frequency in a sidecar.
atomic_write(path, *, force=False), atomic_write_text(path, text, force=False), check_free_space(path, n_bytes)
    Atomic, no-overwrite-without-force output for every file iqscope writes.
Recording, ArrayRecording, Segment, Annotation, check_sample_rate
    The recording type every reader returns, and its parts.
SampleFormat, parse_datatype, SAMPLE_FORMATS, SIGMF_DATATYPES
    Sample formats in SigMF notation (scaling to full scale 1).
"""

from __future__ import annotations

from ._atomic import atomic_write, atomic_write_text, check_can_write, check_free_space
from ._formats import SAMPLE_FORMATS, SIGMF_DATATYPES, SampleFormat, parse_datatype
from ._recording import Annotation, ArrayRecording, Recording, Segment, check_sample_rate
from ._registry import READERS, OpenRequest, ReaderSpec, find_reader, open_recording, register_reader

# reader modules register themselves on import, in sniffing order
from ._sigmf import SIGMF_SPEC, write_sigmf  # noqa: E402  (registers "sigmf")
from ._wav import write_wav  # noqa: E402  (registers "wav")
from ._hdf5 import open_hdf5 as _open_hdf5  # noqa: E402,F401  (registers "hdf5")
from ._raw import open_raw as _open_raw  # noqa: E402,F401  (registers "raw")

__all__ = [
    "Annotation",
    "ArrayRecording",
    "Recording",
    "Segment",
    "check_sample_rate",
    "open_recording",
    "write_sigmf",
    "write_wav",
    "atomic_write",
    "atomic_write_text",
    "check_can_write",
    "check_free_space",
    "SampleFormat",
    "parse_datatype",
    "SAMPLE_FORMATS",
    "SIGMF_DATATYPES",
    "SIGMF_SPEC",
    "READERS",
    "ReaderSpec",
    "OpenRequest",
    "register_reader",
    "find_reader",
]
