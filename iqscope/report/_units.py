"""Number formatting for reports: pure functions from numbers to short strings.

The digits shown follow the uncertainty: it is rounded to one significant digit (two
when the leading digit is 1), and the value to the same decimal place (GUM, JCGM
100:2008 section 7.2.6). Without an uncertainty a modest default precision per unit is
used. A noise-limited bound is rounded *outwards* (a lower bound down, an upper bound
up) so that the printed bound is still true, and shown as ``">= 62 dB (noise-limited)"``.

Frequencies in Hz are scaled to Hz / kHz / MHz / GHz by their size, powers in W to
kW / W / mW / µW / nW (``0.5 mW`` is never printed as ``0.001 W``). Values of other units
smaller than 1e-3 (an Allan deviation, a drift of micro-hertz per minute) are printed in
scientific notation.

References
----------
.. [1] JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement" (GUM), section 7.2.6 (number of significant digits).
"""

from __future__ import annotations

import math
from typing import Final

__all__ = [
    "format_value",
    "format_measurement",
    "format_frequency",
    "format_bound",
    "format_limit",
    "format_duration",
    "format_count",
    "format_rate",
    "ge_le",
]

_LOG_UNITS: Final = frozenset({"dB", "dBc", "dBFS", "dBFS/Hz", "dBm", "dB PEP", "dBc/Hz"})
_MAX_DECIMALS: Final = {"dB": 2, "Hz": 3, "1": 4, "Hz/min": 3, "Hz/s": 4, "s": 3, "ppm": 4}
_DEFAULT_DECIMALS: Final = {"dB": 1, "1": 3, "Hz/min": 2, "Hz/s": 3, "s": 1, "ppm": 3}
_SI: Final = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""))
#: Prefixes of a power in watts (a sampled transmitter: kilowatts down to nanowatts).
_SI_POWER: Final = ((1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "\u00b5"), (1e-9, "n"))
#: Units scaled by an SI prefix (watts are never shown in scientific notation).
_SCALED: Final = frozenset({"Hz", "W"})
#: Below this magnitude (non-dB units) numbers are shown in scientific notation.
_TINY: Final = 1e-3


def ge_le(ascii_only: bool = False) -> tuple[str, str, str]:
    """The >=, <= and +/- signs, in Unicode or ASCII."""
    return (">=", "<=", "+/-") if ascii_only else ("\u2265", "\u2264", "\u00b1")


def _family(unit: str) -> str:
    return "dB" if unit in _LOG_UNITS else unit


def _fixed(x: float, decimals: int) -> str:
    text = f"{x:.{max(decimals, 0)}f}"
    if float(text) == 0.0:
        text = text.lstrip("-")
    return text


def _uncertainty_decimals(u: float) -> int:
    """Decimal places that show ``u`` with 1 significant digit (2 when it starts with 1)."""
    exponent = math.floor(math.log10(u))
    leading = int(u / 10**exponent + 1e-9)
    sig = 2 if leading == 1 else 1
    return -exponent + sig - 1


def _si_scale(unit: str, magnitude: float, ascii_only: bool = False) -> tuple[float, str]:
    """Factor and prefixed unit for ``magnitude`` (Hz: Hz..GHz; W: nW..kW; others as is)."""
    if unit == "W":
        if magnitude == 0.0 or not math.isfinite(magnitude):
            return 1.0, "W"
        # Compared after rounding to 3 significant digits, so 0.99999 mW (from a dB
        # conversion) reads 1.00 mW, not 1000 µW.
        rounded = float(f"{magnitude:.3g}")
        for factor, prefix in _SI_POWER:
            if rounded >= factor:
                break
        if ascii_only:
            prefix = prefix.replace("\u00b5", "u")
        return factor, f"{prefix}W"
    if unit != "Hz":
        return 1.0, unit
    for factor, prefix in _SI:
        if magnitude >= factor:
            return factor, f"{prefix}Hz"
    return 1.0, "Hz"


def _significant_decimals(v: float, digits: int = 3) -> int:
    """Decimal places that show ``v`` with ``digits`` significant digits (at least 0)."""
    if v == 0.0 or not math.isfinite(v):
        return 0
    return max(0, digits - 1 - math.floor(math.log10(abs(v))))


def _suffix(unit: str) -> str:
    return "" if unit in ("", "1") else f" {unit}"


