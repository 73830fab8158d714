"""Text report (rich): one small renderer per section, the Console always injected.

Sections of a graded recording: :func:`render_header` (recording, mode, carrier, limits),
:func:`render_verdict_table` (measurement, value ± uncertainty, limit, verdict),
:func:`render_notes` (reasons, receiver artefacts, advice) and :func:`render_caution`.
:func:`print_grade` prints them all. Renderers never compute a measurement.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator, Mapping, Sequence
from typing import Final

from rich import box
from rich.console import Console, Group, RenderableType
from rich.table import Table
from rich.text import Text

from ..grading import GradeResult, LimitsProfile, Verdict
from ..grading._limits import Rule
from ._theme import is_ascii, verdict_label, verdict_style
from ._units import (
    format_count,
    format_duration,
    format_frequency,
    format_limit,
    format_measurement,
    format_rate,
)

__all__ = [
    "LABELS",
    "CAUTION",
    "SAFETY_POINTS",
    "label",
    "render_header",
    "render_verdict_table",
    "render_notes",
    "render_caution",
    "print_grade",
    "render_summary",
    "render_profile",
    "render_profile_list",
    "progress_reporter",
]

#: Readable names of the stable measurement keys.
LABELS: Final[Mapping[str, str]] = {
    "carrier_suppression_db": "carrier suppression",
    "carrier_below_pep_db": "carrier below PEP",
    "opposite_sideband_suppression_db": "opposite sideband",
    "sideband_balance_db": "sideband balance",
    "modulation_index": "modulation index",
    "occupied_bandwidth_hz": "99 % bandwidth",
    "bandwidth_26db_hz": "-26 dB bandwidth",
    "imd3_dbc": "IMD3 (re one tone)",
    "imd5_dbc": "IMD5 (re one tone)",
    "imd3_db_pep": "IMD3 (re PEP)",
    "frequency_offset_hz": "frequency offset",
    "drift_hz_per_min": "drift",
    "drift_peak_to_peak_hz": "drift peak-to-peak",
    "drift_worst_window_hz": "drift in window",
    "noise_floor_dbfs_per_hz": "noise floor",
    "peak_dbfs": "peak level",
    "clipped_fraction": "clipped samples",
    "worst_spur_dbc": "worst spur",
    "necessary_bandwidth_hz": "necessary bandwidth",
    "imd5_db_pep": "IMD5 (re PEP)",
    "imd7_dbc": "IMD7 (re one tone)",
    "imd7_db_pep": "IMD7 (re PEP)",
    "tone_balance_db": "tone balance",
    "frequency_offset_hz": "frequency offset",
    "warmup_settling_s": "warm-up time",
    "allan_deviation": "Allan deviation",
    "mean_power_dbm": "mean power",
    "pep_dbm": "PEP",
}

#: One-line caution under every text report.
CAUTION: Final = (
    "Caution: figures include the receiver chain. Transmit only into a dummy load or an antenna "
    "you are licensed to use, with enough attenuation before the receiver (5 W is +37 dBm). "
    "Presets are a convenience, not legal advice: local regulations decide."
)

#: Safety points for the HTML report (DESIGN.md section 6).
SAFETY_POINTS: Final = (
    "Transmit only into a dummy load or an antenna you are licensed to use, on frequencies your "
    "licence allows.",
    "A receiver input survives only milliwatts: sample through enough attenuation. A 5 W "
    "transmitter is +37 dBm; bring it down to about -20 to -30 dBm, with a first attenuator "
    "rated for the full transmitter power.",
    "RF burns are real, even at a few watts, and so are RF exposure limits.",
    "Local regulations and licensed practice decide what is allowed; the limits presets are a "
    "convenience, not legal advice.",
    "Every figure includes the receiver: check that a known attenuation step moves a product "
    "1:1 (the transmitter's) rather than about 3:1 (the receiver's).",
)


def label(name: str) -> str:
    """The readable name of a measurement key."""
    return LABELS.get(name, name.replace("_", " "))


def _modes_text(mode: str) -> str:
    return {"two-tone": "two-tone", "usb": "USB", "lsb": "LSB"}.get(mode, mode.upper())


def render_header(result: GradeResult, *, ascii_only: bool = False) -> RenderableType:
    """Recording, mode, carrier and limits profile, as a two-column grid."""
    a = result.analysis
    rec, sig = a.recording, a.signal
    grid = Table.grid(padding=(0, 2))
    grid.add_column(style="iqscope.label", no_wrap=True)
    grid.add_column()
    fmt = f"{rec.format}, {rec.datatype}" if rec.datatype else rec.format
    grid.add_row("recording", Text(f"{rec.path} ({fmt})"))
    centre = format_frequency(rec.center_frequency_hz) if rec.center_frequency_hz is not None else "unknown"
    grid.add_row(
        "",
        Text(
            f"{format_rate(rec.sample_rate_hz)}, {format_count(rec.n_samples)} samples, "
            f"{format_duration(rec.duration_s)}, centre {centre}"
        ),
    )
    mode = _modes_text(sig.mode) + (" (detected)" if sig.mode_detected else "")
    if sig.carrier_offset_hz is None:
        carrier = "carrier not located"
    else:
        offset = format_frequency(sig.carrier_offset_hz)
        if not offset.startswith("-"):
            offset = "+" + offset
        carrier = (
            f"carrier {format_frequency(sig.carrier_frequency_hz)} (offset {offset})"
            if sig.carrier_frequency_hz is not None
            else f"carrier offset {offset}"
        )
        if sig.how:
            carrier += f", {sig.how}"
    grid.add_row("signal", Text(f"{mode}, {carrier}"))
    p = result.profile
    how = f"default for {sig.mode}" if result.default_limits else ("preset" if p.preset else p.origin)
    grid.add_row("limits", Text(f"{p.name} ({how})"))
    return grid


def _limit_text(rule: Rule | None, ascii_only: bool, *, two_lines: bool = True) -> str:
    """``"≥ 40 dB"`` with the warn bound on a second line (``"warn ≥ 30 dB"``)."""
    if rule is None:
        return ""
    scale, unit = (100.0, "%") if rule.measurement.endswith("_fraction") and rule.unit in ("", "1") else (1.0, rule.unit)

    def s(x: float | None) -> float | None:
        return None if x is None else x * scale

    text = format_limit(s(rule.pass_bound.min), s(rule.pass_bound.max), unit=unit, ascii_only=ascii_only)
    w = rule.warn_bound
    if w is not None:
        warn = format_limit(s(w.min), s(w.max), unit=unit, ascii_only=ascii_only)
        text += ("\n" if two_lines else ", ") + f"warn {warn}"
    return text


def render_verdict_table(result: GradeResult, *, ascii_only: bool = False) -> Table:
    """Measurement, value ± uncertainty, limit, verdict: every measurement, graded or not."""
    table = Table(box=box.ASCII if ascii_only else box.SIMPLE_HEAD, pad_edge=False, expand=False)
    table.add_column("measurement", no_wrap=False, min_width=19)
    table.add_column("value", justify="right", no_wrap=True)
    table.add_column("limit", no_wrap=False, min_width=12)
    table.add_column("verdict", no_wrap=True)
    shown: set[str] = set()
    for name, m in result.analysis.measurements.items():
        v = result.verdict_for(name)
        value = format_measurement(
            name,
            m.value,
            m.unit,
            m.uncertainty,
            limited_by_noise=m.limited_by_noise,
            bound=m.bound,
            ascii_only=ascii_only,
        )
        _add_row(table, name, value, v, ascii_only, bound=m.limited_by_noise)
        shown.add(name)
    for v in result.verdicts:
        if v.measurement not in shown:
            _add_row(table, v.measurement, "not measured", v, ascii_only, bound=False)
    return table


def _add_row(table: Table, name: str, value: str, v: Verdict | None, ascii_only: bool, *, bound: bool) -> None:
    status = "info" if v is None else v.status
    word = verdict_label(status, ascii_only)
    if v is not None and v.inconclusive and v.status == "warn":
        word += "?"
    table.add_row(
        label(name),
        Text(value, style="iqscope.bound" if bound else "iqscope.value"),
        Text(_limit_text(None if v is None else v.rule, ascii_only), style="iqscope.limit"),
        Text(word, style=verdict_style(status)),
    )


def _bullets(items: Sequence[str], style: str, bullet: str) -> Table:
    grid = Table.grid(padding=(0, 1))
    grid.add_column(no_wrap=True)
    grid.add_column(style=style)
    for item in items:
        grid.add_row(f"  {bullet}", item)
    return grid


def render_notes(result: GradeResult, *, ascii_only: bool = False) -> RenderableType:
    """Overall verdict, reasons for non-passing verdicts, receiver artefacts and advice."""
    bullet = "*" if ascii_only else "\u2022"
    parts: list[RenderableType] = []
    overall = Text("overall  ", style="iqscope.label")
    overall.append(verdict_label(result.overall, ascii_only), style=verdict_style(result.overall))
    parts.append(overall)
    reasons = [v for v in result.verdicts if v.status != "pass" or v.marginal]
    if reasons:
        parts.append(Text("\nwhy", style="iqscope.label"))
        parts.append(_bullets([f"{label(v.measurement)}: {v.reason}" for v in reasons], "iqscope.note", bullet))
    a = result.analysis
    receiver: list[str] = []
    for text in [art.note or art.kind for art in a.artefacts] + list(a.warnings):
        if text not in receiver:
            receiver.append(text)
    if receiver:
        parts.append(Text("\nreceiver and recording", style="iqscope.label"))
        parts.append(_bullets(receiver, "iqscope.artefact", bullet))
    advice = list(result.advice) + list(result.receiver_advice)
    if advice:
        parts.append(Text("\nadvice", style="iqscope.label"))
        parts.append(_bullets(advice, "iqscope.advice", bullet))
    if result.skipped:
        parts.append(Text("\nnot graded", style="iqscope.label"))
        parts.append(_bullets(list(result.skipped), "iqscope.muted", bullet))
    return Group(*parts)


def render_caution() -> Text:
    """The one-line caution."""
    return Text(CAUTION, style="iqscope.caution")


def print_grade(result: GradeResult, console: Console) -> None:
    """Print the whole text report of one graded recording on ``console``."""
    ascii_only = is_ascii(console)
    name = result.analysis.recording.path
    console.rule(Text(f"iqscope grade: {name}", style="iqscope.title"), style="iqscope.muted")
    console.print(render_header(result, ascii_only=ascii_only))
    console.print()
    console.print(render_verdict_table(result, ascii_only=ascii_only))
    console.print(render_notes(result, ascii_only=ascii_only))
    console.print()
    console.print(render_caution())


def render_summary(rows: Sequence[tuple[str, str, str]], *, ascii_only: bool = False) -> Table:
    """Several recordings: (path, status or "error", detail) per row."""
    table = Table(box=box.ASCII if ascii_only else box.SIMPLE_HEAD, pad_edge=False, title="summary")
    table.add_column("recording")
    table.add_column("overall", no_wrap=True)
    table.add_column("detail")
    for path, status, detail in rows:
        style = verdict_style(status) if status in ("pass", "warn", "fail") else "iqscope.fail"
        word = verdict_label(status, ascii_only) if status in ("pass", "warn", "fail") else "ERROR"
        table.add_row(path, Text(word, style=style), detail)
    return table


def render_profile(profile: LimitsProfile, *, ascii_only: bool = False) -> RenderableType:
    """A limits profile as a table of rules, with its description and origin."""
    head = Text(profile.name, style="iqscope.title")
    head.append(f"  ({'preset' if profile.preset else profile.origin})", style="iqscope.muted")
    table = Table(box=box.ASCII if ascii_only else box.SIMPLE_HEAD, pad_edge=False)
    table.add_column("measurement")
    table.add_column("modes")
    table.add_column("pass")
    table.add_column("warn")
    table.add_column("source")
    for r in profile.rules:
        w = r.warn_bound
        table.add_row(
            label(r.measurement),
            ", ".join(r.modes) or "all",
            format_limit(r.pass_bound.min, r.pass_bound.max, unit=r.unit, ascii_only=ascii_only),
            "" if w is None else format_limit(w.min, w.max, unit=r.unit, ascii_only=ascii_only),
            r.source,
        )
    parts: list[RenderableType] = [head, Text(profile.description)]
    if profile.source:
        parts.append(Text(f"source: {profile.source}", style="iqscope.muted"))
    parts.append(table)
    return Group(*parts)


def render_profile_list(profiles: Sequence[LimitsProfile], defaults: Mapping[str, str]) -> Table:
    """The shipped presets: name, default for which modes, description."""
    table = Table(box=box.SIMPLE_HEAD, pad_edge=False)
    table.add_column("name", no_wrap=True)
    table.add_column("default for")
    table.add_column("description")
    for p in profiles:
        modes = [m for m, n in defaults.items() if n == p.name]
        every = bool(modes) and len(modes) == len(defaults)
        table.add_row(p.name, "every mode" if every else ", ".join(modes), p.description)
    return table


@contextlib.contextmanager
def progress_reporter(
    console: Console, label: str, *, enabled: bool = True
) -> Iterator[Callable[[int, int], None] | None]:
    """A transient progress bar on ``console`` (stderr); yields a ``(done, total)`` callback.

    Yields None when disabled (quiet, or stderr not a terminal), so the pipeline skips it.
    """
    if not enabled:
        yield None
        return
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

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
