"""Helpers shared by the readers: safe sibling paths, bounded JSON, sidecars, overrides."""

from __future__ import annotations

import json
import math
import os
import stat
from collections.abc import Mapping
from pathlib import Path
from typing import Any, Final

from ..errors import FormatError, InputMissingError, MetadataError, UnsafePathError
from ._recording import check_sample_rate

__all__ = [
    "SIDECAR_SUFFIX",
    "MAX_JSON_BYTES",
    "safe_sibling",
    "read_json_file",
    "parse_json_bytes",
    "sidecar_path",
    "read_sidecar",
    "check_center",
    "resolve_rate",
    "not_regular_reason",
]

#: Suffix of our own sidecar file, appended to the full file name (``x.wav.iqscope.json``).
SIDECAR_SUFFIX: Final = ".iqscope.json"

#: Largest metadata or sidecar JSON we read (bytes); a bigger one is refused, not loaded.
MAX_JSON_BYTES: Final = 256 * 1024 * 1024

_SIDECAR_KEYS: Final = frozenset(
    {"center_frequency_hz", "sample_rate_hz", "datatype", "datetime", "description"}
)


def _inside(folder: Path, target: str) -> bool:
    real_folder = os.path.realpath(folder)
    try:
        return os.path.commonpath([real_folder, target]) == real_folder
    except ValueError:  # different drives
        return False


def safe_sibling(meta_path: Path, name: str, what: str = "dataset") -> Path:
    """Return ``meta_path.parent / name`` if it is safe to open, else raise.

    ``name`` must be a bare file name (no folder part, not ``..``); if the sibling is a
    symbolic link, its final target must lie inside the metadata file's folder. Nothing
    is opened: only the name and the link target are examined.

    Raises:
        UnsafePathError: the name has a folder part or is absolute, or a link leads out.
    """
    if not isinstance(name, str) or not name:
        raise FormatError(f"the {what} file name {name!r} is not a file name", meta_path)
    bad = (
        "/" in name
        or "\\" in name
        or "\x00" in name
        or name in (".", "..")
        or os.path.isabs(name)
        or (len(name) > 1 and name[1] == ":")
    )
    if bad:
        raise UnsafePathError(
            f"refusing {what} {name!r}: a {what} must be a file next to the metadata file", meta_path
        )
    folder = meta_path.parent
    candidate = folder / name
    try:
        st = os.lstat(candidate)
    except FileNotFoundError:
        return candidate  # the caller reports it missing
    except OSError as exc:
        raise InputMissingError(f"cannot examine {what}: {exc.strerror or exc}", candidate) from exc
    if stat.S_ISLNK(st.st_mode):
        target = os.path.realpath(candidate)
        if not _inside(folder, target):
            raise UnsafePathError(
                f"refusing {what}: it is a symbolic link to a file outside the metadata file's folder",
                candidate,
            )
    return candidate


def parse_json_bytes(raw: bytes, path: Path) -> Any:
    """Decode a JSON document, translating every decoding error to :class:`FormatError`."""
    if not raw.strip():
        raise FormatError("empty metadata file", path)
    try:
        return json.loads(raw.decode("utf-8-sig"))
    except UnicodeDecodeError as exc:
        raise FormatError(f"metadata is not UTF-8 text (byte {exc.start})", path) from exc
    except json.JSONDecodeError as exc:
        raise FormatError(f"malformed JSON at line {exc.lineno} column {exc.colno}: {exc.msg}", path) from exc
    except RecursionError as exc:
        raise FormatError("JSON nested too deeply", path) from exc


def not_regular_reason(mode: int) -> str:
    """Why a file of ``st_mode`` ``mode`` is no recording: ``"is a folder"`` or ``"not a
    regular file (a named pipe)"`` (a socket, a device ...). Such files are refused before
    they are opened: opening a named pipe would wait for a writer."""
    if stat.S_ISDIR(mode):
        return "is a folder"
    if stat.S_ISFIFO(mode):
        kind = "a named pipe"
    elif stat.S_ISSOCK(mode):
        kind = "a socket"
    elif stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        kind = "a device"
    else:
        kind = "a special file"
    return f"not a regular file ({kind})"


