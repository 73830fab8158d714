"""The shared option helpers of the command line (iqscope/cli/_options.py): one reading of
each option in every command.

Expected values: SI prefixes k = 1e3, M = 1e6, G = 1e9 (BIPM, The International System of
Units, 9th ed. 2019, Table 7); ``m`` is read as mega, not milli (common practice for
receiver frequencies on a command line: nobody means a millihertz). Exit statuses:
iqscope/errors.py (project contract: 3 unusable input, 4 usage error).
"""

from __future__ import annotations

import argparse
import math
import re
from pathlib import Path

import pytest

from iqscope.cli import build_parser, main
from iqscope.cli._options import (
    FORMAT_HELP,
    MODE_CHOICES,
    add_input_options,
    check_format,
    finite_number,
    hz,
    parse_hz,
    positive_hz,
    positive_number,
    positive_seconds,
)
from iqscope.errors import EXIT_INPUT, EXIT_USAGE, UsageError
from iqscope.measure.locate import MODES

#: Commands that read recordings, with the arguments each needs besides the input options
#: (files named here need not exist for parsing).
READING = {
    "grade": ["grade", "a.cf32"],
    "inspect": ["inspect", "a.cf32"],
    "drift": ["drift", "a.cf32"],
    "watch": ["watch", "a.cf32", "--idle", "0.05", "--poll", "0.01", "--no-live"],
    "sweep": ["sweep", "a.cf32", "b.cf32", "--drive", "0,3"],
    "harmonics": ["harmonics", "a.cf32", "b.cf32"],
    "calibrate": ["calibrate", "a.cf32", "--level-dbm", "-10", "-o", "cal.json"],
}
#: Commands without ``--center`` (harmonics numbers each file by its own centre frequency).
NO_CENTER = {"harmonics"}


# -- argument types ---------------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "expected"),
    [("48000", 48_000.0), ("48e3", 48_000.0), ("48k", 48_000.0), ("14.1M", 14.1e6), ("14.1 MHz", 14.1e6),
     ("7100 kHz", 7.1e6), ("2.4G", 2.4e9), ("14.1m", 14.1e6), (" 1k ", 1000.0)],
)
def test_frequency_syntax(text: str, expected: float) -> None:
    """SI prefixes (BIPM SI Brochure, 9th ed., Table 7); relative 1e-12: float rounding only."""
    for parse in (parse_hz, hz, positive_hz):
        assert parse(text) == pytest.approx(expected, rel=1e-12)


def test_hz_takes_any_sign_but_not_a_non_finite_value() -> None:
    assert hz("-3k") == -3000.0 and hz("0") == 0.0
    for text in ("nan", "inf", "-inf", "1e400"):
        with pytest.raises(argparse.ArgumentTypeError, match="finite"):
            hz(text)
    assert math.isnan(parse_hz("nan")) and parse_hz("inf") == math.inf  # left to the reader


@pytest.mark.parametrize("text", ["0", "-0", "-1", "-48k", "nan", "inf", "-inf", "1e400"])
def test_positive_types_refuse_zero_negative_and_non_finite(text: str) -> None:
    for parse in (positive_hz, positive_seconds, positive_number):
        with pytest.raises(argparse.ArgumentTypeError):
            parse(text)


@pytest.mark.parametrize("text", ["abc", "", "1 kk", "12 parsecs", "0x10"])
def test_types_refuse_what_is_not_a_number(text: str) -> None:
    for parse in (parse_hz, hz, positive_hz, positive_seconds, finite_number, positive_number):
        with pytest.raises(argparse.ArgumentTypeError):
            parse(text)


def test_plain_number_types() -> None:
    assert positive_seconds("0.25") == 0.25 and positive_number("5") == 5.0
    assert finite_number("-10.5") == -10.5 and finite_number("0") == 0.0
    with pytest.raises(argparse.ArgumentTypeError, match="finite"):
        finite_number("nan")


def test_mode_choices_are_the_measurement_modes() -> None:
    assert MODE_CHOICES == tuple(MODES)


def test_check_format() -> None:
    assert check_format(None) is None and check_format("cs16") == "cs16"
    for empty in ("", "   "):
        with pytest.raises(UsageError, match="--format needs a value"):
            check_format(empty)


