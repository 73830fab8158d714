"""Carrier figures: carrier_suppression_db, carrier_below_pep_db, frequency_offset_hz.

Definitions (DESIGN.md section 3, contract):

- ``carrier_suppression_db = 10 log10(P_sideband_total / P_carrier)``: wanted sideband
  power (both sidebands for DSB) over the residual carrier power. Positive when the
  carrier is below the sidebands.
- ``carrier_below_pep_db = 10 log10(PEP / P_carrier)``, PEP the largest ``|x|^2`` of
  the recording (RR No. 1.157 peak envelope power, for the sampled signal), over the
  whole capture bandwidth: anything else in the capture (a click, a neighbour, the
  receiver's DC offset) can raise it; the note flags the cheap-to-see cases
  (:func:`_pep_caveats`).
- ``frequency_offset_hz``: where the carrier sits relative to the capture centre.

Powers are integrated from the calibrated PSD with the noise floor subtracted
(:func:`iqscope.dsp.line_power`, :meth:`Layout.band`). A residual carrier that does not
stand ``DETECTION_SIGMAS`` above the noise gives a lower bound on the suppression, with
``limited_by_noise`` set. Uncertainties: docs/measurements.md.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import replace

import numpy as np

from ..dsp._lines import BandPower, LinePower
from ._context import AnalysisContext, FigureSet
from ._result import Artefact, Measurement, failed
from .locate import Layout, db_ratio, layout_of, stats_of

__all__ = ["carrier_figures", "sideband_power", "dc_artefact"]

#: Modes whose carrier is suppressed (the suppression figures apply).
SUPPRESSED: tuple[str, ...] = ("dsb", "usb", "lsb", "two-tone")


def sideband_power(ctx: AnalysisContext, lay: Layout) -> tuple[BandPower, str]:
    """Wanted sideband power: both sides for DSB, the wanted side for SSB (carrier lobe excluded)."""
    spec = ctx.spectrum
    f0 = lay.f0 if lay.f0 is not None else 0.0
    lo, hi = lay.lo_hz, lay.hi_hz
    if lay.mode == "usb":
        return lay.band(spec, f0 + lay.gap_hz, max(hi, f0 + lay.gap_hz)), "upper sideband"
    if lay.mode == "lsb":
        return lay.band(spec, min(lo, f0 - lay.gap_hz), f0 - lay.gap_hz), "lower sideband"
    return lay.band(spec, lo, hi), "both sidebands"


def dc_artefact(lay: Layout, ref_power: float) -> Artefact | None:
    """A receiver DC line flag (line at the capture centre away from the carrier)."""
    dc = lay.dc_line
    if dc is None or not dc.detected:
        return None
    near = lay.f0 is not None and abs(lay.f0) <= 2 * lay.gap_hz
    level = 10.0 * math.log10(dc.power / ref_power) if ref_power > 0 and dc.power > 0 else None
    if near:
        note = (
            "the carrier sits at the capture centre, where the receiver's DC offset also appears: "
            "the carrier figures may be the receiver's; tune the receiver a few kHz off the carrier"
        )
    else:
        note = (
            "a line at the capture centre: the receiver's DC offset (LO leakage), not the transmitter's; "
            "left out of the sideband and bandwidth figures"
        )
    return Artefact(kind="dc_line", offset_hz=dc.frequency_hz, level_dbc=level, note=note)


def carrier_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: carrier suppression, carrier below PEP, frequency offset, DC line."""
    out = FigureSet()
    lay = layout_of(ctx)
    mode = ctx.signal.mode
    spec = ctx.spectrum
    ref = ctx.signal_power if ctx.signal_power > 0 else ctx.mean_power

    art = dc_artefact(lay, ref)
    if art is not None:
        out.artefacts.append(art)
    dc_note = ""
    if art is not None and lay.f0 is not None and abs(lay.f0) <= 2 * lay.gap_hz:
        dc_note = "; carrier at the capture centre: the receiver's DC offset adds to it"

    if lay.f0 is not None:
        out.markers["carrier"] = float(lay.f0)

    # -- frequency offset ------------------------------------------------------------
    if mode in ("none", "unknown") or lay.f0 is None:
        if mode not in ("two-tone",):
            out.measurements["frequency_offset_hz"] = failed(
                "Hz", f"carrier not placed: {ctx.signal.how or 'no signal above the noise floor'}"
            )
    else:
        out.measurements["frequency_offset_hz"] = _offset(ctx, lay)

    if mode not in SUPPRESSED:
        return out
    if lay.f0 is None:
        for name in ("carrier_suppression_db", "carrier_below_pep_db"):
            out.measurements[name] = failed("dB", f"carrier not placed: {ctx.signal.how}")
        return out
    car = lay.carrier
    if car is None or not math.isfinite(car.power):
        for name in ("carrier_suppression_db", "carrier_below_pep_db"):
            out.measurements[name] = failed("dB", "recording too short for a spectrum: carrier not measured")
        return out
    sb, which = sideband_power(ctx, lay)
    if not lay.has_signal or not sb.detected or sb.power <= 0:
        out.measurements["carrier_suppression_db"] = failed("dB", "no sideband power above the noise floor")
    else:
        if car.detected:
            what = f"{which} over the residual carrier line at {car.frequency_hz:.2f} Hz"
        else:
            # car.frequency_hz is then only the bin searched, not a line's frequency.
            what = f"{which} over the residual carrier; no carrier line detected near {lay.f0:.2f} Hz"
        out.measurements["carrier_suppression_db"] = _ratio_figure(sb.power, sb.sigma, car, what + dc_note, mode)
    pep = ctx.peak_power
    if not pep > 0:
        out.measurements["carrier_below_pep_db"] = failed("dB", "no samples: no peak envelope power")
    else:
        noise_total = lay.floor.psd * spec.sample_rate_hz
        pep_sigma = pep * math.sqrt(2.0 * max(noise_total, 0.0) / pep)
        caveat, pep_details = _pep_caveats(ctx, lay, pep)
        m = _ratio_figure(
            pep, pep_sigma, car,
            "peak envelope power (largest |x|^2 over the whole capture bandwidth) over the residual carrier"
            + dc_note + caveat,
            mode,
        )
        if m.value is not None:
            m = replace(m, details=dict(m.details, **pep_details))
        out.measurements["carrier_below_pep_db"] = m
    return out


