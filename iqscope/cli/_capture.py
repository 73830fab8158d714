"""``iqscope capture`` (record from a receiver through SoapySDR) and ``iqscope devices``.

Both need SoapySDR's Python module (system package manager); without it they print how
to install it and exit with status 5. Everything else in iqscope works without it.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib
import json
import math
import sys
from collections.abc import Callable, Iterator
from typing import Any

from ..errors import EXIT_INTERRUPTED, CaptureError, UsageError
from ._options import (
    FULL_SCALE_HELP,
    MODE_CHOICES,
    SWAP_IQ_HELP,
    add_full_scale_option,
    add_swap_iq_option,
    hz,
    positive_hz,
)

__all__ = ["register", "run_capture", "run_devices", "grade_argv"]


def _number(kind: str, *, positive: bool = False, nonneg: bool = False) -> Callable[[str], float]:
    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a number ({kind})") from None
        if not math.isfinite(value):
            raise argparse.ArgumentTypeError(f"{text!r} is not a finite number ({kind})")
        if positive and value <= 0:
            raise argparse.ArgumentTypeError(f"{kind} must be > 0, not {text}")
        if nonneg and value < 0:
            raise argparse.ArgumentTypeError(f"{kind} must be >= 0, not {text}")
        return value

    return parse


def register(subparsers: Any) -> None:
    """Add the ``capture`` and ``devices`` commands."""
    p = subparsers.add_parser(
        "capture",
        help="record I/Q from a receiver through SoapySDR into SigMF (optionally grade it)",
        description="Record I/Q samples from a software-defined receiver through SoapySDR "
        "into a SigMF recording, with a fixed gain (automatic gain control off) so levels "
        "stay comparable. Overflows and timeouts are counted and stored in the metadata; "
        "Ctrl-C stops early and keeps a valid file with the samples so far. Give "
        "--tx-power and --attenuation-db to have the receiver's input level checked first. "
        "Needs SoapySDR's Python module from your system package manager.",
    )
    p.add_argument("--device", metavar="ARGS", default="",
                   help="SoapySDR device arguments, e.g. 'driver=NAME,serial=X' (see 'iqscope "
                   "devices'; default: the first receiver found)")
    p.add_argument("--freq", metavar="HZ", type=hz, required=True,
                   help="receiver centre frequency, Hz (14.1M, 7100k ...); tune a few kHz away "
                   "from the signal so it does not sit on the receiver's DC offset")
    p.add_argument("--rate", metavar="HZ", type=positive_hz, required=True, help="sample rate, Hz")
    p.add_argument("--seconds", metavar="N", type=_number("seconds", positive=True),
                   required=True, help="length of the capture, s")
    p.add_argument("-o", "--output", metavar="FILE", required=True,
                   help="SigMF recording to write (base name or .sigmf-meta)")
    p.add_argument("--gain", metavar="DB", type=_number("gain, dB"),
                   help="overall receiver gain, dB (default: leave the driver's gain; AGC is "
                   "turned off either way)")
    p.add_argument("--antenna", metavar="NAME", help="antenna port of the receiver")
    p.add_argument("--channel", metavar="N", type=int, default=0, help="receive channel (default 0)")
    p.add_argument("--stream-format", choices=("cf32", "cs16"), default="cf32",
                   help="sample format asked of the driver: cf32 (written as cf32_le) or cs16 "
                   "(written as ci16_le, half the size); default cf32")
    p.add_argument("--description", metavar="TEXT", default="",
                   help="core:description stored in the recording")
    p.add_argument("--tx-power", metavar="W", type=_number("transmitter power, W", positive=True),
                   help="transmitter power (PEP), W: the receiver's input level is checked first")
    p.add_argument("--attenuation-db", metavar="A", type=_number("attenuation, dB", nonneg=True),
                   help="total attenuation between transmitter and receiver, dB")
    p.add_argument("--max-input-dbm", metavar="DBM", type=_number("level, dBm"), default=None,
                   help="highest receiver input level accepted without --yes, dBm (default -20, "
                   "common practice; your receiver's datasheet decides)")
    p.add_argument("--yes", action="store_true",
                   help="start even when the stated chain would overdrive the receiver")
    p.add_argument("--force", action="store_true", help="overwrite an existing recording")
    g = p.add_argument_group("grading after the capture")
    g.add_argument("--grade", action="store_true", help="grade the recording when it is written")
    g.add_argument("--mode", metavar="MODE", choices=MODE_CHOICES,
                   help="passed to grade: " + ", ".join(MODE_CHOICES))
    g.add_argument("--limits", metavar="FILE|NAME", help="passed to grade: limits profile")
    g.add_argument("--calibration", metavar="FILE",
                   help="passed to grade: calibration file from 'iqscope calibrate' (power in dBm, W)")
    g.add_argument("--report", metavar="FILE", help="passed to grade: write a report file")
    g.add_argument("--json", action="store_true", help="passed to grade: print the JSON result")
    add_full_scale_option(g, help="passed to grade: " + FULL_SCALE_HELP)
    add_swap_iq_option(g, help="passed to grade: " + SWAP_IQ_HELP)
    p.set_defaults(func=run_capture)

    d = subparsers.add_parser(
        "devices",
        help="list the receivers SoapySDR finds",
        description="List the receivers SoapySDR finds, with the arguments to give to "
        "'iqscope capture --device'. Needs SoapySDR's Python module and its driver modules.",
    )
    d.add_argument("--filter", metavar="ARGS", default="",
                   help="only devices matching these SoapySDR arguments, e.g. 'driver=NAME'")
    d.add_argument("--json", action="store_true", help="print a JSON list on stdout")
    d.set_defaults(func=run_devices)


def _say(text: str) -> None:
    print(text, file=sys.stderr)


def grade_argv(args: argparse.Namespace, path: str) -> list[str]:
    """The ``iqscope grade`` command line for a capture's ``--grade`` options."""
    argv = ["grade", path]
    for flag, value in (("--mode", args.mode), ("--limits", args.limits),
                        ("--calibration", args.calibration), ("--report", args.report),
                        ("--full-scale", getattr(args, "full_scale", None))):
        if value is not None:
            argv += [flag, str(value)]
    if getattr(args, "swap_iq", False):
        argv.append("--swap-iq")
    if args.json:
        argv.append("--json")
    if getattr(args, "force", False) and args.report is not None:
        argv.append("--force")  # --force covers every output of the command, the report too
    return argv


