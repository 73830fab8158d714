"""Plots (matplotlib, Agg canvas, no pyplot): PNG bytes from a graded analysis.

Everything drawn comes from the :class:`~iqscope.measure._analysis.Analysis` already
computed: the averaged spectrum, the markers (carrier, band edges, products ...) and
the traces (spectrogram, envelope, frequency, Allan deviation). Renderers convert to dB
for display and choose the view; they never compute a measurement.

The limit mask on the spectrum is a visual aid drawn relative to the displayed peak (a
spectrum analyser's limit line); the verdicts come from the measurements, not the mask.
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping
from typing import Any, Final

import numpy as np
import numpy.typing as npt
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..grading import GradeResult
from ..measure._analysis import Analysis, Trace
from ..measure._result import Measurement

__all__ = ["PLOT_NAMES", "render_plots", "spectrum_figure", "figure_png", "line_figure", "allan_figure", "worst_window"]

#: Plots ``render_plots`` may produce, in report order (file names ``STEM-NAME.png``).
PLOT_NAMES: Final = ("spectrum", "spectrogram", "envelope", "frequency", "allan")

_SIZE: Final = (8.0, 4.5)
_SPECTRUM_SIZE: Final = (8.0, 5.4)
_DPI: Final = 110
_MASK_COLOR: Final = "#c0392b"
_EDGE_COLOR: Final = "#2471a3"
_RECEIVER_COLOR: Final = "#7d3c98"
_SPUR_COLOR: Final = "#d35400"


def figure_png(fig: Figure) -> bytes:
    """Render a figure to PNG bytes with the Agg canvas."""
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, metadata={"Software": None})
    return buf.getvalue()


def render_plots(result: GradeResult) -> dict[str, bytes]:
    """Every plot the analysis has data for, as ``{name: PNG bytes}`` in report order."""
    a = result.analysis
    out: dict[str, bytes] = {}
    if a.spectrum is not None and a.spectrum.freqs_hz.size > 1:
        out["spectrum"] = figure_png(spectrum_figure(result))
    sg = a.traces.get("spectrogram")
    if sg is not None and np.ndim(sg.y) == 2 and np.size(sg.y) > 1:
        out["spectrogram"] = figure_png(_spectrogram_figure(a, sg))
    env = a.traces.get("envelope")
    if env is not None and np.ndim(env.y) == 1 and np.size(env.y) > 1:
        out["envelope"] = figure_png(line_figure(env, _title(a, "Envelope over time")))
    fr = a.traces.get("frequency")
    if fr is not None and np.ndim(fr.y) == 1 and np.size(fr.y) > 1:
        out["frequency"] = figure_png(
            line_figure(
                fr,
                _title(a, "Frequency over time"),
                band=fr.extra.get("sigma"),
                relative=True,
                window=worst_window(a.measurements),
            )
        )
    ad = a.traces.get("allan_deviation")
    if ad is not None and np.ndim(ad.y) == 1 and np.size(ad.y) > 1:
        out["allan"] = figure_png(allan_figure(ad, _title(a, "Allan deviation")))
    return out


def _title(a: Analysis, what: str) -> str:
    name = a.recording.path.replace("\\", "/").rsplit("/", 1)[-1]
    return f"{what}: {name} ({a.signal.mode})"


def _hz_scale(span_hz: float) -> tuple[float, str]:
    return (1e3, "kHz") if span_hz >= 5e3 else (1.0, "Hz")


def _view(a: Analysis, rule_widths: list[float]) -> tuple[float, float]:
    """Centre and half-span of the spectrum view (Hz offsets from the capture centre)."""
    spec = a.spectrum
    assert spec is not None
    carrier = a.signal.carrier_offset_hz
    if carrier is None or not math.isfinite(carrier):
        carrier = float(spec.freqs_hz[int(np.argmax(np.nan_to_num(spec.psd, nan=0.0)))])
    reach = [abs(v - carrier) for k, v in a.markers.items() if math.isfinite(v) and k != "worst_spur"]
    reach += [w for w in rule_widths if math.isfinite(w)]
    half = 1.4 * max(reach) if reach else 0.0
    half = max(half, 25 * spec.bin_hz, 200.0)
    nyq = spec.sample_rate_hz / 2
    return carrier, min(half, nyq)


def _mask_rules(result: GradeResult) -> dict[str, float]:
    """Pass limits worth drawing: name -> number (Hz widths, dB suppressions)."""
    out: dict[str, float] = {}
    for v in result.verdicts:
        r = v.rule
        if r is None:
            continue
        if v.measurement in ("bandwidth_26db_hz", "occupied_bandwidth_hz") and r.pass_bound.max is not None:
            out[v.measurement] = r.pass_bound.max
        if v.measurement in ("carrier_suppression_db", "opposite_sideband_suppression_db") and r.pass_bound.min is not None:
            out[v.measurement] = r.pass_bound.min
    return out


def spectrum_figure(result: GradeResult) -> Figure:
    """Spectrum around the signal: carrier, sidebands, band edges, products and the mask."""
    a = result.analysis
    spec = a.spectrum
    assert spec is not None
    masks = _mask_rules(result)
    widths = [masks[k] / 2 for k in ("bandwidth_26db_hz", "occupied_bandwidth_hz") if k in masks]
    spurs = _spur_info(result)
    if spurs is not None and spurs["limit"] is not None and a.signal.carrier_offset_hz is not None:
        # Show where the spurious domain starts, when that fits in the recorded band.
        nyq = spec.sample_rate_hz / 2
        c = a.signal.carrier_offset_hz
        edges = [spurs["centre"] - spurs["boundary"], spurs["centre"] + spurs["boundary"]]
        reach = [abs(e - c) for e in edges if abs(e) < nyq]
        if reach and 1.4 * max(reach) <= nyq:
            widths.append(max(reach))
    centre, half = _view(a, widths)
    scale, unit = _hz_scale(2 * half)
    f = spec.freqs_hz
    sel = (f >= centre - half) & (f <= centre + half)
    if np.count_nonzero(sel) < 2:
        sel = np.ones_like(f, dtype=bool)
    # Display only: power in one resolution bandwidth, so a line reads its power.
    psd = np.nan_to_num(np.asarray(spec.psd[sel], dtype=float), nan=0.0, posinf=0.0, neginf=0.0)
    level = 10.0 * np.log10(np.maximum(psd * spec.enbw_hz, 1e-30))
    x = (f[sel] - centre) / scale
    fig = Figure(figsize=_SPECTRUM_SIZE, layout="constrained")
    ax = fig.add_subplot()
    ax.plot(x, level, color="#1b2631", linewidth=0.9, label="spectrum")
    peak = float(np.max(level))
    floor = float(np.percentile(level, 10))
    ax.set_ylim(max(floor - 10.0, peak - 130.0), peak + 12.0)
    ax.set_xlim(x[0], x[-1])

    def xm(hz: float) -> float:
        return (hz - centre) / scale

    m = a.markers
    if "obw_lower" in m and "obw_upper" in m:
        ax.axvspan(xm(m["obw_lower"]), xm(m["obw_upper"]), color=_EDGE_COLOR, alpha=0.10, label="99 % bandwidth")
    if "bw26_lower" in m and "bw26_upper" in m:
        for k in ("bw26_lower", "bw26_upper"):
            ax.axvline(xm(m[k]), color=_EDGE_COLOR, linestyle="--", linewidth=0.8)
        ax.plot([], [], color=_EDGE_COLOR, linestyle="--", linewidth=0.8, label="-26 dB edges")
    if "band_lower" in m and "band_upper" in m:
        for k in ("band_lower", "band_upper"):
            ax.axvline(xm(m[k]), color="#909497", linewidth=0.7, linestyle=(0, (1, 3)))
        ax.plot([], [], color="#909497", linewidth=0.7, linestyle=(0, (1, 3)), label="emission band")
    if a.signal.carrier_offset_hz is not None:
        ax.axvline(0.0, color="#7d3c98", linewidth=0.8, linestyle=":", label="carrier")
    # The worst spur is drawn with the spur table when its levels can be placed.
    _draw_point_markers(ax, a, centre, scale, sel, level, frozenset({"worst_spur"}) if spurs else frozenset())
    _draw_receiver_artefacts(ax, a, centre, scale, sel, level)
    _draw_mask(ax, a, masks, centre, scale, peak)
    if spurs is not None:
        _draw_spurs(ax, spurs, centre, scale)
    ax.set_xlabel(f"offset from carrier ({unit})" if a.signal.carrier_offset_hz is not None else f"offset ({unit})")
    ax.set_ylabel(f"dBFS in {spec.enbw_hz:.3g} Hz RBW")
    ax.set_title(_title(a, "Spectrum"), fontsize=10)
    ax.grid(True, alpha=0.3)
    # Below the axes: inside, a long legend hides the band edges and the spur limit.
    fig.legend(loc="outside lower center", ncols=3, fontsize=7, frameon=False)
    return fig


def _finite(x: object) -> float | None:
    """A stored number as a float, or None when it is missing, not a number or not finite."""
    if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
        return None
    return float(x)


def _spur_info(result: GradeResult) -> dict[str, Any] | None:
    """What the spur figure stored: reference (dBFS), domain, lines and the graded limit."""
    m = result.analysis.measurements.get("worst_spur_dbc")
    if m is None:
        return None
    d = m.details
    ref, centre, boundary = (_finite(d.get(k)) for k in ("reference_dbfs", "emission_centre_hz", "spurious_boundary_hz"))
    if ref is None or centre is None or boundary is None:
        return None
    v = result.verdict_for("worst_spur_dbc")
    limit = None if v is None or v.rule is None else v.rule.pass_bound.max
    lines = [
        s
        for s in d.get("spurs") or []
        if isinstance(s, Mapping) and s.get("domain") == "spurious" and not s.get("artefact")
        and isinstance(s.get("offset_hz"), (int, float)) and isinstance(s.get("level_dbc"), (int, float))
    ]
    return {"ref": ref, "centre": centre, "boundary": boundary, "limit": limit,
            "lines": lines, "worst": m.value if not m.limited_by_noise else None}


def _draw_spurs(ax: Any, spurs: Mapping[str, Any], centre: float, scale: float) -> None:
    """Spurious-domain lines at their stored levels, and the spur limit over that domain.

    Levels are dBc re the mean power; ``reference_dbfs`` puts them on the dBFS axis (a
    line reads its power in one resolution bandwidth).
    """
    x0, x1 = ax.get_xlim()
    ref = spurs["ref"]
    lo_edge = (spurs["centre"] - spurs["boundary"] - centre) / scale
    hi_edge = (spurs["centre"] + spurs["boundary"] - centre) / scale
    limit = spurs["limit"]
    if limit is not None:
        label = f"spur limit (a line's level): {limit:g} dBc re mean power"
        for a_, b_ in ((x0, min(lo_edge, x1)), (max(hi_edge, x0), x1)):
            if b_ > a_:
                ax.plot([a_, b_], [ref + limit] * 2, color=_MASK_COLOR, linewidth=1.1, linestyle="--", label=label)
                label = "_nolegend_"
    shown = False
    outside: list[Mapping[str, Any]] = []
    for s in spurs["lines"]:
        x = (float(s["offset_hz"]) - centre) / scale
        if not x0 <= x <= x1:
            outside.append(s)
            continue
        y = ref + float(s["level_dbc"])
        ax.plot([x], [y], marker="v", color=_SPUR_COLOR, markersize=6, linestyle="none",
                label="_nolegend_" if shown else "spur (spurious domain)")
        ax.annotate(f"{float(s['level_dbc']):.0f} dBc", xy=(x, y), xytext=(0, 8), textcoords="offset points",
                    ha="center", fontsize=7, color=_SPUR_COLOR)
        shown = True
    if outside:
        worst = max(outside, key=lambda s: float(s["level_dbc"]))
        off = float(worst["offset_hz"]) - centre
        ax.text(0.01, 0.01, f"strongest spur outside this view: {float(worst['level_dbc']):.1f} dBc at "
                f"{'+' if off >= 0 else '-'}{_hz_text(abs(off))} from the carrier",
                transform=ax.transAxes, fontsize=7, color=_SPUR_COLOR, ha="left", va="bottom")


_ARTEFACT_TEXT: Final = {"dc_line": "receiver DC", "iq_image": "receiver image"}


def _draw_receiver_artefacts(
    ax: Any, a: Analysis, centre: float, scale: float, sel: npt.NDArray[np.bool_], level: npt.NDArray[np.float64]
) -> None:
    """Name the lines that are the receiver's (DC offset, I/Q image), so none reads as a spur."""
    spec = a.spectrum
    assert spec is not None
    f = spec.freqs_hz[sel]
    done: list[tuple[str, float]] = []
    tol = max(2.0 * spec.bin_hz, 0.03 * float(f[-1] - f[0]))  # one label per crowded spot
    for art in a.artefacts:
        hz = art.offset_hz
        text = _ARTEFACT_TEXT.get(art.kind)
        if text is None or hz is None or not math.isfinite(hz) or hz < f[0] or hz > f[-1]:
            continue
        if any(t == text and abs(hz - d) <= tol for t, d in done):
            continue
        done.append((text, hz))
        i = int(np.argmin(np.abs(f - hz)))
        lo, hi = max(0, i - 2), min(level.size, i + 3)
        y = float(np.max(level[lo:hi]))
        ax.annotate(text, xy=((hz - centre) / scale, y), xytext=(0, 10), textcoords="offset points",
                    ha="center", fontsize=7, color=_RECEIVER_COLOR, style="italic",
                    arrowprops={"arrowstyle": "-", "color": _RECEIVER_COLOR, "linewidth": 0.6})


