"""Reports: the only place rich and matplotlib are used. Renderers never compute.

- text (rich): :func:`print_grade`, :func:`render_header`, :func:`render_verdict_table`,
  :func:`render_notes`, :func:`render_caution`; theme :data:`THEME`, :func:`make_console`
- JSON: :func:`grade_document`, :func:`batch_document`, :func:`dumps`
- plots (matplotlib Agg): :func:`render_plots` -> ``{name: PNG bytes}``
- HTML: :func:`render_html` (one self-contained page)
- SigMF: :func:`write_annotated_meta` (a new ``NAME.graded.sigmf-meta``)
- numbers: :mod:`iqscope.report._units`

Names are imported on first use, so a text-only command never loads matplotlib.
"""

from __future__ import annotations

import importlib
from typing import Any

_WHERE = {
    "annotated_meta_path": "_annotate",
    "write_annotated_meta": "_annotate",
    "render_html": "_html",
    "batch_document": "_json",
    "dumps": "_json",
    "grade_document": "_json",
    "PLOT_NAMES": "_plots",
    "render_plots": "_plots",
    "CAUTION": "_text",
    "print_grade": "_text",
    "progress_reporter": "_progress",
    "render_caution": "_text",
    "render_header": "_text",
    "render_notes": "_text",
    "render_summary": "_text",
    "render_verdict_table": "_text",
    "THEME": "_theme",
    "make_console": "_theme",
    "verdict_label": "_theme",
}

__all__ = sorted(_WHERE)


def __getattr__(name: str) -> Any:
    module = _WHERE.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_WHERE))
