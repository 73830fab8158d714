"""``iqscope sweep FILES... --drive LABELS``: figures against drive level. Wiring only."""

from __future__ import annotations

import argparse
import json
import math
import sys
from collections.abc import Mapping
from typing import Any

from ..errors import EXIT_OK, UsageError
from ._options import MODE_CHOICES, add_input_options, check_format, finite_number, hz, positive_hz

__all__ = ["register", "run", "DRIVE_KEY", "parse_drives"]

#: SigMF global key (our namespace) holding a recording's drive level in dB.
DRIVE_KEY = "iqscope:drive_db"

EPILOG = """\
Record the transmitter at several drive levels (e.g. the two-tone audio level in steps of
2-3 dB, from well below normal up to where it clearly distorts), with the receiver
settings unchanged. Give the drive of each file with --drive, in the same order, in dB of
any fixed reference (or as amplitudes/powers with --drive-scale), or store it in each
SigMF file's global key "iqscope:drive_db".

Shown: output (per tone for two-tone) against drive and the 1 dB compression point,
IMD3 against drive and the drive where it crosses --imd3-limit (dB PEP), the third-order
intercept OIP3 = P_tone + (P_tone - P_IM3)/2, carrier and opposite-sideband suppression.
"""


def parse_drives(text: str, scale: str = "db") -> list[float]:
    """``"-20,-17,-14"`` -> dB values; amplitudes -> 20 log10, powers -> 10 log10.

    Raises
    ------
    UsageError
        On a value that is not a number, or a non-positive amplitude or power.
    """
    out: list[float] = []
    for part in text.replace(";", ",").split(","):
        part = part.strip()
        if not part:
            continue
        try:
            v = float(part)
        except ValueError:
            raise UsageError(f"--drive: {part!r} is not a number") from None
        if not math.isfinite(v):
            raise UsageError(f"--drive: {part!r} is not a finite number")
        out.append(_to_db(v, scale, part))
    return out


def _to_db(v: float, scale: str, text: str) -> float:
    if scale == "db":
        return v
    if v <= 0:
        raise UsageError(f"--drive: {text!r} must be positive with --drive-scale {scale}")
    return (20.0 if scale == "amplitude" else 10.0) * math.log10(v)


def register(subparsers: Any) -> None:
    """Add the ``sweep`` command."""
    from . import SAFETY_LINE

    p = subparsers.add_parser(
        "sweep",
        help="drive sweep: output, IMD3, carrier and opposite sideband against drive; P1dB, OIP3",
        description="Analyse recordings made at several drive levels and show the figures against "
        "drive: is the modulator or amplifier being overdriven?",
        epilog=EPILOG + "\n" + SAFETY_LINE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="recordings, one per drive level")
    p.add_argument("--drive", metavar="LIST", help="drive of each file, comma separated, same order, e.g. --drive=-12,-9,-6 (default: metadata)")
    p.add_argument(
        "--drive-scale",
        choices=("db", "amplitude", "power"),
        default="db",
        help="how --drive values are given (default: dB)",
    )
    s = p.add_argument_group("signal")
    s.add_argument("--mode", choices=MODE_CHOICES, default="two-tone", help="emission mode for every file (default: two-tone)")
    s.add_argument("--carrier", metavar="HZ", type=hz, help="carrier offset from the capture centre, or absolute RF, Hz")
    s.add_argument("--tone", metavar="HZ", type=positive_hz, help="test tone's audio frequency (SSB), Hz")
    s.add_argument("--calibration", metavar="FILE", help="calibration from 'iqscope calibrate' (output in dBm)")
    s.add_argument("--imd3-limit", metavar="DB", type=finite_number, default=None, help="IMD3 limit, dB re PEP (default -30)")
    o = p.add_argument_group("output")
    o.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    o.add_argument("--plot", metavar="DIR", help="write sweep.png into DIR")
    o.add_argument("--force", action="store_true", help="overwrite existing output files")
    add_input_options(p, several=True)
    p.set_defaults(func=run)


def _metadata_drive(metadata: Mapping[str, Any]) -> float | None:
    for where in (metadata, metadata.get("global") if isinstance(metadata.get("global"), Mapping) else None):
        if isinstance(where, Mapping):
            v = where.get(DRIVE_KEY)
            if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v):
                return float(v)
    return None


def run(args: argparse.Namespace) -> int:
    """Analyse each recording, derive the sweep figures, print them; exit 0."""
    from ._options import open_input
    from ..measure._context import AnalysisRequest
    from ..measure.pipeline import analyse
    from ..measure.sweep import DEFAULT_IMD3_LIMIT_DB_PEP, analyse_sweep, point_from_analysis

    check_format(args.format)
    files = list(args.files)
    if len(files) < 2:
        raise UsageError("a sweep needs at least two recordings (one per drive level)")
    drives: list[float | None]
    if args.drive is not None:
        given = parse_drives(args.drive, args.drive_scale)
        if len(given) != len(files):
            raise UsageError(f"--drive has {len(given)} values for {len(files)} files")
        drives = list(given)
    else:
        drives = [None] * len(files)
    if args.plot:
        from ._options import check_plot_folder, make_plot_folder

        make_plot_folder(check_plot_folder(args.plot, ["sweep.png"], force=args.force))
    options: dict[str, Any] = {}
    if args.calibration:
        from ..measure.power import load_calibration

        options["calibration"] = load_calibration(args.calibration)
    request = AnalysisRequest(mode=args.mode, carrier_hz=args.carrier, tone_hz=args.tone, options=options)
    points = []
    for path, drive in zip(files, drives):
        with open_input(path, args) as rec:
            if drive is None:
                drive = _metadata_drive(rec.metadata)
                if drive is None:
                    raise UsageError(
                        f"no drive level for {path}: give --drive LIST or store '{DRIVE_KEY}' in its metadata"
                    )
                if args.drive_scale != "db":
                    drive = _to_db(drive, args.drive_scale, str(drive))
            analysis = analyse(rec, request)
            for w in rec.warnings:  # soft problems of the input (partial sample, NaN ...)
                print(f"iqscope: warning: {path}: {w}", file=sys.stderr)
        points.append(point_from_analysis(drive, analysis))
    limit = DEFAULT_IMD3_LIMIT_DB_PEP if args.imd3_limit is None else args.imd3_limit
    try:
        result = analyse_sweep(points, limit)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    data = result.to_json()
    if args.json:
        sys.stdout.write(json.dumps(data, allow_nan=False) + "\n")
    else:
        from ..report._sweep import print_sweep
        from ..report._theme import make_console

        print_sweep(data, make_console())
    if args.plot:
        from ..report._sweep import render_sweep_png
        from ._options import write_plots

        write_plots(args.plot, render_sweep_png(data), force=args.force)
    return EXIT_OK
