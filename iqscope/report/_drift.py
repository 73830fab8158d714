"""Drift reports: text (rich), JSON document, PNG plots, live watch display.

Renderers only draw what :mod:`iqscope.measure.drift` computed (a
:class:`~iqscope.measure.drift.DriftResult` or a
:class:`~iqscope.measure.drift.WatchStatus`); they never compute a figure.
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Callable, Iterator, Mapping
from typing import Any, Final

import numpy as np
from matplotlib.figure import Figure
from rich.console import Console, Group, RenderableType
from rich.live import Live
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from ..io._recording import Recording
from ..measure._analysis import Trace
from ..measure._result import Measurement
from ..measure.drift import NOTE_INCLUDES_RECEIVER, NOTE_RELATIVE, DriftResult, WatchStatus
from . import _plots
from ._plots import figure_png, line_figure, worst_window
from ._units import format_duration, format_frequency, format_measurement, format_rate, ge_le

__all__ = [
    "DRIFT_SCHEMA",
    "DRIFT_FIGURES",
    "DRIFT_PLOT_NAMES",
    "drift_document",
    "render_drift",
    "drift_plots",
    "watch_panel",
    "live_watch",
]

#: Schema of ``iqscope drift --json``.
DRIFT_SCHEMA: Final = "iqscope.drift/1"
#: Figures in report order, with their labels.
DRIFT_FIGURES: Final[Mapping[str, str]] = {
    "frequency_offset_hz": "Frequency offset",
    "frequency_error_hz": "Error from nominal",
    "drift_hz_per_min": "Drift rate",
    "drift_peak_to_peak_hz": "Peak-to-peak",
    "drift_worst_window_hz": "Worst window",
    "warmup_settling_s": "Warm-up settling",
    "allan_deviation": "Allan deviation",
    "hadamard_deviation": "Hadamard deviation",
    "allan_deviation_drift_removed": "Allan deviation, drift removed",
}
#: Plots ``drift_plots`` may produce (file names ``STEM-drift-NAME.png``).
DRIFT_PLOT_NAMES: Final = ("frequency", "allan")


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def drift_document(result: DriftResult, recording: Recording, *, include_track: bool = True) -> dict[str, Any]:
    """The ``iqscope drift --json`` object (schema ``iqscope.drift/1``)."""
    tr = result.track
    t, f, s = tr.corrected()
    doc: dict[str, Any] = {
        "schema": DRIFT_SCHEMA,
        "recording": {
            "path": None if recording.path is None else str(recording.path),
            "format": recording.format,
            "sample_rate_hz": recording.sample_rate_hz,
            "center_frequency_hz": _finite(recording.center_frequency_hz),
            "n_samples": recording.n_samples,
            "duration_s": recording.duration_s,
            "swap_iq": bool(getattr(recording, "swap_iq", False)),
        },
        "line": {
            "kind": tr.plan.kind,
            "description": tr.plan.description,
            "start_offsets_hz": list(tr.plan.lines_hz),
            "carrier_shift_hz": _finite(tr.plan.carrier_shift_hz),
            "reference_line_hz": _finite(tr.stable_nominal_hz),
            "relative_to_reference": tr.stable_hz is not None,
        },
        "tracking": {
            "block_s": tr.block_s,
            "span_hz": tr.span_hz,
            "window": tr.window,
            "n_blocks": tr.n_blocks,
            "n_used": int(t.size),
            "nominal_offset_hz": result.nominal_offset_hz,
        },
        "measurements": {k: m.to_json() for k, m in result.measurements.items()},
        "warnings": list(result.warnings),
    }
    if include_track:
        doc["track"] = {
            "time_s": [round(float(v), 6) for v in t],
            "offset_hz": [round(float(v), 6) for v in (f - result.nominal_offset_hz)],
            "sigma_hz": [float(f"{v:.3g}") for v in s],
        }
    return doc


def _value_text(name: str, m: Measurement, ascii_only: bool) -> str:
    if m.value is None:
        return "not measured"
    if m.unit == "1":
        pm = ge_le(ascii_only)[2]
        u = f" {pm} {m.uncertainty:.1e}" if m.uncertainty else ""
        tau = m.details.get("tau_quoted_s")
        at = f" at tau = {tau:g} s" if tau is not None else ""
        return f"{m.value:.2e}{u}{at}"
    if name == "warmup_settling_s":
        return format_measurement(name, m.value, m.unit, m.uncertainty, ascii_only=ascii_only) + (
            f" ({format_duration(m.value)})" if m.value >= 60 else ""
        )
    return format_measurement(
        name, m.value, m.unit, m.uncertainty, limited_by_noise=m.limited_by_noise, bound=m.bound,
        ascii_only=ascii_only,
    )


def render_drift(result: DriftResult, recording: Recording, *, ascii_only: bool = False) -> RenderableType:
    """Header, figures table and notes of ``iqscope drift``."""
    tr = result.track
    head = Table.grid(padding=(0, 2))
    head.add_column(style="iqscope.label")
    head.add_column()
    head.add_row("Recording", f"{recording.name}  ({format_rate(recording.sample_rate_hz)}, "
                 f"{format_duration(recording.duration_s)}, centre "
                 f"{format_frequency(recording.center_frequency_hz)})")
    head.add_row("Followed", tr.plan.description)
    if tr.stable_hz is not None:
        head.add_row("Reference", f"stable line near {tr.stable_nominal_hz:.1f} Hz: figures are relative to it")
    else:
        head.add_row("Reference", "none: the figures include the receiver's own drift")
    head.add_row("Blocks", f"{tr.n_blocks} x {tr.block_s:g} s, search +/-{tr.span_hz:.3g} Hz, {tr.window} window")
    table = Table(title="Frequency drift", title_justify="left", show_lines=False)
    table.add_column("Figure", style="iqscope.label")
    table.add_column("Value", style="iqscope.value", no_wrap=True)
    notes = Table.grid(padding=(0, 1))
    notes.add_column(style="iqscope.muted", no_wrap=True)
    notes.add_column(style="iqscope.note")
    for i, (name, label) in enumerate(((n, lb) for n, lb in DRIFT_FIGURES.items() if n in result.measurements), 1):
        m = result.measurements[name]
        table.add_row(f"{label} [{i}]", _value_text(name, m, ascii_only))
        # the receiver sentence is said once, in the header
        note = m.note.replace(NOTE_RELATIVE, "").replace(NOTE_INCLUDES_RECEIVER, "").strip()
        notes.add_row(f"[{i}]", note)
    parts: list[RenderableType] = [head, table, notes]
    for w in result.warnings:
        parts.append(Text(f"! {w}", style="iqscope.warn"))
    return Group(*parts)


# -- plots ----------------------------------------------------------------------------
# Drawn by the shared figures of report/_plots.py (one look for grade and drift); drift
# adds its own marks: the regression line and the settling time.
def frequency_figure(result: DriftResult, title: str) -> Figure:
    """Frequency offset against time with its 1-sigma band and the worst window
    (:func:`~iqscope.report._plots.line_figure`), plus the regression line and the
    settling time. Time is in minutes beyond 10 minutes."""
    tr = result.frequency_trace()
    x = np.asarray(tr.x, dtype=float)
    scale, xlab = (60.0, "time (min)") if x.size and x[-1] > 600 else (1.0, "time (s)")
    y_label = tr.y_label + (" (relative to reference line)" if tr.extra.get("relative") else "")
    shown = Trace(x=x / scale, y=np.asarray(tr.y, dtype=float), x_label=xlab, y_label=y_label)
    window = worst_window(result.measurements)
    if window is not None:
        window = (window[0] / scale, window[1] / scale, window[2])
    fig = line_figure(shown, title, band=tr.extra.get("sigma"), window=window)
    ax = fig.axes[0]
    fit = tr.extra.get("fit")
    slope = result.measurements.get("drift_hz_per_min")
    if fit is not None and x.size:
        icpt, b = fit
        xx = np.array([x[0], x[-1]])
        lab = "fit" if slope is None or slope.value is None else f"fit {slope.value:+.3g} Hz/min"
        ax.plot(xx / scale, icpt + b * xx - result.nominal_offset_hz, "--", color="#c0392b", linewidth=1.0, label=lab)
    st = result.measurements.get("warmup_settling_s")
    kd = tr.extra.get("key_down_s")
    if st is not None and st.value is not None and st.value > 0 and kd is not None:
        ax.axvline((kd + st.value) / scale, color="#27ae60", linewidth=1.0, label="settled")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="best", fontsize=7)
    return fig


def allan_figure(result: DriftResult, title: str) -> Figure | None:
    """Overlapping Allan deviation against tau (log-log) with simple error bars
    (:func:`~iqscope.report._plots.allan_figure`); None without the RF frequency."""
    tr = result.allan_trace()
    if tr is None:
        return None
    fig = _plots.allan_figure(tr, title)
    fig.axes[0].set_ylabel(tr.y_label + " (fractional)")
    return fig


def drift_plots(result: DriftResult, name: str) -> dict[str, bytes]:
    """``{"frequency": PNG, "allan": PNG}`` (ADEV only when the RF frequency is known)."""
    out: dict[str, bytes] = {}
    if result.track.corrected()[0].size > 1:
        out["frequency"] = figure_png(frequency_figure(result, f"Frequency over time: {name}"))
    fig = allan_figure(result, f"Allan deviation: {name}")
    if fig is not None:
        out["allan"] = figure_png(fig)
    return out


# -- live -----------------------------------------------------------------------------
def _opt(x: float | None, fmt: str, unit: str = "") -> str:
    return "-" if x is None or not math.isfinite(x) else f"{x:{fmt}}{unit}"


def watch_panel(status: WatchStatus, *, title: str = "iqscope watch", state: str = "") -> Panel:
    """The live display of ``iqscope watch``: one small table, redrawn every block."""
    t = Table.grid(padding=(0, 2))
    t.add_column(style="iqscope.label")
    t.add_column(style="iqscope.value")
    t.add_row("Followed", status.what)
    t.add_row("Time", f"{format_duration(status.elapsed_s)}  ({status.n_valid}/{status.n_blocks} blocks with the line)")
    t.add_row("Level", _opt(status.level_dbfs, ".1f", " dBFS") + "   SNR " + _opt(status.snr_db, ".1f", " dB/sample"))
    off = _opt(status.offset_hz, "+.3f", " Hz")
    if status.sigma_hz is not None:
        off += f" +/- {status.sigma_hz:.2g} Hz"
    t.add_row("Offset", off)
    drift = _opt(status.drift_hz_per_min, "+.3f", " Hz/min")
    if status.drift_se_hz_per_min is not None:
        drift += f" +/- {status.drift_se_hz_per_min:.2g}"
    t.add_row("Drift so far", drift + "   peak-to-peak " + _opt(status.peak_to_peak_hz, ".3f", " Hz"))
    if status.carrier_suppression_db is not None:
        cs = f"{status.carrier_suppression_db:.1f} dB"
        if status.carrier_limited_by_noise:
            cs = f">= {math.floor(status.carrier_suppression_db):.0f} dB (noise-limited)"
        t.add_row("Carrier suppression", cs)
    return Panel(t, title=title, subtitle=state or None, title_align="left")


@contextlib.contextmanager
def live_watch(console: Console, title: str) -> Iterator[Callable[[WatchStatus | None, str], None]]:
    """The live display of ``iqscope watch`` on ``console`` (transient: gone when it ends).

    Yields ``show(status, state)``: with a :class:`~iqscope.measure.drift.WatchStatus` it
    redraws :func:`watch_panel`; with ``None`` (no line chosen yet) one muted line
    ``"TITLE: STATE ..."``.
    """
    waiting = Text("waiting for data ...", style="iqscope.muted")
    with Live(waiting, console=console, refresh_per_second=4, transient=True) as live:

        def show(status: WatchStatus | None, state: str) -> None:
            if status is None:
                live.update(Text(f"{title}: {state} ...", style="iqscope.muted"))
            else:
                live.update(watch_panel(status, title=title, state=state))

        yield show
