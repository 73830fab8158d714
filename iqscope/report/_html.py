"""HTML report: one self-contained page (plots embedded as base64 PNG), readable on a phone.

No external resource is referenced (a Content-Security-Policy forbids any), so the file
can be mailed or posted as it is. Every text taken from a recording or a limits file is
HTML-escaped. Verdicts carry a symbol and a word, never colour alone.
"""

from __future__ import annotations

import base64
import datetime as _dt
from collections.abc import Mapping, Sequence
from html import escape
from typing import Final

from .. import __version__
from ..grading import GradeResult
from ._plots import PLOT_NAMES
from ._text import (
    SAFETY_POINTS,
    _limit_text,
    detail_rows,
    label,
    measurement_text,
    spur_caption,
    spur_rows,
    unmeasured_notes,
)
from ._theme import verdict_label
from ._units import (
    format_count,
    format_duration,
    format_frequency,
    format_rate,
)

__all__ = ["render_html"]

_CAPTIONS: Final[Mapping[str, str]] = {
    "spectrum": "Spectrum around the signal: carrier, sidebands, 99 % and -26 dB band edges, lines "
    "that are the receiver's named as such. The red limit mask is drawn relative to the displayed "
    "peak as a visual aid; the dashed red spur limit is where a discrete line would sit at the limit "
    "(verdicts come from the measurements, not the picture).",
    "spectrogram": "Spectrogram: level over time and frequency.",
    "envelope": "Envelope over time.",
    "frequency": "Frequency of the reference line over time (1-sigma band; the worst drift window shaded).",
    "allan": "Overlapping Allan deviation of fractional frequency.",
}

_CSS: Final = """
:root { --pass: #1e8449; --warn: #9a7d0a; --fail: #c0392b; --muted: #5d6d7e; --line: #d5d8dc; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; margin: 0 auto;
       max-width: 62rem; padding: 1rem; line-height: 1.45; color: #1b2631; background: #fff; }
h1 { font-size: 1.4rem; margin: 0.2rem 0; }
h2 { font-size: 1.2rem; margin: 1.6rem 0 0.4rem; overflow-wrap: anywhere; }
h3 { font-size: 1rem; margin: 1rem 0 0.3rem; }
.meta { color: var(--muted); font-size: 0.85rem; margin: 0; }
.badge { display: inline-block; padding: 0.1rem 0.5rem; border-radius: 0.3rem; color: #fff;
         font-size: 0.95rem; white-space: nowrap; }
.badge.pass { background: var(--pass); } .badge.warn { background: var(--warn); }
.badge.fail { background: var(--fail); }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: 0.15rem 1rem; margin: 0.5rem 0; }
dl.facts dt { font-weight: 600; } dl.facts dd { margin: 0; overflow-wrap: anywhere; }
.table-wrap { overflow-x: auto; -webkit-overflow-scrolling: touch; }
table { border-collapse: collapse; width: 100%; font-size: 0.95rem; }
th, td { text-align: left; padding: 0.35rem 0.5rem; border-bottom: 1px solid var(--line); vertical-align: top; }
td.value { text-align: right; white-space: nowrap; font-variant-numeric: tabular-nums; }
td.bound { font-style: italic; }
tr.detail td { color: var(--muted); font-size: 0.85rem; border-bottom: none; }
tr.detail td.name { padding-left: 1.5rem; font-weight: 400; }
table.spurs { font-size: 0.85rem; } table.spurs tr.receiver td { color: #6c3483; }
td.limit { white-space: pre-line; }
td.verdict { white-space: nowrap; font-weight: 700; }
td.verdict.pass { color: var(--pass); } td.verdict.warn { color: var(--warn); }
td.verdict.fail { color: var(--fail); } td.verdict.info { color: var(--muted); font-weight: 400; }
ul { padding-left: 1.2rem; margin: 0.3rem 0; }
li.advice { color: #1a5276; } li.receiver { color: #6c3483; }
figure { margin: 1rem 0; } figure img { max-width: 100%; height: auto; border: 1px solid var(--line); }
figcaption { color: var(--muted); font-size: 0.85rem; }
section.cautions { border-left: 4px solid var(--warn); padding: 0.2rem 0.8rem; margin-top: 2rem;
                   background: #fef9e7; }
footer { color: var(--muted); font-size: 0.8rem; margin-top: 2rem; }
@media (max-width: 40rem) {
  body { padding: 0.6rem; font-size: 0.95rem; }
  dl.facts { gap: 0.1rem 0.6rem; }
  table.verdicts thead { display: none; }
  table.verdicts tr { display: grid; grid-template-columns: 1fr auto; column-gap: 0.5rem;
                      border-bottom: 1px solid var(--line); padding: 0.35rem 0; }
  table.verdicts td { border: none; padding: 0.05rem 0.2rem; }
  table.verdicts td.name { order: 0; font-weight: 600; }
  table.verdicts td.verdict { order: 1; text-align: right; }
  table.verdicts td.value { order: 2; text-align: left; }
  table.verdicts td.limit { order: 3; text-align: right; color: var(--muted); }
  table.verdicts tr.detail { padding: 0.1rem 0; border-bottom: none; }
  table.verdicts tr.detail td.name { font-weight: 400; padding-left: 1rem; }
  table.verdicts tr.detail td.value { order: 1; text-align: right; }
  table.verdicts tr.detail td.limit, table.verdicts tr.detail td.verdict { display: none; }
  table.spurs thead { display: none; }
  table.spurs tr { display: grid; grid-template-columns: 1fr auto; column-gap: 0.5rem;
                   border-bottom: 1px solid var(--line); padding: 0.3rem 0; }
  table.spurs td { border: none; padding: 0.05rem 0.2rem; }
  table.spurs td.line { order: 0; font-weight: 600; }
  table.spurs td.level { order: 1; text-align: right; font-weight: 600; }
  table.spurs td.rel { order: 2; text-align: left; }
  table.spurs td.rel:not(:empty)::after { content: " from the carrier"; color: var(--muted); }
  table.spurs td.domain { order: 3; text-align: right; color: var(--muted); }
  table.spurs td.what { order: 4; grid-column: 1 / -1; }
  table.spurs td.what:empty { display: none; }
}
"""