#: A recording's largest |x|^2 this far above the 90th percentile of the envelope blocks'
#: peaks comes from a few blocks (a click, a burst from a neighbour): the note says so.
PEP_OUTLIER_DB = 6.0


def _pep_caveats(ctx: AnalysisContext, lay: Layout, pep: float) -> tuple[str, dict[str, float]]:
    """Cautions on the PEP used by ``carrier_below_pep_db`` (docs/measurements.md section 5).

    The PEP is the largest ``|x|^2`` of the wideband samples, taken in the single pass
    before the emission band is known (a band-limited envelope would need a second read):
    a click, another station inside the capture bandwidth or the receiver's DC offset can
    set it, and a higher PEP reads as a carrier further below it. Two cheap checks on the
    pass's own statistics: the largest block peak against the 90th percentile of the
    envelope blocks' peaks (a steady test signal peaks alike in every block), and the
    receiver's DC line amplitude, which adds at most ``20 log10(1 + a_dc / a_pep)`` dB.
    """
    notes: list[str] = []
    det: dict[str, float] = {}
    st = stats_of(ctx)
    b = st.block_peak_power if st is not None else None
    if b is not None and b.size >= 8:
        ref = float(np.quantile(b, 0.9))
        if ref > 0:
            over = 10.0 * math.log10(pep / ref)
            det["pep_over_block_peak_p90_db"] = over
            if over > PEP_OUTLIER_DB:
                notes.append(
                    f"the peak stands {over:.1f} dB above the 90th percentile of the envelope blocks' peaks: "
                    "a click or a burst may have set the PEP, making this figure read high"
                )
    dc = lay.dc_line
    if dc is not None and dc.detected and dc.power > 0 and pep > dc.power:
        a = math.sqrt(dc.power / pep)
        det["pep_dc_share_db_max"] = 20.0 * math.log10(1.0 + a)
        notes.append(f"the receiver's DC line may add up to {20 * math.log10(1 + a):.2g} dB to the PEP")
    return ("; " + "; ".join(notes) if notes else ""), det