def _grade_available() -> bool:
    try:
        importlib.import_module("iqscope.cli._grade")
    except ModuleNotFoundError as exc:
        if exc.name == "iqscope.cli._grade":
            return False
        raise
    return True


@contextlib.contextmanager
def _progress(total: int, enabled: bool) -> Iterator[Callable[[int, int, int], None]]:
    """A progress bar on stderr (the report layer draws it) as a capture callback."""
    from ..report._progress import progress_reporter

    with progress_reporter(None, "capturing", enabled=enabled) as progress:
        if progress is None:
            yield lambda done, wanted, overflows: None
        else:
            yield lambda done, wanted, overflows: progress(done, total)


def _check_safety(args: argparse.Namespace) -> None:
    from ..capture._safety import LINEAR_MAX_DBM, assess_input_level, check_input_level

    if args.tx_power is None:
        if args.attenuation_db is not None:
            raise UsageError("--attenuation-db needs --tx-power (the transmitter's power, W)")
        _say(
            "iqscope: note: give --tx-power W and --attenuation-db A to have the receiver's "
            "input level checked; a receiver survives only milliwatts"
        )
        return
    attenuation = args.attenuation_db
    if attenuation is None:
        _say("iqscope: note: no --attenuation-db given: assuming none")
        attenuation = 0.0
    limit = LINEAR_MAX_DBM if args.max_input_dbm is None else args.max_input_dbm
    level = assess_input_level(args.tx_power, attenuation, limit_dbm=limit)
    check_input_level(level, confirmed=args.yes)
    prefix = "iqscope: input level: " if level.safe else "iqscope: warning (--yes given): "
    _say(prefix + level.message())


