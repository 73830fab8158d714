"""Number formatting of reports (string asserts).

Digits follow the uncertainty: one significant digit, two when it starts with 1, the
value rounded to the same place (JCGM 100:2008 "GUM", section 7.2.6: "at most two
significant digits" for the uncertainty).
"""

from __future__ import annotations

import pytest

from iqscope.report._units import (
    format_bound,
    format_count,
    format_duration,
    format_frequency,
    format_limit,
    format_measurement,
    format_rate,
    format_value,
)


@pytest.mark.parametrize(
    ("args", "expected"),
    [
        ((37.6, "dB", 0.2), "37.6 ± 0.2 dB"),  # the DESIGN.md section 4 example
        ((37.64, "dB", 0.16), "37.64 ± 0.16 dB"),  # leading 1: two digits
        ((37.649, "dB", 0.04), "37.65 ± 0.04 dB"),
        ((-52.3, "dBc", 0.3), "-52.3 ± 0.3 dBc"),
        ((-0.01, "dB", 0.3), "0.0 ± 0.3 dB"),  # no "-0.0"
        ((-120.04, "dBFS/Hz", 0.001), "-120.04 ± <0.01 dBFS/Hz"),  # dB shown to 0.01 at most
        ((2100.0, "Hz", 15.0), "2.100 ± 0.015 kHz"),
        ((2376.4, "Hz", 0.6), "2376.4 ± 0.6 Hz"),  # small uncertainty: no awkward kHz digits
        ((0.8, "Hz", 0.05), "0.80 ± 0.05 Hz"),
        ((0.42, "Hz/min", 0.05), "0.42 ± 0.05 Hz/min"),
        ((0.63, "1", 0.012), "0.630 ± 0.012"),
        ((37.6, "dB", None), "37.6 dB"),
        ((2100.0, "Hz", None), "2.100 kHz"),
        ((850.0, "Hz", None), "850 Hz"),
        ((None, "dB", 0.1), "not measured"),
        ((float("nan"), "dB", 0.1), "not measured"),
    ],
)
def test_format_value(args: tuple, expected: str) -> None:
    assert format_value(*args) == expected


def test_tiny_values_in_scientific_notation() -> None:
    # An Allan deviation of fractional frequency, or a drift of micro-hertz: no "0.0000".
    assert format_value(3.46e-13, "1", 3.46e-13) == "(3 ± 3)e-13"
    assert format_value(1.165e-5, "Hz", 4.4e-6) == "(1.2 ± 0.4)e-05 Hz"
    assert format_value(2e-4, "1") == "2.0e-04"
    # ... but a tiny value with an uncertainty above 1e-3 reads in fixed digits
    assert format_value(8e-4, "Hz", 5.9e-3) == "0.001 ± 0.006 Hz"
    assert format_bound(1.165e-5, "Hz", "upper") == "≤ 1.2e-05 Hz (noise-limited)"
    assert format_bound(0.83, "Hz", "upper") == "≤ 0.830 Hz (noise-limited)"


def test_ascii_variant() -> None:
    assert format_value(37.6, "dB", 0.2, ascii_only=True) == "37.6 +/- 0.2 dB"
    assert format_bound(62.7, "dB", "lower", ascii_only=True) == ">= 62 dB (noise-limited)"


def test_bounds_round_outwards_so_they_stay_true() -> None:
    # A lower bound of 62.7 dB printed as 62 is still true; 63 would claim more than shown.
    assert format_bound(62.7, "dB", "lower") == "≥ 62 dB (noise-limited)"
    assert format_bound(-70.2, "dBc", "upper") == "≤ -70 dBc (noise-limited)"
    assert format_bound(-70.0, "dBc", "upper") == "≤ -70 dBc (noise-limited)"
    assert format_bound(1234.0, "Hz", "lower") == "≥ 1.23 kHz (noise-limited)"


def test_format_measurement() -> None:
    assert format_measurement("carrier_suppression_db", 62.9, "dB", None, limited_by_noise=True, bound="lower") == (
        "≥ 62 dB (noise-limited)"
    )
    assert format_measurement("clipped_fraction", 0.0, "1") == "0 %"
    assert format_measurement("clipped_fraction", 0.00012, "1") == "0.012 %"
    assert format_measurement("modulation_index", 0.63, "1", 0.012) == "0.630 ± 0.012"
    assert format_measurement("x", None, "dB") == "not measured"


def test_format_frequency() -> None:
    assert format_frequency(14_103_210.0) == "14.103210 MHz"
    assert format_frequency(3210.0) == "3.210 kHz"
    assert format_frequency(-3210.4) == "-3.210 kHz"
    assert format_frequency(850.0) == "850 Hz"
    assert format_frequency(None) == "unknown"
    assert format_frequency(7_100_000.0, resolution_hz=100.0) == "7.1000 MHz"


def test_format_limit() -> None:
    assert format_limit(40.0, None, 30.0, None, "dB") == "≥ 40 dB (warn ≥ 30 dB)"
    assert format_limit(None, 3000.0, None, 3500.0, "Hz") == "≤ 3 kHz (warn ≤ 3.5 kHz)"
    assert format_limit(-1.0, 1.0, unit="dB") == "±1 dB"  # symmetric about zero
    assert format_limit(-1.0, 1.0, -3.0, 3.0, unit="dB", ascii_only=True) == "+/-1 dB (warn +/-3 dB)"
    assert format_limit(-2.0, 1.0, unit="dB") == "-2 .. 1 dB"
    assert format_limit(None, 0.005, unit="W") == "≤ 5 mW"
    assert format_limit(None, 0.95, unit="1") == "≤ 0.95"
    assert format_limit(40.0, None, unit="dB", ascii_only=True) == ">= 40 dB"


def test_durations_counts_rates() -> None:
    assert format_duration(9.87) == "9.87 s"
    assert format_duration(10.0) == "10 s"
    assert format_duration(125.0) == "2 min 05 s"
    assert format_duration(120.0) == "2 min"
    assert format_duration(3600.0) == "1 h"
    assert format_duration(3725.0) == "1 h 02 min"
    assert format_count(480000) == "480 000"
    assert format_rate(48000.0) == "48 kS/s"
    assert format_rate(2.4e6) == "2.4 MS/s"


def test_watts_take_a_prefix_never_a_rounded_zero() -> None:
    """SI prefixes (BIPM SI Brochure, 9th ed. 2019, Table 7): 0.5 mW is 500 µW, never
    "0.001 W"; 1 mW = +0 dBm and 5 W = +37 dBm (REFERENCES.md item 11, computed)."""
    assert format_value(5e-4, "W") == "500 µW"
    assert format_value(5e-4, "W", 6e-5) == "500 ± 60 µW"
    assert format_value(5e-4, "W", ascii_only=True) == "500 uW"
    assert format_value(10 ** (0.0 / 10) * 1e-3, "W") == "1.00 mW"  # 0 dBm
    assert format_value(10 ** (-1e-7 / 10) * 1e-3, "W") == "1.00 mW"  # not "1000 µW"
    assert format_value(10 ** (37.0 / 10) * 1e-3, "W") == "5.01 W"  # +37 dBm
    assert format_value(5.0, "W", 0.58) == "5.0 ± 0.6 W"
    assert format_value(1.2e-7, "W") == "120 nW"
    assert format_value(2000.0, "W") == "2.00 kW"
    assert format_measurement("pep_w", 0.012, "W", 0.0014) == "12.0 ± 1.4 mW"