def _data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _facts(result: GradeResult) -> str:
    a = result.analysis
    rec, sig = a.recording, a.signal
    rows: list[tuple[str, str]] = [
        ("recording", rec.path),
        ("format", f"{rec.format} {rec.datatype}".strip()),
        ("sample rate", format_rate(rec.sample_rate_hz)),
        ("length", f"{format_count(rec.n_samples)} samples, {format_duration(rec.duration_s)}"),
        ("capture centre", format_frequency(rec.center_frequency_hz)),
        ("mode", sig.mode + (
            (" (detected, a guess)" if sig.mode_confidence == "low" else " (detected)") if sig.mode_detected else ""
        )),
    ]
    if sig.carrier_offset_hz is not None:
        carrier = f"offset {format_frequency(sig.carrier_offset_hz)}"
        if sig.carrier_frequency_hz is not None:
            carrier = f"{format_frequency(sig.carrier_frequency_hz)} ({carrier})"
        if sig.how:
            carrier += f", {sig.how}"
        if sig.carrier_error_hz is not None and sig.carrier_found_offset_hz is not None:
            carrier += (f"; the signal puts it at offset {format_frequency(sig.carrier_found_offset_hz)} "
                        f"({format_frequency(sig.carrier_error_hz)} off)")
        rows.append(("carrier", carrier))
    p = result.profile
    how = f"default for {sig.mode}" if result.default_limits else ("preset" if p.preset else p.origin)
    rows.append(("limits", f"{p.name} ({how}): {p.description}"))
    body = "".join(f"<dt>{escape(k)}</dt><dd>{escape(v)}</dd>" for k, v in rows)
    return f'<dl class="facts">{body}</dl>'


def _table(result: GradeResult) -> str:
    rows: list[str] = []
    shown: set[str] = set()
    for name, m in result.analysis.measurements.items():
        v = result.verdict_for(name)
        rows.append(_row(label(name, m), measurement_text(name, m), v, m.note, bound=m.limited_by_noise))
        for sub, text in detail_rows(name, m):
            rows.append(
                f'<tr class="detail"><td class="name">{escape(sub.strip())}</td>'
                f'<td class="value">{escape(text)}</td><td class="limit"></td><td class="verdict info"></td></tr>'
            )
        shown.add(name)
    for v in result.verdicts:
        if v.measurement not in shown:
            rows.append(_row(label(v.measurement), "not measured", v, ""))
    head = "<tr><th>measurement</th><th>value</th><th>limit</th><th>verdict</th></tr>"
    return f'<div class="table-wrap"><table class="verdicts"><thead>{head}</thead><tbody>{"".join(rows)}</tbody></table></div>'


def _row(name: str, value: str, v: object, note: str, *, bound: bool = False) -> str:
    from ..grading import Verdict

    assert v is None or isinstance(v, Verdict)
    status = "info" if v is None else v.status
    word = verdict_label(status)
    if v is not None and v.inconclusive and v.status == "warn":
        word += " (inconclusive)"
    limit = "" if v is None else _limit_text(v.rule, False)
    title = f' title="{escape(note)}"' if note else ""
    value_class = "value bound" if bound else "value"
    return (
        f'<tr><td class="name"{title}>{escape(name)}</td><td class="{value_class}">{escape(value)}</td>'
        f'<td class="limit">{escape(limit)}</td><td class="verdict {status}">{escape(word)}</td></tr>'
    )


