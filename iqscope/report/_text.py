"""Text report (rich): one small renderer per section, the Console always injected.

Sections of a graded recording: :func:`render_header` (recording, mode, carrier, limits),
:func:`render_verdict_table` (measurement, value ± uncertainty or the noise-limited bound,
limit, verdict; what the details add, e.g. the emission designator), :func:`render_spur_table`
(the lines outside the necessary band, receiver artefacts marked), :func:`render_notes`
(reasons, receiver artefacts, advice) and :func:`render_caution`. :func:`print_grade`
prints them all. :func:`label`, :func:`measurement_text` and :func:`spur_rows` are shared
with the HTML report. Renderers never compute a measurement: they look stored numbers up.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Final

from rich import box
from rich.console import Console, Group, RenderableType
from rich.table import Table
from rich.text import Text

from ..grading import GradeResult, LimitsProfile, Verdict
from ..grading._limits import Rule
from ..measure._result import Measurement
from ._theme import is_ascii, verdict_label, verdict_style
from ._units import (
    format_count,
    format_duration,
    format_frequency,
    format_limit,
    format_measurement,
    format_rate,
    ge_le,
    format_value,
)

__all__ = [
    "LABELS",
    "CAUTION",
    "SAFETY_POINTS",
    "label",
    "measurement_text",
    "detail_rows",
    "spur_rows",
    "unmeasured_notes",
    "spur_caption",
    "render_spur_table",
    "render_header",
    "render_verdict_table",
    "render_notes",
    "render_caution",
    "print_grade",
    "render_summary",
    "render_profile",
    "render_profile_list",
]

#: Readable names of the measurement keys (every key the pipeline produces).
LABELS: Final[Mapping[str, str]] = {
    # carrier and sidebands
    "carrier_suppression_db": "carrier suppression",
    "carrier_below_pep_db": "carrier below PEP",
    "opposite_sideband_suppression_db": "opposite sideband",
    "sideband_balance_db": "sideband balance",
    "modulation_index": "modulation index",
    # bandwidth
    "occupied_bandwidth_hz": "99 % bandwidth",
    "bandwidth_26db_hz": "-26 dB bandwidth",
    "necessary_bandwidth_hz": "necessary bandwidth",
    # two-tone test
    "imd3_dbc": "IMD3 (re one tone)",
    "imd5_dbc": "IMD5 (re one tone)",
    "imd7_dbc": "IMD7 (re one tone)",
    "imd3_db_pep": "IMD3 (re PEP)",
    "imd5_db_pep": "IMD5 (re PEP)",
    "imd7_db_pep": "IMD7 (re PEP)",
    "tone_balance_db": "tone balance",
    # spurs and harmonics
    "worst_spur_dbc": "worst spur",
    "harmonic_dbc": "harmonic",
    "worst_harmonic_dbc": "worst harmonic",
    # power (with a calibration)
    "mean_power_dbm": "mean power",
    "mean_power_w": "mean power",
    "pep_dbm": "PEP",
    "pep_w": "PEP",
    # frequency and its stability
    "frequency_offset_hz": "frequency offset",
    "frequency_error_hz": "frequency error",
    "drift_hz_per_min": "drift rate",
    "drift_peak_to_peak_hz": "drift peak-to-peak",
    "drift_worst_window_hz": "worst drift in window",
    "warmup_settling_s": "warm-up settling",
    "allan_deviation": "Allan deviation",
    "hadamard_deviation": "Hadamard deviation",
    "allan_deviation_drift_removed": "Allan deviation, drift removed",
    # the recording
    "noise_floor_dbfs_per_hz": "noise floor",
    "peak_dbfs": "peak level",
    "clipped_fraction": "clipped samples",
}

#: One-line caution under every text report.
CAUTION: Final = (
    "Caution: figures include the receiver chain. Transmit only into a dummy load or an antenna "
    "you are licensed to use, with enough attenuation before the receiver (5 W is +37 dBm). "
    "RF burns happen even at a few watts, and RF exposure limits apply. "
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


def label(name: str, m: Measurement | None = None, *, ascii_only: bool = False) -> str:
    """The readable name of a measurement key; with ``m``, what its details qualify.

    ``drift_worst_window_hz`` names its window (``"worst 2-min drift"``).
    """
    text = LABELS.get(name, name.replace("_", " "))
    details = {} if m is None else m.details
    if name == "drift_worst_window_hz":
        window = _number(details.get("window_s"))
        if window is not None and window > 0:
            minutes = window / 60.0
            span = f"{minutes:g}-min" if window >= 60 and minutes == round(minutes) else f"{window:g}-s"
            text = f"worst {span} drift"
    return text


def _number(x: object) -> float | None:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    return float(x) if math.isfinite(x) else None


def measurement_text(name: str, m: Measurement, *, ascii_only: bool = False) -> str:
    """The value cell of one measurement: value ± uncertainty, or the noise-limited bound
    (``"≥ 62 dB (noise-limited)"``, ``"≤ -88 dBc (noise-limited)"``), with what the details
    add: the emission designator beside ``necessary_bandwidth_hz`` (``"2.40 kHz (2K40J3E)"``)
    and the averaging time of ``allan_deviation`` (``"(1.4 ± 0.2)e-07 at τ = 8 s"``).
    """
    text = format_measurement(
        name,
        m.value,
        m.unit,
        m.uncertainty,
        limited_by_noise=m.limited_by_noise,
        bound=m.bound,
        ascii_only=ascii_only,
    )
    if name == "necessary_bandwidth_hz" and m.value is not None:
        designator = m.details.get("designator")
        if isinstance(designator, str) and designator:
            text += f" ({designator})"
    if name == "warmup_settling_s" and m.value is None:
        still = _number(m.details.get("lower_bound_s"))
        if still is not None and still > 0:
            text = f"> {format_duration(still)} (not settled)"
    if name in ("allan_deviation", "hadamard_deviation", "allan_deviation_drift_removed") and m.value is not None:
        tau = _number(m.details.get("tau_quoted_s"))
        if tau is not None and tau > 0:
            text += f" at {'tau' if ascii_only else chr(0x3C4)} = {format_duration(tau)}"
    return text


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
    mode = _modes_text(sig.mode) + (
        (" (detected, a guess)" if sig.mode_confidence == "low" else " (detected)") if sig.mode_detected else ""
    )
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
        if sig.carrier_error_hz is not None and sig.carrier_found_offset_hz is not None:
            found = format_frequency(sig.carrier_found_offset_hz)
            carrier += f"; the signal puts it at {'' if found.startswith('-') else '+'}{found} " \
                       f"({format_frequency(sig.carrier_error_hz)} off)"
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


def detail_rows(name: str, m: Measurement) -> list[tuple[str, str]]:
    """Extra (label, value) rows under a measurement, from numbers its details carry.

    ``modulation_index`` (DESIGN.md section 3: report the line and the envelope index, and
    the positive and negative peaks): the envelope (trapezoid) index and the peaks in %.
    """
    if name != "modulation_index" or m.value is None:
        return []
    rows: list[tuple[str, str]] = []
    env = _number(m.details.get("index_envelope"))
    if env is not None:
        rows.append(("  from the envelope", f"{env:.3f}"))
    pos, neg = _number(m.details.get("positive_peak")), _number(m.details.get("negative_peak"))
    if pos is not None and neg is not None:
        rows.append(("  peaks (+ / -)", f"{100 * pos:.0f} % / {100 * neg:.0f} %"))
    return rows


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
        value = measurement_text(name, m, ascii_only=ascii_only)
        _add_row(table, label(name, m, ascii_only=ascii_only), value, v, ascii_only, bound=m.limited_by_noise)
        for sub, text in detail_rows(name, m):
            table.add_row(Text(sub, style="iqscope.muted"), Text(text, style="iqscope.muted"), "", "")
        shown.add(name)
    for v in result.verdicts:
        if v.measurement not in shown:
            _add_row(table, label(v.measurement), "not measured", v, ascii_only, bound=False)
    return table


def _add_row(table: Table, name: str, value: str, v: Verdict | None, ascii_only: bool, *, bound: bool) -> None:
    status = "info" if v is None else v.status
    word = verdict_label(status, ascii_only)
    if v is not None and v.inconclusive and v.status == "warn":
        word += "?"
    table.add_row(
        name,
        Text(value, style="iqscope.bound" if bound else "iqscope.value"),
        Text(_limit_text(None if v is None else v.rule, ascii_only), style="iqscope.limit"),
        Text(word, style=verdict_style(status)),
    )


#: Most lines the spur table shows (the JSON has them all).
SPUR_ROWS_SHOWN: Final = 8
#: Spur levels known better than this (1 sigma) are shown to 0.1 dB without "±".
_LEVEL_STEP_DB: Final = 0.2


def _signed_zero(x: float) -> str:
    text = f"{x:.1f}"
    return "0.0" if text == "-0.0" else text

_ARTEFACT_WORDS: Final[Mapping[str, str]] = {
    "dc": "receiver DC",
    "dc_line": "receiver DC",
    "iq_image": "receiver image",
    "iq": "receiver image",
}

_MARKER_WORDS: Final[Mapping[str, str]] = {
    "carrier": "carrier",
    "tone1": "tone 1",
    "tone2": "tone 2",
    "sideband_lower": "lower sideband",
    "sideband_upper": "upper sideband",
}


#: Markers of wanted lines, whose mirror about the carrier is the opposite sideband.
_WANTED_LINES: Final = frozenset({"tone1", "tone2", "sideband_lower", "sideband_upper"})


def _is_point_marker(name: str) -> bool:
    """Markers of lines (carrier, tones, sidebands, IMD products), not of band edges."""
    return name in _MARKER_WORDS or (name.startswith("imd") and "_" in name)


def _imd_figure_text(measurements: Mapping[str, Measurement], name: str) -> str:
    """For an IMD product's marker (``imd3_lower``): the figure's own level of that product,
    with its reference, so that the spur table (re the mean power) and the verdict table
    (re one tone) never show one product as two unexplained "dBc" numbers."""
    if not (name.startswith("imd") and "_" in name):
        return ""
    order, side = name.split("_", 1)
    m = measurements.get(f"{order}_dbc")
    products = None if m is None else m.details.get("products")
    product = products.get(side) if isinstance(products, Mapping) else None
    level = _number(product.get("level_dbc")) if isinstance(product, Mapping) else None
    if level is None:
        return ""
    return f" ({_signed_zero(level)} dBc re one tone)"


def _marker_word(name: str) -> str:
    if name in _MARKER_WORDS:
        return _MARKER_WORDS[name]
    if name.startswith("imd") and "_" in name:
        order, side = name.split("_", 1)
        return f"{order.upper()} {side}"
    return name.replace("_", " ")


def spur_rows(result: GradeResult, *, ascii_only: bool = False) -> tuple[list[tuple[str, str, str, str, str]], int]:
    """The spur table of ``worst_spur_dbc`` (``details["spurs"]``) as display rows.

    Each row: RF frequency (or offset from the capture centre when the centre is unknown),
    offset from the carrier, level in dBc re the mean power (and dBm when calibrated), the
    domain (out-of-band / spurious, SM.1539) and what the line is: a receiver artefact, or
    a marker the pipeline placed at the same frequency (carrier, tone, IMD product).
    Returns the first :data:`SPUR_ROWS_SHOWN` rows, strongest first, and how many were
    left out. Renderers only look the numbers up; nothing is measured here.
    """
    a = result.analysis
    m = a.measurements.get("worst_spur_dbc")
    table = [] if m is None else m.details.get("spurs") or []
    if not isinstance(table, (list, tuple)):
        return [], 0
    carrier = a.signal.carrier_offset_hz
    tol = max(2.0 * a.spectrum.bin_hz, 1.0) if a.spectrum is not None else 1.0
    markers = {k: v for k, v in a.markers.items() if _is_point_marker(k) and math.isfinite(v)}
    if carrier is not None:
        markers.setdefault("carrier", carrier)
    rows: list[tuple[str, str, str, str, str]] = []
    for line in table:
        if not isinstance(line, Mapping):
            continue
        offset = _number(line.get("offset_hz"))
        level = _number(line.get("level_dbc"))
        if offset is None or level is None:
            continue
        rf = _number(line.get("frequency_hz"))
        where = format_frequency(rf) if rf is not None else f"{format_frequency(offset)} (offset)"
        rel = "" if carrier is None else format_frequency(float(round(offset - carrier)))
        if rel and not rel.startswith("-") and rel != "0 Hz":
            rel = "+" + rel
        u = _number(line.get("uncertainty_db"))
        if u is not None and u < _LEVEL_STEP_DB:
            # Resolved to better than the 0.1 dB shown: no "± 0.05" in every row.
            level_text = f"{_signed_zero(level)} dBc"
        else:
            level_text = format_value(level, "dBc", u, ascii_only=ascii_only)
        dbm = _number(line.get("level_dbm"))
        if dbm is not None:
            level_text += f" ({format_value(dbm, 'dBm', None, ascii_only=ascii_only)})"
        artefact = line.get("artefact")
        if isinstance(artefact, str) and artefact:
            what = _ARTEFACT_WORDS.get(artefact, f"receiver {artefact}")
        else:
            near = [
                _marker_word(k) + _imd_figure_text(a.measurements, k)
                for k, f in markers.items()
                if abs(f - offset) <= tol
            ]
            if not near and carrier is not None:
                # The mirror of a wanted line about the carrier: the opposite sideband.
                near = [
                    f"{_marker_word(k)} opposite sideband"
                    for k, f in markers.items()
                    if k in _WANTED_LINES and abs(2.0 * carrier - f - offset) <= tol
                ]
            what = ", ".join(near)
        rows.append((where, rel, level_text, str(line.get("domain") or ""), what))
    left = max(0, len(rows) - SPUR_ROWS_SHOWN)
    return rows[:SPUR_ROWS_SHOWN], left


def spur_caption(result: GradeResult, *, ascii_only: bool = False) -> str:
    """One line saying what the spur table lists and where the spurious domain starts."""
    m = result.analysis.measurements.get("worst_spur_dbc")
    details = {} if m is None else m.details
    pm = ge_le(ascii_only)[2]
    text = "lines outside the necessary band, levels re the mean power"
    bn = _number(details.get("necessary_bandwidth_hz"))
    edge = _number(details.get("spurious_boundary_hz"))
    if bn is not None and edge is not None:
        text += (
            f"; spurious domain beyond {pm}{format_frequency(edge, 10.0)} of the emission centre "
            f"(250 % of the {format_frequency(bn, 10.0)} necessary bandwidth, SM.1539)"
        )
        searched = _number(details.get("searched_spurious_hz"))
        if searched is not None:
            text += f", {format_frequency(searched, 10.0)} of it recorded"
    return text


def render_spur_table(result: GradeResult, *, ascii_only: bool = False) -> RenderableType | None:
    """The spur table (None when ``worst_spur_dbc`` lists no line)."""
    rows, left = spur_rows(result, ascii_only=ascii_only)
    if not rows:
        return None
    table = Table(box=box.ASCII if ascii_only else box.SIMPLE_HEAD, pad_edge=False, expand=False, show_edge=False)
    table.add_column("line", no_wrap=True)
    table.add_column("re carrier", justify="right", no_wrap=True)
    table.add_column("re mean power", justify="right", no_wrap=True)
    table.add_column("domain", no_wrap=True)
    table.add_column("what")
    for where, rel, level, domain, what in rows:
        style = "iqscope.artefact" if what.startswith("receiver") else "iqscope.value"
        table.add_row(where, rel, level, domain, Text(what, style=style))
    parts: list[RenderableType] = [
        Text("spurs", style="iqscope.label"),
        Text(spur_caption(result, ascii_only=ascii_only), style="iqscope.muted"),
        Text(""),
        table,
    ]
    if left:
        parts.append(Text(f"... and {left} weaker line{'s' if left > 1 else ''} (all in --json)", style="iqscope.muted"))
    return Group(*parts)


def _bullets(items: Sequence[str], style: str, bullet: str) -> Table:
    grid = Table.grid(padding=(0, 1))
    grid.add_column(no_wrap=True)
    grid.add_column(style=style)
    for item in items:
        grid.add_row(f"  {bullet}", item)
    return grid


def unmeasured_notes(result: GradeResult) -> list[str]:
    """Why each ungraded figure shown as "not measured" was not: one line per reason,
    naming the figures it covers (graded ones already say why under "why")."""
    by_note: dict[str, list[str]] = {}
    for name, m in result.analysis.measurements.items():
        if m.value is not None or result.verdict_for(name) is not None:
            continue
        note = m.note.strip() or "no reason given"
        for prefix in ("not measured: ", "not measured "):
            if note.lower().startswith(prefix):
                note = note[len(prefix):]
        by_note.setdefault(note, []).append(label(name, m))
    return [f"{', '.join(names)}: {note}" for note, names in by_note.items()]


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
    missing = unmeasured_notes(result)
    if missing:
        parts.append(Text("\nnot measured", style="iqscope.label"))
        parts.append(_bullets(missing, "iqscope.muted", bullet))
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
    spurs = render_spur_table(result, ascii_only=ascii_only)
    if spurs is not None:
        console.print(spurs)
        console.print()
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
        limit = _limit_text(r, ascii_only, two_lines=True).split("\nwarn ", 1)
        table.add_row(
            label(r.measurement),
            ", ".join(r.modes) or "all",
            limit[0],
            limit[1] if len(limit) > 1 else "",
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
