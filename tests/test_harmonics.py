"""Harmonics table (measure), its grading against the spurious preset, and the attenuation-step check.

Check values and their sources:

- 47 CFR 97.307(d): spurious emissions of an amateur transmitter below 30 MHz at least
  43 dB below the mean power of the fundamental; 97.307(e): 60 dB for 30-225 MHz
  (REFERENCES.md item 5, found verbatim).
- RR Appendix 3 / Rec. ITU-R SM.329, amateur below 30 MHz: 43 + 10 log10(PEP/W) dB or
  50 dBc, whichever is less stringent; worked values 5 W -> 50.0 dB, 100 W -> 50 dB
  (capped), 1 W -> 43 dB (REFERENCES.md item 5, computed from the rule).
- Attenuation step: a transmitter product moves 1:1 with a known attenuation step, a
  receiver-generated IMD3 product about 3:1 (REFERENCES.md item 11, common practice); an
  n-th order product's slope is n (power-series result, item 6).
- Synthesized recordings: harmonic lines at known dBc, measured within 0.1 dB (they
  stand 40+ dB above the noise in their band; the 0.5 dB flatness allowance in the
  stated uncertainty is for real receivers, not this synthetic one).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.errors import EXIT_FAIL, EXIT_OK, EXIT_WARN, MetadataError, UsageError
from iqscope.io import write_sigmf
from iqscope.io._recording import ArrayRecording
from iqscope.grading import comparison, grade_harmonics, harmonic_rules, judge_level, load_limits
from iqscope.measure.harmonics import (
    analyse_levels,
    attenuation_step_check,
    harmonics_table,
)

FS = 48_000.0
N = 48_000
NOISE_PSD = 1e-12  # -120 dBFS/Hz
F1 = 7_030_123.4  # fundamental, Hz (a 40 m CW carrier)
A = 0.1  # -20 dBFS


def _noise(rng: np.random.Generator) -> np.ndarray:
    return (rng.standard_normal(N) + 1j * rng.standard_normal(N)) * math.sqrt(NOISE_PSD * FS / 2)


def _line_recording(rng: np.random.Generator, centre: float, freq: float, level_dbc: float | None) -> np.ndarray:
    t = np.arange(N) / FS
    x = _noise(rng)
    if level_dbc is not None:
        x = x + A * 10 ** (level_dbc / 20) * np.exp(2j * np.pi * (freq - centre) * t)
    return x


def _set(rng: np.random.Generator, dbc: dict[int, float | None]) -> list[ArrayRecording]:
    """Fundamental at F1 and harmonics n (centre 5 kHz below n F1) at the given dBc."""
    recs = [ArrayRecording(_line_recording(rng, F1 - 5000, F1, 0.0), FS, F1 - 5000)]
    for n, lv in dbc.items():
        centre = n * F1 - 5000.0
        recs.append(ArrayRecording(_line_recording(rng, centre, n * F1, lv), FS, centre))
    return recs


def _spurious_rule(label: str, fundamental_hz: float = 7.0e6):
    rules, _ = harmonic_rules(load_limits("spurious"), fundamental_hz)
    return next(r for r in rules if r.label == label)


class TestLimits:
    """The harmonic limits now come from the spurious preset (grading), not from code."""

    @pytest.mark.parametrize(("pep_w", "att"), [(1.0, 43.0), (5.0, 49.99), (100.0, 50.0), (1000.0, 50.0)])
    def test_rr_appendix3(self, pep_w: float, att: float) -> None:
        """RR Ap. 3 amateur < 30 MHz: min(43 + 10 log P, 50) dB (REFERENCES.md item 5)."""
        rule = _spurious_rule("RR Appendix 3")
        assert rule.pep_attenuation is not None
        assert rule.pep_attenuation.attenuation_db(pep_w) == pytest.approx(att, abs=0.01)
        assert rule.at_pep(pep_w).pass_bound.max == pytest.approx(-att, abs=0.01)

    def test_cfr_97_307(self) -> None:
        """47 CFR 97.307(d) 43 dB below 30 MHz; (e) 60 dB for 30-225 MHz."""
        def attenuation(f: float) -> float | None:
            rules, _ = harmonic_rules(load_limits("spurious"), f)
            cfr = [r for r in rules if r.label.startswith("47 CFR 97.307")]
            assert len(cfr) <= 1
            return None if not cfr else -cfr[0].pass_bound.max

        assert attenuation(7.0e6) == 43.0
        assert attenuation(50.1e6) == 60.0
        assert attenuation(433e6) is None

    def test_compare(self) -> None:
        rule = _spurious_rule("47 CFR 97.307(d)")  # pass <= -43 dBc
        assert comparison(judge_level(-55.0, False, rule)) == "meets"
        assert comparison(judge_level(-40.0, False, rule)) == "exceeds"
        assert comparison(judge_level(-40.0, True, rule)) == "inconclusive"  # a bound above the limit
        assert comparison(judge_level(-60.0, True, rule)) == "meets"  # a bound below the limit


class TestAttenuationStep:
    def test_transmitter_product_moves_one_to_one(self) -> None:
        """REFERENCES.md item 11: a transmitter product moves 1:1 with the step."""
        r = attenuation_step_check(-62.0, -72.1, 10.0)
        assert r.verdict == "transmitter" and r.slope == pytest.approx(1.01)

    def test_receiver_imd3_moves_three_to_one(self) -> None:
        """REFERENCES.md item 11: a receiver IMD3 product moves ~3:1."""
        assert attenuation_step_check(-62.0, -91.0, 10.0).verdict == "receiver (3rd order)"

    def test_second_order_and_unclear(self) -> None:
        assert attenuation_step_check(-50.0, -62.0, 6.0).verdict == "receiver (2nd order)"
        assert attenuation_step_check(-50.0, -65.0, 10.0).verdict == "unclear"

    def test_bad_step(self) -> None:
        with pytest.raises(ValueError):
            attenuation_step_check(-50.0, -60.0, 0.0)

    def test_synthesized_receiver_cubic(self, rng: np.random.Generator) -> None:
        """End to end: a receiver modelled as y = x + k|x|^2 x makes an IM3 product of two
        input tones; 10 dB more attenuation before it lowers that product by 30 dB (the
        expansion in tests/test_imd.py: IM3 amplitude k a^3), so the check says receiver."""
        from iqscope.dsp import averaged_spectrum, line_power, noise_floor

        k = 2.0
        t = np.arange(N) / FS
        levels = []
        for att_db in (0.0, 10.0):
            a = 0.1 * 10 ** (-att_db / 20)
            x = a * np.exp(2j * np.pi * 1000.3 * t) + a * np.exp(2j * np.pi * 2200.7 * t)
            y = x + k * np.abs(x) ** 2 * x + _noise(rng)
            spec = averaged_spectrum(y, 8192, FS)
            lp = line_power(spec, 2 * 1000.3 - 2200.7, noise_floor(spec).psd)
            assert lp.detected
            levels.append(10 * math.log10(lp.power))
        r = attenuation_step_check(levels[0], levels[1], 10.0)
        assert r.slope == pytest.approx(3.0, abs=0.05)
        assert r.verdict == "receiver (3rd order)"


class TestTable:
    def test_levels_and_comparisons(self, rng: np.random.Generator) -> None:
        """2nd harmonic -45 dBc (meets 97.307(d), exceeds App. 3 at an assumed >= 5 W),
        3rd -60 dBc (meets both), 4th absent (noise-limited bound, meets)."""
        recs = _set(rng, {2: -45.0, 3: -60.0, 4: None})
        lv = [analyse_levels(r) for r in recs]
        tab = harmonics_table(lv[0], lv[1:])
        graded = grade_harmonics(tab)  # default: the spurious preset
        assert tab.fundamental.frequency_hz == pytest.approx(F1, abs=1.0)
        rows = {r.n: r for r in tab.harmonics}
        grades = {g.n: g for g in graded.harmonics}
        assert rows[2].level_dbc == pytest.approx(-45.0, abs=0.1)
        assert rows[3].level_dbc == pytest.approx(-60.0, abs=0.1)
        assert not rows[2].limited_by_noise
        assert rows[4].limited_by_noise and rows[4].level_dbc < -70
        assert grades[2].comparisons == {"47 CFR 97.307(d)": "meets", "RR Appendix 3": "exceeds"}
        assert set(grades[3].comparisons.values()) == {"meets"}
        assert set(grades[4].comparisons.values()) == {"meets"}
        assert tab.worst is rows[2]
        assert any("assumed 5 W" in a for a in graded.assumptions)
        assert graded.overall == "fail" and graded.exit_status == EXIT_FAIL
        json.dumps(tab.to_json(), allow_nan=False)
        json.dumps(graded.to_json(), allow_nan=False)

    def test_pep_given_relaxes_appendix3(self, rng: np.random.Generator) -> None:
        """At 1 W PEP App. 3 asks only 43 dB (43 + 10 log 1): -45 dBc then meets it."""
        lv = [analyse_levels(r) for r in _set(rng, {2: -45.0})]
        tab = harmonics_table(lv[0], lv[1:], pep_w=1.0)
        graded = grade_harmonics(tab, load_limits("spurious"))
        assert graded.harmonics[0].comparisons["RR Appendix 3"] == "meets"
        assert [lim.limit_dbc for lim in graded.limits] == [-43.0, pytest.approx(-43.0)]

    def test_calibrated_levels_in_dbm(self, rng: np.random.Generator) -> None:
        """dBm = dBFS + offset; PEP in W from the calibrated envelope peak: a -20 dBFS
        carrier with +57 dBm offset is +37 dBm = 5.0 W (dBm definition: 10 log10(P/1 mW))."""
        lv = [analyse_levels(r) for r in _set(rng, {2: -55.0})]
        tab = harmonics_table(lv[0], lv[1:], dbfs_to_dbm_db=57.0)
        assert tab.fundamental.level_dbm == pytest.approx(37.0, abs=0.05)
        assert tab.harmonics[0].level_dbm == pytest.approx(37.0 - 55.0, abs=0.1)
        assert tab.pep_w == pytest.approx(5.0, rel=0.05)

    def test_gain_difference_corrected(self, rng: np.random.Generator) -> None:
        """A harmonic recorded with 10 dB more receiver gain (metadata iqscope:gain_db) is
        referred back to the fundamental's gain."""
        fund = ArrayRecording(_line_recording(rng, F1 - 5000, F1, 0.0), FS, F1 - 5000, metadata={"iqscope:gain_db": 20.0})
        c2 = 2 * F1 - 5000
        x2 = _line_recording(rng, c2, 2 * F1, -50.0) * 10 ** (10 / 20)
        h2 = ArrayRecording(x2, FS, c2, metadata={"iqscope:gain_db": 30.0})
        tab = harmonics_table(analyse_levels(fund), [analyse_levels(h2)])
        assert tab.harmonics[0].level_dbc == pytest.approx(-50.0, abs=0.1)
        assert "gain difference" in tab.harmonics[0].note

    def test_not_a_harmonic(self, rng: np.random.Generator) -> None:
        fund = ArrayRecording(_line_recording(rng, F1 - 5000, F1, 0.0), FS, F1 - 5000)
        other = ArrayRecording(_noise(rng), FS, 1.3 * F1)
        with pytest.raises(UsageError):
            harmonics_table(analyse_levels(fund), [analyse_levels(other)])

    def test_centre_frequency_needed(self, rng: np.random.Generator) -> None:
        with pytest.raises(MetadataError):
            analyse_levels(ArrayRecording(_noise(rng), FS, None))


