"""Emission designators: necessary-bandwidth code and classification symbols.

An emission is designated by its necessary bandwidth written as a four-character code
(three numerals and a unit letter standing where the decimal point goes) followed by
three classification symbols: the modulation of the main carrier, the nature of the
modulating signal and the type of information, e.g. ``2K70J3E`` for suppressed-carrier
SSB telephony 2.7 kHz wide.

This module is pure formatting and classification (no I/O); :func:`designator_figures`
is the pipeline's figure provider, which estimates the necessary bandwidth from the
measured 99 % occupied bandwidth and adds it as the measurement
``necessary_bandwidth_hz`` with the designator string in its details.

Why a measurement with details rather than a new top-level key: every entry of the
JSON contract's ``measurements`` has a numeric value (DESIGN.md section 4), and a
designator is text. The bandwidth it encodes is a number, so the number is the value
and the designator rides along in ``details["designator"]``; the contract only grows
by one key, which DESIGN.md allows ("change it only by adding").

References
----------
.. [1] ITU Radio Regulations, Appendix 1, "Classification of emissions and necessary
   bandwidths", sections 1-4.
.. [2] 47 CFR 2.201 (emission, modulation and transmission characteristics) and 2.202
   (bandwidths), in particular the bandwidth-code examples of 2.202(b) and the table of
   necessary-bandwidth formulae of 2.202(g).
.. [3] Rec. ITU-R SM.1138, "Determination of necessary bandwidths including examples
   for their calculation and associated examples for the designation of emissions",
   Annex 1 (worked examples 100HA1A, 6K00A3E, 3K00H3E, 2K70J3E).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from decimal import ROUND_HALF_UP, Decimal
from typing import Final, Literal

import numpy as np

from ..dsp._lines import find_peaks, line_power, lobe_half_width_bins
from ..dsp._noise import spectrum_dof, sum_variance_factor
from ..dsp._types import Spectrum
from ._context import AnalysisContext, FigureSet
from ._result import Measurement, failed

__all__ = [
    "CarrierLevel",
    "bandwidth_code",
    "parse_bandwidth_code",
    "ssb_carrier_level",
    "classification_symbols",
    "emission_designator",
    "occupied_bandwidth_from_spectrum",
    "emission_band",
    "designator_figures",
]

#: SSB carrier level: ``full`` (H), ``reduced`` (R) or ``suppressed`` (J), RR Ap. 1 section 4.
CarrierLevel = Literal["full", "reduced", "suppressed"]

#: Unit letters and their scale, RR Ap. 1 section 2 / 47 CFR 2.202(b).
_UNITS: Final = (("H", Decimal(1)), ("K", Decimal(10) ** 3), ("M", Decimal(10) ** 6), ("G", Decimal(10) ** 9))

#: Smallest and largest bandwidth a code can carry: 0.001 Hz (H001) and 999 GHz (999G).
MIN_CODE_HZ: Final = 0.001
MAX_CODE_HZ: Final = 999e9

#: An emission with at least this fraction of its power in discrete lines is a test
#: signal (steady tones): its occupied bandwidth says nothing about the necessary one.
TONAL_FRACTION: Final = 0.9

#: Boundaries (dB below PEP) used to name an SSB carrier level when it is measured.
#: Anchors, 47 CFR 80.207(c): H3E carrier 3-6 dB below PEP, R3E 18 +/- 2 dB, J3E at
#: least 40 dB. The cut points between them are our own choice (roughly midway on a dB
#: scale, with a poorly suppressed carrier still counted as "suppressed" below 26 dB).
FULL_CARRIER_MAX_DB_BELOW_PEP: Final = 10.0
REDUCED_CARRIER_MAX_DB_BELOW_PEP: Final = 26.0


def bandwidth_code(bandwidth_hz: float) -> str:
    """Write a necessary bandwidth as the four-character code of RR Appendix 1.

    Parameters
    ----------
    bandwidth_hz : float
        Necessary bandwidth, Hz; from 0.001 Hz to 999 GHz.

    Returns
    -------
    str
        Three numerals and one of the letters H (Hz), K (kHz), M (MHz), G (GHz), the
        letter in the position of the decimal point, e.g. ``"2K70"``.

    Raises
    ------
    ValueError
        When ``bandwidth_hz`` is not finite or lies outside 0.001 Hz ... 999 GHz.

    Notes
    -----
    The value is first expressed in the largest unit that leaves at least 1 (Hz below
    1 kHz, kHz below 1 MHz, ...), then rounded to three significant figures, halves
    rounded up, as in the official examples 180.4 kHz -> 180K and 180.5 kHz -> 181K.
    A value that rounds up to 1000 of a unit moves to the next unit (999.6 Hz ->
    1K00). Below 1 Hz the letter H comes first (0.002 Hz -> H002). Decimal arithmetic
    on the shortest decimal representation of the float avoids binary rounding
    surprises (180.5 is exactly a half).

    References
    ----------
    .. [1] ITU RR Appendix 1, section 2; 47 CFR 2.202(b) (examples 0.002 Hz = H002,
       0.1 Hz = H100, 25.3 Hz = 25H3, 400 Hz = 400H, 2.4 kHz = 2K40, 6 kHz = 6K00,
       12.5 kHz = 12K5, 180.4 kHz = 180K, 180.5 kHz = 181K, 180.7 kHz = 181K,
       1.25 MHz = 1M25, 2 MHz = 2M00, 10 MHz = 10M0, 202 MHz = 202M, 5.65 GHz = 5G65).

    Examples
    --------
    >>> bandwidth_code(2700.0)
    '2K70'
    >>> bandwidth_code(180_500.0)
    '181K'
    >>> bandwidth_code(0.002)
    'H002'
    """
    if not isinstance(bandwidth_hz, (int, float, np.floating, np.integer)) or isinstance(bandwidth_hz, bool):
        raise ValueError(f"{bandwidth_hz=} is not a number")
    bw = float(bandwidth_hz)
    if not math.isfinite(bw) or bw <= 0:
        raise ValueError(f"{bandwidth_hz=} must be a positive, finite bandwidth in Hz")
    value = Decimal(repr(bw))
    for index, (letter, scale) in enumerate(_UNITS):
        last = index == len(_UNITS) - 1
        if value >= scale * 1000 and not last:
            continue
        scaled = value / scale
        digits, exponent = _round_three_figures(scaled)
        if digits >= 1000 and exponent == 0:
            if last:
                break
            continue  # rounded up to 1000 of this unit: use the next one
        code = _place_letter(digits, exponent, letter)
        if code is None:
            break
        return code
    raise ValueError(
        f"{bandwidth_hz=} Hz cannot be written as a bandwidth code (range {MIN_CODE_HZ} Hz to {MAX_CODE_HZ:.0f} Hz)"
    )


def _round_three_figures(x: Decimal) -> tuple[int, int]:
    """Round ``x`` (0 < x < 1000.x) to three significant figures, halves up.

    Returns ``(digits, exponent)`` with the rounded value ``digits * 10**exponent`` and
    ``digits`` a three-digit integer (100 ... 999), or 1000 when rounding reaches the
    next power of ten at exponent 0. Below 1 the value is kept to three decimals
    (exponent -3) as the code allows no more, e.g. 0.002 -> (2, -3).
    """
    if x >= 100:
        exponent = 0
    elif x >= 10:
        exponent = -1
    elif x >= 1:
        exponent = -2
    else:
        exponent = -3
    quantum = Decimal(1).scaleb(exponent)
    rounded = x.quantize(quantum, rounding=ROUND_HALF_UP)
    digits = int(rounded.scaleb(-exponent))
    if digits >= 1000 and exponent < 0:
        # e.g. 9.996 -> 10.00: one figure more than allowed, keep three figures.
        return _round_three_figures(rounded)
    return digits, exponent


def _place_letter(digits: int, exponent: int, letter: str) -> str | None:
    """Put the unit letter where the decimal point of ``digits * 10**exponent`` goes."""
    if digits <= 0:
        return None  # below 0.001 of the unit: not representable
    text = f"{digits:03d}"
    if exponent == 0:
        return text + letter
    if exponent == -1:
        return text[:2] + letter + text[2:]
    if exponent == -2:
        return text[:1] + letter + text[1:]
    # exponent -3: a value below 1 of the unit; only Hz allows this (H002 = 0.002 Hz)
    if letter != "H":
        return None
    return letter + text


def parse_bandwidth_code(code: str) -> float:
    """Read a bandwidth code back into Hz (the inverse of :func:`bandwidth_code`).

    >>> parse_bandwidth_code("12K5")
    12500.0
    """
    if len(code) != 4:
        raise ValueError(f"{code=} must have four characters")
    letters = [c for c in code if c.isalpha()]
    if len(letters) != 1 or letters[0].upper() not in "HKMG":
        raise ValueError(f"{code=} must hold exactly one of the letters H, K, M, G")
    letter = letters[0].upper()
    scale = dict(_UNITS)[letter]
    number = code.upper().replace(letter, ".")
    try:
        return float(Decimal(number) * scale)
    except ArithmeticError as exc:
        raise ValueError(f"{code=} is not a bandwidth code") from exc


def ssb_carrier_level(carrier_below_pep_db: float) -> CarrierLevel:
    """Name an SSB carrier level from its measured level below PEP (dB, positive).

    Parameters
    ----------
    carrier_below_pep_db : float
        How far the carrier is below the peak envelope power, dB (positive = below).

    Returns
    -------
    {"full", "reduced", "suppressed"}
        ``full`` below 10 dB, ``reduced`` from 10 to 26 dB, ``suppressed`` beyond.

    Notes
    -----
    Anchored on 47 CFR 80.207(c): H3E carrier 3-6 dB below PEP, R3E 18 +/- 2 dB, J3E at
    least 40 dB. The cut points (10 and 26 dB) are our choice: a home-built J3E
    transmitter with only 30 dB of carrier suppression is still a suppressed-carrier
    emission, just a poor one (the verdict on suppression is the grader's job).
    """
    if not math.isfinite(carrier_below_pep_db):
        raise ValueError(f"{carrier_below_pep_db=} must be finite")
    if carrier_below_pep_db < FULL_CARRIER_MAX_DB_BELOW_PEP:
        return "full"
    if carrier_below_pep_db < REDUCED_CARRIER_MAX_DB_BELOW_PEP:
        return "reduced"
    return "suppressed"


_SSB_FIRST: Final = {"full": "H", "reduced": "R", "suppressed": "J"}


def classification_symbols(mode: str, carrier: CarrierLevel | None = None) -> str:
    """The three classification symbols of RR Appendix 1 for one of iqscope's modes.

    Parameters
    ----------
    mode : str
        ``cw``, ``am``, ``dsb``, ``usb`` or ``lsb``.
    carrier : {"full", "reduced", "suppressed"}, optional
        SSB only: the carrier level (default ``suppressed``).

    Returns
    -------
    str
        ``A1A`` (cw), ``A3E`` (am, dsb), ``J3E`` / ``R3E`` / ``H3E`` (usb, lsb).

    Notes
    -----
    First symbol (main carrier): A double-sideband, H single-sideband full carrier,
    R single-sideband reduced or variable-level carrier, J single-sideband suppressed
    carrier. Second: 1 a single channel of quantized or digital information without a
    modulating sub-carrier (on-off keyed Morse), 3 a single analogue channel. Third:
    A telegraphy for aural reception, E telephony.

    Double-sideband with a suppressed carrier is ``A3E``: RR Appendix 1 section 4
    (and 47 CFR 2.201(b)) has a single symbol A for "double-sideband" and, unlike the
    single-sideband symbols H, R and J, gives no separate symbol for the carrier level.
    The carrier's suppression is a measured figure, not part of the designator.

    References
    ----------
    .. [1] ITU RR Appendix 1, section 4 (symbols); 47 CFR 2.201(b)-(d).
    """
    mode = mode.lower()
    if mode == "cw":
        return "A1A"
    if mode in ("am", "dsb"):
        return "A3E"
    if mode in ("usb", "lsb"):
        level = "suppressed" if carrier is None else carrier
        if level not in _SSB_FIRST:
            raise ValueError(f"{carrier=} must be 'full', 'reduced' or 'suppressed'")
        return _SSB_FIRST[level] + "3E"
    raise ValueError(f"{mode=} has no emission class (expected cw, am, dsb, usb or lsb)")


def emission_designator(necessary_bandwidth_hz: float, mode: str, carrier: CarrierLevel | None = None) -> str:
    """Bandwidth code followed by classification symbols, e.g. ``"2K70J3E"``.

    Parameters
    ----------
    necessary_bandwidth_hz : float
        Necessary bandwidth, Hz.
    mode : str
        ``cw``, ``am``, ``dsb``, ``usb`` or ``lsb``.
    carrier : {"full", "reduced", "suppressed"}, optional
        SSB carrier level (default suppressed).

    References
    ----------
    .. [1] Rec. ITU-R SM.1138, Annex 1; 47 CFR 2.202(g): 25 wpm Morse, Bn = B K =
       20 x 5 = 100 Hz -> 100HA1A; DSB telephony, Bn = 2M = 6000 Hz -> 6K00A3E; SSB full
       carrier, Bn = M = 3000 Hz -> 3K00H3E; SSB suppressed carrier, Bn = 3000 - 300 Hz
       -> 2K70J3E.

    Examples
    --------
    >>> emission_designator(2700.0, "usb")
    '2K70J3E'
    >>> emission_designator(100.0, "cw")
    '100HA1A'
    """
    return bandwidth_code(necessary_bandwidth_hz) + classification_symbols(mode, carrier)


def occupied_bandwidth_from_spectrum(
    freqs_hz: np.ndarray, power_psd: np.ndarray, bin_hz: float, fraction: float = 0.99
) -> tuple[float, float]:
    """Lower and upper limits (Hz) of the band holding ``fraction`` of the power.

    ``power_psd`` must already have the noise floor subtracted (negative values are
    clipped to zero). Limits are interpolated within the bin where the cumulative power
    crosses (1 - fraction)/2 and (1 + fraction)/2 of the total.

    References
    ----------
    .. [1] ITU RR No. 1.153 (occupied bandwidth, beta/2 = 0.5 %).
    """
    if not 0 < fraction < 1:
        raise ValueError(f"{fraction=} must lie in (0, 1)")
    p = np.clip(np.asarray(power_psd, dtype=np.float64), 0.0, None) * bin_hz
    total = float(p.sum())
    if p.size == 0 or not total > 0:
        raise ValueError("no power above the noise floor")
    cum = np.concatenate(([0.0], np.cumsum(p))) / total
    edges = np.concatenate(([freqs_hz[0] - bin_hz / 2], np.asarray(freqs_hz, dtype=np.float64) + bin_hz / 2))
    lo = float(np.interp((1 - fraction) / 2, cum, edges))
    hi = float(np.interp((1 + fraction) / 2, cum, edges))
    return lo, hi


def emission_band(spectrum: Spectrum, noise_psd: float, sigmas: float = 5.0) -> tuple[float, float]:
    """The emission's 99 % occupied band (Hz offsets), counting only bins that stand out of the noise.

    Subtracting the noise floor and clipping at zero would leave the positive noise
    fluctuations of every bin in the sum, which widens the band of a weak emission to
    the whole recording. So only bins whose main-lobe sum of noise-subtracted PSD
    exceeds ``sigmas`` standard deviations of a noise-only sum (variance
    ``(N0 df)^2 R_m / K``, :func:`iqscope.dsp.sum_variance_factor`) contribute; the
    99 % band (RR No. 1.153) is taken over those.

    Raises
    ------
    ValueError
        When no bin stands out of the noise.
    """
    psd = np.asarray(spectrum.psd, dtype=np.float64)
    if psd.size == 0 or not noise_psd > 0:
        raise ValueError("no emission above the noise floor")
    h = lobe_half_width_bins(spectrum)
    m = 2 * h + 1
    df = spectrum.bin_hz
    nfft = int(getattr(spectrum, "nfft", 0) or psd.size)
    sigma = noise_psd * df * math.sqrt(sum_variance_factor(spectrum.window, nfft, m) / spectrum_dof(spectrum))
    excess = psd - noise_psd
    lobe = np.convolve(excess, np.ones(m), mode="same") * df
    significant = lobe > sigmas * sigma
    if not np.any(significant):
        raise ValueError("no emission above the noise floor")
    # A bin counts when a significant lobe sum covers it.
    covered = np.convolve(significant.astype(np.float64), np.ones(m), mode="same") > 0
    weights = np.where(covered, np.clip(excess, 0.0, None), 0.0)
    return occupied_bandwidth_from_spectrum(spectrum.freqs_hz, weights, df)


def designator_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: ``necessary_bandwidth_hz`` with the emission designator.

    The necessary bandwidth is estimated by the measured 99 % occupied bandwidth of the
    emission (noise floor subtracted), which is what the SM.1138 formulae predict for
    a well-behaved transmitter (J3E: Bn = M - lowest audio frequency, which is the
    occupied sideband; A3E: 2M; H3E: M from carrier to top). The designator is in
    ``details["designator"]``. Not produced for the two-tone test signal, which is a
    test, not an emission class; null (with a note) when the emission is a single line.
    """
    out = FigureSet()
    mode = ctx.signal.mode
    if mode not in ("cw", "am", "dsb", "usb", "lsb"):
        return out
    spec = ctx.spectrum
    try:
        lo, hi = emission_band(spec, ctx.noise_floor_psd)
    except ValueError:
        out.measurements["necessary_bandwidth_hz"] = failed("Hz", "no emission above the noise floor")
        return out
    bn = hi - lo
    lobe = 2.0 * lobe_half_width_bins(spec) * spec.bin_hz
    if bn <= 2.0 * lobe:
        out.measurements["necessary_bandwidth_hz"] = Measurement(
            value=None,
            unit="Hz",
            note="the emission is a single line (an unmodulated carrier or a steady test tone): its occupied "
            "bandwidth does not estimate the necessary bandwidth; record it modulated (speech, keying)",
            details={"lower_hz": lo, "upper_hz": hi},
        )
        return out
    tonal = _line_fraction(spec, ctx.noise_floor_psd, lo, hi)
    if tonal >= TONAL_FRACTION:
        out.measurements["necessary_bandwidth_hz"] = Measurement(
            value=None,
            unit="Hz",
            note=f"{100 * tonal:.0f} % of the emission's power is in discrete lines (steady test tones): its "
            "occupied bandwidth is the tones' spread, not the necessary bandwidth; record it with speech or keying",
            details={"lower_hz": lo, "upper_hz": hi, "line_fraction": tonal},
        )
        return out
    carrier: CarrierLevel | None = None
    basis = "99 % occupied bandwidth (RR No. 1.153) taken as the necessary bandwidth"
    if mode in ("usb", "lsb"):
        carrier, how = _ssb_carrier_from_spectrum(ctx)
        basis += f"; carrier {how}"
    try:
        designator = emission_designator(bn, mode, carrier)
    except ValueError as exc:
        out.measurements["necessary_bandwidth_hz"] = failed("Hz", f"no designator: {exc}")
        return out
    # Resolution: each limit is known to about one bin; the two add in quadrature.
    sigma = spec.bin_hz / math.sqrt(6.0)
    out.measurements["necessary_bandwidth_hz"] = Measurement(
        value=bn,
        unit="Hz",
        uncertainty=sigma,
        note=f"estimated as the measured 99 % occupied bandwidth; emission designator {designator}",
        details={
            "designator": designator,
            "bandwidth_code": designator[:4],
            "classification": designator[4:],
            "lower_hz": lo,
            "upper_hz": hi,
            "basis": basis,
        },
    )
    return out


def _line_fraction(spec: Spectrum, noise_psd: float, lo: float, hi: float) -> float:
    """Fraction of the power in [lo, hi] held by discrete lines (find_peaks + line_power)."""
    h = lobe_half_width_bins(spec) * spec.bin_hz
    sel = (spec.freqs_hz >= lo - h) & (spec.freqs_hz <= hi + h)
    total = float(np.sum(np.clip(spec.psd[sel] - noise_psd, 0.0, None))) * spec.bin_hz
    if not total > 0:
        return 0.0
    peaks = find_peaks(spec, noise_psd, max_peaks=32, lo_hz=lo - h, hi_hz=hi + h)
    lines = 0.0
    for pk in peaks:
        lp = line_power(spec, pk.frequency_hz, noise_psd, search_bins=1)
        if lp.detected:
            lines += lp.power
    return min(1.0, lines / total)


def _ssb_carrier_from_spectrum(ctx: AnalysisContext) -> tuple[CarrierLevel, str]:
    """Classify the SSB carrier level from the spectrum at the carrier offset."""
    f0 = ctx.signal.carrier_offset_hz
    if f0 is None or not ctx.peak_power > 0:
        return "suppressed", "level unknown, assumed suppressed"
    spec = ctx.spectrum
    half = 2.5 * spec.enbw_hz
    sel = np.abs(spec.freqs_hz - f0) <= half
    if not np.any(sel):
        return "suppressed", "outside the recorded band, assumed suppressed"
    p_carrier = float(np.sum(np.clip(spec.psd[sel] - ctx.noise_floor_psd, 0.0, None)) * spec.bin_hz)
    if not p_carrier > 0:  # also NaN (an overflowed spectrum)
        return "suppressed", "not detected above the noise"
    ratio = ctx.peak_power / p_carrier
    if not (math.isfinite(ratio) and ratio > 0):
        return "suppressed", "level unknown, assumed suppressed"
    below = 10.0 * math.log10(ratio)
    level = ssb_carrier_level(below)
    return level, f"{below:.1f} dB below PEP ({level})"


def _designator_provides(ctx: AnalysisContext) -> Mapping[str, str]:
    """``necessary_bandwidth_hz`` for an emission class, not for the two-tone test
    (pipeline ``provides``)."""
    return {"necessary_bandwidth_hz": "Hz"} if ctx.signal.mode in ("cw", "am", "dsb", "usb", "lsb") else {}


designator_figures.provides = _designator_provides  # type: ignore[attr-defined]
