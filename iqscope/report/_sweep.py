"""Rendering of ``iqscope harmonics`` and ``iqscope sweep``: rich tables and matplotlib plots.

The inputs are the plain mappings the commands print with ``--json``
(``HarmonicsTable.to_json()`` and ``SweepResult.to_json()``, schemas
``iqscope.harmonics/1`` and ``iqscope.sweep/1``); nothing here computes a figure, it only
arranges and formats them. Plots use the Agg canvas (no pyplot) and return PNG bytes.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from matplotlib.figure import Figure
from rich.console import Console, Group, RenderableType
from rich.table import Table
from rich.text import Text

from ._plots import figure_png
from ._text import render_caution
from ._theme import is_ascii
from ._units import format_bound, format_frequency, format_value

__all__ = [
    "harmonics_renderable",
    "print_harmonics",
    "harmonics_figure",
    "sweep_renderable",
    "print_sweep",
    "sweep_figure",
    "render_harmonics_png",
    "render_sweep_png",
]

_COMPARISON_STYLE = {
    "meets": "iqscope.pass",
    "exceeds": "iqscope.fail",
    "inconclusive": "iqscope.warn",
    "warn": "iqscope.warn",
}
_COMPARISON_WORD = {"meets": "meets", "exceeds": "EXCEEDS", "inconclusive": "inconclusive (noise)", "warn": "WARN"}
_OVERALL_STYLE = {"pass": "iqscope.pass", "warn": "iqscope.warn", "fail": "iqscope.fail"}


def _level(row: Mapping[str, Any], key: str, unit: str, ascii_only: bool) -> str:
    v = row.get(key)
    if v is None:
        return "-"
    if row.get("limited_by_noise"):
        return format_bound(float(v), unit, "upper", ascii_only=ascii_only)
    u = row.get("uncertainty_db")
    return format_value(float(v), unit, None if u is None else float(u), ascii_only=ascii_only)


def harmonics_renderable(data: Mapping[str, Any], *, ascii_only: bool = False) -> RenderableType:
    """The harmonics table: n, frequency, level in dBFS / dBm / dBc, verdict per limit.

    The verdicts (``comparisons``, ``overall``) come from grading; this only shows them.
    """
    limits: Sequence[Mapping[str, Any]] = data.get("limits", [])
    fund = data["fundamental"]
    table = Table(title="Harmonics re mean power of the fundamental", title_justify="left")
    table.add_column("n", justify="right")
    table.add_column("frequency")
    table.add_column("level")
    table.add_column("dBc", justify="right")
    for lim in limits:
        table.add_column(f"{lim['name']}\n({lim['limit_dbc']:.1f} dBc)")
    table.add_column("file", style="iqscope.muted")
    has_dbm = fund.get("level_dbm") is not None
    rows = [fund, *data.get("harmonics", [])]
    for row in rows:
        level_key, unit = ("level_dbm", "dBm") if has_dbm else ("level_dbfs", "dBFS")
        cells: list[RenderableType] = [
            str(row["n"]),
            format_frequency(row.get("frequency_hz")),
            _level(row, level_key, unit, ascii_only),
            "reference" if row["n"] == 1 else _level(row, "level_dbc", "dBc", ascii_only),
        ]
        for lim in limits:
            comp = row.get("comparisons", {}).get(lim["name"])
            if comp not in _COMPARISON_WORD:
                cells.append("")
            else:
                cells.append(Text(_COMPARISON_WORD[comp], style=_COMPARISON_STYLE[comp]))
        cells.append(str(row.get("path", "")))
        table.add_row(*cells)
    parts: list[RenderableType] = []
    profile = data.get("limits_profile")
    if profile:
        head = Text("limits  ", style="iqscope.muted")
        head.append(str(profile.get("name", "")))
        if profile.get("default"):
            head.append("  (default for harmonics)", style="iqscope.muted")
        parts.append(head)
    parts.append(table)
    bullet = "-" if ascii_only else "\u2022"
    overall = data.get("overall")
    if overall in _OVERALL_STYLE:
        parts.append(Text(f"overall  {overall.upper()}", style=_OVERALL_STYLE[overall]))
    for lim in limits:
        source = str(lim.get("source", ""))
        if source.startswith(f"{lim['name']}:"):  # a source that starts by citing the limit's name
            source = source[len(lim["name"]) + 1 :].lstrip()
        line = f"{bullet} {lim['name']}: {source}"
        if lim.get("assumption"):
            line += f" ({lim['assumption']})"
        parts.append(Text(line, style="iqscope.note"))
    for row in data.get("harmonics", []):
        step = row.get("attenuation_step")
        if step:
            parts.append(Text(f"{bullet} harmonic {row['n']}, attenuation step: {step['note']}", style="iqscope.advice"))
        if row.get("note"):
            parts.append(Text(f"{bullet} harmonic {row['n']}: {row['note']}", style="iqscope.muted"))
    shown = [str(lim.get("assumption")) for lim in limits if lim.get("assumption")]
    for a in data.get("assumptions", []):
        if any(str(a).endswith(text) for text in shown):  # already beside its limit
            continue
        parts.append(Text(f"{bullet} assumed: {a}", style="iqscope.muted"))
    for why in data.get("not_graded", []):
        parts.append(Text(f"{bullet} not graded: {why}", style="iqscope.muted"))
    return Group(*parts)


def print_harmonics(data: Mapping[str, Any], console: Console) -> None:
    """Print the harmonics table to ``console``."""
    console.print(harmonics_renderable(data, ascii_only=is_ascii(console)))
    console.print(render_caution())


def harmonics_figure(data: Mapping[str, Any]) -> Figure:
    """Bar chart of harmonic levels (dBc) with the regulatory limits as lines."""
    fig = Figure(figsize=(7.0, 4.0), dpi=100)
    ax = fig.add_subplot(1, 1, 1)
    rows = data.get("harmonics", [])
    ns = [r["n"] for r in rows]
    levels = [r["level_dbc"] if r.get("level_dbc") is not None else math.nan for r in rows]
    colours = ["0.6" if r.get("limited_by_noise") else "C0" for r in rows]
    ax.bar(ns, levels, color=colours, width=0.6)
    for n, lv, r in zip(ns, levels, rows):
        if math.isfinite(lv):
            text = ("<= " if r.get("limited_by_noise") else "") + f"{lv:.1f}"
            ax.annotate(text, (n, lv), ha="center", va="top", fontsize=8, xytext=(0, -3), textcoords="offset points")
    for i, lim in enumerate(data.get("limits", [])):
        ax.axhline(lim["limit_dbc"], color=f"C{i + 1}", linestyle="--", label=f"{lim['name']} ({lim['limit_dbc']:.1f} dBc)")
    ax.set_xlabel("harmonic number n")
    ax.set_ylabel("level re mean power of fundamental (dBc)")
    ax.set_xticks(ns or [2])
    ax.set_title("Harmonics (grey: noise-limited upper bound)")
    if data.get("limits"):
        ax.legend(loc="lower right", fontsize=8)
    ax.grid(True, axis="y", alpha=0.3)
    return fig


def render_harmonics_png(data: Mapping[str, Any]) -> dict[str, bytes]:
    """``{"harmonics": png}`` for ``--plot DIR``."""
    return {"harmonics": figure_png(harmonics_figure(data))}


# --------------------------------------------------------------------------------------
# Sweep
# --------------------------------------------------------------------------------------
def _num(v: Any, unit: str = "", digits: int = 1) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{float(v):.{digits}f}{(' ' + unit) if unit else ''}"


def sweep_renderable(data: Mapping[str, Any], *, ascii_only: bool = False) -> RenderableType:
    """The sweep table (one row per drive level) and the derived figures."""
    unit = data.get("output_unit", "dBFS")
    table = Table(title="Drive sweep", title_justify="left")
    for col in ("drive dB", f"output {unit}", "compression dB", "IMD3 dBc", "IMD3 dB PEP", "carrier supp. dB", "opp. sideband dB"):
        table.add_column(col, justify="right")
    le = "<=" if ascii_only else "\u2264"
    for p, comp in zip(data.get("points", []), data.get("compression_db", [])):
        out = p.get("tone_dbfs") if data.get("output_kind") == "tone" else (
            p.get("output_dbm") if unit == "dBm" else p.get("output_dbfs")
        )
        imd3 = _num(p.get("imd3_dbc"))
        imd3p = _num(p.get("imd3_db_pep"))
        if p.get("imd3_limited_by_noise") and imd3 != "-":
            imd3, imd3p = f"{le} {imd3}", f"{le} {imd3p}"
        ge = ">=" if ascii_only else "\u2265"
        cs = _num(p.get("carrier_suppression_db"))
        if p.get("carrier_limited_by_noise") and cs != "-":
            cs = f"{ge} {cs}"
        osb = _num(p.get("opposite_sideband_suppression_db"))
        if p.get("opposite_sideband_limited_by_noise") and osb != "-":
            osb = f"{ge} {osb}"
        table.add_row(_num(p.get("drive_db")), _num(out, digits=2), _num(comp, digits=2), imd3, imd3p, cs, osb)
    bullet = "-" if ascii_only else "\u2022"
    lines: list[RenderableType] = [table]
    kind = "per-tone output" if data.get("output_kind") == "tone" else "mean output"
    p1 = data.get("p1db", {})
    if p1.get("drive_db") is not None:
        lines.append(Text(f"{bullet} 1 dB compression ({kind}) at drive {p1['drive_db']:.1f} dB, output {_num(p1.get('output'), unit, 2)} ({p1['note']})"))
    else:
        lines.append(Text(f"{bullet} 1 dB compression: {p1.get('note', 'not found')}"))
    ic = data.get("imd3_crossing", {})
    lim = data.get("imd3_limit_db_pep")
    if ic.get("drive_db") is not None:
        lines.append(Text(f"{bullet} IMD3 reaches {lim:g} dB PEP at drive {ic['drive_db']:.1f} dB ({ic['note']})", style="iqscope.advice"))
    else:
        lines.append(Text(f"{bullet} IMD3 limit {lim:g} dB PEP: {ic.get('note', '')}"))
    if data.get("oip3_dbfs") is not None:
        slope = data.get("im3_slope_db_per_db")
        s = "" if slope is None else f", IM3 slope {slope:.2f} dB/dB (3 expected)"
        lines.append(Text(f"{bullet} third-order intercept OIP3 {data['oip3_dbfs']:.1f} dBFS per tone{s}"))
    if data.get("small_signal_gain_db") is not None:
        lines.append(Text(f"{bullet} small-signal gain (output - drive) {data['small_signal_gain_db']:.2f} dB", style="iqscope.muted"))
    for n in data.get("notes", []):
        lines.append(Text(f"{bullet} {n}", style="iqscope.warn"))
    return Group(*lines)


def print_sweep(data: Mapping[str, Any], console: Console) -> None:
    """Print the sweep table to ``console``."""
    console.print(sweep_renderable(data, ascii_only=is_ascii(console)))
    console.print(render_caution())


def sweep_figure(data: Mapping[str, Any]) -> Figure:
    """Output and IMD3 against drive (top), carrier and opposite sideband (bottom)."""
    pts = data.get("points", [])
    unit = data.get("output_unit", "dBFS")
    drive = [p["drive_db"] for p in pts]
    tone_kind = data.get("output_kind") == "tone"

    def col(key: str) -> list[float]:
        return [math.nan if p.get(key) is None else float(p[key]) for p in pts]

    out = col("tone_dbfs") if tone_kind else col("output_dbm" if unit == "dBm" else "output_dbfs")
    fig = Figure(figsize=(7.5, 7.0), dpi=100)
    ax1 = fig.add_subplot(2, 1, 1)
    ax1.plot(drive, out, "o-", color="C0", label=("per-tone output" if tone_kind else "output") + f" ({unit})")
    g = data.get("small_signal_gain_db")
    if g is not None and drive:
        ax1.plot(drive, [d + g for d in drive], ":", color="C0", label="small-signal gain line")
    p1 = data.get("p1db", {})
    if p1.get("drive_db") is not None and p1.get("output") is not None:
        ax1.plot([p1["drive_db"]], [p1["output"]], "v", color="C3", markersize=9, label="1 dB compression")
    ax1.set_xlabel("drive (dB)")
    ax1.set_ylabel(f"output ({unit})")
    ax1.grid(True, alpha=0.3)
    ax2 = ax1.twinx()
    imd = col("imd3_db_pep")
    ax2.plot(drive, imd, "s-", color="C1", label="IMD3 (dB PEP)")
    lim = data.get("imd3_limit_db_pep")
    if lim is not None:
        ax2.axhline(lim, color="C1", linestyle="--", label=f"IMD3 limit {lim:g} dB PEP")
    ic = data.get("imd3_crossing", {})
    if ic.get("drive_db") is not None:
        ax2.axvline(ic["drive_db"], color="C1", alpha=0.5)
    ax2.set_ylabel("IMD3 (dB re PEP)")
    h1, l1 = ax1.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    ax1.legend(h1 + h2, l1 + l2, loc="best", fontsize=8)
    ax1.set_title("Drive sweep")
    ax3 = fig.add_subplot(2, 1, 2)
    cs = col("carrier_suppression_db")
    os_ = col("opposite_sideband_suppression_db")
    for values, flag, marker, colour, name in (
        (cs, "carrier_limited_by_noise", "o", "C2", "carrier suppression (dB)"),
        (os_, "opposite_sideband_limited_by_noise", "^", "C4", "opposite sideband suppression (dB)"),
    ):
        if not any(math.isfinite(v) for v in values):
            continue
        ax3.plot(drive, values, "-", color=colour, label=name)
        bound = [bool(p.get(flag)) for p in pts]
        ax3.plot([d for d, b in zip(drive, bound) if not b], [v for v, b in zip(values, bound) if not b], marker, color=colour, linestyle="none")
        if any(bound):
            ax3.plot(
                [d for d, b in zip(drive, bound) if b],
                [v for v, b in zip(values, bound) if b],
                marker,
                markerfacecolor="none",
                color=colour,
                linestyle="none",
                label=name.replace(" (dB)", ": noise-limited bound"),
            )
    ax3.set_xlabel("drive (dB)")
    ax3.set_ylabel("suppression (dB)")
    ax3.grid(True, alpha=0.3)
    if ax3.get_legend_handles_labels()[0]:
        ax3.legend(loc="best", fontsize=8)
    fig.tight_layout()
    return fig


def render_sweep_png(data: Mapping[str, Any]) -> dict[str, bytes]:
    """``{"sweep": png}`` for ``--plot DIR``."""
    return {"sweep": figure_png(sweep_figure(data))}
