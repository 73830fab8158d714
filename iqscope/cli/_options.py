"""Option helpers shared by the command modules: plot folders and output checks.

Wiring only: these check what the user named before any work starts, so a command never
spends minutes measuring and then fails on its output.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from ..errors import OutputError, UsageError
from ..io._atomic import check_can_write

__all__ = ["check_plot_folder", "make_plot_folder"]


def check_plot_folder(folder: str | Path, files: Iterable[str], *, force: bool) -> Path:
    """Check that ``--plot FOLDER`` can take ``files`` (names inside it); create nothing.

    Raises:
        UsageError: FOLDER exists and is not a folder.
        OutputError: its parent does not exist, or a file exists there without ``force``.
    """
    path = Path(folder)
    if path.exists() and not path.is_dir():
        raise UsageError(f"--plot needs a folder, but {path} is a file")
    if not path.exists() and not path.absolute().parent.is_dir():
        raise OutputError("the folder to create the plot folder in does not exist", path)
    if path.is_dir():
        for name in files:
            check_can_write(path / name, force=force)
    return path


def make_plot_folder(folder: str | Path) -> Path:
    """Create the plot folder (its parent must exist); an existing folder is fine."""
    path = Path(folder)
    try:
        path.mkdir(exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create the plot folder: {exc.strerror or exc}", path) from exc
    return path
