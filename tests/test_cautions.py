"""Cautions wherever a transmitter's power is involved: help texts and text reports of
``grade``, ``sweep``, ``harmonics``, ``drift`` and ``synth audio`` (whose WAV feeds a
transmitter) remind of the dummy load, attenuation, the licence, RF burns and exposure."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from iqscope.cli import AUDIO_CAUTION, SAFETY_LINE, main
from iqscope.report._text import CAUTION, SAFETY_POINTS

#: What every caution must name (the points of the README's "Safety first").
POINTS = ("dummy load", "licen", "attenuation", "burns", "exposure")


def _covers(text: str) -> None:
    low = " ".join(text.lower().split())
    for word in POINTS:
        assert word in low, (word, text)


@pytest.mark.parametrize("text", [CAUTION, SAFETY_LINE, AUDIO_CAUTION, " ".join(SAFETY_POINTS)])
def test_every_caution_text_names_every_point(text: str) -> None:
    _covers(text)


@pytest.mark.parametrize(
    "argv", [["grade"], ["sweep"], ["harmonics"], ["drift"], ["synth", "audio"]]
)
def test_help_of_power_commands_carries_the_caution(argv: list[str], capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as exc:
        main([*argv, "--help"])
    assert exc.value.code == 0
    _covers(capsys.readouterr().out)


def test_synth_audio_prints_the_caution(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """On stderr, so that ``--json`` stays one object on stdout."""
    out = tmp_path / "tone.wav"
    assert main(["synth", "audio", "-o", str(out), "--duration", "0.1", "--json"]) == 0
    captured = capsys.readouterr()
    assert json.loads(captured.out)["schema"] == "iqscope.synth/1"
    _covers(captured.err)


def test_synth_of_iq_recording_prints_no_caution(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """An I/Q file feeds no transmitter: no caution there."""
    assert main(["synth", "cw", "-o", str(tmp_path / "cw"), "--duration", "0.1"]) == 0
    assert "burns" not in capsys.readouterr().err


def test_drift_text_report_ends_with_the_caution(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "cw"
    assert main(["synth", "cw", "-o", str(path), "--duration", "2", "--sample-rate", "8000",
                 "--offset", "1000", "--noise-dbfs-per-hz", "-110"]) == 0
    capsys.readouterr()
    assert main(["drift", str(path) + ".sigmf-meta", "-q"]) == 0
    _covers(capsys.readouterr().out)


def test_readme_setup_starts_with_a_virtual_environment() -> None:
    """The first command the README gives makes and activates a virtual environment; the
    install and the test command (the one CI runs verbatim) come after it."""
    readme = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    blocks = readme.split("```")[1::2]
    commands = [line.strip() for b in blocks for line in b.splitlines() if line.strip()]
    assert commands[0].startswith("python3 -m venv ")
    assert "activate" in commands[0]
    first_install = next(i for i, c in enumerate(commands) if c.startswith("pip install"))
    assert first_install > 0
    assert 'pip install -e ".[test]" && python -m pytest' in commands


def test_readme_safety_section_names_every_point() -> None:
    readme = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Safety first", 1)[1].split("\n## ", 1)[0]
    _covers(section.replace("**", ""))
