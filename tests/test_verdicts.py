"""Verdicts: pass / warn / fail, noise-limited bounds, null values, overall and exit status."""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from grading_helpers import analysis_with, dsb_analysis

from iqscope.errors import EXIT_FAIL, EXIT_OK, EXIT_WARN
from iqscope.grading import (
    GRADE_SCHEMA,
    INCONCLUSIVE_ADVICE,
    grade,
    load_limits,
    parse_limits,
    preset_text,
    worst,
)
from iqscope.measure._result import Measurement

ONE_RULE = """
schema = "iqscope.limits/1"
name = "one"
[[rule]]
measurement = "{name}"
pass = {pass_}
warn = {warn}
unit = "{unit}"
source = "test"
"""


def one_rule(name: str, pass_: str, warn: str, unit: str = "dB"):
    return parse_limits(ONE_RULE.format(name=name, pass_=pass_, warn=warn, unit=unit), origin="one.toml")


MIN40 = ("carrier_suppression_db", "{ min = 40.0 }", "{ min = 30.0 }")


@pytest.mark.parametrize(
    ("value", "expected"),
    [(65.0, "pass"), (40.0, "pass"), (39.99, "warn"), (30.0, "warn"), (29.9, "fail"), (8.0, "fail")],
)
def test_min_rule_boundaries_inclusive(value: float, expected: str) -> None:
    a = analysis_with("dsb", {"carrier_suppression_db": Measurement(value, "dB", 0.001)})
    r = grade(a, one_rule(*MIN40))
    assert [v.status for v in r.verdicts] == [expected]
    assert r.overall == expected


def test_spur_levels_against_97_307_and_appendix_3() -> None:
    """Spurious preset, from 47 CFR 97.307(d) (43 dB) and RR Appendix 3 (50 dBc at >= 5 W):
    -52 dBc meets both; -45 dBc meets 97.307(d) only; -40 dBc meets neither."""
    spur = load_limits("spurious")
    for level, expected in ((-52.0, "pass"), (-45.0, "warn"), (-40.0, "fail")):
        a = analysis_with("usb", {"worst_spur_dbc": Measurement(level, "dBc", 0.3)})
        assert grade(a, spur).overall == expected


def test_noise_limited_lower_bound_that_meets_the_limit_passes() -> None:
    a = analysis_with(
        "dsb", {"carrier_suppression_db": Measurement(62.0, "dB", None, limited_by_noise=True, bound="lower")}
    )
    (v,) = grade(a, one_rule(*MIN40)).verdicts
    assert v.status == "pass" and not v.inconclusive
    assert "noise-limited" in v.reason


def test_noise_limited_bound_that_cannot_show_it_is_inconclusive() -> None:
    a = analysis_with(
        "dsb", {"carrier_suppression_db": Measurement(35.0, "dB", None, limited_by_noise=True, bound="lower")}
    )
    (v,) = grade(a, one_rule(*MIN40)).verdicts
    assert v.status == "warn" and v.inconclusive
    assert v.reason == "inconclusive: noise floor too high"
    assert v.advice == INCONCLUSIVE_ADVICE and "record for longer" in v.advice


def test_noise_limited_upper_bound_on_a_max_rule() -> None:
    rule = one_rule("worst_spur_dbc", "{ max = -50.0 }", "{ max = -43.0 }", "dBc")
    below = analysis_with("usb", {"worst_spur_dbc": Measurement(-70.0, "dBc", limited_by_noise=True, bound="upper")})
    assert grade(below, rule).overall == "pass"
    unsure = analysis_with("usb", {"worst_spur_dbc": Measurement(-45.0, "dBc", limited_by_noise=True, bound="upper")})
    (v,) = grade(unsure, rule).verdicts
    assert v.status == "warn" and v.inconclusive


