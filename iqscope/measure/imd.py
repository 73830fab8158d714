"""Two-tone intermodulation: IMD3, IMD5, IMD7 in dBc and dB below PEP, tone balance.

The classic linearity test of an SSB (or DSB) transmitter: feed two equal audio tones
that are not harmonically related, and look for the odd-order products a nonlinear
stage makes at ``2f1 - f2``, ``2f2 - f1`` (third order), ``3f1 - 2f2``, ``3f2 - 2f1``
(fifth) and so on. Each order's worst product is reported

- in dBc, relative to the mean power of one tone (the mean of the two tones' powers),
- in dB below PEP, where PEP is the envelope peak |x|² of the recording. The PEP the
  tones imply, ``(sqrt(P1) + sqrt(P2))²`` (= 4 x one tone for equal tones), is given
  too: a compressing transmitter flattens the envelope peaks, so the two disagree and
  the difference is itself a symptom.

Levels are negative when below the reference (DESIGN.md sign convention). A product not
detectable above the noise gives an upper bound (``limited_by_noise``, ``bound="upper"``).

References
----------
.. [1] H. L. Krauss, C. W. Bostian, F. H. Raab, *Solid State Radio Engineering*,
   Wiley, 1980, p. 509: for n equal incoherent tones, P_avg = n P_tone and
   P_peak = n² P_tone, so PEP = 4 P_tone for two tones and dB(PEP) = dBc - 6.02.
.. [2] Rec. ITU-R SM.326-7, "Determination and measurement of the power of amplitude-
   modulated radio transmitters" (two-tone method for PEP).
.. [3] Third-order intercept: OIP3 = P_tone + (P_tone - P_IM3)/2 (per-tone powers, dB);
   standard RF relation (REFERENCES.md item 6).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Final

from ..dsp._lines import LinePower, find_peaks, line_power, lobe_half_width_bins
from ..dsp._types import Spectrum
from ._context import AnalysisContext, FigureSet
from ._result import Artefact, Measurement, failed

__all__ = [
    "TonePair",
    "ProductLevel",
    "TwoToneResult",
    "DB_PEP_OFFSET_DB",
    "pep_from_tones",
    "db_pep_from_dbc",
    "product_offsets_hz",
    "third_order_intercept",
    "line_half_width_hz",
    "level_sigma_db",
    "find_tone_pair",
    "measure_two_tone",
    "opposite_sideband_of_tones",
    "two_tone_figures",
]

#: 10 log10(4): a product X dBc below one of two equal tones is X - 6.02 dB below PEP.
DB_PEP_OFFSET_DB: Final = 10.0 * math.log10(4.0)

#: Systematic part of a line level's 1-sigma uncertainty, dB: residual window
#: leakage, noise-floor estimation error and frequency-response ripple of the receiver
#: over a few kHz (our estimate; a calibrated receiver may do better).
SYSTEMATIC_DB: Final = 0.05

#: Highest intermodulation order reported.
MAX_ORDER: Final = 7


# --------------------------------------------------------------------------------------
# Relations (pure)
# --------------------------------------------------------------------------------------
#: What ``imdN_dbc`` is relative to (``details.reference``): one tone, not the total power.
IMD_DBC_REFERENCE: Final = "mean power of one tone"
#: What ``imdN_db_pep`` is relative to (``details.reference``).
IMD_PEP_REFERENCE: Final = "peak envelope power"

def pep_from_tones(p1: float, p2: float) -> float:
    """PEP of two tones of mean powers ``p1`` and ``p2`` (same units): (sqrt p1 + sqrt p2)².

    For equal tones this is 4 x one tone (Krauss, Bostian & Raab 1980, p. 509).

    >>> pep_from_tones(1.0, 1.0)
    4.0
    """
    if p1 < 0 or p2 < 0:
        raise ValueError(f"{p1=} and {p2=} must be >= 0")
    return (math.sqrt(p1) + math.sqrt(p2)) ** 2


def db_pep_from_dbc(level_dbc: float) -> float:
    """Convert a level in dBc (re one of two equal tones) to dB re PEP: dBc - 6.02.

    >>> round(db_pep_from_dbc(-30.0), 2)
    -36.02
    """
    return level_dbc - DB_PEP_OFFSET_DB


def product_offsets_hz(f1_hz: float, f2_hz: float, order: int) -> tuple[float, float]:
    """Frequencies of the two odd-order products of ``order`` (3, 5, 7, ...), Hz.

    With ``f1 < f2`` and spacing ``d = f2 - f1``, the products of order ``2n + 1`` lie at
    ``f1 - n d`` (= (n+1) f1 - n f2) and ``f2 + n d`` (= (n+1) f2 - n f1).

    >>> product_offsets_hz(700.0, 1900.0, 3)
    (-500.0, 3100.0)
    """
    if order < 3 or order % 2 == 0:
        raise ValueError(f"{order=} must be an odd number >= 3")
    lo, hi = min(f1_hz, f2_hz), max(f1_hz, f2_hz)
    n = (order - 1) // 2
    d = hi - lo
    return lo - n * d, hi + n * d


def third_order_intercept(p_tone_db: float, p_im3_db: float) -> float:
    """Output third-order intercept from per-tone and IM3 powers (same dB scale).

    OIP3 = P_tone + (P_tone - P_IM3) / 2: the IM3 product grows 3 dB per dB of drive and
    the tone 1 dB per dB, so their extrapolated lines meet (P_tone - P_IM3)/2 above the
    present tone level (REFERENCES.md item 6, standard).

    >>> third_order_intercept(0.0, -40.0)
    20.0
    """
    return p_tone_db + (p_tone_db - p_im3_db) / 2.0


# --------------------------------------------------------------------------------------
# Line levels (dsp.line_power) in dB
# --------------------------------------------------------------------------------------
def level_sigma_db(line: LinePower) -> float:
    """1-sigma uncertainty of a detected line's level in dB: noise (from ``line.sigma``)
    and :data:`SYSTEMATIC_DB` in quadrature; NaN when the line is not detected."""
    if not line.detected or not line.power > 0:
        return math.nan
    rel = 10.0 * math.log10(1.0 + line.sigma / line.power)
    return math.hypot(rel, SYSTEMATIC_DB)


def line_half_width_hz(spectrum: Spectrum) -> float:
    """Half width of the band a line's power is integrated over, Hz (dsp lobe half-width)."""
    return lobe_half_width_bins(spectrum) * spectrum.bin_hz