def regular_file_stat(path: Path, *, what: str = "") -> os.stat_result:
    """``path.stat()`` of a regular file, else :class:`InputMissingError` (missing,
    unreadable, or a folder / pipe / device: ``what`` is added to that reason)."""
    try:
        st = path.stat()
    except FileNotFoundError as exc:
        raise InputMissingError("file not found", path) from exc
    except OSError as exc:
        raise InputMissingError(f"cannot read: {exc.strerror or exc}", path) from exc
    if not stat.S_ISREG(st.st_mode):
        raise InputMissingError(not_regular_reason(st.st_mode) + what, path)
    return st


def read_json_file(path: Path) -> Any:
    """Read and decode a JSON file of bounded size."""
    st = regular_file_stat(path)
    if st.st_size > MAX_JSON_BYTES:
        raise FormatError(f"metadata of {st.st_size} bytes is larger than we read", path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_JSON_BYTES + 1)
    except OSError as exc:
        raise InputMissingError(f"cannot read: {exc.strerror or exc}", path) from exc
    return parse_json_bytes(raw, path)


def sidecar_path(data_path: Path) -> Path:
    """Our sidecar for ``data_path``: the same file name plus ``.iqscope.json``."""
    return data_path.with_name(data_path.name + SIDECAR_SUFFIX)


def check_center(value: Any, path: Path | None, what: str = "centre frequency") -> float | None:
    """Return a finite float (Hz) or None; raise :class:`MetadataError` on nonsense."""
    if value is None:
        return None
    if isinstance(value, bool):
        raise MetadataError(f"{what} {value!r} is not a number", path)
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise MetadataError(f"{what} {value!r} is not a number", path) from None
    if not math.isfinite(out) or abs(out) > 1e13:
        raise MetadataError(f"{what} {value!r} Hz is not usable", path)
    return out


def read_sidecar(data_path: Path) -> dict[str, Any]:
    """Read ``<file>.iqscope.json`` if present (else ``{}``) and check its values.

    Keys: ``center_frequency_hz`` (Hz), ``sample_rate_hz`` (Hz, raw files only),
    ``datatype`` (raw files only), ``datetime`` (ISO 8601 UTC), ``description``.
    Unknown keys are ignored. A sidecar that is a link out of the folder is refused.
    """
    side = sidecar_path(data_path)
    if not os.path.lexists(side):
        return {}
    side = safe_sibling(data_path, side.name, "sidecar")
    doc = read_json_file(side)
    if not isinstance(doc, Mapping):
        raise FormatError("sidecar must hold a JSON object", side)
    out: dict[str, Any] = {k: v for k, v in doc.items() if k in _SIDECAR_KEYS}
    if "center_frequency_hz" in out:
        out["center_frequency_hz"] = check_center(out["center_frequency_hz"], side)
    if "sample_rate_hz" in out:
        out["sample_rate_hz"] = check_sample_rate(out["sample_rate_hz"], side)
    for key in ("datatype", "datetime", "description"):
        if key in out and out[key] is not None and not isinstance(out[key], str):
            raise MetadataError(f"sidecar {key} must be a string", side)
    out["_path"] = str(side)
    return out


def resolve_rate(override: float | None, from_file: Any, path: Path) -> float:
    """The sample rate to use: the caller's override if given, else the file's (checked)."""
    if override is not None:
        return check_sample_rate(override, path)
    return check_sample_rate(from_file, path)


#: What a refusal of a truncated file tells the user to do.
ACCEPT_TRUNCATED_HINT = "give --accept-truncated to read what is there"


def truncated(what: str, path: Path | None, accept: bool, warnings: list[str]) -> None:
    """A file ends before its own structure says it should: refuse it (``FormatError``,
    exit 3, naming it as truncated) unless ``accept``; then add ``what`` to ``warnings``."""
    if not accept:
        raise FormatError(f"truncated: {what}; {ACCEPT_TRUNCATED_HINT}", path)
    warnings.append(f"truncated: {what}; reading the whole samples there are (--accept-truncated)")
