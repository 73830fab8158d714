"""Limits profiles: presets, their cited numbers, and clear errors for bad files."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from iqscope.errors import EXIT_USAGE, LimitsError
from iqscope.grading import (
    LIMITS_SCHEMA,
    MODES,
    default_profile,
    default_profile_name,
    load_limits,
    parse_limits,
    preset_names,
    preset_text,
)


def test_presets_are_shipped_and_load() -> None:
    assert {"home-built", "spurious", "beacon"} <= set(preset_names())
    for name in preset_names():
        profile = load_limits(name)
        assert profile.name == name
        assert profile.preset and profile.origin == "preset"
        assert profile.description
        assert profile.rules
        for rule in profile.rules:
            assert rule.source, f"{name}: rule {rule.index} ({rule.measurement}) has no source"
            assert rule.unit, f"{name}: rule {rule.index} has no unit"


def test_every_preset_text_cites_and_declares_schema() -> None:
    for name in preset_names():
        text = preset_text(name)
        assert text.lstrip().startswith("#"), "a preset starts with explanatory comments"
        assert f'schema = "{LIMITS_SCHEMA}"' in text


def test_default_profile_exists_for_every_mode() -> None:
    for mode in MODES:
        profile = default_profile(mode)
        assert profile.name == default_profile_name(mode)
        assert profile.rules_for_mode(mode), f"default limits grade nothing for {mode}"


def _rule(profile_name: str, measurement: str, mode: str = "dsb"):
    rule = load_limits(profile_name).rule_for(measurement, mode)
    assert rule is not None
    return rule


def test_spurious_preset_follows_97_307_and_appendix_3() -> None:
    """47 CFR 97.307(d): >= 43 dB below mean power below 30 MHz (REFERENCES.md item 5).

    RR Appendix 3 / Rec. ITU-R SM.329, amateur below 30 MHz: 43 + 10 log10(PEP) dB or
    50 dBc, whichever is less stringent. The attenuation that meets Appendix 3 at any
    power is the largest of those minima over power, 50 dB (reached from 5 W up).
    """
    rule = _rule("spurious", "worst_spur_dbc")
    appendix3 = max(min(43 + 10 * math.log10(p), 50.0) for p in (0.1, 1.0, 5.0, 100.0, 1500.0))
    assert rule.pass_bound.max == pytest.approx(-appendix3)
    assert rule.warn_bound is not None and rule.warn_bound.max == -43.0  # 97.307(d)
    # Appendix 3 at 5 W: 43 + 10 log10(5) = 49.99 dB (computed), i.e. the 50 dB cap.
    assert 43 + 10 * math.log10(5) == pytest.approx(50.0, abs=0.02)


def test_beacon_preset_matches_guidance() -> None:
    """Common practice (no regulation sets these): pass <= 1 Hz within a two-minute window,
    warn up to about 3 Hz; the slope rule is the same 1 Hz per 2 min (0.5 Hz/min)."""
    rule = _rule("beacon", "drift_worst_window_hz", "cw")
    assert rule.pass_bound.max == 1.0
    assert rule.warn_bound is not None and 2.0 <= rule.warn_bound.max <= 3.0
    slope = _rule("beacon", "drift_hz_per_min", "cw")
    # 1 Hz per 120 s window = 0.5 Hz/min: the pass slope must not exceed it.
    assert slope.pass_bound.max is not None and slope.pass_bound.max <= 60 / 120
    assert slope.pass_bound.min == -slope.pass_bound.max


#: Names of published sources a preset rule may cite (regulations, ITU texts).
_PUBLISHED = ("CFR", "ITU", "RR App", "SM.", "Rec. ")


def test_every_preset_rule_cites_a_source_or_says_common_practice() -> None:
    """A limit either names a published source or is marked common practice; a rule of
    iqscope's own about the receiver says so ("iqscope:")."""
    for name in preset_names():
        profile = load_limits(name)
        for r in profile.rules:
            src = r.source
            assert src, (name, r.measurement)
            assert (
                "common practice" in src.lower() or any(p in src for p in _PUBLISHED) or src.startswith("iqscope:")
            ), (name, r.measurement, src)