# --------------------------------------------------------------------------------------
# Two-tone analysis
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TonePair:
    """The two test tones found in the spectrum (``f1 < f2``)."""

    f1_hz: float
    f2_hz: float
    p1: LinePower
    p2: LinePower

    @property
    def spacing_hz(self) -> float:
        return self.f2_hz - self.f1_hz

    @property
    def mean_tone_power(self) -> float:
        """Mean of the two tones' powers, FS² (the dBc reference)."""
        return 0.5 * (self.p1.power + self.p2.power)

    @property
    def balance_db(self) -> float:
        """10 log10(P_upper / P_lower), signed (upper tone over lower tone)."""
        return 10.0 * math.log10(self.p2.power / self.p1.power)


@dataclass(frozen=True)
class ProductLevel:
    """One intermodulation product."""

    order: int
    side: str
    """"lower" (below f1) or "upper" (above f2)."""
    line: LinePower
    level_dbc: float
    """Level re the mean tone power, dB (a bound when not detected)."""
    collides_with: tuple[str, ...] = ()
    """Other things at this frequency: "carrier", "dc", "tone image" ... (then doubtful)."""


@dataclass(frozen=True)
class TwoToneResult:
    """Everything the two-tone analysis found."""

    tones: TonePair
    products: tuple[ProductLevel, ...]
    pep_envelope: float | None
    """Envelope peak |x|² of the recording, FS² (None when unknown)."""
    pep_tones: float
    """PEP implied by the tones, (sqrt P1 + sqrt P2)², FS²."""
    noise_psd: float
    warnings: tuple[str, ...] = field(default=())

    def worst(self, order: int) -> ProductLevel | None:
        """The higher of the two products of ``order`` (a bound counts at its level)."""
        cands = [p for p in self.products if p.order == order]
        if not cands:
            return None
        return max(cands, key=lambda p: p.level_dbc)


