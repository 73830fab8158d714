"""Raw interleaved I/Q files: no header, the caller names the datatype and the rate.

The datatype comes from ``format`` (``cf32``, ``ci16_le``, ``ci8``, ``cu8`` ...), else from a
file-name extension that implies one (``.cf32``/``.fc32``, ``.cs16``/``.ci16``, ``.cs8``/
``.ci8``, ``.cu8``), else from our sidecar ``<file>.iqscope.json`` (``"datatype"``). The
sample rate comes from ``rate`` or the sidecar's ``sample_rate_hz``; the centre frequency
from ``center`` or the sidecar's ``center_frequency_hz``.
"""

from __future__ import annotations

from ..errors import FormatError, MetadataError, UsageError
from ._common import read_sidecar, resolve_rate, truncated
from ._filerec import ByteRun, FileRecording, file_size
from ._formats import parse_datatype
from ._recording import Recording, Segment
from ._registry import OpenRequest, ReaderSpec, register_reader

__all__ = ["open_raw", "RAW_EXTENSION_DATATYPES"]

#: File-name endings that imply a datatype (common practice in SDR tools' file naming).
RAW_EXTENSION_DATATYPES: tuple[tuple[str, str], ...] = (
    (".cf32", "cf32_le"),
    (".fc32", "cf32_le"),
    (".cf64", "cf64_le"),
    (".cs16", "ci16_le"),
    (".ci16", "ci16_le"),
    (".sc16", "ci16_le"),
    (".cs8", "ci8"),
    (".ci8", "ci8"),
    (".sc8", "ci8"),
    (".cu8", "cu8"),
)


def open_raw(req: OpenRequest) -> Recording:
    """Open a raw interleaved I/Q file."""
    path = req.path
    size = file_size(path)
    side = read_sidecar(path)
    name = req.datatype or req.implied_datatype or side.get("datatype")
    if name is None:
        raise UsageError(
            "a raw file needs its sample datatype: give --format cf32, ci16, ci8, cu8 (or another)", path
        )
    try:
        fmt = parse_datatype(name)
    except ValueError as exc:
        raise FormatError(str(exc), path) from None
    if req.rate is None and "sample_rate_hz" not in side:
        raise MetadataError("a raw file needs its sample rate: give --rate HZ", path)
    rate = resolve_rate(req.rate, side.get("sample_rate_hz"), path)
    center = req.center if req.center is not None else side.get("center_frequency_hz")
    if size == 0:
        raise FormatError("empty file", path)
    n = size // fmt.sample_bytes
    rest = size - n * fmt.sample_bytes
    if n == 0:
        raise FormatError(f"the file holds no complete {fmt.name} sample ({size} bytes)", path)
    warnings: list[str] = []
    if rest:
        truncated(f"the file ends with a partial sample ({rest} of {fmt.sample_bytes} bytes)",
                  path, req.accept_truncated, warnings)
    meta = {"sidecar": side} if side else {}
    return FileRecording(
        data_path=path,
        sample_format=fmt,
        runs=[ByteRun(0, 0, n)],
        path=path,
        format="raw",
        sample_rate_hz=rate,
        center_frequency_hz=center,
        metadata=meta,
        segments=(Segment(0, center, side.get("datetime")),),
        warnings=tuple(warnings),
    )


RAW_READER = register_reader(
    ReaderSpec(
        name="raw",
        aliases=("iq", "bin"),
        extensions=tuple(e for e, _ in RAW_EXTENSION_DATATYPES) + (".raw", ".iq"),
        sniff=None,
        open=open_raw,
        description="raw interleaved I/Q; needs the datatype (--format) and the rate (--rate)",
        extension_datatypes=RAW_EXTENSION_DATATYPES,
    )
)
