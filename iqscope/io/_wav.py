"""Two-channel WAV I/Q (I left, Q right): our own RIFF chunk parser, and a writer.

Accepted: ``WAVE_FORMAT_PCM`` (1), ``WAVE_FORMAT_IEEE_FLOAT`` (3) and
``WAVE_FORMAT_EXTENSIBLE`` (0xFFFE) whose sub-format is PCM or float; 8-bit unsigned,
16/24/32-bit signed PCM, 32/64-bit float; RIFF and RF64/BW64 (files over 4 GiB).
The centre frequency never comes from a vendor chunk: it is the caller's ``center`` or
our sidecar ``<file>.wav.iqscope.json`` holding ``{"center_frequency_hz": ...}``.

A data chunk whose size runs past the end of the file (a recording cut short) is read
as far as the file goes, with a warning in :attr:`Recording.warnings`; so is a trailing
partial sample. Other chunks that run past the end before a data chunk is found make
the file unreadable (:class:`~iqscope.errors.FormatError`).

References
----------
.. [1] Microsoft/IBM, "Multimedia Programming Interface and Data Specifications 1.0"
   (1991), RIFF WAVE ``fmt `` and ``data`` chunks; Microsoft, ``WAVEFORMATEXTENSIBLE``
   (KSDATAFORMAT_SUBTYPE_PCM / _IEEE_FLOAT GUIDs); EBU Tech 3306 (RF64).
"""

from __future__ import annotations

import struct
from collections.abc import Iterable
from pathlib import Path
from typing import Final

import numpy.typing as npt

from ..errors import FormatError, MetadataError
from ._atomic import atomic_write, atomic_write_text, check_can_write
from ._common import read_sidecar, resolve_rate, sidecar_path, truncated
from ._filerec import ByteRun, FileRecording, file_size, open_readonly
from ._formats import SampleFormat, parse_datatype
from ._recording import Recording, Segment, check_sample_rate
from ._registry import OpenRequest, ReaderSpec, register_reader
from ._sigmf import iter_blocks

__all__ = ["open_wav", "write_wav", "WavInfo", "parse_wav_header"]

WAVE_FORMAT_PCM: Final = 0x0001
WAVE_FORMAT_IEEE_FLOAT: Final = 0x0003
WAVE_FORMAT_EXTENSIBLE: Final = 0xFFFE
#: Tail shared by the KSDATAFORMAT_SUBTYPE_* GUIDs (after the 2-byte format tag + 2 zero bytes).
_GUID_TAIL: Final = b"\x00\x00\x00\x00\x10\x00\x80\x00\x00\xaa\x00\x38\x9b\x71"


class WavInfo:
    """What the RIFF header says: the sample format, rate and where the data are."""

    def __init__(
        self, fmt: SampleFormat, channels: int, rate: int, data_offset: int, data_bytes: int, warnings: list[str]
    ) -> None:
        self.fmt = fmt
        self.channels = channels
        self.rate = rate
        self.data_offset = data_offset
        self.data_bytes = data_bytes
        self.warnings = warnings


def _sniff(head: bytes) -> bool:
    return len(head) >= 12 and head[:4] in (b"RIFF", b"RF64", b"BW64") and head[8:12] == b"WAVE"


