"""SigMF reader (``.sigmf-meta`` + ``.sigmf-data``, and ``.sigmf`` tar archives) and writer.

Reading: the metadata is parsed and checked; the dataset is read on demand. Every
capture segment keeps its own centre frequency and start time; ``core:header_bytes``
(per capture) and ``core:trailing_bytes`` of non-conforming datasets are skipped;
annotation indices are taken as absolute (``core:offset`` is subtracted). The data file
is only ever looked for next to the metadata file: a ``core:dataset`` name with a folder
part, or a symbolic link leading out of the folder, is refused before anything is opened.
In an archive the data member is read in place (byte offsets into the tar file); a
compressed archive is refused (it cannot be read in place).

The checksum ``core:sha512`` is not verified on open (that would read the whole file).

References
----------
.. [1] SigMF specification 1.2.6 (``core:datatype``, ``core:sample_start``,
   ``core:header_bytes``, ``core:trailing_bytes``, ``core:offset``, ``core:dataset``).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
import tarfile
from collections.abc import Iterable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any, Final

import numpy as np
import numpy.typing as npt

from ..errors import FormatError, InputMissingError, MetadataError
from ._atomic import atomic_write, atomic_write_text, check_can_write
from ._common import check_center, parse_json_bytes, read_json_file, resolve_rate, safe_sibling, truncated
from ._filerec import ByteRun, FileRecording, file_size
from ._formats import SampleFormat, parse_datatype
from ._recording import Annotation, Recording, Segment, check_sample_rate
from ._registry import OpenRequest, ReaderSpec, register_reader

__all__ = ["SIGMF_SPEC", "open_sigmf", "write_sigmf", "sigmf_paths"]

#: Version of the SigMF specification we write and read.
SIGMF_SPEC: Final = "1.2.6"
META_EXT: Final = ".sigmf-meta"
DATA_EXT: Final = ".sigmf-data"
ARCHIVE_EXT: Final = ".sigmf"

# metadata keys (SigMF 1.2.6 core namespace)
K_DATATYPE: Final = "core:datatype"
K_SAMPLE_RATE: Final = "core:sample_rate"
K_VERSION: Final = "core:version"
K_NUM_CHANNELS: Final = "core:num_channels"
K_SHA512: Final = "core:sha512"
K_OFFSET: Final = "core:offset"
K_DESCRIPTION: Final = "core:description"
K_RECORDER: Final = "core:recorder"
K_DATASET: Final = "core:dataset"
K_TRAILING_BYTES: Final = "core:trailing_bytes"
K_METADATA_ONLY: Final = "core:metadata_only"
K_SAMPLE_START: Final = "core:sample_start"
K_SAMPLE_COUNT: Final = "core:sample_count"
K_FREQUENCY: Final = "core:frequency"
K_DATETIME: Final = "core:datetime"
K_HEADER_BYTES: Final = "core:header_bytes"
K_FREQ_LOWER: Final = "core:freq_lower_edge"
K_FREQ_UPPER: Final = "core:freq_upper_edge"
K_LABEL: Final = "core:label"
K_COMMENT: Final = "core:comment"

_BLOCK: Final = 1 << 18


def sigmf_paths(path: str | Path) -> tuple[Path, Path]:
    """Return ``(meta, data)`` paths for a SigMF base name or either file name."""
    p = Path(path)
    name = p.name
    for ext in (META_EXT, DATA_EXT):
        if name.lower().endswith(ext):
            name = name[: -len(ext)]
            break
    return p.with_name(name + META_EXT), p.with_name(name + DATA_EXT)


# -- reading ---------------------------------------------------------------------------
def _int_field(obj: Mapping[str, Any], key: str, default: int, path: Path, where: str) -> int:
    value = obj.get(key, default)
    if (
        isinstance(value, bool)
        or not isinstance(value, (int, float))
        or not math.isfinite(value)
        or value != int(value)
        or value < 0
    ):
        raise FormatError(f"{where} {key} must be a whole number >= 0, not {value!r}", path)
    return int(value)


def _is_tar(head: bytes) -> bool:
    return len(head) >= 262 and head[257:262] == b"ustar"


def _sniff_meta(head: bytes) -> bool:
    text = head.lstrip()[:1024]
    return text.startswith(b"{") and b'"global"' in text


def _sniff(head: bytes) -> bool:
    return _sniff_meta(head) or (_is_tar(head) and b".sigmf-meta" in head[:100])


def _parse_annotations(
    raw: Any, offset: int, n_samples: int, path: Path, warnings: list[str]
) -> tuple[Annotation, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, list):
        raise FormatError("'annotations' must be a list", path)
    out: list[Annotation] = []
    skipped = 0
    past = 0
    known = {K_SAMPLE_START, K_SAMPLE_COUNT, K_FREQ_LOWER, K_FREQ_UPPER, K_LABEL, K_COMMENT}
    for item in raw:
        try:
            if not isinstance(item, Mapping):
                raise TypeError
            start = _int_field(item, K_SAMPLE_START, 0, path, "annotation")
            count = item.get(K_SAMPLE_COUNT)
            count = None if count is None else _int_field(item, K_SAMPLE_COUNT, 0, path, "annotation")
            lo = check_center(item.get(K_FREQ_LOWER), path, "annotation lower edge")
            hi = check_center(item.get(K_FREQ_UPPER), path, "annotation upper edge")
            label = item.get(K_LABEL, "")
            comment = item.get(K_COMMENT, "")
            if not isinstance(label, str) or not isinstance(comment, str):
                raise TypeError
        except (FormatError, MetadataError, TypeError):
            skipped += 1
            continue
        start = start - offset if start >= offset else start
        if start >= n_samples:
            past += 1
        out.append(
            Annotation(
                start=start,
                count=count,
                freq_lower_hz=lo,
                freq_upper_hz=hi,
                label=label,
                comment=comment,
                extra={k: v for k, v in item.items() if k not in known},
            )
        )
    if skipped:
        warnings.append(f"{skipped} malformed annotation(s) ignored")
    if past:
        warnings.append(f"{past} annotation(s) start past the end of the data")
    return tuple(out)


def _build(
    doc: Any,
    meta_path: Path,
    data_path: Path,
    base_offset: int,
    data_bytes: int,
    req: OpenRequest,
    warnings: list[str],
    label_path: Path,
) -> Recording:
    if not isinstance(doc, Mapping):
        raise FormatError("metadata must be a JSON object", meta_path)
    glob = doc.get("global")
    if not isinstance(glob, Mapping):
        raise FormatError("metadata has no 'global' object", meta_path)
    dt_name = glob.get(K_DATATYPE)
    if dt_name is None:
        raise FormatError(f"metadata has no {K_DATATYPE}", meta_path)
    try:
        fmt: SampleFormat = parse_datatype(dt_name)
    except ValueError as exc:
        raise FormatError(str(exc), meta_path) from None
    if not fmt.is_sigmf:
        raise FormatError(f"datatype {dt_name!r} is not a SigMF datatype", meta_path)
    rate = resolve_rate(req.rate, glob.get(K_SAMPLE_RATE), meta_path)
    nch = _int_field(glob, K_NUM_CHANNELS, 1, meta_path, "global")
    if nch < 1:
        raise FormatError(f"{K_NUM_CHANNELS} must be at least 1", meta_path)
    if nch > 1:
        warnings.append(f"{nch} interleaved channels: only the first is analysed")
    offset = _int_field(glob, K_OFFSET, 0, meta_path, "global")
    trailing = _int_field(glob, K_TRAILING_BYTES, 0, meta_path, "global")

    caps_raw = doc.get("captures", [])
    if caps_raw is None:
        caps_raw = []
    if not isinstance(caps_raw, list) or not all(isinstance(c, Mapping) for c in caps_raw):
        raise FormatError("'captures' must be a list of objects", meta_path)
    if not caps_raw:
        caps_raw = [{K_SAMPLE_START: 0}]
    starts = [_int_field(c, K_SAMPLE_START, 0, meta_path, f"capture {i}") for i, c in enumerate(caps_raw)]
    headers = [_int_field(c, K_HEADER_BYTES, 0, meta_path, f"capture {i}") for i, c in enumerate(caps_raw)]
    if any(b < a for a, b in zip(starts, starts[1:])):
        raise FormatError("capture segments are not in order of core:sample_start", meta_path)
    if starts[0] != 0:
        warnings.append(f"the first capture starts at sample {starts[0]}; earlier samples belong to no capture")

    frame = fmt.sample_bytes * nch
    usable = data_bytes - trailing
    if usable < 0:
        raise FormatError(f"data file is shorter ({data_bytes} bytes) than its trailing bytes", data_path)
    runs: list[ByteRun] = []
    n_total = 0
    header_sum = 0
    if starts[0] > 0:  # samples before the first capture belong to no capture but exist
        n0 = min(starts[0], max(0, usable - headers[0]) // frame)
        runs.append(ByteRun(0, base_offset + headers[0], n0))
        n_total = n0
    for i, start in enumerate(starts):
        header_sum += headers[i]
        last = i + 1 == len(starts)
        if not last and starts[i + 1] == start:
            continue  # an empty segment; the next one at the same start is checked
        byte0 = header_sum + start * frame
        avail = max(0, usable - byte0)
        n = avail // frame if last else min(starts[i + 1] - start, avail // frame)
        if start > n_total or n == 0:
            if i == 0 and start == 0:
                raise FormatError("the data file holds no complete sample", data_path)
            raise MetadataError(
                f"capture segment {i} starts at sample {start}, past the end of the data "
                f"({n_total} samples)",
                meta_path,
            )
        if last and avail % frame:
            truncated(f"the data ends with a partial sample ({avail % frame} of {frame} bytes)",
                      data_path, req.accept_truncated, warnings)
        runs.append(ByteRun(start, base_offset + byte0, n))
        n_total = start + n

    center_override = req.center
    segments = []
    for i, c in enumerate(caps_raw):
        f = check_center(c.get(K_FREQUENCY), meta_path, f"capture {i} core:frequency")
        when = c.get(K_DATETIME)
        if when is not None and not isinstance(when, str):
            raise FormatError(f"capture {i} core:datetime must be a string", meta_path)
        segments.append(Segment(starts[i], center_override if center_override is not None else f, when))
    annotations = _parse_annotations(doc.get("annotations"), offset, n_total, meta_path, warnings)
    return FileRecording(
        data_path=data_path,
        sample_format=fmt,
        runs=runs,
        n_channels=nch,
        path=label_path,
        format="sigmf",
        sample_rate_hz=rate,
        center_frequency_hz=segments[0].center_frequency_hz,
        metadata=doc,
        segments=tuple(segments),
        annotations=annotations,
        warnings=tuple(warnings),
    )


def _dataset_size(data_path: Path, meta_path: Path) -> int:
    """Size of the dataset file, or an :class:`InputMissingError` naming the metadata file
    and saying why (not found, a folder, a named pipe ...)."""
    try:
        return file_size(data_path)
    except InputMissingError as exc:
        if os.path.exists(data_path):
            why = f"dataset file {data_path.name}: {exc.message.removesuffix(', not a recording file')}"
        else:
            why = f"dataset file {data_path.name} not found next to the metadata"
        raise InputMissingError(why, meta_path) from exc


def _open_pair(req: OpenRequest) -> Recording:
    meta_path, default_data = sigmf_paths(req.path)
    if req.path.name.lower().endswith(DATA_EXT) and not meta_path.exists():
        raise InputMissingError(f"no metadata file {meta_path.name} next to the data file", req.path)
    doc = read_json_file(meta_path)
    glob = doc.get("global") if isinstance(doc, Mapping) else None
    if isinstance(glob, Mapping) and glob.get(K_METADATA_ONLY) is True and K_DATASET not in glob:
        raise FormatError("a metadata-only recording holds no samples", meta_path)
    name = glob.get(K_DATASET) if isinstance(glob, Mapping) else None
    data_path = safe_sibling(meta_path, name if name is not None else default_data.name)
    size = _dataset_size(data_path, meta_path)
    warnings: list[str] = []
    return _build(doc, meta_path, data_path, 0, size, req, warnings, meta_path)


def _open_archive(req: OpenRequest) -> Recording:
    path = req.path
    total = file_size(path)
    if total == 0:
        raise FormatError("empty file", path)
    try:
        tar = tarfile.open(path, mode="r:")
    except tarfile.ReadError as exc:
        try:
            with tarfile.open(path, mode="r:*"):
                pass
        except (tarfile.TarError, OSError, EOFError):
            raise FormatError(f"not a readable SigMF archive (tar): {exc}", path) from None
        raise FormatError("compressed SigMF archive: decompress it first (samples are read in place)", path) from None
    except (OSError, EOFError) as exc:
        raise FormatError(f"not a readable SigMF archive (tar): {exc}", path) from exc
    warnings: list[str] = []
    try:
        try:
            members = tar.getmembers()
        except (tarfile.TarError, EOFError, OSError) as exc:
            raise FormatError(f"damaged tar archive: {exc}", path) from exc
        metas = [m for m in members if m.isfile() and m.name.lower().endswith(META_EXT)]
        if not metas:
            raise FormatError("archive holds no .sigmf-meta member", path)
        if len(metas) > 1:
            warnings.append(f"archive holds {len(metas)} recordings; reading {metas[0].name}")
        meta = metas[0]
        if meta.size > 256 * 1024 * 1024:
            raise FormatError("metadata member too large", path)
        fh = tar.extractfile(meta)
        if fh is None:  # pragma: no cover - isfile() checked
            raise FormatError("cannot read the metadata member", path)
        try:
            raw = fh.read()
        except (tarfile.TarError, OSError, EOFError) as exc:
            raise FormatError(f"damaged tar archive: {exc}", path) from exc
        meta_label = path / meta.name
        doc = parse_json_bytes(raw, meta_label)
        glob = doc.get("global") if isinstance(doc, Mapping) else None
        dataset = glob.get(K_DATASET) if isinstance(glob, Mapping) else None
        folder = meta.name.rpartition("/")[0]
        if dataset is not None:
            safe_sibling(Path("/nonexistent-folder/x"), dataset)  # name check only
            data_name = f"{folder}/{dataset}" if folder else dataset
        else:
            data_name = meta.name[: -len(META_EXT)] + DATA_EXT
        match = [m for m in members if m.name == data_name]
        if not match:
            raise InputMissingError(f"archive holds no data member {data_name}", path)
        member = match[-1]
        if not member.isfile() or member.issparse():
            raise FormatError(f"data member {data_name} is not a plain file", path)
        start = member.offset_data
        size = member.size
        if start + size > total:
            warnings.append(
                f"archive is truncated: data member has {max(0, total - start)} of {size} bytes"
            )
            size = max(0, total - start)
    finally:
        tar.close()
    rec = _build(doc, meta_label, path, start, size, req, warnings, path)
    return rec


def open_sigmf(req: OpenRequest) -> Recording:
    """Open a SigMF recording (metadata + dataset pair, or a ``.sigmf`` archive)."""
    name = req.path.name.lower()
    if name.endswith(ARCHIVE_EXT):
        return _open_archive(req)
    if name.endswith(META_EXT) or name.endswith(DATA_EXT):
        return _open_pair(req)
    try:
        with open(req.path, "rb") as fh:
            head = fh.read(1024)
    except OSError as exc:
        raise InputMissingError(f"cannot read: {exc.strerror or exc}", req.path) from exc
    if _is_tar(head):
        return _open_archive(req)
    doc = read_json_file(req.path)
    data = safe_sibling(req.path, req.path.stem + DATA_EXT)
    glob = doc.get("global") if isinstance(doc, Mapping) else None
    if isinstance(glob, Mapping) and glob.get(K_DATASET) is not None:
        data = safe_sibling(req.path, glob[K_DATASET])
    size = _dataset_size(data, req.path)
    return _build(doc, req.path, data, 0, size, req, [], req.path)


SIGMF_READER = register_reader(
    ReaderSpec(
        name="sigmf",
        aliases=("sigmf-archive",),
        extensions=(META_EXT, DATA_EXT, ARCHIVE_EXT),
        sniff=_sniff,
        open=open_sigmf,
        description="SigMF recording (.sigmf-meta + .sigmf-data) or uncompressed .sigmf archive",
    )
)


# -- writing ---------------------------------------------------------------------------
def _iso_utc(value: _dt.datetime | str) -> str:
    if isinstance(value, str):
        return value
    if value.tzinfo is None:
        value = value.replace(tzinfo=_dt.timezone.utc)
    value = value.astimezone(_dt.timezone.utc)
    return value.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def iter_blocks(samples: npt.ArrayLike | Iterable[npt.ArrayLike], block: int = _BLOCK) -> Iterator[npt.NDArray[Any]]:
    """Yield 1-D sample blocks: an array is sliced into ``block``-sample pieces; a list or
    tuple of arrays, or any other iterable (a generator of blocks), is passed on block by
    block; a plain sequence of numbers is taken as one array."""
    if isinstance(samples, (list, tuple)) and not all(isinstance(b, np.ndarray) for b in samples):
        samples = np.asarray(samples)
    if isinstance(samples, np.ndarray):
        arr = samples.ravel()
        for i in range(0, arr.size, block):
            yield arr[i : i + block]
        return
    if not isinstance(samples, Iterable):
        raise TypeError(f"samples must be an array or an iterable of arrays, not {type(samples).__name__}")
    for b in samples:
        yield np.asarray(b).ravel()


def _annotation_json(a: Annotation) -> dict[str, Any]:
    out: dict[str, Any] = {K_SAMPLE_START: int(a.start)}
    if a.count is not None:
        out[K_SAMPLE_COUNT] = int(a.count)
    if a.freq_lower_hz is not None:
        out[K_FREQ_LOWER] = float(a.freq_lower_hz)
    if a.freq_upper_hz is not None:
        out[K_FREQ_UPPER] = float(a.freq_upper_hz)
    if a.label:
        out[K_LABEL] = a.label
    if a.comment:
        out[K_COMMENT] = a.comment
    for k, v in a.extra.items():
        out.setdefault(k, v)
    return out


def _dump(doc: Mapping[str, Any]) -> str:
    try:
        return json.dumps(doc, indent=4, allow_nan=False) + "\n"
    except (TypeError, ValueError) as exc:
        raise ValueError(f"metadata holds a value JSON cannot carry: {exc}") from None


def write_sigmf(
    path: str | Path,
    samples: npt.ArrayLike | Iterable[npt.ArrayLike],
    sample_rate_hz: float,
    *,
    center_frequency_hz: float | None = None,
    datatype: str = "cf32_le",
    description: str = "",
    datetime: _dt.datetime | str | None = None,
    extra_global: Mapping[str, Any] | None = None,
    annotations: Sequence[Annotation] = (),
    force: bool = False,
) -> Path:
    """Write a SigMF recording (``.sigmf-meta`` + ``.sigmf-data``) and return the meta path.

    Parameters
    ----------
    path : path-like
        Base name, or either file name; both files are written next to each other.
    samples : ndarray or iterable of ndarray
        Complex samples, full scale 1; an iterable of blocks is streamed (for long captures)
        and the SHA-512 of the dataset is computed on the way.
    sample_rate_hz : float
        Sample rate, Hz.
    center_frequency_hz : float, optional
        Receiver centre frequency, Hz (``core:frequency`` of the one capture).
    datatype : str
        SigMF complex datatype, e.g. ``cf32_le`` (default), ``ci16_le``, ``ci8``, ``cu8``.
        Integers are rounded and saturate at full scale.
    description, datetime, extra_global, annotations
        ``core:description``; capture start time (``datetime`` or ISO string, UTC);
        more global keys (namespaced, e.g. ``"iqscope:synth"``); annotations to store.
    force : bool
        Overwrite existing files.

    Returns
    -------
    Path
        The ``.sigmf-meta`` file.

    Notes
    -----
    ``extra_global`` and ``annotations`` are read twice: once before any file is written
    (to fail early on values JSON cannot carry) and again after the last block is drawn,
    so a streaming producer may fill them in while it yields (live capture records its
    overflow counts and overflow annotations that way).

    Raises
    ------
    OutputError
        A file exists (without ``force``) or cannot be written.
    ValueError
        A bad rate, datatype, or NaN/Inf samples for an integer datatype.

    References
    ----------
    .. [1] SigMF specification 1.2.6, global, captures and annotations objects.
    """
    from .. import __version__

    try:
        rate = check_sample_rate(sample_rate_hz)
    except MetadataError as exc:
        raise ValueError(exc.message) from None
    fmt = parse_datatype(datatype)
    if not fmt.is_sigmf:
        raise ValueError(f"{datatype=} is not a SigMF datatype")
    if center_frequency_hz is not None:
        center_frequency_hz = check_center(center_frequency_hz, None)
    meta_path, data_path = sigmf_paths(path)
    check_can_write(meta_path, force=force)
    check_can_write(data_path, force=force)

    def make_doc(sha512: str) -> dict[str, Any]:
        # built again after streaming: a caller may fill extra_global and annotations
        # while the blocks are drawn (live capture counts overflows that way)
        ann = sorted((_annotation_json(a) for a in annotations), key=lambda d: d[K_SAMPLE_START])
        glob: dict[str, Any] = {
            K_DATATYPE: fmt.name,
            K_VERSION: SIGMF_SPEC,
            K_SAMPLE_RATE: rate,
            K_NUM_CHANNELS: 1,
            K_SHA512: sha512,
            K_RECORDER: f"iqscope {__version__}",
        }
        if description:
            glob[K_DESCRIPTION] = description
        for k, v in (extra_global or {}).items():
            if k in (K_DATATYPE, K_SHA512, K_NUM_CHANNELS, K_SAMPLE_RATE):
                raise ValueError(f"extra_global may not set {k}")
            glob[k] = v
        capture: dict[str, Any] = {K_SAMPLE_START: 0}
        if center_frequency_hz is not None:
            capture[K_FREQUENCY] = center_frequency_hz
        if datetime is not None:
            capture[K_DATETIME] = _iso_utc(datetime)
        return {"global": glob, "captures": [capture], "annotations": ann}

    _dump(make_doc(""))  # fail on unencodable metadata before any file is written

    sha = hashlib.sha512()
    n = 0
    with atomic_write(data_path, force=force) as fh:
        for block in iter_blocks(samples):
            raw = fmt.encode(block)
            sha.update(raw)
            fh.write(raw)
            n += block.size
        if n == 0:
            raise ValueError("no samples to write")
    try:
        atomic_write_text(meta_path, _dump(make_doc(sha.hexdigest())), force=force)
    except BaseException:
        data_path.unlink(missing_ok=True)  # the dataset we just wrote is useless alone
        raise
    return meta_path
