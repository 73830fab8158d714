"""AM modulation index, from the spectral lines and from the envelope.

For ``s(t) = Ac [1 + m cos(wm t)] cos(wc t)`` each sideband has amplitude ``m Ac / 2``,
so ``P_usb + P_lsb = m^2 Pc / 2`` and [1]_

.. math:: m = \\sqrt{2 (P_{usb} + P_{lsb}) / P_c}

(sideband level ``20 log10(m/2)`` dBc). For modulation by more than one tone or by
speech this is the RMS index times sqrt(2), i.e. the index of the equivalent single tone.
The envelope (trapezoid) method gives ``m = (Emax - Emin) / (Emax + Emin)`` and the
positive and negative peaks ``Emax/Ec - 1`` and ``1 - Emin/Ec`` (Ec the mean envelope),
which see asymmetric modulation and over-modulation the lines cannot. The envelope is
read in a second, band-limited pass over at most ``ENVELOPE_MAX_SAMPLES`` samples.

References
----------
.. [1] S. Haykin, *Communication Systems*, 4th ed., Wiley, 2001, section 3.1; the
   sideband level 20 log10(m/2) dBc and total power Pc (1 + m^2/2) are textbook AM
   relations (also in amateur radio handbooks, "Modulation" chapter).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Final

from ..dsp._envelope import EnvelopeExtremes, envelope_modulation_index
from ._context import AnalysisContext, FigureSet
from ._result import Measurement, failed
from .locate import layout_of

__all__ = ["ENVELOPE_MAX_SAMPLES", "modulation_figures", "index_from_powers"]

#: Samples read for the envelope estimate (2^23: about 3 minutes at 48 kS/s).
ENVELOPE_MAX_SAMPLES: Final = 1 << 23


def index_from_powers(p_usb: float, p_lsb: float, p_c: float) -> float:
    """``m = sqrt(2 (P_usb + P_lsb) / P_c)`` (Haykin [1]_).

    Examples
    --------
    >>> round(index_from_powers(0.0625, 0.0625, 1.0), 6)   # m = 0.5: each sideband (m/2)^2
    0.5
    """
    if p_c <= 0:
        return float("nan")
    return math.sqrt(max(2.0 * (p_usb + p_lsb) / p_c, 0.0))


def modulation_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: ``modulation_index`` for AM (lines value, envelope in details)."""
    out = FigureSet()
    if ctx.signal.mode != "am":
        return out
    lay = layout_of(ctx)
    spec = ctx.spectrum
    name = "modulation_index"
    car = lay.carrier
    if lay.f0 is None or car is None or not car.detected or not lay.has_signal:
        out.measurements[name] = failed("1", "no carrier line above the noise floor")
        return out
    f0 = lay.f0
    ext = max(lay.hi_hz - f0, f0 - lay.lo_hz, lay.gap_hz)
    bu = lay.band(spec, f0 + lay.gap_hz, f0 + ext, symmetric=True)
    bd = lay.band(spec, f0 - ext, f0 - lay.gap_hz, symmetric=True)
    pu, pd = max(bu.power, 0.0), max(bd.power, 0.0)
    m = index_from_powers(pu, pd, car.power)
    details: dict[str, float | str | None] = {}
    # Envelope pass (band-limited to the emission, carrier shifted to 0 Hz).
    try:
        env = EnvelopeExtremes(ctx.recording.sample_rate_hz, f0, ext + 2 * lay.gap_hz)
        n = min(ctx.recording.n_samples, ENVELOPE_MAX_SAMPLES)
        pos = 0
        for blk in ctx.recording.chunks(env.block, overlap=2 * env.guard, stop=n):
            env.update(blk, pos)
            pos += env.step
        if env.n_samples > 0 and env.e_mean > 0:
            m_env = envelope_modulation_index(env.e_max, env.e_min)
            details = {
                "index_envelope": m_env,
                "positive_peak": env.e_max / env.e_mean - 1.0,
                "negative_peak": 1.0 - env.e_min / env.e_mean,
                "envelope_max": env.e_max,
                "envelope_min": env.e_min,
                "envelope_mean": env.e_mean,
                "envelope_samples": env.n_samples,
            }
    except (ValueError, MemoryError) as exc:  # pragma: no cover - defensive
        out.warnings.append(f"envelope modulation index not computed: {exc}")
    if not (bu.detected or bd.detected):
        ub = bu.upper_bound + bd.upper_bound
        out.measurements[name] = Measurement(
            value=index_from_powers(ub, 0.0, car.power), unit="1", limited_by_noise=True, bound="upper",
            note="sidebands not detectable above the noise: the index is below the bound the noise allows",
            details=details,
        )
        return out
    # sigma_m / m = 1/2 sqrt((sigma_Psb / Psb)^2 + (sigma_Pc / Pc)^2)
    psb = pu + pd
    s_sb = math.hypot(bu.sigma, bd.sigma)
    sig: float | None = 0.5 * m * math.hypot(s_sb / psb, car.sigma / car.power) if psb > 0 else None
    note = "from the lines: m = sqrt(2 (P_usb + P_lsb) / P_c); envelope (trapezoid) index and peaks in details"
    m_env_any = details.get("index_envelope")
    if isinstance(m_env_any, float) and m_env_any > 1.0:
        note += "; the envelope reaches zero: over-modulation"
    out.measurements[name] = Measurement(value=m, unit="1", uncertainty=sig, note=note, details=details)
    return out


def _modulation_provides(ctx: AnalysisContext) -> Mapping[str, str]:
    """``modulation_index`` in AM, nothing otherwise (pipeline ``provides``)."""
    return {"modulation_index": "1"} if ctx.signal.mode == "am" else {}


modulation_figures.provides = _modulation_provides  # type: ignore[attr-defined]