def format_value(
    value: float | None,
    unit: str,
    uncertainty: float | None = None,
    *,
    ascii_only: bool = False,
) -> str:
    """``"37.6 ± 0.2 dB"``, ``"2.100 ± 0.015 kHz"``, ``"0.50 ± 0.06 mW"``, ``"0.63"`` or
    ``"not measured"``.

    Parameters
    ----------
    value : float or None
        The value in ``unit`` (None: not measured).
    unit : str
        Unit symbol; ``"Hz"`` is scaled to kHz / MHz, ``"W"`` to mW / µW / kW, ``"1"``
        prints no unit.
    uncertainty : float, optional
        1-sigma uncertainty in ``unit``; sets the digits shown.
    """
    if value is None or not math.isfinite(value):
        return "not measured"
    _, _, pm = ge_le(ascii_only)
    family = _family(unit)
    u = uncertainty if uncertainty is not None and math.isfinite(uncertainty) and uncertainty > 0 else None
    if family != "dB" and unit != "W" and value != 0.0 and abs(value) < _TINY and not (u is not None and u >= _TINY):
        # Tiny and known to tiny digits: scientific. A tiny value with a larger uncertainty
        # reads better in fixed digits ("0.001 ± 0.006 Hz", not "(8 ± 59)e-04 Hz").
        return _scientific(value, u, unit, pm)
    factor, shown_unit = _si_scale(unit, abs(value) if value != 0 else (u or 0.0), ascii_only)
    v = value / factor
    max_dec = _MAX_DECIMALS.get(family, 3) + (round(math.log10(factor)) if unit == "Hz" else 0)
    if u is None:
        if unit == "Hz":
            dec = 0 if factor == 1.0 else min(max_dec, 3)
        elif unit == "W":
            dec = _significant_decimals(float(f"{v:.3g}"))
        else:
            dec = _DEFAULT_DECIMALS.get(family, 3)
        return f"{_fixed(v, dec)}{_suffix(shown_unit)}"
    dec = _uncertainty_decimals(u / factor)
    while unit == "Hz" and factor > 1.0 and dec > 3:
        # A small uncertainty on a large frequency: step down a prefix (kHz -> Hz).
        factor /= 1e3
        shown_unit = {1e6: "MHz", 1e3: "kHz", 1.0: "Hz"}[factor]
        max_dec -= 3
        dec = _uncertainty_decimals(u / factor)
    v = value / factor
    us = u / factor
    if dec > max_dec:
        dec = max_dec
        tiny = 10.0**-dec
        if round(us, dec) < tiny:
            return f"{_fixed(v, dec)} {pm} <{_fixed(tiny, dec)}{_suffix(shown_unit)}"
    return f"{_fixed(v, dec)} {pm} {_fixed(us, dec)}{_suffix(shown_unit)}"


def _scientific(value: float, u: float | None, unit: str, pm: str) -> str:
    """Tiny values: ``"(1.2 ± 0.4)e-05 Hz"`` (digits from the uncertainty, else 2 significant)."""
    exponent = math.floor(math.log10(abs(value)))
    m = value / 10.0**exponent
    if u is None:
        return f"{m:.1f}e{exponent:+03d}{_suffix(unit)}"
    um = u / 10.0**exponent
    dec = min(max(_uncertainty_decimals(um), 0), 3)
    return f"({_fixed(m, dec)} {pm} {_fixed(um, dec)})e{exponent:+03d}{_suffix(unit)}"


def format_bound(value: float, unit: str, bound: str | None, *, ascii_only: bool = False) -> str:
    """A noise-limited bound, rounded outwards: ``"≥ 62 dB (noise-limited)"``.

    dB figures are shown to whole dB, others to three significant digits.
    """
    ge, le, _ = ge_le(ascii_only)
    sign = le if bound == "upper" else ge
    family = _family(unit)
    if family != "dB" and unit != "W" and value != 0.0 and abs(value) < _TINY:
        exponent = math.floor(math.log10(abs(value)))
        m = value / 10.0**exponent
        m = math.ceil(m * 10 - 1e-9) / 10 if bound == "upper" else math.floor(m * 10 + 1e-9) / 10
        return f"{sign} {m:.1f}e{exponent:+03d}{_suffix(unit)} (noise-limited)"
    factor, shown_unit = _si_scale(unit, abs(value), ascii_only)
    v = value / factor
    if family == "dB":
        dec = 0
    elif v == 0.0:
        dec = 0
    else:
        dec = max(0, 2 - math.floor(math.log10(abs(v))))
    scale = 10.0**dec
    if bound == "upper":
        v = math.ceil(v * scale - 1e-9) / scale
    else:
        v = math.floor(v * scale + 1e-9) / scale
    return f"{sign} {_fixed(v, dec)}{_suffix(shown_unit)} (noise-limited)"