def parse_wav_header(path: Path, accept_truncated: bool = False) -> WavInfo:
    """Walk the RIFF chunks of ``path`` and return the format and data location.

    A data chunk promising more bytes than the file holds is a truncated recording:
    refused (``FormatError``) unless ``accept_truncated`` (then read as far as it goes).
    """
    import os

    size = file_size(path)
    if size == 0:
        raise FormatError("empty file", path)
    fd = open_readonly(path)
    try:
        head = os.pread(fd, 12, 0)
        if len(head) < 12 or not _sniff(head):
            raise FormatError("not a WAV file (no RIFF/WAVE header)", path)
        rf64 = head[:4] != b"RIFF"
        ds64_data: int | None = None
        pos = 12
        fmt_chunk: bytes | None = None
        warnings: list[str] = []
        break_info: tuple[int, int] | None = None
        while True:
            hdr = os.pread(fd, 8, pos)
            if len(hdr) < 8:
                if fmt_chunk is None:
                    raise FormatError("no 'fmt ' chunk before the end of the file", path)
                raise FormatError("no 'data' chunk (file truncated or chunk sizes wrong)", path)
            cid, csize = hdr[:4], struct.unpack("<I", hdr[4:])[0]
            body = pos + 8
            if cid == b"ds64" and rf64:
                d = os.pread(fd, min(csize, 28), body)
                if len(d) < 24:
                    raise FormatError("truncated ds64 chunk", path)
                ds64_data = struct.unpack("<Q", d[8:16])[0]
            elif cid == b"fmt ":
                if csize < 16 or csize > 4096:
                    raise FormatError(f"'fmt ' chunk of {csize} bytes is malformed", path)
                fmt_chunk = os.pread(fd, csize, body)
                if len(fmt_chunk) < csize:
                    raise FormatError("truncated 'fmt ' chunk", path)
            elif cid == b"data":
                if fmt_chunk is None:
                    raise FormatError("'data' chunk comes before the 'fmt ' chunk", path)
                if rf64 and csize == 0xFFFFFFFF:
                    if ds64_data is None:
                        raise FormatError("RF64 file without a ds64 chunk", path)
                    csize = ds64_data
                available = size - body
                if csize > available:
                    promised, held = csize, available
                    csize = available
                    break_info = (promised, held)
                else:
                    break_info = None
                break
            if cid not in (b"fmt ", b"ds64") and body + csize > size:
                raise FormatError(
                    f"chunk {cid!r} claims {csize} bytes, past the end of the file, before any data chunk", path
                )
            pos = body + csize + (csize & 1)
            if pos > size:
                raise FormatError("no 'data' chunk (chunk sizes run past the end of the file)", path)
    except OSError as exc:
        raise FormatError(f"read failed: {exc.strerror or exc}", path) from exc
    finally:
        os.close(fd)
    tag, channels, rate, _avg, align, bits = struct.unpack("<HHIIHH", fmt_chunk[:16])
    if tag == WAVE_FORMAT_EXTENSIBLE:
        if len(fmt_chunk) < 40:
            raise FormatError("WAVE_FORMAT_EXTENSIBLE 'fmt ' chunk is too short", path)
        guid = fmt_chunk[24:40]
        if guid[2:] != _GUID_TAIL:
            raise FormatError("unsupported WAVE_FORMAT_EXTENSIBLE sub-format", path)
        tag = struct.unpack("<H", guid[:2])[0]
    if tag not in (WAVE_FORMAT_PCM, WAVE_FORMAT_IEEE_FLOAT):
        raise FormatError(f"unsupported WAV encoding (format tag 0x{tag:04x}); need PCM or float", path)
    if channels == 1:
        raise FormatError("mono WAV: I/Q needs two channels (I left, Q right)", path)
    if channels != 2:
        raise FormatError(f"WAV has {channels} channels; I/Q needs exactly two (I left, Q right)", path)
    if tag == WAVE_FORMAT_PCM:
        names = {8: "cu8", 16: "ci16_le", 24: "ci24_le", 32: "ci32_le"}
    else:
        names = {32: "cf32_le", 64: "cf64_le"}
    if bits not in names:
        kind = "PCM" if tag == WAVE_FORMAT_PCM else "float"
        raise FormatError(f"unsupported {bits}-bit {kind} WAV", path)
    fmt = parse_datatype(names[bits])
    if align != fmt.sample_bytes:
        raise FormatError(
            f"WAV block align {align} does not match {channels} x {bits}-bit samples (inconsistent header)", path
        )
    if break_info is not None:
        promised, held = break_info
        frame = fmt.sample_bytes
        secs = f" ({promised // frame / rate:.4g} s)" if rate > 0 else ""
        truncated(
            f"the data chunk claims {promised} bytes{secs} but the file holds {held} "
            f"({held // frame} samples)",
            path, accept_truncated, warnings,
        )
    return WavInfo(fmt, channels, rate, body, csize, warnings)


def open_wav(req: OpenRequest) -> Recording:
    """Open a two-channel I/Q WAV file."""
    path = req.path
    info = parse_wav_header(path, req.accept_truncated)
    warnings = info.warnings
    side = read_sidecar(path)
    rate = resolve_rate(req.rate, info.rate if info.rate > 0 else None, path)
    center = req.center if req.center is not None else side.get("center_frequency_hz")
    n = info.data_bytes // info.fmt.sample_bytes
    rest = info.data_bytes - n * info.fmt.sample_bytes
    if rest and not any(w.startswith("truncated:") for w in warnings):
        truncated(f"the data ends with a partial sample ({rest} of {info.fmt.sample_bytes} bytes)",
                  path, req.accept_truncated, warnings)
    if n == 0:
        raise FormatError("the WAV data chunk holds no complete sample", path)
    meta = {"wav": {"channels": info.channels, "sample_rate": info.rate, "data_offset": info.data_offset}}
    if side:
        meta["sidecar"] = {k: v for k, v in side.items()}
    return FileRecording(
        data_path=path,
        sample_format=info.fmt,
        runs=[ByteRun(0, info.data_offset, n)],
        path=path,
        format="wav",
        sample_rate_hz=rate,
        center_frequency_hz=center,
        metadata=meta,
        segments=(Segment(0, center, side.get("datetime")),),
        warnings=tuple(warnings),
    )


