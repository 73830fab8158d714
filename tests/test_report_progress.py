"""The one progress bar (iqscope/report/_progress.py) that grade, drift, inspect and
capture share. Checked against rich's own task state (rich.progress.Progress is the
reference: percentage = completed / total * 100)."""

from __future__ import annotations

import io
from typing import Any

import pytest
from rich.console import Console
from rich.progress import Progress

from iqscope.report import _progress
from iqscope.report._progress import progress_reporter


def _terminal() -> tuple[Console, io.StringIO]:
    buf = io.StringIO()
    return Console(file=buf, force_terminal=True, width=70, color_system=None), buf


def test_disabled_yields_none_and_prints_nothing() -> None:
    console, buf = _terminal()
    with progress_reporter(console, "grading a.wav", enabled=False) as progress:
        assert progress is None
    assert buf.getvalue() == ""


def test_enabled_draws_the_label_and_is_transient() -> None:
    console, buf = _terminal()
    with progress_reporter(console, "tracking a.wav") as progress:
        assert progress is not None
        progress(25, 100)
    out = buf.getvalue()
    assert "tracking a.wav" in out


def test_total_is_clamped_to_at_least_one(monkeypatch: pytest.MonkeyPatch) -> None:
    """An empty recording reports total 0: the bar's total becomes 1, so rich never divides
    by zero and 0 of 1 reads 0 %."""
    seen: list[Any] = []
    class Spy(Progress):
        def update(self, task_id: Any, **kw: Any) -> None:
            super().update(task_id, **kw)
            seen.append((kw["completed"], kw["total"], self.tasks[0].percentage))

    monkeypatch.setattr(_progress, "Progress", Spy)
    console, _ = _terminal()
    with progress_reporter(console, "empty.cf32") as progress:
        assert progress is not None
        progress(0, 0)
        progress(3, 4)
    assert seen == [(0, 1, 0.0), (3, 4, 75.0)]


def test_default_console_is_stderr(capsys: pytest.CaptureFixture[str]) -> None:
    with progress_reporter(None, "capturing") as progress:
        assert progress is not None
        progress(1, 2)
    assert capsys.readouterr().out == ""
