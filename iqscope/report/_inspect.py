"""Rendering of ``iqscope inspect``: a rich table of the recording facts.

The data are the plain mapping that ``iqscope inspect --json`` prints (see
``iqscope.cli._inspect.inspect_data``); nothing here computes a figure.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from rich.console import Console
from rich.table import Table

__all__ = ["inspect_table", "render_inspect", "format_hz", "format_db"]


def format_hz(value: float | None) -> str:
    """A frequency with an SI prefix (``14.100000 MHz``), or ``unknown``."""
    if value is None:
        return "unknown"
    a = abs(value)
    for scale, unit, digits in ((1e9, "GHz", 9), (1e6, "MHz", 6), (1e3, "kHz", 3)):
        if a >= scale:
            return f"{value / scale:.{digits}f} {unit}"
    return f"{value:.6g} Hz"


def format_db(value: float | None, unit: str = "dBFS", none: str = "no signal") -> str:
    """A level to 0.01 dB, or ``none`` when there is no finite level (zero power)."""
    if value is None:
        return none
    return f"{value:.2f} {unit}"


def _duration(seconds: float) -> str:
    if seconds >= 120:
        return f"{seconds / 60:.2f} min ({seconds:.3f} s)"
    return f"{seconds:.6g} s"


def inspect_table(data: Mapping[str, Any]) -> Table:
    """The recording facts as a two-column table."""
    table = Table(title=str(data.get("path", "")), show_header=False, title_justify="left")
    table.add_column("fact", style="bold")
    table.add_column("value")
    clipped = data.get("clipped_fraction")
    rows = [
        ("format", f"{data['format']} ({data['datatype']})"),
        ("sample rate", format_hz(data["sample_rate_hz"]).replace("Hz", "S/s")),
        ("centre frequency", format_hz(data.get("center_frequency_hz"))),
        ("samples", f"{data['n_samples']:,}"),
        ("duration", _duration(float(data["duration_s"]))),
        ("peak", format_db(data.get("peak_dbfs"))),
        ("mean power", format_db(data.get("mean_dbfs"))),
        ("DC offset", format_db(data.get("dc_offset_dbfs"), none="none")),
        ("clipped", "n/a" if clipped is None else f"{100.0 * clipped:.4g} % of samples"),
    ]
    nonfinite = data.get("nonfinite_samples", 0)
    if nonfinite:
        rows.append(("non-finite", f"{nonfinite:,} samples (replaced by 0)"))
    segments = data.get("segments", [])
    if len(segments) > 1:
        for i, seg in enumerate(segments):
            rows.append(
                (f"segment {i}", f"from sample {seg['start']:,}: {format_hz(seg.get('center_frequency_hz'))}"
                 + (f", {seg['datetime']}" if seg.get("datetime") else ""))
            )
    elif segments and segments[0].get("datetime"):
        rows.append(("start time", str(segments[0]["datetime"])))
    rows.append(("annotations", str(data.get("annotations", 0))))
    for k, v in rows:
        table.add_row(k, v)
    for w in data.get("warnings", []):
        table.add_row("[yellow]warning[/yellow]", w)
    return table


def render_inspect(data: Mapping[str, Any], console: Console | None = None) -> None:
    """Print the inspect table to ``console`` (stdout by default; inject a Console writing to
    a StringIO in tests)."""
    (console or Console()).print(inspect_table(data))