_SKIP_POINT: Final = frozenset(
    {"carrier", "obw_lower", "obw_upper", "bw26_lower", "bw26_upper", "band_lower", "band_upper"}
)


def _marker_text(name: str) -> str:
    """``"imd3_lower"`` -> ``"IMD3 lower"``, ``"tone1"`` -> ``"tone 1"``, ``"sideband_upper"`` ->
    ``"upper sideband"``."""
    if name.startswith("imd") and "_" in name:
        order, side = name.split("_", 1)
        return f"{order.upper()} {side}"
    if name.startswith("tone") and name[4:].isdigit():
        return f"tone {name[4:]}"
    if name.startswith("sideband_"):
        return f"{name[9:]} sideband"
    return name.replace("_", " ")


def _draw_point_markers(
    ax: Any,
    a: Analysis,
    centre: float,
    scale: float,
    sel: npt.NDArray[np.bool_],
    level: npt.NDArray[np.float64],
    skip: frozenset[str] = frozenset(),
) -> None:
    spec = a.spectrum
    assert spec is not None
    f = spec.freqs_hz[sel]
    for name, hz in a.markers.items():
        if name in _SKIP_POINT or name in skip or not math.isfinite(hz) or hz < f[0] or hz > f[-1]:
            continue
        if name.startswith("imd") and "_" in name:
            # An IMD product below the noise has a marker but no line: no label at the floor.
            order = name.split("_", 1)[0]
            product = a.measurements.get(f"{order}_dbc")
            if product is None or product.limited_by_noise or product.value is None:
                continue
        i = int(np.argmin(np.abs(f - hz)))
        lo, hi = max(0, i - 2), min(level.size, i + 3)
        y = float(np.max(level[lo:hi]))
        ax.annotate(
            _marker_text(name),
            xy=((hz - centre) / scale, y),
            xytext=(0, 10),
            textcoords="offset points",
            ha="center",
            fontsize=7,
            arrowprops={"arrowstyle": "-", "color": "#555555", "linewidth": 0.6},
        )