def find_tone_pair(
    spectrum: Spectrum,
    noise_psd: float,
    max_imbalance_db: float = 20.0,
    carrier_offset_hz: float | None = None,
) -> TonePair:
    """Find the two test tones: the strongest line and the strongest other line.

    Lines are found by :func:`iqscope.dsp.find_peaks` (6 noise sigmas) and measured by
    :func:`iqscope.dsp.line_power` (main-lobe integral, noise removed). When the carrier
    is known, a line at the carrier is not a tone, and both tones are taken from the
    side of the carrier that holds the strongest line: a DSB transmitter fed with two
    tones shows them on both sides, and the test looks at one sideband.

    Raises
    ------
    ValueError
        When fewer than two lines stand out of the noise, or the second is more than
        ``max_imbalance_db`` below the first (not a two-tone signal).
    """
    peaks = find_peaks(spectrum, noise_psd, max_peaks=8)
    if carrier_offset_hz is not None and peaks:
        h = line_half_width_hz(spectrum)
        peaks = [pk for pk in peaks if abs(pk.frequency_hz - carrier_offset_hz) > 2 * h]
        if peaks:
            side = 1.0 if peaks[0].frequency_hz > carrier_offset_hz else -1.0
            peaks = [pk for pk in peaks if side * (pk.frequency_hz - carrier_offset_hz) > 0]
    if len(peaks) < 2:
        raise ValueError("fewer than two lines stand out of the noise: not a two-tone signal")
    a, b = (line_power(spectrum, pk.frequency_hz, noise_psd, search_bins=1) for pk in peaks[:2])
    if not (a.detected and b.detected):
        raise ValueError("fewer than two lines stand out of the noise: not a two-tone signal")
    ratio_db = 10.0 * math.log10(max(a.power, b.power) / min(a.power, b.power))
    if ratio_db > max_imbalance_db:
        raise ValueError(
            f"the second-strongest line is {ratio_db:.1f} dB below the strongest: not a two-tone signal"
        )
    lo, hi = sorted((a, b), key=lambda lp: lp.frequency_hz)
    return TonePair(lo.frequency_hz, hi.frequency_hz, lo, hi)


def measure_two_tone(
    spectrum: Spectrum,
    noise_psd: float,
    *,
    peak_power: float | None = None,
    carrier_offset_hz: float | None = None,
    max_order: int = MAX_ORDER,
) -> TwoToneResult:
    """Measure a two-tone test in an averaged spectrum.

    Parameters
    ----------
    spectrum : Spectrum
        Averaged PSD of the recording (FS²/Hz, frequency offsets in Hz).
    noise_psd : float
        Global noise floor, FS²/Hz (a local median near each product may raise it).
    peak_power : float, optional
        Envelope peak |x|² of the recording, FS² (PEP from the envelope).
    carrier_offset_hz : float, optional
        Suppressed carrier's offset, Hz, to flag products that coincide with it.
    max_order : int
        Highest odd order measured (3, 5, 7 ...).

    Returns
    -------
    TwoToneResult

    Raises
    ------
    ValueError
        When no tone pair is found (see :func:`find_tone_pair`).

    Notes
    -----
    Levels in dBc are relative to the mean of the two tone powers. A product is
    measured at the frequency predicted from the refined tone frequencies, not at a
    searched peak, so noise cannot be mistaken for it. Products that land on the
    carrier, the capture centre (receiver DC line) or the mirror image of a tone about
    the capture centre (receiver I/Q image) are flagged in ``collides_with``.

    References
    ----------
    .. [1] Krauss, Bostian & Raab 1980, p. 509 (PEP of n equal tones).
    """
    tones = find_tone_pair(spectrum, noise_psd, carrier_offset_hz=carrier_offset_hz)
    ref = tones.mean_tone_power
    h = line_half_width_hz(spectrum)
    nyq = spectrum.sample_rate_hz / 2.0
    warnings: list[str] = []
    all_products: list[tuple[int, str, float]] = []
    for order in range(3, max_order + 1, 2):
        lo, hi = product_offsets_hz(tones.f1_hz, tones.f2_hz, order)
        all_products += [(order, "lower", lo), (order, "upper", hi)]
    products: list[ProductLevel] = []
    for order, side, freq in all_products:
        if abs(freq) > nyq - h:
            warnings.append(f"IMD{order} {side} product at {freq:.0f} Hz lies outside the recorded band")
            continue
        line = line_power(spectrum, freq, noise_psd, search_bins=1)
        level = 10.0 * math.log10(max(line.level, 1e-300) / ref)
        products.append(
            ProductLevel(order, side, line, level, _collisions(freq, tones, carrier_offset_hz, h))
        )
    return TwoToneResult(
        tones=tones,
        products=tuple(products),
        pep_envelope=peak_power if peak_power is not None and peak_power > 0 else None,
        pep_tones=pep_from_tones(tones.p1.power, tones.p2.power),
        noise_psd=noise_psd,
        warnings=tuple(warnings),
    )