def test_beacon_preset_is_in_general_words() -> None:
    """The beacon preset describes narrow-band beacon modes in general: no quoted sentences,
    no one protocol's exact parameters (tone spacing, transmission length, FSK order)."""
    text = preset_text("beacon")
    assert '"' not in "".join(line for line in text.splitlines() if line.lstrip().startswith("#"))
    for value in ("110.6", "1.46", "4-FSK", "community"):
        assert value not in text
    assert "common practice" in text.lower()


def test_home_built_bandwidths_follow_necessary_bandwidths() -> None:
    """Necessary bandwidths of Rec. ITU-R SM.1138 / 47 CFR 2.202(g) (REFERENCES.md item 4):
    2K70J3E, 6K00A3E (Bn = 2M, M = 3 kHz), 100HA1A (Bn = 5 B at 25 wpm, B = 20 Bd).
    The pass limit must not be tighter than the necessary bandwidth."""
    necessary = {"usb": 2700.0, "lsb": 2700.0, "dsb": 2 * 3000.0, "am": 2 * 3000.0, "cw": 5 * 20.0}
    for mode, bn in necessary.items():
        rule = _rule("home-built", "occupied_bandwidth_hz", mode)
        assert rule.pass_bound.max is not None and rule.pass_bound.max >= bn
        assert rule.pass_bound.max <= 2 * bn  # and not absurdly loose


def test_home_built_imd_limits_are_consistent_with_pep_relation() -> None:
    """Two equal tones: dB below PEP = dBc - 6.02 (REFERENCES.md item 6, PEP = 4 x tone).
    IMD5 pass limit (dBc) is -35 dB PEP expressed per tone."""
    imd3 = _rule("home-built", "imd3_db_pep", "two-tone")
    imd5 = _rule("home-built", "imd5_dbc", "two-tone")
    assert imd3.pass_bound.max == -30.0  # common practice: better than -30 dB PEP
    assert imd5.pass_bound.max == pytest.approx(-35.0 + 10 * math.log10(4), abs=0.05)


def test_mode_specific_rule_wins_over_generic(tmp_path: Path) -> None:
    text = f"""
schema = "{LIMITS_SCHEMA}"
[[rule]]
measurement = "occupied_bandwidth_hz"
pass = {{ max = 100.0 }}
[[rule]]
measurement = "occupied_bandwidth_hz"
modes = ["dsb"]
pass = {{ max = 6000.0 }}
"""
    p = tmp_path / "mine.toml"
    p.write_text(text, encoding="utf-8")
    profile = load_limits(p)
    assert profile.name == "mine" and profile.origin == str(p)
    assert profile.rule_for("occupied_bandwidth_hz", "dsb").pass_bound.max == 6000.0
    assert profile.rule_for("occupied_bandwidth_hz", "cw").pass_bound.max == 100.0


BAD = [
    ("x = = 1\n", "not valid TOML"),
    ('schema = "other/9"\n[[rule]]\nmeasurement="a"\npass={min=1}\n', "key 'schema'"),
    ('rules = []\n', "unknown key 'rules' (did you mean 'rule'?)"),
    ('name = "x"\n', "no [[rule]]"),
    ('[[rule]]\npass={min=1}\n', "rule 1: key 'measurement'"),
    ('[[rule]]\nmeasurement="a"\n', "rule 1 (a): key 'pass' is missing"),
    ('[[rule]]\nmeasurement="a"\npass={min="forty"}\n', "'pass.min' must be a finite number"),
    ('[[rule]]\nmeasurement="a"\npass={min=nan}\n', "'pass.min' must be a finite number"),
    ('[[rule]]\nmeasurement="a"\npass={min=true}\n', "'pass.min' must be a finite number"),
    ('[[rule]]\nmeasurement="a"\npass={min=5, max=1}\n', "min 5 is above max 1"),
    ('[[rule]]\nmeasurement="a"\npass={low=5}\n', "unknown key 'pass.low'"),
    ('[[rule]]\nmeasurement="a"\npass={min=40}\nwarn={min=45}\n', "key 'warn' must be looser"),
    ('[[rule]]\nmeasurement="a"\npass={min=40}\nmodes=["ssb"]\n', "unknown mode 'ssb'"),
    ('[[rule]]\nmeasurement="a"\npass={min=40}\nsorce="x"\n', "unknown key 'sorce' (did you mean 'source'?)"),
    (
        '[[rule]]\nmeasurement="a"\nmodes=["dsb"]\npass={min=1}\n[[rule]]\nmeasurement="a"\nmodes=["dsb","am"]\npass={min=2}\n',
        "rules 1 and 2 both set 'a' for mode 'dsb'",
    ),
]