WAV_READER = register_reader(
    ReaderSpec(
        name="wav",
        aliases=("wave", "rf64"),
        extensions=(".wav", ".wave"),
        sniff=_sniff,
        open=open_wav,
        description="two-channel WAV (I left, Q right), 8/16/24/32-bit PCM or 32/64-bit float",
    )
)


def write_wav(
    path: str | Path,
    samples: npt.ArrayLike | Iterable[npt.ArrayLike],
    sample_rate_hz: float,
    *,
    bits: int | str = 16,
    center_frequency_hz: float | None = None,
    force: bool = False,
) -> Path:
    """Write a two-channel I/Q WAV file (I left, Q right) and return its path.

    Parameters
    ----------
    path : path-like
        The ``.wav`` file.
    samples : ndarray or iterable of ndarray
        Complex samples, full scale 1 (streamed when an iterable of blocks).
    sample_rate_hz : float
        Sample rate, Hz; WAV stores a whole number, so it must be an integer.
    bits : {8, 16, 24, 32, "float"}
        8-bit unsigned, 16/24/32-bit signed PCM (rounded, saturating), or 32-bit float.
    center_frequency_hz : float, optional
        Written to the sidecar ``<path>.iqscope.json`` (WAV itself has no place for it).
    force : bool
        Overwrite existing files.

    Raises
    ------
    OutputError
        A file exists (without ``force``), cannot be written, or would exceed 4 GiB.
    ValueError
        A bad rate or ``bits``.

    References
    ----------
    .. [1] Microsoft/IBM, "Multimedia Programming Interface and Data Specifications 1.0"
       (1991): RIFF WAVE ``fmt `` (PCM, 16 bytes) and ``data`` chunks; float files carry an
       18-byte ``fmt `` and a ``fact`` chunk.
    """
    import json
    import math

    from ..errors import OutputError

    try:
        rate = check_sample_rate(sample_rate_hz)
    except MetadataError as exc:
        raise ValueError(exc.message) from None
    if rate != math.floor(rate) or rate > 0xFFFFFFFF:
        raise ValueError(f"{sample_rate_hz=} must be a whole number of Hz that fits a WAV header")
    names = {8: "cu8", 16: "ci16_le", 24: "ci24_le", 32: "ci32_le", "float": "cf32_le"}
    if bits not in names:
        raise ValueError(f"{bits=} must be 8, 16, 24, 32 or 'float'")
    fmt = parse_datatype(names[bits])
    target = Path(path)
    check_can_write(target, force=force)
    side = sidecar_path(target)
    if center_frequency_hz is not None:
        from ._common import check_center

        center_frequency_hz = check_center(center_frequency_hz, None)
    # a sidecar left from an older file would lend this one a wrong centre frequency
    check_can_write(side, force=force)
    is_float = fmt.kind == "f"
    block_align = fmt.sample_bytes
    if is_float:
        fmt_body = struct.pack("<HHIIHHH", WAVE_FORMAT_IEEE_FLOAT, 2, int(rate), int(rate) * block_align,
                               block_align, fmt.bits, 0)
    else:
        fmt_body = struct.pack("<HHIIHH", WAVE_FORMAT_PCM, 2, int(rate), int(rate) * block_align,
                               block_align, fmt.bits)

    def header(data_bytes: int) -> bytes:
        n_frames = data_bytes // block_align
        chunks = b"fmt " + struct.pack("<I", len(fmt_body)) + fmt_body
        if is_float:
            chunks += b"fact" + struct.pack("<II", 4, n_frames & 0xFFFFFFFF)
        riff_size = 4 + len(chunks) + 8 + data_bytes + (data_bytes & 1)
        return b"RIFF" + struct.pack("<I", riff_size) + b"WAVE" + chunks + b"data" + struct.pack("<I", data_bytes)

    with atomic_write(target, force=force) as fh:
        fh.write(header(0))
        data_bytes = 0
        for block in iter_blocks(samples):
            raw = fmt.encode(block)
            fh.write(raw)
            data_bytes += len(raw)
            if data_bytes > 0xFFFFFFFF - 64:
                raise OutputError("WAV cannot hold more than 4 GiB of samples; write SigMF instead", target)
        if data_bytes == 0:
            raise ValueError("no samples to write")
        if data_bytes & 1:  # pragma: no cover - every format has an even sample size
            fh.write(b"\x00")
        fh.seek(0)
        fh.write(header(data_bytes))
        fh.seek(0, 2)
    if center_frequency_hz is None:
        side.unlink(missing_ok=True)  # only reached with force (checked above)
    else:
        atomic_write_text(side, json.dumps({"center_frequency_hz": center_frequency_hz}, indent=2) + "\n", force=force)
    return target
