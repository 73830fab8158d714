"""Semantic styles and verdict symbols for the text report.

Renderers use style *names* (``iqscope.pass``, ``iqscope.warn`` ...), never literal
colours, so a user or a test can swap the theme. A verdict is always shown as a symbol
and a word ("✔ PASS"), so it reads without colour.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import IO, Final

from rich.console import Console
from rich.theme import Theme

__all__ = ["STYLES", "THEME", "verdict_style", "verdict_label", "make_console", "is_ascii"]

#: Style name -> style definition.
STYLES: Final[Mapping[str, str]] = {
    "iqscope.pass": "bold green",
    "iqscope.warn": "bold yellow",
    "iqscope.fail": "bold red",
    "iqscope.info": "dim",
    "iqscope.title": "bold",
    "iqscope.label": "bold",
    "iqscope.muted": "dim",
    "iqscope.value": "",
    "iqscope.limit": "",
    "iqscope.bound": "italic",
    "iqscope.note": "",
    "iqscope.advice": "cyan",
    "iqscope.artefact": "magenta",
    "iqscope.caution": "yellow",
}

#: The default theme.
THEME: Final = Theme(dict(STYLES))

_SYMBOLS: Final = {"pass": "\u2714", "warn": "!", "fail": "\u2718", "info": "-"}
_ASCII_SYMBOLS: Final = {"pass": "+", "warn": "!", "fail": "x", "info": "-"}


def is_ascii(console: Console) -> bool:
    """True when the console cannot print Unicode symbols."""
    return not console.encoding.lower().replace("-", "").startswith("utf")


def verdict_style(status: str) -> str:
    """The style name of a verdict (``iqscope.pass`` ...)."""
    return f"iqscope.{status}" if status in _SYMBOLS else "iqscope.info"


def verdict_label(status: str, ascii_only: bool = False) -> str:
    """Symbol and word: ``"✔ PASS"``, ``"! WARN"``, ``"✘ FAIL"`` (``"+ PASS"`` in ASCII)."""
    symbols = _ASCII_SYMBOLS if ascii_only else _SYMBOLS
    word = "-" if status == "info" else status.upper()
    return f"{symbols.get(status, '-')} {word}" if status != "info" else "-"


def make_console(
    file: IO[str] | None = None,
    *,
    stderr: bool = False,
    width: int | None = None,
    color_system: str | None = "auto",
    no_color: bool | None = None,
) -> Console:
    """A :class:`rich.console.Console` with the iqscope theme (tests pass a StringIO)."""
    return Console(
        file=file,
        stderr=stderr,
        width=width,
        color_system=color_system,  # type: ignore[arg-type]
        no_color=no_color,
        theme=THEME,
        highlight=False,
        emoji=False,
    )
