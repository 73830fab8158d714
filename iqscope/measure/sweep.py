"""Drive sweep: output, IMD3, carrier and opposite sideband against drive; P1dB, IMD3 limit, OIP3.

"Am I overdriving the modulator?" Record the transmitter at several drive levels (the
audio level into the microphone input, in dB of any fixed reference), analyse each
recording as usual (typically ``--mode two-tone``), and this module puts the figures
side by side:

- output power against drive and the **1 dB compression point**: the drive at which
  the output falls 1 dB below the straight line of the small-signal gain;
- **IMD3 against drive** and the drive at which it crosses a limit (dB below PEP);
- a **third-order intercept** estimate, OIP3 = P_tone + (P_tone - P_IM3)/2 from the
  points in the weakly nonlinear region, with the measured IM3 slope (3 dB/dB expected);
- carrier suppression and opposite-sideband suppression against drive (a balanced
  modulator's carrier suppression often worsens as it is driven harder).

References
----------
.. [1] Third-order intercept and the 3:1 slope of IM3 products: REFERENCES.md item 6
   (standard RF relation); Krauss, Bostian & Raab, *Solid State Radio Engineering*,
   Wiley 1980 (two-tone PEP relations, p. 509).
.. [2] 1 dB compression point: the input (here: drive) level at which the gain has
   dropped 1 dB below its small-signal value (standard definition).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Final

import numpy as np

from ._analysis import Analysis
from ._result import Measurement
from .imd import third_order_intercept

__all__ = [
    "SweepPoint",
    "Crossing",
    "SweepResult",
    "DEFAULT_IMD3_LIMIT_DB_PEP",
    "point_from_analysis",
    "analyse_sweep",
    "crossing",
]

#: Default IMD3 limit, dB below PEP: "better than -30 dB PEP acceptable" for an SSB
#: transmitter (REFERENCES.md item 11, common practice).
DEFAULT_IMD3_LIMIT_DB_PEP: Final = -30.0

#: Points whose compression is below this are "weakly nonlinear" (OIP3 and IM3 slope).
WEAK_COMPRESSION_DB: Final = 0.5


@dataclass(frozen=True)
class SweepPoint:
    """The figures of one recording of the sweep."""

    drive_db: float
    """Drive level, dB re any fixed reference."""
    path: str = ""
    output_dbfs: float | None = None
    """Mean power of the emission, dBFS (noise removed)."""
    output_dbm: float | None = None
    """Mean power in dBm, when calibrated."""
    tone_dbfs: float | None = None
    """Two-tone: mean power of one tone, dBFS."""
    imd3_dbc: float | None = None
    imd3_db_pep: float | None = None
    imd3_limited: bool = False
    """True when the IMD3 figures are noise-limited upper bounds."""
    imd5_dbc: float | None = None
    carrier_suppression_db: float | None = None
    opposite_sideband_db: float | None = None
    carrier_limited: bool = False
    """True when the carrier suppression is a noise-limited lower bound."""
    opposite_sideband_limited: bool = False
    """True when the opposite-sideband suppression is a noise-limited lower bound."""

    @property
    def im3_dbfs(self) -> float | None:
        """Absolute level of the worst IM3 product, dBFS."""
        if self.tone_dbfs is None or self.imd3_dbc is None:
            return None
        return self.tone_dbfs + self.imd3_dbc

    def to_json(self) -> dict[str, Any]:
        return {
            "drive_db": self.drive_db,
            "path": self.path,
            "output_dbfs": _f(self.output_dbfs),
            "output_dbm": _f(self.output_dbm),
            "tone_dbfs": _f(self.tone_dbfs),
            "imd3_dbc": _f(self.imd3_dbc),
            "imd3_db_pep": _f(self.imd3_db_pep),
            "imd3_limited_by_noise": self.imd3_limited,
            "imd5_dbc": _f(self.imd5_dbc),
            "carrier_suppression_db": _f(self.carrier_suppression_db),
            "opposite_sideband_suppression_db": _f(self.opposite_sideband_db),
            "carrier_limited_by_noise": self.carrier_limited,
            "opposite_sideband_limited_by_noise": self.opposite_sideband_limited,
        }


@dataclass(frozen=True)
class Crossing:
    """Where a curve crosses a level, by linear interpolation between measured points."""

    drive_db: float | None
    """The crossing drive, dB (None when not crossed inside the sweep)."""
    value: float | None
    """The interpolated value of a second curve there (e.g. output power), if asked."""
    bound: str | None = None
    """"above" when the crossing lies beyond the highest drive, "below" before the lowest."""
    note: str = ""


@dataclass(frozen=True)
class SweepResult:
    """Everything the sweep shows."""

    points: tuple[SweepPoint, ...]
    output_kind: str
    """Which output the compression is taken from: "tone" (two-tone) or "mean"."""
    output_unit: str
    """Unit of the output figures used: "dBFS" or "dBm"."""
    small_signal_gain_db: float | None
    """Output minus drive at the lowest drive(s), dB."""
    compression_db: tuple[float | None, ...]
    """Compression at each point, dB (positive when below the small-signal line)."""
    p1db: Crossing
    imd3_limit_db_pep: float
    imd3_crossing: Crossing
    oip3_dbfs: float | None
    """Output third-order intercept (per-tone power), dBFS."""
    oip3_points: tuple[float | None, ...]
    im3_slope: float | None
    """Measured slope of the IM3 product against drive in the weakly nonlinear region, dB/dB."""
    notes: tuple[str, ...] = field(default=())

    def to_json(self) -> dict[str, Any]:
        return {
            "schema": "iqscope.sweep/1",
            "points": [p.to_json() for p in self.points],
            "output_kind": self.output_kind,
            "output_unit": self.output_unit,
            "small_signal_gain_db": _f(self.small_signal_gain_db),
            "compression_db": [_f(c) for c in self.compression_db],
            "p1db": _crossing_json(self.p1db),
            "imd3_limit_db_pep": self.imd3_limit_db_pep,
            "imd3_crossing": _crossing_json(self.imd3_crossing),
            "oip3_dbfs": _f(self.oip3_dbfs),
            "oip3_points_dbfs": [_f(x) for x in self.oip3_points],
            "im3_slope_db_per_db": _f(self.im3_slope),
            "notes": list(self.notes),
        }


def _crossing_json(c: Crossing) -> dict[str, Any]:
    return {"drive_db": _f(c.drive_db), "output": _f(c.value), "bound": c.bound, "note": c.note}


def _f(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def _value(m: Mapping[str, Measurement], key: str) -> float | None:
    meas = m.get(key)
    return None if meas is None else meas.value


def point_from_analysis(drive_db: float, analysis: Analysis) -> SweepPoint:
    """Collect one sweep point from an :class:`Analysis` (pipeline result).

    Output power: ``mean_power_dbm`` when calibrated; in dBFS the emission's power is
    the spectrum integrated with the noise floor (``noise_floor_dbfs_per_hz``) removed,
    or ``mean_power_dbfs`` / ``signal_power_dbfs`` when the pipeline reports one.
    """
    m = analysis.measurements
    out_dbfs = _value(m, "signal_power_dbfs")
    if out_dbfs is None:
        out_dbfs = _signal_power_dbfs(analysis)
    if out_dbfs is None:
        out_dbfs = _value(m, "mean_power_dbfs")
    tone = None
    imd3 = m.get("imd3_dbc")
    if imd3 is not None and imd3.details:
        t = imd3.details.get("reference_tone_dbfs")
        tone = float(t) if isinstance(t, (int, float)) and math.isfinite(t) else None
    return SweepPoint(
        drive_db=float(drive_db),
        path=analysis.recording.path,
        output_dbfs=out_dbfs,
        output_dbm=_value(m, "mean_power_dbm"),
        tone_dbfs=tone,
        imd3_dbc=_value(m, "imd3_dbc"),
        imd3_db_pep=_value(m, "imd3_db_pep"),
        imd3_limited=bool(imd3.limited_by_noise) if imd3 is not None else False,
        imd5_dbc=_value(m, "imd5_dbc"),
        carrier_suppression_db=_value(m, "carrier_suppression_db"),
        opposite_sideband_db=_value(m, "opposite_sideband_suppression_db"),
        carrier_limited=_limited(m, "carrier_suppression_db"),
        opposite_sideband_limited=_limited(m, "opposite_sideband_suppression_db"),
    )


def _limited(m: Mapping[str, Measurement], key: str) -> bool:
    meas = m.get(key)
    return bool(meas is not None and meas.limited_by_noise)


def _signal_power_dbfs(analysis: Analysis) -> float | None:
    spec = analysis.spectrum
    nf = analysis.measurements.get("noise_floor_dbfs_per_hz")
    if spec is None or nf is None or nf.value is None:
        return None
    n0 = 10.0 ** (nf.value / 10.0)
    p = float(np.sum(np.clip(spec.psd - n0, 0.0, None))) * spec.bin_hz
    return 10.0 * math.log10(p) if p > 0 else None


def crossing(
    x: Sequence[float],
    y: Sequence[float | None],
    level: float,
    rising: bool = True,
    other: Sequence[float | None] | None = None,
) -> Crossing:
    """First drive at which ``y`` crosses ``level`` (upward when ``rising``), interpolated.

    Points with ``y`` None are skipped. ``other`` is interpolated at the crossing too.
    """
    pts = [(xi, yi, None if other is None else other[i]) for i, (xi, yi) in enumerate(zip(x, y)) if yi is not None]
    if not pts:
        return Crossing(None, None, None, "no values")
    sign = 1.0 if rising else -1.0

    def over(v: float) -> bool:
        return sign * (v - level) > 0

    if over(pts[0][1]):
        return Crossing(None, None, "below", f"already past {level:g} at the lowest drive ({pts[0][0]:g} dB)")
    for (x0, y0, o0), (x1, y1, o1) in zip(pts, pts[1:]):
        if over(y1):
            t = (level - y0) / (y1 - y0) if y1 != y0 else 0.0
            xc = x0 + t * (x1 - x0)
            oc = None if o0 is None or o1 is None else o0 + t * (o1 - o0)
            return Crossing(xc, oc, None, f"interpolated between {x0:g} and {x1:g} dB drive")
    return Crossing(None, None, "above", f"not reached up to the highest drive ({pts[-1][0]:g} dB)")


def analyse_sweep(points: Sequence[SweepPoint], imd3_limit_db_pep: float = DEFAULT_IMD3_LIMIT_DB_PEP) -> SweepResult:
    """Compression point, IMD3 crossing and OIP3 from sweep points.

    Parameters
    ----------
    points : sequence of SweepPoint
        At least two, any order (sorted by drive here).
    imd3_limit_db_pep : float
        IMD3 limit, dB re PEP (negative); default -30 (common practice).

    Returns
    -------
    SweepResult

    Notes
    -----
    The small-signal gain is output minus drive at the lowest drive (the mean of the two
    lowest when they agree within 0.2 dB). Compression at a point is
    ``drive + gain - output``; the 1 dB compression point is where it first reaches
    1 dB (linear interpolation). With two tones the per-tone output is used (IMD
    products and a compressing envelope do not disturb it), else the mean output.
    OIP3 = P_tone + (P_tone - P_IM3)/2 at each point whose IMD3 is detected and whose
    compression is below 0.5 dB; their median is the estimate, and the IM3 slope is the
    least-squares slope of the IM3 level over those points (3 dB/dB in theory).
    """
    if len(points) < 2:
        raise ValueError("a sweep needs at least two recordings")
    pts = tuple(sorted(points, key=lambda p: p.drive_db))
    drives = [p.drive_db for p in pts]
    if len(set(drives)) != len(drives):
        raise ValueError("two recordings have the same drive level")
    notes: list[str] = []
    use_tone = all(p.tone_dbfs is not None for p in pts)
    use_dbm = not use_tone and all(p.output_dbm is not None for p in pts)
    outs: list[float | None]
    if use_tone:
        outs, kind, unit = [p.tone_dbfs for p in pts], "tone", "dBFS"
    elif use_dbm:
        outs, kind, unit = [p.output_dbm for p in pts], "mean", "dBm"
    else:
        outs, kind, unit = [p.output_dbfs for p in pts], "mean", "dBFS"
    gain: float | None = None
    valid = [(d, o) for d, o in zip(drives, outs) if o is not None]
    if valid:
        g0 = valid[0][1] - valid[0][0]
        gain = g0
        if len(valid) > 1:
            g1 = valid[1][1] - valid[1][0]
            if abs(g1 - g0) <= 0.2:
                gain = 0.5 * (g0 + g1)
        if len(valid) > 1 and valid[1][1] - valid[0][1] < 0.5 * (valid[1][0] - valid[0][0]):
            notes.append("output grows by less than half the drive step already at the lowest drives: "
                         "start the sweep lower to see the small-signal gain")
    comp: list[float | None] = [None if (o is None or gain is None) else d + gain - o for d, o in zip(drives, outs)]
    p1db = crossing(drives, comp, 1.0, rising=True, other=outs)
    imd3 = [p.imd3_db_pep if not p.imd3_limited else None for p in pts]
    imd_cross = crossing(drives, imd3, imd3_limit_db_pep, rising=True, other=outs)
    if all(p.imd3_db_pep is None for p in pts):
        imd_cross = Crossing(None, None, None, "no IMD3 figures (record with --mode two-tone)")
    oip3_pts: list[float | None] = []
    slope_x: list[float] = []
    slope_y: list[float] = []
    for p, c in zip(pts, comp):
        if p.tone_dbfs is None or p.imd3_dbc is None or p.imd3_limited:
            oip3_pts.append(None)
            continue
        im3 = p.tone_dbfs + p.imd3_dbc
        oip3_pts.append(third_order_intercept(p.tone_dbfs, im3))
        if c is not None and c < WEAK_COMPRESSION_DB:
            slope_x.append(p.drive_db)
            slope_y.append(im3)
    weak = [o for o, c in zip(oip3_pts, comp) if o is not None and c is not None and c < WEAK_COMPRESSION_DB]
    oip3 = float(np.median(weak)) if weak else None
    slope = float(np.polyfit(slope_x, slope_y, 1)[0]) if len(slope_x) >= 2 else None
    if slope is not None and abs(slope - 3.0) > 0.5:
        notes.append(
            f"IM3 grows {slope:.2f} dB per dB of drive, not 3: the products may not be third-order "
            "intermodulation of one stage (or the receiver adds its own), so treat OIP3 with care"
        )
    if oip3 is None:
        notes.append("no OIP3: needs two-tone points with IMD3 above the noise and less than 0.5 dB compression")
    return SweepResult(
        points=pts,
        output_kind=kind,
        output_unit=unit,
        small_signal_gain_db=gain,
        compression_db=tuple(comp),
        p1db=p1db,
        imd3_limit_db_pep=imd3_limit_db_pep,
        imd3_crossing=imd_cross,
        oip3_dbfs=oip3,
        oip3_points=tuple(oip3_pts),
        im3_slope=slope,
        notes=tuple(notes),
    )