def _draw_mask(ax: Any, a: Analysis, masks: Mapping[str, float], centre: float, scale: float, peak: float) -> None:
    """Limit mask relative to the displayed peak (a visual aid; verdicts use the figures)."""
    m = a.markers
    mid = centre
    if "obw_lower" in m and "obw_upper" in m:
        mid = (m["obw_lower"] + m["obw_upper"]) / 2
    x0, x1 = ax.get_xlim()
    width = masks.get("bandwidth_26db_hz")
    drop = 26.0
    if width is None and "occupied_bandwidth_hz" in masks:
        width, drop = masks["occupied_bandwidth_hz"], 26.0
    if width is not None:
        lo, hi = (mid - width / 2 - centre) / scale, (mid + width / 2 - centre) / scale
        xs = [x0, lo, lo, hi, hi, x1]
        ys = [peak - drop, peak - drop, peak + 3, peak + 3, peak - drop, peak - drop]
        ax.plot(xs, ys, color=_MASK_COLOR, linewidth=1.1, label=f"mask: {_hz_text(width)} wide at -{drop:g} dB")
    sup = masks.get("carrier_suppression_db")
    if sup is not None and a.signal.carrier_offset_hz is not None:
        w = max((x1 - x0) * 0.04, 1e-9)
        wanted = _sideband_power_dbfs(a)
        if wanted is not None:
            # Where the carrier line would read at the limit: sideband power - limit (the
            # definition of carrier_suppression_db; a line reads its power in one RBW).
            ax.plot([-w, w], [wanted - sup] * 2, color=_MASK_COLOR, linewidth=2.0,
                    label=f"carrier limit: {sup:g} dB below the sideband power")
        else:
            ax.plot([-w, w], [peak - sup] * 2, color=_MASK_COLOR, linewidth=2.0, label=f"carrier limit: peak -{sup:g} dB")
    opp = masks.get("opposite_sideband_suppression_db")
    if opp is not None and "obw_lower" in m and "obw_upper" in m and a.signal.carrier_offset_hz is not None:
        c = a.signal.carrier_offset_hz
        lo, hi = sorted((2 * c - m["obw_lower"], 2 * c - m["obw_upper"]))
        ax.plot(
            [(lo - centre) / scale, (hi - centre) / scale],
            [peak - opp] * 2,
            color=_MASK_COLOR,
            linewidth=1.1,
            linestyle="-.",
            label=f"opposite sideband limit: peak -{opp:g} dB",
        )