def format_measurement(
    name: str,
    value: float | None,
    unit: str,
    uncertainty: float | None = None,
    *,
    limited_by_noise: bool = False,
    bound: str | None = None,
    ascii_only: bool = False,
) -> str:
    """Format one measurement for a table cell (fractions in per cent)."""
    if value is None or not math.isfinite(value):
        return "not measured"
    if limited_by_noise:
        return format_bound(value, unit, bound, ascii_only=ascii_only)
    if name.endswith("_fraction") and unit == "1":
        if value == 0.0 and not uncertainty:
            return "0 %"
        pct = value * 100.0
        u = None if uncertainty is None else uncertainty * 100.0
        if u is None and pct != 0.0:
            return f"{pct:.2g} %"
        return format_value(pct, "%", u, ascii_only=ascii_only)
    return format_value(value, unit, uncertainty, ascii_only=ascii_only)


def format_frequency(hz: float | None, resolution_hz: float = 1.0) -> str:
    """``14103210`` -> ``"14.103210 MHz"``, ``3210`` -> ``"3.210 kHz"``, ``850`` -> ``"850 Hz"``.

    The digits show ``resolution_hz`` (default 1 Hz).
    """
    if hz is None or not math.isfinite(hz):
        return "unknown"
    factor, unit = _si_scale("Hz", abs(hz))
    dec = max(0, math.ceil(math.log10(factor / resolution_hz) - 1e-9)) if resolution_hz > 0 else 0
    return f"{_fixed(hz / factor, dec)} {unit}"


def _limit_number(x: float, unit: str, ascii_only: bool = False) -> str:
    factor, shown = _si_scale(unit, abs(x), ascii_only)
    return f"{x / factor:g}{_suffix(shown)}"


def format_limit(
    pass_min: float | None,
    pass_max: float | None,
    warn_min: float | None = None,
    warn_max: float | None = None,
    unit: str = "",
    *,
    ascii_only: bool = False,
) -> str:
    """``"≥ 40 dB (warn ≥ 30 dB)"``, ``"≤ 3 kHz (warn ≤ 3.5 kHz)"``, ``"-2 .. 1 dB"``;
    a range symmetric about zero reads ``"±1 dB"``."""
    ge, le, pm = ge_le(ascii_only)

    def one(lo: float | None, hi: float | None) -> str:
        if lo is not None and hi is not None:
            if hi > 0 and lo == -hi:
                return f"{pm}{_limit_number(hi, unit, ascii_only)}"
            lo_text = f"{lo:g}" if unit not in _SCALED else _limit_number(lo, unit, ascii_only)
            return f"{lo_text} .. {_limit_number(hi, unit, ascii_only)}"
        if lo is not None:
            return f"{ge} {_limit_number(lo, unit, ascii_only)}"
        if hi is not None:
            return f"{le} {_limit_number(hi, unit, ascii_only)}"
        return "any"

    text = one(pass_min, pass_max)
    if warn_min is not None or warn_max is not None:
        text += f" (warn {one(warn_min, warn_max)})"
    return text


def format_duration(seconds: float) -> str:
    """``9.87`` -> ``"9.87 s"``, ``125`` -> ``"2 min 05 s"``, ``120`` -> ``"2 min"``,
    ``3725`` -> ``"1 h 02 min"``."""
    if not math.isfinite(seconds) or seconds < 0:
        return "unknown"
    if seconds < 60:
        return f"{seconds:.3g} s"
    total = round(seconds)
    if total < 3600:
        return f"{total // 60} min" + (f" {total % 60:02d} s" if total % 60 else "")
    return f"{total // 3600} h" + (f" {(total % 3600) // 60:02d} min" if (total % 3600) // 60 else "")


def format_count(n: int) -> str:
    """``480000`` -> ``"480 000"`` (groups of three, a space between)."""
    return f"{n:,}".replace(",", " ")


def format_rate(hz: float) -> str:
    """Sample rate: ``48000`` -> ``"48 kS/s"``, ``2.4e6`` -> ``"2.4 MS/s"``."""
    factor, unit = _si_scale("Hz", abs(hz))
    return f"{hz / factor:.6g} {unit[:-2]}S/s"
