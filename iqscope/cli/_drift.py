"""``iqscope drift FILE``: follow the transmitter's frequency through a recording. Wiring only.

Text report on stdout (or ``--json``: one ``iqscope.drift/1`` object, see docs/drift.md);
a progress bar on stderr when it is a terminal. ``--plot DIR`` writes
``STEM-drift-frequency.png`` and ``STEM-drift-allan.png`` atomically (never over an
existing file without ``--force``).
"""

from __future__ import annotations

import argparse
import sys
from typing import Any

from ._options import MODE_CHOICES, add_input_options, check_format, hz, positive_hz, positive_seconds

__all__ = ["register", "run", "add_tracking_options"]


def add_tracking_options(p: argparse.ArgumentParser) -> None:
    """Options shared by ``drift`` and ``watch``: what to follow and how."""
    s = p.add_argument_group("what to follow")
    s.add_argument("--mode", choices=MODE_CHOICES, default="auto",
                   help="emission mode (default auto: the strongest line, or an equal pair averaged)")
    s.add_argument("--carrier", metavar="HZ", type=hz,
                   help="nominal carrier: within +/- fs/2 an offset from the capture centre, else absolute "
                   "RF; frequency_offset_hz is measured from it")
    s.add_argument("--tone", metavar="HZ", type=positive_hz, help="SSB test tone's audio frequency")
    s.add_argument("--line", metavar="HZ", type=hz, help="follow the line nearest this frequency")
    s.add_argument("--reference", metavar="HZ", type=hz,
                   help="a stable line in the same capture: drift is reported relative to it "
                   "(removes the receiver's own drift); absolute RF also corrects the offset")
    t = p.add_argument_group("tracking")
    t.add_argument("--block", metavar="S", type=positive_seconds, help="block length, s (default: from the SNR); at least 64 samples and, for a "
                   "finished recording, no longer than it")
    t.add_argument("--span", metavar="HZ", type=positive_hz,
                   help="search +/- this around the last seen frequency (default: 20 Hz or 8 bins)")
    t.add_argument("--window", metavar="S", type=positive_seconds, default=120.0,
                   help="window for the worst excursion, s (default 120); at least two blocks")
    t.add_argument("--settle-band", metavar="HZ", type=positive_hz, default=1.0,
                   help="settling band half-width, Hz (default 1)")
    add_input_options(p)


def register(subparsers: Any) -> None:
    """Add the ``drift`` command."""
    from . import SAFETY_LINE

    p = subparsers.add_parser(
        "drift",
        help="frequency drift and stability of a line through a recording",
        description="Follow the transmitter's reference line (the carrier, an SSB test tone, or the "
        "two DSB sideband lines averaged) block by block and report its offset, drift rate, "
        "peak-to-peak, worst excursion within a window, warm-up settling time and, when the RF "
        "frequency is known, the overlapping Allan deviation. Without --reference the figures "
        "include the receiver's own oscillator drift.",
        epilog=SAFETY_LINE,
    )
    p.add_argument("file", help="recording: .sigmf-meta/.sigmf, .wav, .h5[:/dataset], or a raw file")
    add_tracking_options(p)
    o = p.add_argument_group("output")
    o.add_argument("--json", action="store_true", help="print one JSON object (iqscope.drift/1) on stdout")
    o.add_argument("--no-track", action="store_true", help="leave the per-block track out of the JSON")
    o.add_argument("--plot", metavar="DIR", help="write frequency-versus-time and ADEV plots (PNG) into DIR")
    o.add_argument("--force", action="store_true", help="overwrite existing output files")
    o.add_argument("--quiet", "-q", action="store_true", help="no progress bar")
    p.set_defaults(func=run)


def _plot_prefix(args: argparse.Namespace) -> str:
    """Check the --plot folder before any work; return the file-name prefix of the plots."""
    from ..report._drift import DRIFT_PLOT_NAMES
    from ._grade import output_stem
    from ._options import check_plot_folder

    prefix = f"{output_stem(args.file)}-drift-"
    check_plot_folder(args.plot, [f"{prefix}{name}.png" for name in DRIFT_PLOT_NAMES], force=args.force)
    return prefix


def run(args: argparse.Namespace) -> int:
    """Open, track, figure, render."""
    from ._options import open_input
    from ..measure.drift import analyse_drift
    from ..report._drift import drift_document, drift_plots, render_drift
    from ..report._progress import progress_reporter
    from ..report._json import dumps
    from ..report._text import render_caution
    from ..report._theme import is_ascii, make_console

    check_format(args.format)
    plot_prefix = _plot_prefix(args) if args.plot else None
    with open_input(args.file, args) as rec:
        err = make_console(stderr=True)
        show = sys.stderr.isatty() and not args.quiet
        with progress_reporter(err, f"tracking {rec.name}", enabled=show) as progress:
            result = analyse_drift(
                rec,
                mode=args.mode,
                carrier_hz=args.carrier,
                nominal_hz=args.carrier,
                tone_hz=args.tone,
                line_hz=args.line,
                reference_hz=args.reference,
                block_s=args.block,
                span_hz=args.span,
                window_s=args.window,
                settle_band_hz=args.settle_band,
                progress=progress,
            )
        if args.json:
            sys.stdout.write(dumps(drift_document(result, rec, include_track=not args.no_track)) + "\n")
            sys.stdout.flush()
        else:
            out = make_console()
            out.print(render_drift(result, rec, ascii_only=is_ascii(out)))
            out.print(render_caution())
        if plot_prefix is not None:
            from ._options import write_plots

            write_plots(args.plot, drift_plots(result, rec.name), force=args.force,
                        prefix=plot_prefix)
    return 0