def _sideband_power_dbfs(a: Analysis) -> float | None:
    """Wanted sideband power in dBFS from the stored carrier figure: its value (dB) plus the
    carrier's power, or the noise bound on it, that the figure was taken against."""
    m = a.measurements.get("carrier_suppression_db")
    if m is None or m.value is None:
        return None
    carrier = m.details.get("carrier_power_dbfs", m.details.get("carrier_upper_bound_dbfs"))
    if not isinstance(carrier, (int, float)) or not math.isfinite(carrier):
        return None
    return float(carrier) + m.value


def _hz_text(hz: float) -> str:
    return f"{hz / 1e3:g} kHz" if abs(hz) >= 1e3 else f"{hz:g} Hz"


def _spectrogram_figure(a: Analysis, tr: Trace) -> Figure:
    """Image of level over time and frequency, in dBFS/Hz (``extra['scale'] == 'linear'``:
    FS²/Hz). The pipeline's layout: ``x`` frequencies (Hz offsets), ``y`` one row per time
    in ``extra['rows']`` (s); also accepted: ``x`` times and ``extra['freqs_hz']``."""
    img = np.asarray(tr.y, dtype=float)
    if "rows" in tr.extra:
        times = np.asarray(tr.extra["rows"], dtype=float)
        freqs = np.asarray(tr.x, dtype=float)
    else:
        times = np.asarray(tr.x, dtype=float)
        freqs = np.asarray(tr.extra.get("freqs_hz", np.arange(img.shape[1])), dtype=float)
    if img.shape[0] != times.size and img.shape[1] == times.size:
        img = img.T
    if tr.extra.get("scale") == "linear":
        img = 10.0 * np.log10(np.maximum(img, 1e-30))
    span = float(freqs[-1] - freqs[0]) if freqs.size > 1 else 1.0
    scale, unit = _hz_scale(span)
    fig = Figure(figsize=_SIZE, layout="constrained")
    ax = fig.add_subplot()
    finite = img[np.isfinite(img)]
    vmax = float(np.max(finite)) if finite.size else 0.0
    vmin = max(float(np.percentile(finite, 5)) if finite.size else -100.0, vmax - 100.0)
    t0, t1 = (float(times[0]), float(times[-1])) if times.size > 1 else (0.0, 1.0)
    mesh = ax.imshow(
        img,
        aspect="auto",
        origin="lower",
        extent=(float(freqs[0]) / scale, float(freqs[-1]) / scale, t0, t1),
        vmin=vmin,
        vmax=vmax,
        cmap="viridis",
        interpolation="nearest",
    )
    fig.colorbar(mesh, ax=ax, label=str(tr.extra.get("z_label", tr.extra.get("unit", "dBFS/Hz"))))
    ax.set_xlabel(f"offset from capture centre ({unit})")
    ax.set_ylabel("time (s)")
    ax.set_title(_title(a, "Spectrogram"), fontsize=10)
    return fig