def _spurs(result: GradeResult) -> str:
    """The spur table of ``worst_spur_dbc`` (empty when it lists no line)."""
    rows, left = spur_rows(result)
    if not rows:
        return ""
    head = "<tr><th>line</th><th>re carrier</th><th>level re mean power</th><th>domain</th><th>what</th></tr>"
    body = []
    for where, rel, level, domain, what in rows:
        cls = ' class="receiver"' if what.startswith("receiver") else ""
        body.append(
            f'<tr{cls}><td class="line">{escape(where)}</td><td class="value rel">{escape(rel)}</td>'
            f'<td class="value level">{escape(level)}</td><td class="domain">{escape(domain)}</td>'
            f'<td class="what">{escape(what)}</td></tr>'
        )
    more = f'<p class="meta">... and {left} weaker line{"s" if left > 1 else ""} (all in the JSON output)</p>' if left else ""
    return (
        f'<h3>Spurs</h3><p class="meta">{escape(spur_caption(result))}</p>'
        f'<div class="table-wrap"><table class="spurs"><thead>{head}</thead><tbody>{"".join(body)}</tbody></table></div>'
        f"{more}"
    )


def _notes(result: GradeResult) -> str:
    out: list[str] = []
    reasons = [v for v in result.verdicts if v.status != "pass" or v.marginal]
    if reasons:
        items = "".join(f"<li>{escape(label(v.measurement))}: {escape(v.reason)}</li>" for v in reasons)
        out.append(f"<h3>Why</h3><ul>{items}</ul>")
    a = result.analysis
    receiver: list[str] = []
    for text in [art.note or art.kind for art in a.artefacts] + list(a.warnings):
        if text not in receiver:
            receiver.append(text)
    if receiver:
        items = "".join(f'<li class="receiver">{escape(t)}</li>' for t in receiver)
        out.append(f"<h3>Receiver and recording</h3><ul>{items}</ul>")
    advice = list(result.advice) + list(result.receiver_advice)
    if advice:
        items = "".join(f'<li class="advice">{escape(t)}</li>' for t in advice)
        out.append(f"<h3>Advice</h3><ul>{items}</ul>")
    missing = unmeasured_notes(result)
    if missing:
        items = "".join(f"<li>{escape(t)}</li>" for t in missing)
        out.append(f"<h3>Not measured</h3><ul>{items}</ul>")
    if result.skipped:
        items = "".join(f"<li>{escape(t)}</li>" for t in result.skipped)
        out.append(f"<h3>Not graded</h3><ul>{items}</ul>")
    return "".join(out)


def _figures(result: GradeResult, images: Mapping[str, bytes]) -> str:
    out: list[str] = []
    name = result.analysis.recording.path
    for key in PLOT_NAMES:
        png = images.get(key)
        if not png:
            continue
        alt = f"{key} of {name}"
        out.append(
            f'<figure><img src="{_data_uri(png)}" alt="{escape(alt)}">'
            f"<figcaption>{escape(_CAPTIONS.get(key, key))}</figcaption></figure>"
        )
    return "".join(out)


def render_html(
    results: Sequence[GradeResult],
    images: Sequence[Mapping[str, bytes]] = (),
    *,
    generated: str | None = None,
) -> str:
    """The whole report as one HTML string.

    Parameters
    ----------
    results : sequence of GradeResult
        One section per graded recording.
    images : sequence of {name: PNG bytes}
        Plots per result (from :func:`iqscope.report.render_plots`), same order.
    generated : str, optional
        Time stamp to print (default: now, UTC); tests pass a fixed one.
    """
    when = generated or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    sections: list[str] = []
    for i, r in enumerate(results):
        pngs = images[i] if i < len(images) else {}
        name = r.analysis.recording.path
        badge = f'<span class="badge {r.overall}">{escape(verdict_label(r.overall))}</span>'
        sections.append(
            f'<section class="recording"><h2>{escape(name)} {badge}</h2>'
            f"{_facts(r)}{_table(r)}{_spurs(r)}{_notes(r)}{_figures(r, pngs)}</section>"
        )
    overall = "pass"
    for r in results:
        if ("pass", "warn", "fail").index(r.overall) > ("pass", "warn", "fail").index(overall):
            overall = r.overall
    title = "iqscope report"
    if len(results) == 1:
        title += f": {results[0].analysis.recording.path}"
    title += f" - {overall.upper()}"
    cautions = "".join(f"<li>{escape(t)}</li>" for t in SAFETY_POINTS)
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
        "img-src data:; style-src 'unsafe-inline'\">"
        f"<title>{escape(title)}</title><style>{_CSS}</style></head><body>"
        "<header><h1>iqscope transmit-quality report</h1>"
        f'<p class="meta">generated {escape(when)} by iqscope {escape(__version__)}; '
        f"overall {escape(verdict_label(overall))}</p></header>"
        f"{''.join(sections)}"
        '<section class="cautions"><h2>Cautions</h2>'
        f"<ul>{cautions}</ul></section>"
        "<footer>Figures are measured from an I/Q recording made with a software-defined receiver "
        "and include the receiver chain. Limits presets are a convenience, not legal advice.</footer>"
        "</body></html>\n"
    )
