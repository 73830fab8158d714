"""The one progress bar of every command: transient, on stderr, drawn by rich.

Commands hand the yielded ``progress(done, total)`` callback to the pipeline, the drift
tracker, a reading loop or a capture; it is None when the bar is off (quiet, or stderr
not a terminal), so callers skip the call altogether.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator

from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

__all__ = ["progress_reporter"]


@contextlib.contextmanager
def progress_reporter(
    console: Console | None, label: str, *, enabled: bool = True
) -> Iterator[Callable[[int, int], None] | None]:
    """A transient progress bar on ``console`` (stderr); yields a ``(done, total)`` callback.

    ``total`` may change between calls and is clamped to at least 1 (an empty recording
    never divides by zero). Yields None when not ``enabled``; nothing is printed then.
    With ``console=None`` the bar goes to a themed console on stderr.
    """
    if not enabled:
        yield None
        return
    if console is None:
        from ._theme import make_console

        console = make_console(stderr=True)
    progress = Progress(
        TextColumn("{task.description}"),
        BarColumn(),
        TextColumn("{task.percentage:>5.1f} %"),
        TimeRemainingColumn(),
        console=console,
        transient=True,
    )
    with progress:
        task = progress.add_task(label, total=None)

        def update(done: int, total: int) -> None:
            progress.update(task, completed=done, total=max(total, 1))

        yield update