def worst_window(measurements: Mapping[str, Measurement]) -> tuple[float, float, str] | None:
    """Start, length and legend text of the worst drift window (``drift_worst_window_hz``)."""
    m = measurements.get("drift_worst_window_hz")
    if m is None or m.value is None:
        return None
    start, span = _finite(m.details.get("window_start_s")), _finite(m.details.get("window_s"))
    if start is None or span is None:
        return None
    what = "at most " if m.limited_by_noise else ""
    return start, span, f"worst {span:g}-s window: {what}{m.value:.3g} Hz peak-to-peak"


def line_figure(
    tr: Trace,
    title: str,
    *,
    band: Any = None,
    relative: bool = False,
    window: tuple[float, float, str] | None = None,
) -> Figure:
    """A curve over time; ``relative`` draws it about its median (named in the label);
    ``window`` (start s, length s, text) shades the worst drift window."""
    fig = Figure(figsize=_SIZE, layout="constrained")
    ax = fig.add_subplot()
    x = np.asarray(tr.x, dtype=float)
    y = np.asarray(tr.y, dtype=float)
    y_label = tr.y_label
    finite = y[np.isfinite(y)]
    if relative and finite.size:
        ref = float(np.median(finite))
        y = y - ref
        y_label = f"{tr.y_label}, relative to {ref:.3f}"
    peak = tr.extra.get("peak_dbfs")
    if peak is not None and np.shape(peak) == y.shape:
        ax.plot(x, np.asarray(peak, dtype=float), color=_MASK_COLOR, linewidth=0.8, label="peak")
        ax.plot(x, y, color="#1b2631", linewidth=0.9, label="mean")
        ax.legend(loc="best", fontsize=7)
    else:
        ax.plot(x, y, color="#1b2631", linewidth=0.9)
    if band is not None and np.shape(band) == y.shape:
        s = np.asarray(band, dtype=float)
        ax.fill_between(x, y - s, y + s, color=_EDGE_COLOR, alpha=0.2, linewidth=0, label="1-sigma")
    if window is not None and x.size:
        start, span, text = window
        t0, t1 = max(start, float(x[0])), min(start + span, float(x[-1]))
        whole = float(x[-1] - x[0])
        if t1 > t0 and (t1 - t0) < 0.95 * whole:  # a window as long as the track says nothing
            ax.axvspan(t0, t1, color=_SPUR_COLOR, alpha=0.10, linewidth=0, label=text)
        else:
            window = None
    if band is not None or window is not None:
        ax.legend(loc="upper right", fontsize=7)
    ax.set_xlabel(tr.x_label)
    ax.set_ylabel(y_label)
    ax.set_title(title, fontsize=10)
    ax.grid(True, alpha=0.3)
    return fig


def allan_figure(tr: Trace, title: str) -> Figure:
    """Allan deviation against tau, log-log, with the trace's ``extra["error"]`` as error bars."""
    fig = Figure(figsize=_SIZE, layout="constrained")
    ax = fig.add_subplot()
    x = np.asarray(tr.x, dtype=float)
    y = np.asarray(tr.y, dtype=float)
    ok = (x > 0) & (y > 0)
    err = tr.extra.get("error")
    if err is not None and np.shape(err) == y.shape:
        ax.errorbar(x[ok], y[ok], yerr=np.asarray(err, dtype=float)[ok], fmt="o-", markersize=3, linewidth=0.9)
    else:
        ax.plot(x[ok], y[ok], "o-", markersize=3, linewidth=0.9)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel(tr.x_label)
    ax.set_ylabel(tr.y_label)
    ax.set_title(title, fontsize=10)
    ax.grid(True, which="both", alpha=0.3)
    return fig