def _collisions(freq: float, tones: TonePair, carrier: float | None, h: float) -> tuple[str, ...]:
    out: list[str] = []
    if carrier is not None and abs(freq - carrier) <= 2 * h:
        out.append("carrier")
    if abs(freq) <= 2 * h:
        out.append("dc (receiver)")
    for g in (tones.f1_hz, tones.f2_hz):
        if abs(freq + g) <= 2 * h:
            out.append("tone image (receiver I/Q)")
        if carrier is not None and abs(freq - (2 * carrier - g)) <= 2 * h:
            out.append("opposite-sideband tone")
    return tuple(out)


# --------------------------------------------------------------------------------------
# Provider
# --------------------------------------------------------------------------------------
def two_tone_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider for ``--mode two-tone``: imd3/5/7_dbc, imd3/5/7_db_pep, tone_balance_db.

    Does nothing in other modes. Markers ``tone1``, ``tone2``, ``imd3_lower`` ... are
    added for the spectrum plot.
    """
    out = FigureSet()
    if ctx.signal.mode != "two-tone":
        return out
    try:
        res = measure_two_tone(
            ctx.spectrum,
            ctx.noise_floor_psd,
            peak_power=ctx.peak_power,
            carrier_offset_hz=ctx.signal.carrier_offset_hz,
        )
    except ValueError as exc:
        for name, unit in (("imd3_dbc", "dBc"), ("imd5_dbc", "dBc"), ("imd3_db_pep", "dB"), ("imd5_db_pep", "dB")):
            out.measurements[name] = failed(unit, str(exc))
        return out
    out.warnings.extend(res.warnings)
    t = res.tones
    out.markers["tone1"] = t.f1_hz
    out.markers["tone2"] = t.f2_hz
    for p in res.products:
        out.markers[f"imd{p.order}_{p.side}"] = p.line.frequency_hz

    bal_sigma = math.hypot(level_sigma_db(t.p1), level_sigma_db(t.p2))
    out.measurements["tone_balance_db"] = Measurement(
        value=t.balance_db,
        unit="dB",
        uncertainty=bal_sigma,
        note=f"upper tone ({t.f2_hz:.1f} Hz) over lower tone ({t.f1_hz:.1f} Hz), ideal 0",
        details={"f1_hz": t.f1_hz, "f2_hz": t.f2_hz, "spacing_hz": t.spacing_hz},
    )

    osb = opposite_sideband_of_tones(ctx.spectrum, ctx.noise_floor_psd, res, ctx.signal.carrier_offset_hz)
    if osb is not None:
        out.measurements["opposite_sideband_suppression_db"] = osb

    ref_sigma_db = 0.5 * bal_sigma  # mean of two tone levels
    pep_env = res.pep_envelope
    pep_tones = res.pep_tones
    pep_diff_db = None if pep_env is None else 10.0 * math.log10(pep_env / pep_tones)
    # PEP from the envelope is a sample maximum of |x|²: over the many samples near the
    # envelope crests the noise (rms amplitude sqrt(N0 fs)) lifts the maximum by about
    # three of its sigmas. We carry that as the 1-sigma uncertainty (our estimate).
    noise_amp = math.sqrt(max(ctx.noise_floor_psd, 0.0) * ctx.spectrum.sample_rate_hz)
    pep_sigma_db = (
        math.nan if pep_env is None else 20.0 * math.log10(1.0 + 3.0 * noise_amp / math.sqrt(pep_env))
    )
    # The PEP each product's "re PEP" level is taken against (the same as imdN_db_pep's).
    pep_ref = pep_env if pep_env is not None else pep_tones
    for order in range(3, MAX_ORDER + 1, 2):
        worst = res.worst(order)
        if worst is None:
            continue
        sides = {
            p.side: {
                "freq_hz": p.line.frequency_hz,
                "level_dbc": p.level_dbc,
                "level_db_pep": 10.0 * math.log10(max(p.line.level, 1e-300) / pep_ref),
                "detected": p.line.detected,
                "collides_with": list(p.collides_with),
            }
            for p in res.products
            if p.order == order
        }
        limited = not worst.line.detected
        sigma = math.nan if limited else math.hypot(level_sigma_db(worst.line), ref_sigma_db)
        how = "measured" if not limited else "not above the noise: upper bound"
        caveat = ""
        if worst.collides_with:
            caveat = f"; coincides with {', '.join(worst.collides_with)}: may not be intermodulation"
        dbc = worst.level_dbc
        out.measurements[f"imd{order}_dbc"] = Measurement(
            value=dbc,
            unit="dBc",
            uncertainty=sigma,
            limited_by_noise=limited,
            bound="upper" if limited else None,
            note=f"worst IMD{order} product ({worst.side}, {worst.line.frequency_hz:.1f} Hz) re one tone's mean power, "
            f"{how}{caveat}",
            details={
                "products": sides,
                "reference_tone_dbfs": _db(t.mean_tone_power),
                "reference": IMD_DBC_REFERENCE,
            },
        )
        p_abs = max(worst.line.level, 1e-300)
        db_pep_tones = 10.0 * math.log10(p_abs / pep_tones)
        if pep_env is not None:
            db_pep = 10.0 * math.log10(p_abs / pep_env)
            pep_how = "PEP from the envelope peak of the recording"
            sig_pep = math.hypot(sigma, pep_sigma_db) if not limited else math.nan
        else:
            db_pep = db_pep_tones
            pep_how = "PEP from the tones, (sqrt P1 + sqrt P2)^2 (no envelope peak)"
            sig_pep = math.hypot(sigma, ref_sigma_db) if not limited else math.nan
        pep_note = pep_how
        if pep_diff_db is not None and abs(pep_diff_db) > 0.5:
            pep_note += (
                f"; envelope PEP is {pep_diff_db:+.1f} dB from the 4 x tone value"
                + (" (compression flattens the peaks)" if pep_diff_db < 0 else " (other components or transients add to the peaks)")
            )
        out.measurements[f"imd{order}_db_pep"] = Measurement(
            value=db_pep,
            unit="dB",
            uncertainty=sig_pep,
            limited_by_noise=limited,
            bound="upper" if limited else None,
            note=f"worst IMD{order} product re PEP; {pep_note}",
            details={
                "db_pep_from_tones": db_pep_tones,
                "pep_envelope_dbfs": None if pep_env is None else _db(pep_env),
                "pep_tones_dbfs": _db(pep_tones),
                "pep_envelope_minus_tones_db": pep_diff_db,
                "reference": IMD_PEP_REFERENCE,
            },
        )
        for p in res.products:
            if p.order == order and ("dc (receiver)" in p.collides_with or "tone image (receiver I/Q)" in p.collides_with):
                out.artefacts.append(
                    Artefact(
                        kind="dc_line" if "dc (receiver)" in p.collides_with else "iq_image",
                        offset_hz=p.line.frequency_hz,
                        level_dbc=p.level_dbc,
                        note=f"IMD{order} {p.side} product coincides with a receiver artefact; "
                        f"imd{order} figures may be the receiver's",
                    )
                )
    return out


def opposite_sideband_of_tones(
    spectrum: Spectrum, noise_psd: float, res: TwoToneResult, carrier_offset_hz: float | None
) -> Measurement | None:
    """Opposite-sideband suppression of a two-tone SSB test: tones over their mirror images.

    ``10 log10((P1 + P2) / (P1' + P2'))`` with ``Pi'`` the line power at ``2 f0 - fi``,
    the mirror of tone ``i`` about the carrier ``f0`` (DESIGN.md section 3 definition,
    applied to lines so that intermodulation products in the mirror band do not count).
    None when the carrier is unknown or the tones lie on both sides of it. A mirror not
    detectable above the noise gives a lower bound.
    """
    if carrier_offset_hz is None:
        return None
    t = res.tones
    f0 = carrier_offset_hz
    if (t.f1_hz - f0) * (t.f2_hz - f0) <= 0:
        return None
    nyq = spectrum.sample_rate_hz / 2.0
    mirrors = [2.0 * f0 - t.f1_hz, 2.0 * f0 - t.f2_hz]
    if any(abs(m) > nyq - line_half_width_hz(spectrum) for m in mirrors):
        return failed("dB", "the mirror images of the tones lie outside the recorded band")
    lines = [line_power(spectrum, m, noise_psd, search_bins=1) for m in mirrors]
    wanted = t.p1.power + t.p2.power
    mirror = sum(lp.level for lp in lines)
    if not (wanted > 0 and mirror > 0):
        return failed("dB", "no tone or mirror power to compare")
    limited = not all(lp.detected for lp in lines)
    value = 10.0 * math.log10(wanted / mirror)
    sigma = None
    if not limited:
        sigma = math.hypot(
            10.0 * math.log10(1.0 + math.hypot(lines[0].sigma, lines[1].sigma) / mirror), SYSTEMATIC_DB
        )
    side = "upper" if t.f1_hz > f0 else "lower"
    collide = [
        m for m in mirrors for p in res.products if abs(p.line.frequency_hz - m) <= 2 * line_half_width_hz(spectrum)
    ]
    note = f"two tones ({side} sideband) over their mirror images about the carrier at {f0:.1f} Hz"
    if limited:
        note += "; a mirror image is not above the noise: lower bound"
    if collide:
        note += "; an intermodulation product falls on a mirror image: choose another tone pair"
    return Measurement(
        value=value,
        unit="dB",
        uncertainty=sigma,
        limited_by_noise=limited,
        bound="lower" if limited else None,
        note=note,
        details={"mirror_hz": mirrors, "mirror_detected": [lp.detected for lp in lines]},
    )


def _db(p: float) -> float:
    return 10.0 * math.log10(p) if p > 0 else math.nan


def _two_tone_provides(ctx: AnalysisContext) -> Mapping[str, str]:
    """The figures :func:`two_tone_figures` reports (pipeline ``provides``): none outside
    ``--mode two-tone``; the opposite sideband only with a known carrier."""
    if ctx.signal.mode != "two-tone":
        return {}
    out = {"tone_balance_db": "dB"}
    for order in range(3, MAX_ORDER + 1, 2):
        out[f"imd{order}_dbc"] = "dBc"
        out[f"imd{order}_db_pep"] = "dB"
    if ctx.signal.carrier_offset_hz is not None:
        out["opposite_sideband_suppression_db"] = "dB"
    return out


two_tone_figures.provides = _two_tone_provides  # type: ignore[attr-defined]