def test_bound_already_outside_fails_or_warns_definitely() -> None:
    rule = one_rule("occupied_bandwidth_hz", "{ max = 6000.0 }", "{ max = 7000.0 }", "Hz")
    wide = analysis_with(
        "dsb", {"occupied_bandwidth_hz": Measurement(9000.0, "Hz", limited_by_noise=True, bound="lower")}
    )
    assert grade(wide, rule).overall == "fail"
    between = analysis_with(
        "dsb", {"occupied_bandwidth_hz": Measurement(6500.0, "Hz", limited_by_noise=True, bound="lower")}
    )
    (v,) = grade(between, rule).verdicts
    # At least 6500 Hz: certainly not a pass, but warn and fail cannot be told apart.
    assert v.status == "warn" and v.inconclusive and "outside the pass limit" in v.reason
    just_warn = one_rule("occupied_bandwidth_hz", "{ min = 0.0, max = 6000.0 }", "{ min = 0.0, max = 7000.0 }", "Hz")
    low = analysis_with("dsb", {"occupied_bandwidth_hz": Measurement(6500.0, "Hz", limited_by_noise=True, bound="upper")})
    (v,) = grade(low, just_warn).verdicts
    assert v.status == "warn" and v.inconclusive  # at most 6500: pass or warn
    assert v.reason == "inconclusive: noise floor too high"


def test_null_value_warns_with_its_note() -> None:
    a = analysis_with("dsb", {"carrier_suppression_db": Measurement(None, "dB", note="no sidebands found")})
    (v,) = grade(a, one_rule(*MIN40)).verdicts
    assert v.status == "warn" and v.inconclusive
    assert v.reason == "inconclusive: no sidebands found"
    assert v.value is None


def test_range_rule_for_signed_balance() -> None:
    rule = one_rule("sideband_balance_db", "{ min = -1.0, max = 1.0 }", "{ min = -3.0, max = 3.0 }")
    for value, expected in ((0.0, "pass"), (-1.0, "pass"), (2.0, "warn"), (-2.5, "warn"), (3.5, "fail")):
        a = analysis_with("dsb", {"sideband_balance_db": Measurement(value, "dB", 0.1)})
        assert grade(a, rule).overall == expected, value


def test_marginal_when_uncertainty_straddles_the_limit() -> None:
    a = analysis_with("dsb", {"carrier_suppression_db": Measurement(40.2, "dB", 0.5)})
    (v,) = grade(a, one_rule(*MIN40)).verdicts
    assert v.status == "pass" and v.marginal


def test_absent_measurement_warns_or_is_skipped() -> None:
    # A mode-specific rule whose figure is missing: warn, with a did-you-mean.
    text = """
[[rule]]
measurement = "carrier_supression_db"
modes = ["dsb"]
pass = { min = 40.0 }
"""
    a = analysis_with("dsb", {"carrier_suppression_db": Measurement(50.0, "dB", 0.2)})
    (v,) = grade(a, parse_limits(text, "typo.toml")).verdicts
    assert v.status == "warn" and "did you mean 'carrier_suppression_db'" in v.reason
    # A generic rule for a figure that does not apply to the mode (DESIGN.md section 3):
    generic = parse_limits('[[rule]]\nmeasurement = "opposite_sideband_suppression_db"\npass = { min = 40.0 }\n')
    r = grade(a, generic)
    assert r.verdicts == () and r.overall == "warn"
    assert any("does not apply to dsb" in s for s in r.skipped)


def test_unit_mismatch_is_never_compared() -> None:
    a = analysis_with("dsb", {"occupied_bandwidth_hz": Measurement(2.1, "kHz", 0.01)})
    rule = one_rule("occupied_bandwidth_hz", "{ max = 6000.0 }", "{ max = 7000.0 }", "Hz")
    (v,) = grade(a, rule).verdicts
    assert v.status == "warn" and "not compared" in v.reason


def test_overall_is_worst_and_exit_statuses_differ() -> None:
    assert worst([]) == "pass"
    assert worst(["pass", "warn", "pass"]) == "warn"
    assert worst(["warn", "fail", "pass"]) == "fail"
    good = grade(dsb_analysis(65.0, spectrum=False))
    bad = grade(dsb_analysis(8.0, spectrum=False))
    meh = grade(dsb_analysis(35.0, spectrum=False))
    assert (good.overall, meh.overall, bad.overall) == ("pass", "warn", "fail")
    assert (good.exit_status, meh.exit_status, bad.exit_status) == (EXIT_OK, EXIT_WARN, EXIT_FAIL) == (0, 1, 2)


