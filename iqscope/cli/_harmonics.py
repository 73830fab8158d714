"""``iqscope harmonics FILES...``: a harmonics table from recordings at f, 2f, 3f ... Wiring only."""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import Any

from ..errors import UsageError
from ._options import add_input_options, check_format, positive_number

__all__ = ["register", "run"]

EPILOG = """\
Record the fundamental, then retune the receiver to 2f, 3f ... keeping its gain and the
attenuator chain unchanged (or give --calibration). Each recording's centre frequency must
be known. The harmonic number of a recording comes from its centre frequency.

Receiver or transmitter? Record the same harmonic again with a known extra attenuation
before the receiver and pass it with --step FILE DB: a transmitter product drops by the
step (1 dB per dB), a product made in the receiver by about 2 or 3 dB per dB.

Limits come from a limits profile (--limits; default the 'spurious' preset: 47 CFR
97.307(d)/(e) and ITU RR Appendix 3). Its 'harmonic_dbc' rules are applied (else its
'worst_spur_dbc' rule). Appendix 3 depends on the PEP in W: from --calibration, else
--pep-w, else the most stringent case is assumed and said.

exit status: 0 every harmonic meets every limit, 1 some harmonic is inconclusive (noise
too high to show it) or only warns, 2 some harmonic exceeds a limit, 3/4/5 as for every
command.
"""


def register(subparsers: Any) -> None:
    """Add the ``harmonics`` command."""
    from . import SAFETY_LINE

    p = subparsers.add_parser(
        "harmonics",
        help="table of harmonics from recordings at f, 2f, 3f ..., graded against a limits profile",
        description="Combine recordings of the fundamental and of its harmonics (same receiver settings, "
        "or a calibration) into a table of harmonic levels in dBc relative to the mean power of the "
        "fundamental, graded against a limits profile (default 'spurious': 47 CFR 97.307(d)/(e) and "
        "ITU RR Appendix 3).",
        epilog=EPILOG + "\n" + SAFETY_LINE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="recordings; the lowest centre frequency is the fundamental")
    p.add_argument("--fundamental", metavar="FILE", help="the fundamental's recording (default: lowest centre frequency)")
    p.add_argument("--calibration", metavar="FILE", help="calibration from 'iqscope calibrate' (levels in dBm, PEP in W)")
    p.add_argument("--pep-w", metavar="W", type=positive_number, help="PEP in watts for RR Appendix 3 when not calibrated")
    p.add_argument(
        "--step",
        nargs=2,
        action="append",
        metavar=("FILE", "DB"),
        default=[],
        help="a second recording of a harmonic's band made with DB more attenuation (receiver-or-transmitter check)",
    )
    p.add_argument(
        "--limits",
        action="append",
        metavar="FILE|NAME",
        help="limits profile: a TOML file or a preset (iqscope limits list); repeat to combine "
        "(later rules replace earlier ones); default: the 'spurious' preset",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.add_argument("--plot", metavar="DIR", help="write harmonics.png into DIR")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    add_input_options(p, center=False, several=True)
    p.set_defaults(func=run)


def _levels(path: str, args: argparse.Namespace) -> Any:
    from ._options import open_input
    from ..measure.harmonics import analyse_levels

    with open_input(path, args, center=False) as rec:
        levels = analyse_levels(rec)
        for w in rec.warnings:  # soft problems of the input (partial sample, NaN ...)
            print(f"iqscope: warning: {path}: {w}", file=sys.stderr)
        return levels


def run(args: argparse.Namespace) -> int:
    """Measure every recording, build the table, grade it, print it, return the exit status."""
    from ..grading import combine_profiles, grade_harmonics, load_limits
    from ..measure.harmonics import harmonics_table

    check_format(args.format)
    # Limits first: a bad profile is a limits error (exit 4) before any recording is read.
    limits = combine_profiles([load_limits(spec) for spec in args.limits]) if args.limits else None
    files: list[str] = []
    seen: set[str] = set()
    for f in ([args.fundamental] if args.fundamental else []) + list(args.files):
        key = str(Path(f).resolve())
        if key not in seen:  # the same file named twice (e.g. also as --fundamental)
            seen.add(key)
            files.append(f)
    if len(files) < 2:
        raise UsageError("give the fundamental's recording and at least one harmonic's recording")
    if args.plot:
        from ._options import check_plot_folder, make_plot_folder

        make_plot_folder(check_plot_folder(args.plot, ["harmonics.png"], force=args.force))
    levels = {path: _levels(path, args) for path in files}
    if args.fundamental:
        fund = levels[files[0]]
    else:
        fund = min(levels.values(), key=lambda lv: lv.center_frequency_hz)
    others = [lv for lv in levels.values() if lv is not fund]
    offset = gain = None
    if args.calibration:
        from ..measure.power import load_calibration

        cal = load_calibration(args.calibration)
        offset, gain = cal.offset_db, cal.gain_db
    stepped_raw = [(_levels(f, args), _step_db(db)) for f, db in args.step]
    stepped: dict[int, Any] = {}
    if stepped_raw:
        # Match each stepped recording to a harmonic by its centre frequency.
        f1 = harmonics_table(fund, others, dbfs_to_dbm_db=offset, calibration_gain_db=gain).fundamental.frequency_hz
        for lv, db in stepped_raw:
            n = int(round(lv.center_frequency_hz / f1))
            stepped[n] = (lv, db)
    table = harmonics_table(
        fund, others, dbfs_to_dbm_db=offset, calibration_gain_db=gain, pep_w=args.pep_w, stepped=stepped
    )
    graded = grade_harmonics(table, limits)
    data = graded.to_json()
    if args.json:
        sys.stdout.write(json.dumps(data, allow_nan=False) + "\n")
    else:
        from ..report._sweep import print_harmonics
        from ..report._theme import make_console

        print_harmonics(data, make_console())
    if args.plot:
        from ..report._sweep import render_harmonics_png
        from ._options import write_plots

        write_plots(args.plot, render_harmonics_png(data), force=args.force)
    return graded.exit_status


def _step_db(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise UsageError(f"--step needs an attenuation in dB, not {text!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise UsageError(f"--step attenuation must be a positive number of dB, not {text!r}")
    return v
