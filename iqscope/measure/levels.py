"""Level figures: peak_dbfs, clipped_fraction, noise_floor_dbfs_per_hz (and clipping flags).

All three come from the pipeline's single pass: the peak and clipping counts from the
samples, the noise floor from the averaged spectrum (see :mod:`iqscope.dsp._noise`).
Full scale ``|x| = 1`` is 0 dBFS (DESIGN.md section 3). Derivations of the
uncertainties are in docs/measurements.md.
"""

from __future__ import annotations

import math

from ..dsp._noise import NoiseFloor
from ._context import AnalysisContext, FigureSet
from ._result import Artefact, Measurement, failed
from .locate import floor_of, stats_of

__all__ = ["level_figures", "clipping_artefact"]


def clipping_artefact(n_clipped: int, n_samples: int, clip_level: float, pile_up: int = 0,
                      *, plateau: str = "") -> Artefact | None:
    """An ADC-clipping flag, or None when no sample reached the clip level.

    ``plateau`` says how the clipping was found when it was found in the data:
    ``"component"`` (many I/Q values share the extreme value ``clip_level``) or
    ``"envelope"`` (the envelope is flat-topped at amplitude ``clip_level``).
    """
    if n_samples <= 0 or (n_clipped <= 0 and pile_up <= 0):
        return None
    if n_clipped > 0:
        frac = n_clipped / n_samples
        if plateau == "component":
            what = (f"{n_clipped} sample(s) ({100 * frac:.3g} %) share the extreme |I| or |Q| value "
                    f"{clip_level:.6g} (a plateau)")
        elif plateau == "envelope":
            what = f"{n_clipped} sample(s) ({100 * frac:.3g} %) sit on a flat top of the envelope at |x| = {clip_level:.6g}"
        else:
            what = f"{n_clipped} sample(s) ({100 * frac:.3g} %) at full scale (|I| or |Q| >= {clip_level:.6g})"
    else:
        what = f"{pile_up} samples pile up at one largest value, a sign of clipping before the file was written"
    return Artefact(
        kind="clipping",
        offset_hz=None,
        level_dbc=None,
        note=(
            f"{what}: the receiver's ADC clipped. Intermodulation, spurs, bandwidth and sideband figures "
            "may be the receiver's, not the transmitter's; add attenuation or lower the receiver gain."
        ),
    )


def level_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: ``peak_dbfs``, ``clipped_fraction``, ``noise_floor_dbfs_per_hz``."""
    out = FigureSet()
    st = stats_of(ctx)
    n = ctx.recording.n_samples
    floor: NoiseFloor = floor_of(ctx)
    noise_total = floor.psd * ctx.spectrum.sample_rate_hz if math.isfinite(floor.psd) else float("nan")

    # -- peak ------------------------------------------------------------------------
    peak = ctx.peak_power
    if n == 0 or not peak > 0:
        out.measurements["peak_dbfs"] = failed("dBFS", "no samples, or all samples zero: no peak level")
    else:
        # Noise moves the peak sample by about its in-phase part: sigma_A = sqrt(N/2).
        amp = math.sqrt(peak)
        sig = (20.0 / math.log(10.0)) * math.sqrt(noise_total / 2.0) / amp if math.isfinite(noise_total) else None
        out.measurements["peak_dbfs"] = Measurement(
            value=10.0 * math.log10(peak),
            unit="dBFS",
            uncertainty=sig,
            note="largest sample power |x|^2 of the whole recording (peak envelope power of the capture)",
        )

    # -- clipping --------------------------------------------------------------------
    if st is None or st.n_samples == 0:
        out.measurements["clipped_fraction"] = failed("1", "no samples")
    else:
        rec = ctx.recording
        is_float = bool(getattr(rec, "is_float", False))
        n_plateau, plateau_level, how = (0, None, "") if st.rails is None else st.rails.clipped_values(st.n_samples)
        if is_float:
            # a float file may hold ADC counts: only a plateau in the data is clipping
            n_clipped, level = n_plateau, plateau_level
            rule = ("samples on a plateau of the extreme |I| or |Q| value, or on a flat top of the envelope "
                    "(found in the data; a float magnitude beyond 1 alone is not clipping)")
        elif n_plateau > st.n_clipped:
            n_clipped, level = n_plateau, plateau_level
            rule = "samples on a plateau of the extreme |I| or |Q| value below the datatype's end codes"
        else:
            n_clipped, level, how = st.n_clipped, st.clip_level, ""
            rule = f"samples with |I| or |Q| >= {st.clip_level:.6g} of full scale (the end codes)"
        frac = n_clipped / st.n_samples
        out.measurements["clipped_fraction"] = Measurement(
            value=frac,
            unit="1",
            uncertainty=math.sqrt(max(frac * (1.0 - frac), 0.0) / st.n_samples),
            note=f"fraction of {rule} (binomial counting uncertainty)",
            details={"n_clipped": n_clipped, "clip_level": st.clip_level if level is None else level,
                     "how": how or "end_codes"},
        )
        art = clipping_artefact(n_clipped, st.n_samples, st.clip_level if level is None else level,
                                plateau=how)
        if art is not None:
            out.artefacts.append(art)

        if st.n_nonfinite:
            out.warnings.append(f"{st.n_nonfinite} non-finite sample(s) (NaN/Inf, or a component beyond "
                                "1e10 x full scale) counted as 0")

    # -- noise floor -----------------------------------------------------------------
    if not math.isfinite(floor.psd) or floor.psd <= 0:
        out.measurements["noise_floor_dbfs_per_hz"] = failed(
            "dBFS/Hz", "recording too short for a spectrum, or all zero: no noise floor"
        )
    else:
        out.measurements["noise_floor_dbfs_per_hz"] = Measurement(
            value=floor.dbfs_per_hz,
            unit="dBFS/Hz",
            uncertainty=floor.sigma_db,
            note=(
                f"median of {floor.n_bins} bins of the averaged spectrum, chi-square median bias corrected "
                f"({ctx.spectrum.window}, RBW {ctx.spectrum.enbw_hz:.3g} Hz); includes the receiver's own noise"
            ),
            details={"noise_dbfs_in_rbw": floor.dbfs_per_hz + 10.0 * math.log10(ctx.spectrum.enbw_hz)},
        )
    return out


#: The three level figures apply in every mode (pipeline ``provides``).
level_figures.provides = {  # type: ignore[attr-defined]
    "peak_dbfs": "dBFS",
    "clipped_fraction": "1",
    "noise_floor_dbfs_per_hz": "dBFS/Hz",
}