def run_capture(args: argparse.Namespace) -> int:
    """Check the input level, capture, report, and grade when asked."""
    from ..capture import CaptureSettings, capture_to_sigmf

    if args.channel < 0:
        raise UsageError("--channel must be >= 0")
    grading_flags = [f for f, v in (("--mode", args.mode), ("--limits", args.limits),
                                    ("--calibration", args.calibration),
                                    ("--report", args.report), ("--json", args.json or None),
                                    ("--full-scale", args.full_scale),
                                    ("--swap-iq", args.swap_iq or None))
                     if v is not None]
    if grading_flags and not args.grade:
        raise UsageError(f"{', '.join(grading_flags)} only apply with --grade")
    if args.grade and not _grade_available():
        raise UsageError("--grade: the grade command is not available in this installation")
    _check_safety(args)
    extra: dict[str, Any] = {}
    if args.tx_power is not None:
        extra["iqscope:tx_power_w"] = args.tx_power
    if args.attenuation_db is not None:
        extra["iqscope:attenuation_db"] = args.attenuation_db
    try:
        settings = CaptureSettings(
            frequency_hz=args.freq,
            sample_rate_hz=args.rate,
            seconds=args.seconds,
            device_args=args.device,
            gain_db=args.gain,
            antenna=args.antenna,
            channel=args.channel,
            stream_format="CS16" if args.stream_format == "cs16" else "CF32",
            description=args.description,
            extra_metadata=extra,
        )
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    total = max(1, int(round(args.seconds * args.rate)))
    from ..io import check_free_space

    check_free_space(args.output, total * (4 if args.stream_format == "cs16" else 8))  # before tuning
    from ..io._atomic import check_can_write
    from ..io._sigmf import sigmf_paths

    for target in sigmf_paths(args.output):  # before the device is opened
        check_can_write(target, force=args.force)
    if args.grade and args.report:  # the report is written after the capture: check it first
        check_can_write(args.report, force=args.force)
    with _progress(total, enabled=sys.stderr.isatty()) as update:
        result = capture_to_sigmf(settings, args.output, force=args.force, progress=update)
    for w in result.warnings:
        _say(f"iqscope: warning: {w}")
    gain = "unknown" if result.gain_db is None else f"{result.gain_db:g} dB"
    _say(
        f"iqscope: wrote {result.path}: {result.n_samples} samples ({result.duration_s:.3f} s) at "
        f"{result.center_frequency_hz:.0f} Hz, {result.sample_rate_hz:g} samples/s, gain {gain}; "
        f"overflows {result.overflows}, timeouts {result.timeouts}, "
        f"stream errors {result.stream_errors}"
    )
    if result.overflows or result.stream_errors:
        _say(
            "iqscope: warning: samples were lost (marked by annotations in the recording); "
            "a lower sample rate or a less busy computer avoids that"
        )
    if result.interrupted:
        _say("iqscope: interrupted: the samples so far are saved; grade them with 'iqscope grade'")
        return EXIT_INTERRUPTED
    if result.stalled:
        raise CaptureError("the receiver stopped delivering samples; the samples so far are saved",
                           result.path)
    if not args.grade:
        return 0
    from . import build_parser

    grade_args = build_parser().parse_args(grade_argv(args, str(result.path)))
    return int(grade_args.func(grade_args) or 0)


def run_devices(args: argparse.Namespace) -> int:
    """List what SoapySDR finds."""
    from ..capture import format_kwargs, list_devices

    found = list_devices(args=args.filter)
    if args.json:
        sys.stdout.write(json.dumps(found) + "\n")
        return 0
    if not found:
        _say(
            "iqscope: SoapySDR found no receiver; check the cable and that the SoapySDR driver "
            "module for your receiver is installed"
        )
        return 0
    for i, kw in enumerate(found):
        print(f"{i}: {format_kwargs(kw)}")
    return 0
