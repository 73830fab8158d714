"""The reader registry and :func:`open_recording`, the one public way to open a file.

Each reader is described by a :class:`ReaderSpec` (name, aliases, file-name
extensions, a content sniffer and an ``open`` function). :func:`open_recording` picks a
reader by, in order: the ``format`` argument (a reader name, an alias, a sample
datatype such as ``ci16`` which means a raw file, or any reader's file-name extension
such as ``cs16``, read as a file with that extension is), the file-name extension
(longest match wins), then the first bytes of the file. A folder, named pipe, socket
or device is refused before anything opens it. There is no if-chain over formats: adding
a reader is one :func:`register_reader` call.
"""

from __future__ import annotations

import os
import stat
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Final

from ..errors import FormatError, InputMissingError, UsageError
from ._common import check_center, not_regular_reason
from ._formats import parse_datatype
from ._recording import Recording, check_sample_rate

__all__ = [
    "OpenRequest",
    "ReaderSpec",
    "READERS",
    "register_reader",
    "find_reader",
    "open_recording",
    "SNIFF_BYTES",
]

#: How many leading bytes a sniffer is shown.
SNIFF_BYTES: Final = 1024


@dataclass(frozen=True)
class OpenRequest:
    """What the caller asked for, already checked, handed to a reader's ``open``."""

    path: Path
    """The file (for HDF5 without the ``:dataset`` part)."""
    subpath: str | None = None
    """HDF5 dataset path after ``file.h5:``, when given."""
    datatype: str | None = None
    """Sample datatype chosen by the caller (raw files), e.g. ``"ci16_le"``."""
    rate: float | None = None
    """Sample rate override, Hz."""
    center: float | None = None
    """Centre frequency override, Hz."""
    implied_datatype: str | None = None
    """Datatype implied by the file-name extension (raw files such as ``.cu8``)."""
    accept_truncated: bool = False
    """Read what a truncated file holds (with a warning) instead of refusing it."""


@dataclass(frozen=True)
class ReaderSpec:
    """One entry of the reader registry."""

    name: str
    """Reader name (``Recording.format``), used with ``--format``."""
    aliases: tuple[str, ...]
    """Other names accepted by ``--format``."""
    extensions: tuple[str, ...]
    """Lower-case file-name endings with the dot, e.g. ``(".wav", ".wave")``."""
    sniff: Callable[[bytes], bool] | None
    """True when the leading bytes of a file look like this format (None: never guess)."""
    open: Callable[[OpenRequest], Recording]
    """Open the file and return a recording."""
    description: str
    """One line for help and docs."""
    extension_datatypes: tuple[tuple[str, str], ...] = ()
    """Extensions that also imply a sample datatype (raw files), as (extension, datatype)."""
    takes_subpath: bool = False
    """True when a ``file:/inner/path`` suffix is meaningful (HDF5)."""


#: The registry, in sniffing order. Filled by the reader modules at import.
READERS: dict[str, ReaderSpec] = {}


def register_reader(spec: ReaderSpec) -> ReaderSpec:
    """Add a reader; names, aliases and extensions must not clash with existing ones."""
    taken = {n for s in READERS.values() for n in (s.name, *s.aliases)}
    for n in (spec.name, *spec.aliases):
        if n in taken or n != n.lower():
            raise ValueError(f"reader name {n!r} clashes or is not lower case")
    exts = {e for s in READERS.values() for e in s.extensions}
    for e in spec.extensions:
        if e in exts or not e.startswith(".") or e != e.lower():
            raise ValueError(f"extension {e!r} clashes or is malformed")
    READERS[spec.name] = spec
    return spec


def _by_name(name: str) -> ReaderSpec | None:
    key = name.strip().lower()
    for spec in READERS.values():
        if key == spec.name or key in spec.aliases:
            return spec
    return None


def _by_extension_name(name: str) -> tuple[ReaderSpec | None, str | None]:
    """The reader (and implied datatype) of a file-name extension given as a format name:
    ``cs16`` (or ``.cs16``) is what a ``.cs16`` file is read as."""
    key = "." + name.strip().lower().lstrip(".")
    for spec in READERS.values():
        if key in spec.extensions:
            return spec, dict(spec.extension_datatypes).get(key)
    return None, None


def _by_extension(path: Path) -> tuple[ReaderSpec | None, str | None]:
    lname = path.name.lower()
    best: tuple[int, ReaderSpec | None, str | None] = (0, None, None)
    for spec in READERS.values():
        implied = dict(spec.extension_datatypes)
        for ext in spec.extensions:
            if lname.endswith(ext) and len(ext) > best[0]:
                best = (len(ext), spec, implied.get(ext))
    return best[1], best[2]


def find_reader(path: Path, format: str | None = None) -> tuple[ReaderSpec, str | None]:
    """Return the reader for ``path`` and any datatype implied by ``format`` or the extension.

    Raises:
        UsageError: ``format`` names no reader and no datatype.
        FormatError: no reader recognises the file.
    """
    if format is not None:
        spec = _by_name(format)
        if spec is not None:
            return spec, None
        try:
            return READERS["raw"], parse_datatype(format).name
        except ValueError:
            pass
        spec, implied = _by_extension_name(format)
        if spec is not None:
            return spec, implied
        names = ", ".join(sorted(READERS))
        raise UsageError(
            f"unknown format {format!r}: use one of {names}, a raw datatype such as cf32, ci16, ci8, cu8, "
            "or a file extension such as cs16"
        )
    spec, implied = _by_extension(path)
    if spec is not None:
        return spec, implied
    head = _head(path)
    for spec in READERS.values():
        if spec.sniff is not None and spec.sniff(head):
            return spec, None
    raise FormatError(
        "unknown file type; give --format (sigmf, wav, hdf5, or a raw datatype such as ci16)", path
    )


