"""The command line's own contract: help lists the exit statuses, usage errors exit 4,
an unexpected exception is one line with status 5 (never a traceback), and every
``--plot`` folder is checked before any work.

Exit statuses: iqscope/errors.py and README.md "Exit status" (project contract).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.errors import EXIT_ERROR, EXIT_USAGE
from iqscope.io import write_sigmf


def test_help_lists_exit_statuses(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as exc:
        main(["--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    for line in ("0  success", "1  grade", "2  grade", "3  unusable input", "4  usage error", "5  other error"):
        assert line in out
    assert "dummy load" in out  # the safety line


def test_usage_error_is_status_4(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as exc:
        main(["grade", "--mode", "nonsense", "x.sigmf-meta"])
    assert exc.value.code == EXIT_USAGE


def test_no_command_is_status_4(capsys: pytest.CaptureFixture[str]) -> None:
    assert main([]) == EXIT_USAGE


def test_unexpected_exception_is_one_line(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str],
                                          tmp_path: Path) -> None:
    """A bug inside a command still ends in one line and status 5; --debug re-raises."""
    def boom(args: object) -> int:
        raise RuntimeError("synthetic failure")

    parser_args = ["inspect", str(tmp_path / "x.sigmf-meta")]
    from iqscope import cli

    real_build = cli.build_parser

    def patched() -> object:
        p = real_build()
        sub = next(a for a in p._actions if a.dest == "command")
        sub.choices["inspect"].set_defaults(func=boom)  # type: ignore[union-attr]
        return p

    monkeypatch.setattr(cli, "build_parser", patched)
    assert main(parser_args) == EXIT_ERROR
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert err.count("\n") == 1 and "internal error" in err and "synthetic failure" in err
    with pytest.raises(RuntimeError):
        main(["--debug", *parser_args])


@pytest.fixture
def two_tone_files(tmp_path: Path) -> list[Path]:
    fs = 8000.0
    n = 16384
    t = np.arange(n) / fs
    x = 0.1 * np.exp(2j * np.pi * 700 * t) + 0.1 * np.exp(2j * np.pi * 1900 * t)
    return [write_sigmf(tmp_path / f"r{k}", (x * (1 + k / 10)).astype(np.complex64), fs,
                        center_frequency_hz=14.2e6 * (k + 1)) for k in range(2)]


@pytest.mark.parametrize("command", [["sweep", "--drive=-6,-3", "--mode", "two-tone", "--carrier", "0"],
                                     ["harmonics"]])
def test_plot_folder_that_is_a_file_is_refused_before_work(
    command: list[str], two_tone_files: list[Path], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    not_a_folder = tmp_path / "plots"
    not_a_folder.write_text("keep me")
    status = main([*command, *map(str, two_tone_files), "--plot", str(not_a_folder)])
    err = capsys.readouterr().err
    assert status == EXIT_USAGE
    assert "Traceback" not in err and "is a file" in err
    assert not_a_folder.read_text() == "keep me"


@pytest.mark.parametrize("command", [["sweep", "--drive=-6,-3", "--mode", "two-tone", "--carrier", "0"],
                                     ["harmonics"]])
def test_plot_folder_without_parent_is_refused(
    command: list[str], two_tone_files: list[Path], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    status = main([*command, *map(str, two_tone_files), "--plot", str(tmp_path / "no" / "such" / "dir")])
    err = capsys.readouterr().err
    assert status == EXIT_ERROR
    assert "Traceback" not in err and "does not exist" in err
