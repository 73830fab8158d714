"""``iqscope grade`` and ``iqscope limits`` end to end on synthesized recordings.

Truth comes from the synthesizer's closed form: a DSB signal whose residual carrier is
set ``carrier_leak_dbc`` below the total sideband power, so carrier_suppression_db is its
negative (DESIGN.md section 3 definition). The limits are the home-built preset's
carrier rule (common practice: pass >= 40 dB, warn >= 30 dB).
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from iqscope.cli import main
from iqscope.errors import EXIT_FAIL, EXIT_INPUT, EXIT_OK, EXIT_USAGE, EXIT_WARN

import iqscope.measure.pipeline  # noqa: F401  (a broken pipeline import fails here, never skips)


@pytest.fixture(scope="module")
def recordings(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    from iqscope.synth import Dsb, FrequencyPlan, SignalSpec, Tone, write_signal

    folder = tmp_path_factory.mktemp("rec")
    out = {}
    for name, leak in (("good", -65.0), ("bad", -8.0)):
        spec = SignalSpec(
            modulation=Dsb(audio=Tone(1000.0), carrier_leak_dbc=leak),
            sample_rate_hz=48_000.0,
            duration_s=1.0,
            level_dbfs=-10.0,
            frequency=FrequencyPlan(carrier_offset_hz=3_210.7),
            noise_dbfs_per_hz=-130.0,
            center_frequency_hz=7.1e6,
            seed=3,
        )
        out[name] = Path(write_signal(folder / name, spec))
    return out


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def verdict(doc: dict, name: str) -> str:
    return next(v["status"] for v in doc["verdicts"] if v["measurement"] == name)


def test_help_lists_exit_codes(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as info:
        main(["grade", "--help"])
    assert info.value.code == 0
    text = capsys.readouterr().out
    for line in ("0  success", "1  grade: worst verdict is warn", "2  grade: worst verdict is fail", "3  unusable input"):
        assert line in text
    for flag in ("--mode", "--carrier", "--tone", "--limits", "--json", "--report", "--plot", "--annotate"):
        assert flag in text


def test_acceptance_dsb_65_passes_8_fails(capsys: pytest.CaptureFixture[str], recordings: dict[str, Path]) -> None:
    """Issue 4 acceptance: default limits, carrier 65 dB below the sidebands passes and 8 dB
    below fails, with different exit statuses; stdout is exactly one JSON object."""
    status_good, out_good, _ = run(capsys, "grade", str(recordings["good"]), "--json")
    doc = json.loads(out_good)
    assert doc["schema"] == "iqscope.grade/1" and doc["signal"]["mode"] == "dsb"
    assert doc["measurements"]["carrier_suppression_db"]["value"] == pytest.approx(65.0, abs=1.0)
    assert verdict(doc, "carrier_suppression_db") == "pass"
    assert doc["limits_profile"] == {**doc["limits_profile"], "name": "home-built", "default": True}

    status_bad, out_bad, _ = run(capsys, "grade", str(recordings["bad"]), "--json")
    bad = json.loads(out_bad)
    assert bad["measurements"]["carrier_suppression_db"]["value"] == pytest.approx(8.0, abs=0.5)
    assert verdict(bad, "carrier_suppression_db") == "fail" and bad["overall"] == "fail"
    assert (status_good, status_bad) == (EXIT_OK, EXIT_FAIL)
    assert status_good != status_bad


def test_text_report_names_limits_and_advises(capsys: pytest.CaptureFixture[str], recordings: dict[str, Path]) -> None:
    status, out, _ = run(capsys, "grade", str(recordings["bad"]))
    assert status == EXIT_FAIL
    assert "home-built (default for dsb)" in out
    assert "FAIL" in out and "carrier leak: trim the modulator balance" in out
    assert "dummy load" in out


def test_edited_limits_file_changes_the_verdict(
    capsys: pytest.CaptureFixture[str], recordings: dict[str, Path], tmp_path: Path
) -> None:
    """`limits init home-built > mine.toml`, edit the carrier rule to pass >= 70 dB, grade."""
    status, text, _ = run(capsys, "limits", "init", "home-built")
    assert status == 0 and text.startswith("#")
    old = 'measurement = "carrier_suppression_db"\nmodes = ["dsb", "usb", "lsb", "two-tone"]\npass = { min = 40.0 }'
    assert old in text
    mine = tmp_path / "mine.toml"
    mine.write_text(text.replace(old, old.replace("min = 40.0", "min = 70.0")), encoding="utf-8")
    status, out, _ = run(capsys, "grade", str(recordings["good"]), "--limits", str(mine), "--json")
    doc = json.loads(out)
    assert verdict(doc, "carrier_suppression_db") == "warn"  # 65 dB: below 70, above 30
    assert doc["limits_profile"]["name"] == "home-built-custom" and doc["limits_profile"]["origin"] == str(mine)
    assert status == EXIT_WARN
    # ... and a harsher warn bound too turns it into a fail
    harsh = text.replace(old, old.replace("min = 40.0", "min = 70.0")).replace(
        "pass = { min = 70.0 }\nwarn = { min = 30.0 }", "pass = { min = 70.0 }\nwarn = { min = 66.0 }"
    )
    mine.write_text(harsh, encoding="utf-8")
    status, out, _ = run(capsys, "grade", str(recordings["good"]), "--limits", str(mine), "--json")
    assert verdict(json.loads(out), "carrier_suppression_db") == "fail" and status == EXIT_FAIL


def test_bad_limits_file_is_a_usage_error(
    capsys: pytest.CaptureFixture[str], recordings: dict[str, Path], tmp_path: Path
) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text('[[rule]]\nmeasurement = "carrier_suppression_db"\npass = { min = "forty" }\n', encoding="utf-8")
    status, out, err = run(capsys, "grade", str(recordings["good"]), "--limits", str(bad))
    assert status == EXIT_USAGE and out == ""
    assert err.count("\n") == 1 and str(bad) in err and "pass.min" in err and "Traceback" not in err


def test_unusable_input_is_exit_3(capsys: pytest.CaptureFixture[str], recordings: dict[str, Path], tmp_path: Path) -> None:
    status, out, err = run(capsys, "grade", str(tmp_path / "missing.sigmf-meta"))
    assert status == EXIT_INPUT and out == "" and "missing.sigmf-meta" in err
    # several files: the others are still graded; one JSON object with the error listed
    status, out, _ = run(capsys, "grade", str(recordings["good"]), str(tmp_path / "missing.sigmf-meta"), "--json")
    doc = json.loads(out)
    assert status == EXIT_INPUT
    assert doc["schema"] == "iqscope.grade-batch/1" and len(doc["results"]) == 1
    assert doc["errors"][0]["exit_status"] == EXIT_INPUT


def test_several_files_worst_verdict(capsys: pytest.CaptureFixture[str], recordings: dict[str, Path]) -> None:
    status, out, _ = run(capsys, "grade", str(recordings["good"]), str(recordings["bad"]), "--json")
    doc = json.loads(out)
    assert [r["overall"] for r in doc["results"]] == ["pass", "fail"] and doc["overall"] == "fail"
    assert status == EXIT_FAIL
    status, out, _ = run(capsys, "grade", str(recordings["good"]), str(recordings["bad"]), "--quiet")
    # the marks of the verdict table on the same output (here UTF-8: the symbols)
    from iqscope.report._theme import verdict_label

    assert out.splitlines() == [
        f"{recordings['good']}: {verdict_label('pass')}",
        f"{recordings['bad']}: {verdict_label('fail')}",
    ]


def test_quiet_uses_the_marks_of_the_table(capsys: pytest.CaptureFixture[str], recordings: dict[str, Path]) -> None:
    """One verdict, one mark: ``--quiet`` prints the overall mark the full report prints."""
    for name in ("good", "bad"):
        _, full, _ = run(capsys, "grade", str(recordings[name]))
        overall = next(line for line in full.splitlines() if line.startswith("overall"))
        mark = overall.split(None, 1)[1].strip()
        _, quiet, _ = run(capsys, "grade", str(recordings[name]), "--quiet")
        assert quiet.strip() == f"{recordings[name]}: {mark}"
        for line in full.splitlines():  # the table's rows carry the same marks
            if line.rstrip().endswith(("PASS", "FAIL", "WARN")) and not line.startswith("overall"):
                assert line.rstrip().endswith(("\u2714 PASS", "\u2718 FAIL", "! WARN", "! WARN?")), line


def test_report_plot_and_annotate(capsys: pytest.CaptureFixture[str], recordings: dict[str, Path], tmp_path: Path) -> None:
    import sigmf

    report = tmp_path / "report.html"
    plots = tmp_path / "plots"
    status, _, err = run(
        capsys, "grade", str(recordings["bad"]), "--report", str(report), "--plot", str(plots), "--annotate"
    )
    assert status == EXIT_FAIL
    html = report.read_text(encoding="utf-8")
    assert len(re.findall(r'<img src="data:image/png;base64,', html)) >= 2
    assert "\u2718 FAIL" in html
    names = {p.name for p in plots.iterdir()}
    assert {"bad-envelope.png", "bad-spectrogram.png", "bad-spectrum.png"} <= names
    assert names <= {f"bad-{n}.png" for n in ("spectrogram", "spectrum", "envelope", "frequency", "allan")}
    graded = recordings["bad"].with_name("bad.graded.sigmf-meta")
    sigmf.fromfile(str(graded)).validate()
    # outputs are never overwritten without --force, checked before any work
    status, _, err = run(capsys, "grade", str(recordings["bad"]), "--report", str(report))
    assert status == 5 and "already exists" in err


def test_annotate_needs_sigmf(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    from iqscope.synth import Cw, SignalSpec, write_signal

    wav = Path(write_signal(tmp_path / "cw.wav", SignalSpec(modulation=Cw(), duration_s=0.5), format="wav"))
    status, _, err = run(capsys, "grade", str(wav), "--annotate", "--center", "7e6")
    assert status == EXIT_USAGE and "--annotate needs a SigMF recording" in err


def test_limits_list_and_show(capsys: pytest.CaptureFixture[str]) -> None:
    status, out, _ = run(capsys, "limits", "list")
    assert status == 0 and "home-built" in out and "spurious" in out and "beacon" in out
    status, out, _ = run(capsys, "limits", "show", "spurious")
    assert status == 0 and "97.307(d)" in out
    status, _, err = run(capsys, "limits", "show", "home-biult")
    assert status == EXIT_USAGE and "did you mean 'home-built'" in err