def _write(tmp: Path, name: str, x: np.ndarray, centre: float) -> str:
    return str(write_sigmf(tmp / name, x, FS, center_frequency_hz=centre))


class TestCommand:
    def test_json_and_exit_status(self, tmp_path: Path, rng: np.random.Generator, capsys: pytest.CaptureFixture[str]) -> None:
        """-45 dBc second harmonic exceeds RR App. 3 (assumed >= 5 W): exit status 2."""
        f = _write(tmp_path, "fund", _line_recording(rng, F1 - 5000, F1, 0.0), F1 - 5000)
        h2 = _write(tmp_path, "h2", _line_recording(rng, 2 * F1 - 5000, 2 * F1, -45.0), 2 * F1 - 5000)
        h3 = _write(tmp_path, "h3", _line_recording(rng, 3 * F1 - 5000, 3 * F1, -62.0), 3 * F1 - 5000)
        status = main(["harmonics", h3, h2, f, "--json"])
        out = json.loads(capsys.readouterr().out)
        assert status == EXIT_FAIL
        assert out["schema"] == "iqscope.harmonics/1"
        assert [h["n"] for h in out["harmonics"]] == [2, 3]
        assert out["harmonics"][0]["level_dbc"] == pytest.approx(-45.0, abs=0.1)
        # PEP 1 W: both limits at 43 dB, all harmonics meet
        assert main(["harmonics", f, h2, h3, "--pep-w", "1", "--json"]) == EXIT_OK
        capsys.readouterr()

    def test_step_check_and_text(self, tmp_path: Path, rng: np.random.Generator, capsys: pytest.CaptureFixture[str]) -> None:
        """A second recording of the 2nd harmonic, 10 dB more attenuation, line 10 dB lower:
        the check says transmitter; the text report names it."""
        f = _write(tmp_path, "fund", _line_recording(rng, F1 - 5000, F1, 0.0), F1 - 5000)
        c2 = 2 * F1 - 5000
        h2 = _write(tmp_path, "h2", _line_recording(rng, c2, 2 * F1, -40.0), c2)
        h2b = _write(tmp_path, "h2b", _line_recording(rng, c2, 2 * F1, -50.0), c2)
        status = main(["harmonics", f, h2, "--step", h2b, "10", "--pep-w", "1"])
        text = capsys.readouterr().out
        assert status == EXIT_FAIL  # -40 dBc > -43 dBc
        assert "transmitter" in text and "EXCEEDS" in text
        assert "dummy load" in text and "RF burns" in text  # the caution under the table
        status = main(["harmonics", f, h2, "--step", h2b, "10", "--json"])
        out = json.loads(capsys.readouterr().out)
        step = out["harmonics"][0]["attenuation_step"]
        assert step["verdict"] == "transmitter" and step["slope_db_per_db"] == pytest.approx(1.0, abs=0.05)

    def test_inconclusive_warns(self, tmp_path: Path, rng: np.random.Generator, capsys: pytest.CaptureFixture[str]) -> None:
        """A weak fundamental (-70 dBFS) leaves the bound of an absent harmonic above -50 dBc."""
        t = np.arange(N) / FS
        weak = 10 ** (-70 / 20) * np.exp(2j * np.pi * 5000 * t) + _noise(rng) * 10  # -100 dBFS/Hz floor
        f = _write(tmp_path, "fund", weak, F1 - 5000)
        h2 = _write(tmp_path, "h2", _noise(rng) * 10, 2 * F1 - 5000)
        assert main(["harmonics", f, h2, "--json"]) == EXIT_WARN
        out = json.loads(capsys.readouterr().out)
        assert out["harmonics"][0]["limited_by_noise"]

    def test_plot_written(self, tmp_path: Path, rng: np.random.Generator, capsys: pytest.CaptureFixture[str]) -> None:
        f = _write(tmp_path, "fund", _line_recording(rng, F1 - 5000, F1, 0.0), F1 - 5000)
        h2 = _write(tmp_path, "h2", _line_recording(rng, 2 * F1 - 5000, 2 * F1, -60.0), 2 * F1 - 5000)
        plots = tmp_path / "plots"
        assert main(["harmonics", f, h2, "--plot", str(plots), "--json"]) == EXIT_OK
        png = (plots / "harmonics.png").read_bytes()
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
        # refuses to overwrite without --force (exit 5, one line)
        assert main(["harmonics", f, h2, "--plot", str(plots), "--json"]) == 5
        assert "harmonics.png" in capsys.readouterr().err

    def test_one_file_is_a_usage_error(self, tmp_path: Path, rng: np.random.Generator) -> None:
        f = _write(tmp_path, "fund", _line_recording(rng, F1 - 5000, F1, 0.0), F1 - 5000)
        assert main(["harmonics", f]) == 4

    def test_fundamental_named_twice(self, tmp_path: Path, rng: np.random.Generator, capsys: pytest.CaptureFixture[str]) -> None:
        """--fundamental naming a file also given positionally (another spelling) counts once."""
        f = _write(tmp_path, "fund", _line_recording(rng, F1 - 5000, F1, 0.0), F1 - 5000)
        h2 = _write(tmp_path, "h2", _line_recording(rng, 2 * F1 - 5000, 2 * F1, -60.0), 2 * F1 - 5000)
        other_spelling = str(Path(f).parent / "." / Path(f).name)
        assert main(["harmonics", h2, other_spelling, "--fundamental", f, "--json"]) == EXIT_OK
        out = json.loads(capsys.readouterr().out)
        assert [h["n"] for h in out["harmonics"]] == [2]