def test_format_help_names_only_accepted_formats() -> None:
    """Every example the --format help names is a format open_recording accepts."""
    from iqscope.io._registry import find_reader

    names = re.findall(r"[a-z][a-z0-9]+", FORMAT_HELP.split("reader (", 1)[1])
    names = [n for n in names if n not in ("raw", "datatype", "or", "a", "reader", "s", "file", "extension")]
    assert {"sigmf", "wav", "hdf5", "cf32", "cs16", "sc8", "h5"} <= set(names)
    for name in names:
        find_reader(Path("recording"), name)  # raises UsageError on an unknown name


def test_add_input_options_without_center() -> None:
    p = argparse.ArgumentParser()
    add_input_options(p, center=False)
    args = p.parse_args(["--format", "sc8", "--rate", "2.4M"])
    assert args.format == "sc8" and args.rate == 2.4e6 and not hasattr(args, "center")


# -- every reading command reads the input options alike ---------------------------------
def _subparser(command: str) -> argparse.ArgumentParser:
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices[command]


@pytest.mark.parametrize("command", sorted(READING))
def test_every_reading_command_has_the_same_input_options(command: str) -> None:
    argv = READING[command] + ["--format", "cs16", "--rate", "48k"]
    if command not in NO_CENTER:
        argv += ["--center", "14.1 MHz"]
    args = build_parser().parse_args(argv)
    assert args.format == "cs16" and args.rate == 48_000.0
    if command not in NO_CENTER:
        assert args.center == pytest.approx(14.1e6, rel=1e-12)
    help_text = " ".join(_subparser(command).format_help().split())
    assert " ".join(FORMAT_HELP.split()) in help_text  # the one --format help, extensions named


@pytest.mark.parametrize("command", sorted(READING))
def test_every_reading_command_refuses_an_empty_format(command: str, capsys: pytest.CaptureFixture[str]) -> None:
    status = main(READING[command] + ["--format="])
    err = capsys.readouterr().err
    assert status == EXIT_USAGE and err.strip() == "iqscope: error: --format needs a value"


@pytest.mark.parametrize("command", sorted(READING))
@pytest.mark.parametrize("rate", ["0", "-48k", "nan"])
def test_every_reading_command_refuses_a_bad_rate_alike(
    command: str, rate: str, tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """The reader judges --rate in every command: one line naming the sample rate, status 3."""
    monkeypatch.chdir(tmp_path)
    for name in ("a.cf32", "b.cf32"):
        (tmp_path / name).write_bytes(bytes(8 * 64))
    status = main(READING[command] + [f"--rate={rate}"])
    err = capsys.readouterr().err
    assert status == EXIT_INPUT, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "sample rate" in lines[0] and "Traceback" not in err
    assert not (tmp_path / "cal.json").exists()


@pytest.mark.parametrize("command", ["grade", "drift", "sweep"])
def test_carrier_and_mode_read_alike(command: str) -> None:
    """``--carrier 1k`` is 1000 Hz and ``--mode`` has the same choices in every command."""
    args = build_parser().parse_args(READING[command] + ["--carrier", "1k", "--mode", "usb", "--tone", "1.5k"])
    assert args.carrier == 1000.0 and args.mode == "usb" and args.tone == 1500.0
    with pytest.raises(SystemExit) as exc:
        build_parser().parse_args(READING[command] + ["--mode", "fm"])
    assert exc.value.code == EXIT_USAGE
    with pytest.raises(SystemExit) as exc:
        build_parser().parse_args(READING[command] + ["--tone", "-1k"])
    assert exc.value.code == EXIT_USAGE


def test_no_framework_specific_format_alias() -> None:
    """``cf32`` names 32-bit float complex samples; one framework's own term for the same
    file (``cfile``) is not an alias of ours, as a format or as a file-name ending."""
    from iqscope.errors import UsageError
    from iqscope.io._raw import RAW_EXTENSION_DATATYPES
    from iqscope.io._registry import find_reader

    with pytest.raises(UsageError):
        find_reader(Path("recording"), "cfile")
    assert ".cfile" not in dict(RAW_EXTENSION_DATATYPES)
    assert "cfile" not in FORMAT_HELP
