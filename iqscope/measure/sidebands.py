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
from ._result import Artefact, Measurement, failed
from .locate import Layout, db_ratio, layout_of

__all__ = ["sideband_figures", "sideband_reversal", "REVERSED_DB", "AUDIO_SPAN_HZ", "MIRROR_NOTE"]

#: How the note of a reversal found at the mirror of the carrier (I and Q swapped, the
#: carrier given as RF) begins: the emission is not where the carrier says, so grading
#: leaves the band and spur figures ungraded too.
MIRROR_NOTE = "nothing stands beside the carrier"

#: The side opposite the mode's this much (dB) above the wanted side means the sense is
#: reversed: no SSB filter or phasing exciter passes more of its unwanted sideband than
#: of the wanted one, so 3 dB (twice the power) leaves any real transmitter out.
REVERSED_DB = 3.0
#: Audio span compared on each side of the carrier, Hz (SSB speech audio ends near
#: 3 kHz, test tones below 3 kHz; common practice), with room for a wide filter.
AUDIO_SPAN_HZ = 5000.0


def _line_score(ctx: AnalysisContext, lay: Layout, carrier: float, tone_line: float) -> float:
    """Residual carrier at ``carrier`` or mirror line of ``tone_line`` about it, in noise sigmas
    (0 unless 5 sigmas up): the same test auto mode uses to pick a side from ``--tone``."""
    spec = ctx.spectrum
    best = 0.0
    for f in (carrier, 2 * carrier - tone_line):
        lp = line_power(spec, f, lay.floor.psd, search_bins=2)
        if lp.noise_sigma > 0 and lp.power > 5 * lp.noise_sigma:
            best = max(best, lp.power / lp.noise_sigma)
    return best


def sideband_reversal(ctx: AnalysisContext, lay: Layout) -> str:
    """Why the signal's power sits on the other side of the carrier from ``--mode``; "" if it does not.

    Only for a mode the user named (auto mode picks the side from the signal). With
    ``--tone`` alone the carrier was placed on the mode's side of the tone line; the
    sense is reversed when the residual carrier or mirror line stands on the other side
    (5 noise sigmas up, 10 times the score of the mode's side). Otherwise the
    noise-subtracted power within :data:`AUDIO_SPAN_HZ` on the opposite side of the
    carrier exceeds the wanted side's by :data:`REVERSED_DB`; or, with neither side
    holding power, the mirror of the wanted band about the capture centre holds it
    (I and Q swapped with the carrier given as RF).
    """
    mode = ctx.signal.mode
    if mode not in ("usb", "lsb") or lay.f0 is None or not lay.has_signal or ctx.signal.mode_detected:
        return ""
    f0 = float(lay.f0)
    sgn = 1.0 if mode == "usb" else -1.0
    side = "upper" if mode == "usb" else "lower"
    other = "lower" if mode == "usb" else "upper"
    why = "wrong --mode, or I and Q swapped"
    tone = ctx.request.tone_hz
    spec = ctx.spectrum
    if tone is not None and ctx.request.carrier_hz is None:
        f_line = f0 + sgn * tone
        alt = f_line + sgn * tone
        mine, theirs = _line_score(ctx, lay, f0, f_line), _line_score(ctx, lay, alt, f_line)
        if theirs > 0 and theirs >= 10.0 * mine:
            return (
                f"the test-tone line at {f_line:.2f} Hz has its residual carrier or mirror line on the {other} "
                f"side ({alt:.2f} Hz), not the {side}: the signal is {'lsb' if mode == 'usb' else 'usb'}, not "
                f"{mode} ({why})"
            )
        return ""
    gap = lay.gap_hz
    up = lay.band(spec, f0 + gap, f0 + AUDIO_SPAN_HZ, symmetric=True)
    dn = lay.band(spec, f0 - AUDIO_SPAN_HZ, f0 - gap, symmetric=True)
    want, unw = (up, dn) if mode == "usb" else (dn, up)
    ratio = 10 ** (REVERSED_DB / 10)
    if unw.detected and unw.power > ratio * max(want.power, 0.0):
        return (
            f"the power sits on the {other} side of the carrier ({f0:.2f} Hz), not the {side}: "
            f"the signal is {'lsb' if mode == 'usb' else 'usb'} about it, not {mode} ({why})"
        )
    if not want.detected and not unw.detected and abs(f0) > AUDIO_SPAN_HZ:
        # The mirror of the wanted band about the capture centre: what swapped I and Q give.
        mlo, mhi = sorted((-(f0 + sgn * gap), -(f0 + sgn * AUDIO_SPAN_HZ)))
        mir = lay.band(spec, mlo, mhi)
        if mir.detected and mir.power > 0:
            return (
                f"{MIRROR_NOTE} at {f0:.2f} Hz, but the mirror of its {side} sideband about "
                f"the capture centre ({mlo:.0f}..{mhi:.0f} Hz) holds the signal: I and Q look swapped "
                f"({why}; try --swap-iq)"
            )
    return ""


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
        reversal = sideband_reversal(ctx, lay)
        if reversal:
            out.artefacts.append(Artefact(kind="sideband_reversed", offset_hz=float(lay.f0), level_dbc=None,
                                          note=reversal + "; no sideband figure is graded"))
            out.measurements[name] = failed("dB", f"not measured: {reversal}")
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
