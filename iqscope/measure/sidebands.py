"""Sideband figures: opposite_sideband_suppression_db (SSB), sideband_balance_db (DSB, AM).

Definitions (DESIGN.md section 3, contract):

- ``opposite_sideband_suppression_db = 10 log10(P_wanted / P_mirror)``, the mirror band
  being the wanted band reflected about the carrier; positive when the unwanted side is
  down. With ``--tone`` the two tone lines are compared (more sensitive than bands).
- ``sideband_balance_db = 10 log10(P_upper / P_lower)``, signed, 0 dB ideal.

An undetectable opposite sideband gives a lower bound (``limited_by_noise``). When the
carrier sits near the capture centre the receiver's own image of the wanted sideband
falls on the opposite one, and the note says the figure may be the receiver's.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from ..dsp._lines import line_power
from ._context import AnalysisContext, FigureSet
from ._result import Measurement, failed
from .locate import Layout, db_ratio, layout_of

__all__ = ["sideband_figures"]


def _image_overlap_note(lay: Layout, lo: float, hi: float) -> str:
    """Note when the receiver image of [lo, hi] (i.e. [-hi, -lo]) overlaps the mirror band."""
    f0 = lay.f0 or 0.0
    mlo, mhi = 2 * f0 - hi, 2 * f0 - lo
    ilo, ihi = -hi, -lo
    if min(mhi, ihi) > max(mlo, ilo):
        return (
            "; the receiver's I/Q image of the wanted sideband falls on the opposite one (carrier near the "
            "capture centre), so this figure may be the receiver's: tune the receiver off the carrier"
        )
    return ""


def sideband_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: opposite-sideband suppression (SSB) or sideband balance (DSB, AM)."""
    out = FigureSet()
    lay = layout_of(ctx)
    mode = ctx.signal.mode
    spec = ctx.spectrum
    if mode in ("usb", "lsb"):
        name = "opposite_sideband_suppression_db"
        if lay.f0 is None:
            out.measurements[name] = failed("dB", f"carrier not placed: {ctx.signal.how}")
            return out
        f0 = lay.f0
        sgn = 1.0 if mode == "usb" else -1.0
        tone = ctx.request.tone_hz
        if tone is not None and lay.tone_lines:
            want = lay.tone_lines[0]
            unw = line_power(spec, f0 - sgn * tone, lay.floor.psd, search_bins=2, floor_sigma_rel=lay.floor.sigma_rel)
            wlo, whi = sorted((f0 + sgn * (tone - 1.0), f0 + sgn * (tone + 1.0)))
            img = _image_overlap_note(lay, wlo, whi)
            if not want.detected:
                out.measurements[name] = failed("dB", "test-tone line not above the noise floor")
                return out
            out.markers["sideband_upper" if mode == "usb" else "sideband_lower"] = want.frequency_hz
            if unw.detected:
                v, s = db_ratio(want.power, want.sigma, unw.power, unw.sigma)
                out.measurements[name] = Measurement(
                    value=v, unit="dB", uncertainty=s,
                    note=f"test-tone line over its mirror line about the carrier{img}",
                )
            else:
                vb = 10 * math.log10(want.power / unw.upper_bound) if unw.upper_bound > 0 else None
                out.measurements[name] = Measurement(
                    value=vb, unit="dB", limited_by_noise=True, bound="lower",
                    note=f"mirror line not detectable above the noise: the value is the bound the noise allows{img}",
                )
            return out
        if not lay.has_signal:
            out.measurements[name] = failed("dB", "no signal above the noise floor")
            return out
        if mode == "usb":
            wlo, whi = f0 + lay.gap_hz, max(lay.hi_hz, f0 + lay.gap_hz)
        else:
            wlo, whi = min(lay.lo_hz, f0 - lay.gap_hz), f0 - lay.gap_hz
        mlo, mhi = 2 * f0 - whi, 2 * f0 - wlo
        want_b = lay.band(spec, wlo, whi, symmetric=True)
        unw_b = lay.band(spec, mlo, mhi, symmetric=True)
        img = _image_overlap_note(lay, wlo, whi)
        if not want_b.detected:
            out.measurements[name] = failed("dB", "wanted sideband not above the noise floor")
        elif unw_b.detected:
            v, s = db_ratio(want_b.power, want_b.sigma, unw_b.power, unw_b.sigma)
            out.measurements[name] = Measurement(
                value=v, unit="dB", uncertainty=s,
                note=f"wanted band {wlo:.0f}..{whi:.0f} Hz over its mirror about the carrier{img}",
            )
        else:
            ub = unw_b.upper_bound
            out.measurements[name] = Measurement(
                value=10 * math.log10(want_b.power / ub) if ub > 0 else None,
                unit="dB", limited_by_noise=True, bound="lower",
                note=f"opposite sideband not detectable above the noise: the value is the bound the noise allows{img}",
            )
        return out

    if mode in ("dsb", "am"):
        name = "sideband_balance_db"
        if lay.f0 is None or not lay.has_signal:
            out.measurements[name] = failed("dB", "no sidebands above the noise floor")
            return out
        f0 = lay.f0
        tones = lay.tone_lines
        if len(tones) == 2:
            lo_t, hi_t = tones
            out.markers["sideband_lower"] = lo_t.frequency_hz
            out.markers["sideband_upper"] = hi_t.frequency_hz
            up, dn = hi_t, lo_t
            pu, su, pd, sd = up.power, up.sigma, dn.power, dn.sigma
            det_u, det_d = up.detected, dn.detected
            ub_u, ub_d = up.upper_bound, dn.upper_bound
            what = "upper over lower sideband line"
        else:
            ext = max(lay.hi_hz - f0, f0 - lay.lo_hz)
            bu = lay.band(spec, f0 + lay.gap_hz, f0 + ext, symmetric=True)
            bd = lay.band(spec, f0 - ext, f0 - lay.gap_hz, symmetric=True)
            pu, su, pd, sd = bu.power, bu.sigma, bd.power, bd.sigma
            det_u, det_d = bu.detected, bd.detected
            ub_u, ub_d = bu.upper_bound, bd.upper_bound
            what = f"upper over lower sideband band (+/- {ext:.0f} Hz about the carrier)"
        if det_u and det_d:
            v, s = db_ratio(pu, su, pd, sd)
            out.measurements[name] = Measurement(value=v, unit="dB", uncertainty=s, note=what)
        elif det_u and ub_d > 0:
            out.measurements[name] = Measurement(
                value=10 * math.log10(pu / ub_d), unit="dB", limited_by_noise=True, bound="lower",
                note=f"{what}: lower sideband not detectable, bound from the noise",
            )
        elif det_d and ub_u > 0:
            out.measurements[name] = Measurement(
                value=10 * math.log10(ub_u / pd), unit="dB", limited_by_noise=True, bound="upper",
                note=f"{what}: upper sideband not detectable, bound from the noise",
            )
        else:
            out.measurements[name] = failed("dB", "sidebands not detectable above the noise floor")
    return out


def _sideband_provides(ctx: AnalysisContext) -> Mapping[str, str]:
    """The figure :func:`sideband_figures` reports in this context's mode (pipeline ``provides``)."""
    mode = ctx.signal.mode
    if mode in ("usb", "lsb"):
        return {"opposite_sideband_suppression_db": "dB"}
    if mode in ("dsb", "am"):
        return {"sideband_balance_db": "dB"}
    return {}


sideband_figures.provides = _sideband_provides  # type: ignore[attr-defined]