def _carrier_provides(ctx: AnalysisContext) -> Mapping[str, str]:
    """The figures :func:`carrier_figures` reports in this context's mode (pipeline ``provides``)."""
    mode = ctx.signal.mode
    out: dict[str, str] = {}
    if mode != "two-tone" or ctx.signal.carrier_offset_hz is not None:
        out["frequency_offset_hz"] = "Hz"
    if mode in SUPPRESSED:
        out.update(carrier_suppression_db="dB", carrier_below_pep_db="dB")
    return out


carrier_figures.provides = _carrier_provides  # type: ignore[attr-defined]


def _ratio_figure(num: float, num_sigma: float, car: LinePower, what: str, mode: str) -> Measurement:
    if car.detected and car.power > 0:
        v, s = db_ratio(num, num_sigma, car.power, car.sigma)
        return Measurement(
            value=v,
            unit="dB",
            uncertainty=s,
            note=f"{what}; lines integrated over the window main lobe, noise subtracted",
            details={"carrier_power_dbfs": 10 * math.log10(car.power), "carrier_frequency_hz": car.frequency_hz},
        )
    bound = car.upper_bound
    if not bound > 0:
        return failed("dB", "no noise floor to bound the carrier")
    v = 10.0 * math.log10(num / bound)
    return Measurement(
        value=v,
        unit="dB",
        uncertainty=None,
        limited_by_noise=True,
        bound="lower",
        note=(
            f"{what}: the carrier is not detectable above the noise; the value is the bound from the noise "
            "in its main lobe (carrier below its 97.7 % upper limit)"
        ),
        details={"carrier_upper_bound_dbfs": 10 * math.log10(bound)},
    )


def _offset(ctx: AnalysisContext, lay: Layout) -> Measurement:
    f0 = float(lay.f0) if lay.f0 is not None else float("nan")
    how = ctx.signal.how
    clock = "relative to the receiver's clock (its reference error is not included)"
    rf = ctx.signal.carrier_frequency_hz
    details = {"carrier_frequency_hz": rf} if rf is not None else {}
    if how.startswith("given"):
        car = lay.carrier
        if car is not None and car.detected and math.isfinite(car.frequency_sigma_hz):
            return Measurement(
                value=car.frequency_hz,
                unit="Hz",
                uncertainty=car.frequency_sigma_hz,
                note=f"residual carrier line near the --carrier value (power centroid of its lobe), {clock}",
                details=details,
            )
        # The --carrier value is an input, not a measurement: report a null so the drift
        # provider's measured offset (a line it follows) fills the key in the pipeline's
        # merge ("a value beats a null"); the value given stays in the details.
        return Measurement(
            value=None,
            unit="Hz",
            note=(
                f"not measured: no carrier line near --carrier ({f0:.2f} Hz) stands above the noise; "
                "the --carrier value is an input, not a measurement (the drift figures measure the offset "
                "from a line they follow; for SSB give --tone)"
            ),
            details=dict(details, carrier_given_hz=f0),
        )
    tones = lay.tone_lines
    if lay.mode in ("usb", "lsb") and tones and tones[0].detected:
        s = tones[0].frequency_sigma_hz
        return Measurement(
            value=f0, unit="Hz", uncertainty=s if math.isfinite(s) else None,
            note=f"test-tone line minus --tone, {clock}", details=details,
        )
    if lay.mode in ("dsb", "two-tone") and len(tones) == 2 and all(t.detected for t in tones):
        s = 0.5 * math.hypot(tones[0].frequency_sigma_hz, tones[1].frequency_sigma_hz)
        return Measurement(
            value=f0, unit="Hz", uncertainty=s if math.isfinite(s) else None,
            note=f"mean of the two sideband lines, {clock}", details=details,
        )
    if lay.mode in ("cw", "am"):
        car = lay.carrier
        if car is not None and car.detected:
            s = car.frequency_sigma_hz
            return Measurement(
                value=car.frequency_hz, unit="Hz", uncertainty=s if math.isfinite(s) else None,
                note=f"carrier line, power centroid of its main lobe (its mean over the recording), {clock}",
                details=details,
            )
    # Centre of symmetry of a continuous spectrum: parabolic peak of the autoconvolution,
    # good to about a quarter bin (uniform within +/- half a bin -> bin / sqrt(12)).
    return Measurement(
        value=f0,
        unit="Hz",
        uncertainty=ctx.spectrum.bin_hz / math.sqrt(12.0),
        note=f"centre of symmetry of the sidebands, {clock}",
        details=details,
    )