class TestGrading:
    """grade_harmonics: limits from the profile, verdicts in grading (DESIGN.md layers)."""

    def test_vhf_fundamental_uses_97_307_e(self, rng: np.random.Generator) -> None:
        """A 50.1 MHz fundamental: 47 CFR 97.307(e) asks 60 dB (REFERENCES.md item 5), so a
        -55 dBc second harmonic exceeds it; RR Appendix 3's amateur row (below 30 MHz) and
        97.307(d) are not applied and say why."""
        f1 = 50.1e6
        fund = ArrayRecording(_line_recording(rng, f1 - 5000, f1, 0.0), FS, f1 - 5000)
        h2 = ArrayRecording(_line_recording(rng, 2 * f1 - 5000, 2 * f1, -55.0), FS, 2 * f1 - 5000)
        graded = grade_harmonics(harmonics_table(analyse_levels(fund), [analyse_levels(h2)]))
        assert [lim.name for lim in graded.limits] == ["47 CFR 97.307(e)"]
        assert graded.limits[0].limit_dbc == -60.0
        assert graded.harmonics[0].comparisons == {"47 CFR 97.307(e)": "exceeds"}
        assert graded.exit_status == EXIT_FAIL
        assert any(s.startswith("RR Appendix 3: applies to fundamentals below 30 MHz") for s in graded.skipped)

    def test_calibrated_pep_resolves_appendix3(self, rng: np.random.Generator) -> None:
        """Calibrated PEP 5.0 W (see test_calibrated_levels_in_dbm): App. 3 asks
        43 + 10 log10(5) = 49.99 dB (REFERENCES.md item 5); -55 dBc meets it."""
        lv = [analyse_levels(r) for r in _set(rng, {2: -55.0})]
        graded = grade_harmonics(harmonics_table(lv[0], lv[1:], dbfs_to_dbm_db=57.0))
        app3 = next(lim for lim in graded.limits if lim.name == "RR Appendix 3")
        assert app3.limit_dbc == pytest.approx(-49.99, abs=0.05)  # 5 % in PEP is 0.2 dB: see tolerance above
        assert "calibrated envelope peak" in app3.assumption
        assert not graded.limit_assumptions and graded.exit_status == EXIT_OK

    def test_profile_without_harmonic_rules_uses_worst_spur(self, rng: np.random.Generator) -> None:
        """home-built has no harmonic_dbc rule: its worst_spur_dbc rule (pass <= -43 dBc,
        47 CFR 97.307(d); warn <= -40, common practice) grades harmonics: -41.5 dBc warns."""
        lv = [analyse_levels(r) for r in _set(rng, {2: -41.5})]
        graded = grade_harmonics(harmonics_table(lv[0], lv[1:]), load_limits("home-built"))
        assert [lim.name for lim in graded.limits] == ["worst_spur_dbc"]
        assert graded.harmonics[0].comparisons == {"worst_spur_dbc": "warn"}
        assert graded.overall == "warn" and graded.exit_status == EXIT_WARN

    def test_cli_limits_option(self, tmp_path: Path, rng: np.random.Generator, capsys: pytest.CaptureFixture[str]) -> None:
        """--limits NAME|FILE: the same -45 dBc harmonic fails the default (spurious, App. 3
        at an assumed >= 5 W), passes home-built (97.307(d) 43 dB), warns under a file with
        pass <= -50, warn <= -40 dBc; a missing profile is a limits error (exit 4, one line)."""
        f = _write(tmp_path, "fund", _line_recording(rng, F1 - 5000, F1, 0.0), F1 - 5000)
        h2 = _write(tmp_path, "h2", _line_recording(rng, 2 * F1 - 5000, 2 * F1, -45.0), 2 * F1 - 5000)
        assert main(["harmonics", f, h2, "--json"]) == EXIT_FAIL
        out = json.loads(capsys.readouterr().out)
        assert out["limits_profile"]["name"] == "spurious" and out["limits_profile"]["default"]
        assert out["overall"] == "fail" and out["harmonics"][0]["status"] == "fail"
        assert {v["limit_name"] for v in out["harmonics"][0]["verdicts"]} == {"47 CFR 97.307(d)", "RR Appendix 3"}
        assert main(["harmonics", f, h2, "--limits", "home-built", "--json"]) == EXIT_OK
        capsys.readouterr()
        mine = tmp_path / "mine.toml"
        mine.write_text(
            '[[rule]]\nmeasurement = "harmonic_dbc"\nlabel = "bench"\n'
            'pass = { max = -50.0 }\nwarn = { max = -40.0 }\nunit = "dBc"\n'
        )
        assert main(["harmonics", f, h2, "--limits", str(mine)]) == EXIT_WARN
        text = capsys.readouterr().out
        assert "bench" in text and "WARN" in text and "mine" in text
        assert main(["harmonics", f, h2, "--limits", "nosuch"]) == 4
        assert "no limits file or preset named 'nosuch'" in capsys.readouterr().err