def test_default_limits_dsb_acceptance() -> None:
    """Issue 4 acceptance at the grading level: carrier 65 dB below the sidebands passes,
    8 dB below fails, with the default (home-built) limits named."""
    good = grade(dsb_analysis(65.0, spectrum=False))
    assert good.default_limits and good.profile.name == "home-built"
    assert good.verdict_for("carrier_suppression_db").status == "pass"
    bad = grade(dsb_analysis(8.0, spectrum=False))
    v = bad.verdict_for("carrier_suppression_db")
    assert v.status == "fail" and v.advice.startswith("carrier leak: trim the modulator balance")
    assert bad.advice[0] == v.advice


def test_edited_init_file_changes_the_verdict() -> None:
    """`limits init home-built`, raise the carrier limit to 70 dB, grade again."""
    text = preset_text("home-built")
    block = 'measurement = "carrier_suppression_db"\nmodes = ["dsb", "usb", "lsb", "two-tone"]\npass = { min = 40.0 }'
    assert block in text
    edited = text.replace(block, block.replace("min = 40.0", "min = 70.0"))
    a = dsb_analysis(65.0, spectrum=False)
    assert grade(a).verdict_for("carrier_suppression_db").status == "pass"
    assert grade(a, parse_limits(edited, "mine.toml")).verdict_for("carrier_suppression_db").status == "warn"


def test_json_is_the_contract() -> None:
    """DESIGN.md section 4: exact top-level keys in order, then added keys only."""
    r = grade(dsb_analysis(37.6, spectrum=False))
    doc = json.loads(json.dumps(r.to_json(), allow_nan=False))
    contract = ["schema", "recording", "signal", "measurements", "verdicts", "overall"]
    assert list(doc)[: len(contract)] == contract
    assert doc["schema"] == GRADE_SCHEMA == "iqscope.grade/1"
    assert set(doc["recording"]) >= {
        "path",
        "format",
        "sample_rate_hz",
        "center_frequency_hz",
        "n_samples",
        "duration_s",
    }
    assert set(doc["signal"]) >= {"mode", "carrier_offset_hz", "carrier_frequency_hz"}
    m = doc["measurements"]["carrier_suppression_db"]
    assert {k: m[k] for k in ("value", "unit", "uncertainty", "limited_by_noise")} == {
        "value": 37.6,
        "unit": "dB",
        "uncertainty": 0.2,
        "limited_by_noise": False,
    }
    v = doc["verdicts"][0]
    assert list(v)[:4] == ["measurement", "status", "limit", "value"]
    assert v == {**v, "measurement": "carrier_suppression_db", "status": "warn", "value": 37.6}
    assert isinstance(v["limit"], str) and ">= 40 dB" in v["limit"]
    assert doc["overall"] == "warn"
    assert doc["limits_profile"]["name"] == "home-built" and doc["limits_profile"]["default"] is True


# -- property: a noise-limited verdict agrees with judging every value the bound allows --

_num = st.integers(min_value=-60, max_value=60).map(float)


@st.composite
def _rules(draw):
    kind = draw(st.sampled_from(["min", "max", "range"]))
    a, b, c, d = sorted(draw(st.lists(_num, min_size=4, max_size=4)))
    if kind == "min":
        return "{ min = %s }" % c, "{ min = %s }" % a
    if kind == "max":
        return "{ max = %s }" % b, "{ max = %s }" % d
    return "{ min = %s, max = %s }" % (b, c), "{ min = %s, max = %s }" % (a, d)


@settings(max_examples=150, deadline=None)
@given(rule=_rules(), value=_num, bound=st.sampled_from(["lower", "upper"]))
def test_bound_verdict_matches_brute_force(rule, value, bound) -> None:
    """Oracle: judge a dense grid of the values the bound allows one by one (closed-form
    interval logic of the module docstring, checked by exhaustion)."""
    profile = one_rule("x_db", rule[0], rule[1])
    point_status = {}
    grid = [value + k * 0.5 * (1 if bound == "lower" else -1) for k in range(0, 400)]
    for x in grid:
        a = analysis_with("dsb", {"x_db": Measurement(x, "dB", None)})
        point_status[x] = grade(a, profile).overall
    seen = set(point_status.values())
    m = Measurement(value, "dB", None, limited_by_noise=True, bound=bound)
    (v,) = grade(analysis_with("dsb", {"x_db": m}), profile).verdicts
    if seen == {"pass"}:
        assert v.status == "pass" and not v.inconclusive
    elif seen == {"fail"}:
        assert v.status == "fail" and not v.inconclusive
    elif seen == {"warn"}:
        assert v.status == "warn" and not v.inconclusive
    else:
        assert v.status == "warn" and v.inconclusive