@pytest.mark.parametrize(("text", "expected"), BAD)
def test_bad_profiles_name_file_and_key(tmp_path: Path, text: str, expected: str) -> None:
    p = tmp_path / "bad.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(LimitsError) as info:
        load_limits(p)
    message = str(info.value)
    assert message.startswith(str(p) + ": "), message
    assert expected in message
    assert info.value.exit_status == EXIT_USAGE == 4


def test_missing_unreadable_and_unknown(tmp_path: Path) -> None:
    with pytest.raises(LimitsError, match="limits file not found"):
        load_limits(tmp_path / "nope.toml")
    with pytest.raises(LimitsError, match="folder"):
        load_limits(tmp_path)
    binary = tmp_path / "bin.toml"
    binary.write_bytes(b"\xff\xfe\x00name")
    with pytest.raises(LimitsError, match="not UTF-8"):
        load_limits(binary)
    with pytest.raises(LimitsError, match=r"did you mean 'home-built'\?"):
        load_limits("home-biult")
    with pytest.raises(LimitsError, match="presets: beacon, home-built, spurious"):
        preset_text("nothing")


def test_init_text_round_trips() -> None:
    for name in preset_names():
        again = parse_limits(preset_text(name), origin="copy.toml", default_name="copy")
        assert again.rules == load_limits(name).rules
        assert not again.preset and again.origin == "copy.toml"


def test_combined_profiles_later_rules_replace_earlier() -> None:
    from iqscope.grading import combine_profiles

    both = combine_profiles([load_limits("home-built"), load_limits("beacon")])
    assert both.name == "home-built + beacon" and both.preset
    assert both.rule_for("drift_worst_window_hz", "cw").pass_bound.max == 1.0
    assert both.rule_for("carrier_suppression_db", "dsb").pass_bound.min == 40.0
    mine = parse_limits('[[rule]]\nmeasurement = "carrier_suppression_db"\npass = { min = 60.0 }\n', "m.toml", "m")
    over = combine_profiles([load_limits("home-built"), mine])
    # the later generic rule replaces the preset's mode-specific one
    assert over.rule_for("carrier_suppression_db", "dsb").pass_bound.min == 60.0
    assert over.origin == "m.toml"


def test_home_built_spur_limit_is_97_307_d() -> None:
    """47 CFR 97.307(d) (REFERENCES.md item 5): below 30 MHz every spurious emission at
    least 43 dB below the mean power of the fundamental -> pass <= -43 dBc in every mode.
    The warn band above it is common practice and must not reach above -30 dBc (the
    pre-2003 rule's floor for transmitters under 5 W)."""
    for mode in MODES:
        rule = _rule("home-built", "worst_spur_dbc", mode)
        assert rule.pass_bound.max == -43.0 and rule.pass_bound.min is None
        assert rule.unit == "dBc" and "97.307(d)" in rule.source
        assert rule.warn_bound is not None and -43.0 < rule.warn_bound.max <= -30.0
    assert "97.307(d)" in preset_text("home-built")


# -- power-dependent limits, labels and fundamental ranges (schema extension) ---------------

_APP3 = """
[[rule]]
measurement = "harmonic_dbc"
label = "RR Appendix 3"
pep_attenuation = { at_1w_db = 43.0, per_decade_db = 10.0, cap_db = 50.0 }
unit = "dBc"
"""


