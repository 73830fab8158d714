"""``iqscope calibrate``: relate a receiver's dBFS to dBm at the transmitter's output.

Feed the receiver a reference of known power (a signal generator, or a carrier measured
with a power meter) with the same frequency, gain and attenuator chain you will use for
the transmitter, record it, and run this command on the recording; ``iqscope grade
--calibration FILE`` then reports mean power and PEP in dBm and watts.
"""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from ..errors import UsageError
from ._options import add_input_options, check_format, finite_number

__all__ = ["register", "run"]

#: Largest magnitude accepted for the dB and dBm options (far beyond any real chain).
MAX_DB = 1000.0


def register(subparsers: Any) -> None:
    """Add the ``calibrate`` command."""
    p = subparsers.add_parser(
        "calibrate",
        help="make a dBFS-to-dBm calibration from a recording of a reference of known power",
        description="Measure the power (dBFS) of the strongest line in a recording of a "
        "reference of known power and write a calibration file: dBm at the transmitter's "
        "output = dBFS + offset. Use it with 'iqscope grade --calibration FILE' on recordings "
        "made with the same receiver, frequency, gain and attenuator chain. If the reference "
        "went through the same attenuator chain as the transmitter will, give its level at "
        "the chain's input and leave --attenuation-db at 0; if it went straight into the "
        "receiver, give its level there and the chain's attenuation with --attenuation-db.",
    )
    p.add_argument("reference", help="recording of the reference (SigMF, WAV, raw, HDF5)")
    p.add_argument("--level-dbm", metavar="X", type=finite_number, required=True,
                   help="the reference's power where it was fed in, dBm")
    p.add_argument("--attenuation-db", metavar="A", type=finite_number, default=0.0,
                   help="attenuation between the transmitter's output and the point where the "
                   "reference was fed in, dB (default 0)")
    p.add_argument("--level-uncertainty-db", metavar="U", type=finite_number, default=0.0,
                   help="1-sigma accuracy of the reference level, dB (from its datasheet; "
                   "default 0: only the measurement's own uncertainty is counted)")
    p.add_argument("-o", "--output", metavar="FILE", required=True, help="calibration file to write (JSON)")
    p.add_argument("--force", action="store_true", help="overwrite an existing calibration file")
    p.add_argument("--json", action="store_true", help="print the calibration as JSON on stdout")
    add_input_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Measure the reference, write the calibration file, print a summary."""
    from ._options import open_input
    from ..io._atomic import check_can_write
    from ..measure.power import make_calibration, save_calibration

    check_format(args.format)
    if args.attenuation_db < 0:
        raise UsageError("--attenuation-db must be >= 0 (an attenuation, not a gain)")
    if args.level_uncertainty_db < 0:
        raise UsageError("--level-uncertainty-db must be >= 0")
    for flag, value in (("--level-dbm", args.level_dbm), ("--attenuation-db", args.attenuation_db),
                        ("--level-uncertainty-db", args.level_uncertainty_db)):
        if abs(value) > MAX_DB:  # 1e308 dB made the offset Inf and the JSON invalid
            raise UsageError(f"{flag} {value:g} is beyond +/- {MAX_DB:g} dB")
    check_can_write(args.output, force=args.force)  # before reading a long recording
    with open_input(args.reference, args) as rec:
        cal = make_calibration(
            rec,
            args.level_dbm,
            args.attenuation_db,
            level_uncertainty_db=args.level_uncertainty_db,
        )
        for w in rec.warnings:  # soft problems of the input (partial sample, NaN ...)
            print(f"iqscope: warning: {args.reference}: {w}", file=sys.stderr)
    save_calibration(cal, args.output, force=args.force)
    if args.json:
        sys.stdout.write(json.dumps(cal.to_json(), allow_nan=False) + "\n")
        return 0
    where = (
        f"{cal.line_frequency_hz / 1e6:.6f} MHz" if cal.center_frequency_hz is not None
        and cal.line_frequency_hz is not None else f"{cal.line_frequency_hz:+.1f} Hz offset"
    )
    print(
        f"reference line at {where}: {cal.measured_dbfs:.2f} dBFS "
        f"(+/- {cal.measured_uncertainty_db:.2f} dB, 1 sigma)"
    )
    print(
        f"offset: dBm at the transmitter output = dBFS {cal.offset_db:+.2f} dB "
        f"(+/- {cal.uncertainty_db:.2f} dB); wrote {args.output}"
    )
    if "DC offset" in cal.method:
        print("iqscope: warning: the reference sits on the capture centre (receiver DC offset); "
              "tune a few kHz away and record it again", file=sys.stderr)
    return 0