# -- the demo recordings, graded with the default (home-built) limits ------------------

_DEMOS = __import__("pathlib").Path(__file__).resolve().parent.parent / "recordings"


@pytest.mark.parametrize(
    ("args", "overall", "not_passing"),
    [
        # recordings/README.md truth: m = 0.85, a clean AM rig -> everything passes
        (["am80m_bench.sigmf-meta"], "pass", {}),
        # carrier 27.0 dB below the sidebands (< 30 dB warn bound) -> fails on that alone
        (["dsb40m_bench.sigmf-meta"], "fail", {"carrier_suppression_db": "fail"}),
        # opposite sideband 37.35 dB (0.15 dB / 1.2 deg phasing error) -> inside 30..40: warn
        (["ssb20m_kit.sigmf-meta", "--mode", "usb", "--carrier", "1000"], "warn",
         {"opposite_sideband_suppression_db": "warn"}),
        # the same kit on two tones: IMD3 -37.9 dB PEP and IMD5 pass; its 37.35 dB opposite
        # sideband warns here too
        (["ssb20m_twotone.sigmf-meta", "--mode", "two-tone", "--carrier", "1000"], "warn",
         {"opposite_sideband_suppression_db": "warn"}),
        # a steady carrier: home-built has no drift rule (that is the beacon preset)
        (["beacon30m_warmup.wav"], "pass", {}),
    ],
)
def test_demo_recordings_grade_as_documented(
    args: list[str], overall: str, not_passing: dict[str, str], capsys: pytest.CaptureFixture[str]
) -> None:
    """The home-built spur rule (47 CFR 97.307(d), <= -43 dBc) passes on every demo: none
    has a spur in its spurious domain (each reads a noise-limited bound below -85 dBc)."""
    from iqscope.cli import main

    main(["grade", str(_DEMOS / args[0]), *args[1:], "--json", "--quiet"])
    doc = json.loads(capsys.readouterr().out)
    assert doc["overall"] == overall
    assert {v["measurement"]: v["status"] for v in doc["verdicts"] if v["status"] != "pass"} == not_passing
    spur = next(v for v in doc["verdicts"] if v["measurement"] == "worst_spur_dbc")
    assert spur["status"] == "pass" and spur["value"] < -85.0


def test_every_figure_a_limit_can_grade_has_advice() -> None:
    """A user may write a rule for any figure a builder can act on; each gets advice."""
    from iqscope.grading._advice import advice_for

    actionable = [
        "carrier_suppression_db", "carrier_below_pep_db", "opposite_sideband_suppression_db",
        "sideband_balance_db", "modulation_index", "occupied_bandwidth_hz", "bandwidth_26db_hz",
        "necessary_bandwidth_hz", "imd3_dbc", "imd5_dbc", "imd7_dbc", "imd3_db_pep", "imd5_db_pep",
        "imd7_db_pep", "tone_balance_db", "worst_spur_dbc", "frequency_error_hz", "drift_hz_per_min",
        "drift_peak_to_peak_hz", "drift_worst_window_hz", "warmup_settling_s", "allan_deviation",
        "clipped_fraction", "peak_dbfs",
    ]
    for key in actionable:
        assert advice_for(key, "usb"), key


def test_harmonic_rules_are_not_graded_on_one_recording() -> None:
    """The spurious preset's harmonic_dbc rules need recordings at 2f, 3f ...: `grade` lists
    them under "not graded" instead of warning "not measured" (47 CFR 97.307(d): -52 dBc
    still passes the worst_spur_dbc rule)."""
    a = analysis_with("usb", {"worst_spur_dbc": Measurement(-52.0, "dBc", 0.3)})
    r = grade(a, load_limits("spurious"))
    assert r.overall == "pass" and [v.measurement for v in r.verdicts] == ["worst_spur_dbc"]
    assert any(s.startswith("harmonic_dbc: graded by 'iqscope harmonics'") for s in r.skipped)
