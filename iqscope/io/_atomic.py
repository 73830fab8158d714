"""Atomic output files: write a temporary file in the same folder, sync it, then rename.

Every file iqscope writes (recordings, reports, plots, JSON, annotations) goes through
:func:`atomic_write` or :func:`atomic_write_text`, so a reader never sees a half-written
file, an interrupted run leaves the old file (or nothing) in place, and an existing
file is never overwritten unless ``force`` is given.

Example::

    with atomic_write(out_path, force=args.force) as fh:
        fh.write(payload)            # fh is a binary file object
    atomic_write_text(report_path, text, force=args.force)
"""

from __future__ import annotations

import contextlib
import os
import shutil
import stat
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import BinaryIO

from ..errors import OutputError

__all__ = ["atomic_write", "atomic_write_text", "check_can_write", "check_free_space"]


def _umask_mode() -> int:
    """Permission bits a newly created ordinary file would get (0o666 less the umask)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def check_can_write(path: str | os.PathLike[str], *, force: bool = False) -> Path:
    """Raise :class:`OutputError` if ``path`` cannot be written (exists without force, no folder).

    Nothing is created. Useful to check every output of a command before starting work.
    """
    target = Path(path)
    folder = target.parent
    if not folder.is_dir():
        raise OutputError("the folder to write into does not exist", target)
    if os.path.lexists(target):
        if os.path.isdir(target):
            raise OutputError("is a folder; cannot write a file there", target)
        if not force:
            raise OutputError("already exists; use --force to overwrite it", target)
    return target


def _size_text(n_bytes: float) -> str:
    for unit in ("B", "kB", "MB", "GB", "TB", "PB"):
        if n_bytes < 1000 or unit == "PB":
            return f"{n_bytes:.3g} {unit}"
        n_bytes /= 1000
    return f"{n_bytes:.3g} PB"  # pragma: no cover


def check_free_space(path: str | os.PathLike[str], n_bytes: float) -> None:
    """Raise :class:`OutputError` when ``path``'s folder has less than ``n_bytes`` free.

    A check before a long write (a synthesized or captured recording) whose size is
    known in advance, so that a mistyped length fails at once instead of filling the
    disk. Nothing is created; a folder whose free space cannot be read passes.
    """
    target = Path(path)
    try:
        free = shutil.disk_usage(target.parent).free
    except OSError:
        return
    if n_bytes > free:
        raise OutputError(
            f"would need about {_size_text(n_bytes)} but its folder has {_size_text(free)} free",
            target,
        )


def _fsync_folder(folder: Path) -> None:
    if os.name != "posix":  # pragma: no cover
        return
    try:
        dfd = os.open(folder, os.O_RDONLY)
    except OSError:  # pragma: no cover - e.g. no permission to open the folder
        return
    try:
        os.fsync(dfd)
    except OSError:  # pragma: no cover - some filesystems refuse fsync on folders
        pass
    finally:
        os.close(dfd)


@contextlib.contextmanager
def atomic_write(path: str | os.PathLike[str], *, force: bool = False) -> Iterator[BinaryIO]:
    """Context manager yielding a binary file that replaces ``path`` atomically on success.

    The data go to a temporary file in the same folder; when the ``with`` block ends
    without an exception the file is flushed, ``fsync``-ed and renamed over ``path``
    (``os.replace``), and the folder entry is synced. On an exception the temporary file
    is removed and ``path`` is untouched.

    Parameters
    ----------
    path : path-like
        The file to create.
    force : bool
        Overwrite ``path`` if it exists. Without it an existing file is an error, checked
        before writing and again at the rename (a file created meanwhile is not replaced).

    Raises
    ------
    OutputError
        The file exists (without ``force``), the folder is missing, or writing failed.
    """
    target = check_can_write(path, force=force)
    folder = target.parent
    try:
        fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=folder)
    except OSError as exc:
        raise OutputError(f"cannot create a file in its folder: {exc.strerror or exc}", target) from exc
    tmp = Path(tmp_name)
    try:
        mode = _umask_mode()
        if force and os.path.exists(target):
            with contextlib.suppress(OSError):
                mode = stat.S_IMODE(os.stat(target).st_mode)
        fh = os.fdopen(fd, "wb")
    except BaseException:
        os.close(fd)
        tmp.unlink(missing_ok=True)
        raise
    try:
        with fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        with contextlib.suppress(OSError):
            os.chmod(tmp, mode)
        _commit(tmp, target, force)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise OutputError(f"cannot write: {exc.strerror or exc}", target) from exc
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    _fsync_folder(folder)


def _commit(tmp: Path, target: Path, force: bool) -> None:
    if force:
        os.replace(tmp, target)
        return
    # without force: a hard link fails if the target appeared meanwhile (no overwrite race)
    try:
        os.link(tmp, target)
    except FileExistsError:
        tmp.unlink(missing_ok=True)
        raise OutputError("already exists; use --force to overwrite it", target) from None
    except OSError:
        # filesystems without hard links: check, then rename
        if os.path.lexists(target):
            tmp.unlink(missing_ok=True)
            raise OutputError("already exists; use --force to overwrite it", target) from None
        os.replace(tmp, target)
        return
    tmp.unlink(missing_ok=True)


def atomic_write_text(
    path: str | os.PathLike[str], text: str, force: bool = False, *, encoding: str = "utf-8"
) -> Path:
    """Write ``text`` to ``path`` atomically (see :func:`atomic_write`); return the path.

    Newlines are written as given (``"\\n"``), on every platform.
    """
    data = text.encode(encoding)
    with atomic_write(path, force=force) as fh:
        fh.write(data)
    return Path(path)