@pytest.mark.parametrize(
    ("pep_w", "uncapped", "asked"),
    [(5.0, 50.0, 50.0), (100.0, 63.0, 50.0), (1000.0, 73.0, 50.0), (1.0, 43.0, 43.0)],
)
def test_pep_attenuation_worked_values(pep_w: float, uncapped: float, asked: float) -> None:
    """REFERENCES.md item 5 (worked values, computed from RR Appendix 3 / SM.329 for amateur
    stations below 30 MHz, "43 + 10 log10(PEP) dB or 50 dBc, whichever is less stringent"):
    5 W -> 43 + 7.0 = 50.0 dB; 100 W -> 63 dB uncapped, capped at 50; 1 kW -> 73 dB uncapped.
    1 W -> 43 dB (10 log10 1 = 0). Tolerance 0.02 dB: 10 log10 5 = 6.9897, printed as 7.0."""
    rule = parse_limits(_APP3, "a3.toml").rules[0]
    pep = rule.pep_attenuation
    assert pep is not None
    assert pep.uncapped_db(pep_w) == pytest.approx(uncapped, abs=0.02)
    assert pep.attenuation_db(pep_w) == pytest.approx(asked, abs=0.02)
    assert rule.at_pep(pep_w).pass_bound.max == pytest.approx(-asked, abs=0.02)


def test_pep_attenuation_unknown_power_takes_the_cap() -> None:
    """Without a PEP the most stringent value the rule can ask is its cap (50 dB)."""
    rule = parse_limits(_APP3, "a3.toml").rules[0]
    assert rule.pass_bound.max == -50.0  # stand-in before resolving
    assert rule.at_pep(None).pass_bound.max == -50.0
    assert rule.to_json()["pep_attenuation"] == {"at_1w_db": 43.0, "per_decade_db": 10.0, "cap_db": 50.0}


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        ("pass = { max = -43.0 }", "leave out 'pass'"),
        ("warn = { max = -40.0 }", "leave out 'pass' and 'warn'"),
    ],
)
def test_pep_attenuation_replaces_pass(extra: str, message: str) -> None:
    with pytest.raises(LimitsError, match=message):
        parse_limits(_APP3 + extra + "\n", "a3.toml")


@pytest.mark.parametrize(
    ("table", "message"),
    [
        ("{ at_1w_db = 43.0, per_decade_db = 10.0 }", "pep_attenuation.cap_db' is missing"),
        ("{ at_1w_db = 43.0, per_decade_db = 10.0, cap_db = 'fifty' }", "must be a finite number"),
        ("{ at_1w_db = 43.0, per_decade_db = 10.0, cap_db = 50.0, floor = 1 }", "unknown key 'pep_attenuation.floor'"),
        ("43.0", "must be a table"),
    ],
)
def test_pep_attenuation_errors_name_the_key(table: str, message: str) -> None:
    text = f'[[rule]]\nmeasurement = "harmonic_dbc"\npep_attenuation = {table}\n'
    with pytest.raises(LimitsError, match=message) as info:
        parse_limits(text, "bad.toml")
    assert "bad.toml" in str(info.value)


def test_labels_make_separate_limits_and_duplicates_are_errors() -> None:
    two = (
        '[[rule]]\nmeasurement = "harmonic_dbc"\nlabel = "A"\npass = { max = -43.0 }\n'
        '[[rule]]\nmeasurement = "harmonic_dbc"\nlabel = "B"\npass = { max = -50.0 }\n'
    )
    profile = parse_limits(two, "two.toml")
    assert [r.label for r in profile.rules] == ["A", "B"]
    with pytest.raises(LimitsError, match="with label 'A'"):
        parse_limits(two.replace('"B"', '"A"'), "dup.toml")


def test_fundamental_range_is_half_open() -> None:
    """47 CFR 97.307(d) covers fundamentals below 30 MHz, (e) 30-225 MHz: at exactly 30 MHz
    only (e) applies (the upper end of a range is open, so adjacent ranges do not overlap)."""
    rules = {r.label: r for r in load_limits("spurious").rules if r.label}
    d, e = rules["47 CFR 97.307(d)"], rules["47 CFR 97.307(e)"]
    assert d.applies_at(29.999e6) and not d.applies_at(30e6)
    assert e.applies_at(30e6) and e.applies_at(224.9e6) and not e.applies_at(225e6)
    assert -d.pass_bound.max == 43.0 and -e.pass_bound.max == 60.0  # 97.307(d), (e)
    assert rules["RR Appendix 3"].pep_attenuation is not None