def _refuse_special(path: Path) -> None:
    """Refuse a folder, named pipe, socket or device before anything opens it (opening a
    named pipe waits for a writer). A missing or unreadable path is left to the caller."""
    try:
        st = os.stat(path)
    except OSError:
        return
    if not stat.S_ISREG(st.st_mode):
        raise InputMissingError(f"{not_regular_reason(st.st_mode)}, not a recording file", path)


def _head(path: Path) -> bytes:
    _refuse_special(path)
    try:
        with open(path, "rb") as fh:
            return fh.read(SNIFF_BYTES)
    except FileNotFoundError as exc:
        raise InputMissingError("file not found", path) from exc
    except IsADirectoryError as exc:
        raise InputMissingError("is a folder, not a recording file", path) from exc
    except OSError as exc:
        raise InputMissingError(f"cannot read: {exc.strerror or exc}", path) from exc


def _split_subpath(text: str) -> tuple[Path, str | None]:
    """Split ``file.h5:/inner/path`` when the whole string is not itself a file."""
    if os.path.lexists(text) or ":" not in text:
        return Path(text), None
    pos = len(text)
    while True:
        pos = text.rfind(":", 0, pos)
        if pos <= 0:
            return Path(text), None
        head, tail = text[:pos], text[pos + 1 :]
        # any existing non-folder (a named pipe too: the reader then says what it is)
        if os.path.lexists(head) and not os.path.isdir(head):
            return Path(head), tail or None


def open_recording(
    path: str | os.PathLike[str],
    *,
    format: str | None = None,
    rate: float | None = None,
    center: float | None = None,
    accept_truncated: bool = False,
) -> Recording:
    """Open an I/Q recording and return a streaming :class:`Recording`.

    Parameters
    ----------
    path : str or path-like
        The recording: ``x.sigmf-meta`` (or ``x.sigmf-data``, or the base name ``x``),
        ``x.sigmf`` (archive), ``x.wav``, ``x.h5`` or ``x.h5:/group/dataset``, or a raw file.
    format : str, optional
        Reader name or alias (``sigmf``, ``wav``, ``raw``, ``hdf5`` ...), a sample
        datatype (``cf32``, ``ci16_le``, ``cu8`` ...) meaning a raw interleaved file, or a
        file-name extension without its dot (``cs16``, ``sc8``, ``h5`` ...) read
        as a file with that extension. Overrides the extension and content sniffing.
    rate : float, optional
        Sample rate in Hz; overrides the file's metadata (needed for raw files and for
        SigMF without ``core:sample_rate``).
    center : float, optional
        Centre frequency in Hz; overrides the file's metadata and sidecar.
    accept_truncated : bool
        A file that ends before its own structure says it should (a WAV data chunk
        promising more bytes than the file holds, a partial last sample in a WAV, raw or
        SigMF dataset) is refused with a :class:`~iqscope.errors.FormatError` naming it
        as truncated, unless this is True: then its whole samples are read and
        :attr:`Recording.warnings` says what was missing (``--accept-truncated``).

    Returns
    -------
    Recording
        Samples read on demand as complex64 with full scale 1. A real datatype (SigMF
        ``rf32_le``, ``ri16_le``, ``ru8`` ..., or ``format="ri16"`` for a raw file) gives the
        complex baseband of its positive-frequency half at half the rate
        (:class:`iqscope.io._real.RealAsComplex`).

    Raises
    ------
    InputError
        Missing, malformed, truncated or unsafe input, or absurd metadata (exit status 3).
    UsageError
        An unknown ``format`` name (exit status 4).
    """
    given, subpath = _split_subpath(os.fspath(path))
    if rate is not None:
        rate = check_sample_rate(rate, given)
    center = check_center(center, given) if center is not None else None
    # a SigMF base name: "x" for x.sigmf-meta
    if not os.path.lexists(given) and subpath is None:
        meta = given.with_name(given.name + ".sigmf-meta")
        if os.path.lexists(meta) and (format is None or _by_name(format) is READERS.get("sigmf")):
            given = meta
        else:
            raise InputMissingError("file not found", given)
    _refuse_special(given)
    spec, dt = find_reader(given, format)
    if subpath is not None and not spec.takes_subpath:
        raise InputMissingError("file not found (only HDF5 files take a ':dataset' suffix)", Path(os.fspath(path)))
    implied = _by_extension(given)[1] if format is not None else dt
    req = OpenRequest(
        path=given,
        subpath=subpath,
        datatype=dt if format is not None else None,
        rate=rate,
        center=center,
        implied_datatype=implied,
        accept_truncated=bool(accept_truncated),
    )
    from ._real import as_complex_view

    return as_complex_view(spec.open(req))
