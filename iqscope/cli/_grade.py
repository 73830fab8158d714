"""``iqscope grade FILE...``: open, analyse, grade, render. Wiring only.

Output: a text report on stdout (or ``--json``: exactly one JSON object on stdout; one
file gives the ``iqscope.grade/1`` contract object, several give one
``iqscope.grade-batch/1`` object holding a contract object per file, see
``docs/reports.md``). Progress and errors go to stderr. Optional outputs, each written
atomically and never over an existing file without ``--force``: ``--report FILE.html``
(one self-contained page for all files), ``--plot DIR`` (PNGs named
``STEM-spectrum.png``, ``STEM-spectrogram.png``, ``STEM-envelope.png`` ...) and
``--annotate`` (a new ``STEM.graded.sigmf-meta`` beside each SigMF input).

Exit status: the worst verdict over the files (0 pass, 1 warn, 2 fail), or 3 when a
file is unusable (the others are still graded and reported).
"""

from __future__ import annotations

import argparse
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import (
    EXIT_INPUT,
    EXIT_OK,
    InputError,
    IqscopeError,
    MeasurementError,
    UsageError,
)
from ._options import (
    MODE_CHOICES,
    add_input_options,
    check_format,
    hz,
    positive_hz,
    positive_seconds,
)

__all__ = ["register", "run", "MODE_CHOICES", "output_stem"]

#: Finest ``--resolution`` accepted, Hz: finer is no spectrum any recording gives (the
#: pipeline clamps the FFT to 2^22 points anyway), and fs / 1e-300 overflowed its planner.
MIN_RESOLUTION_HZ = 1e-6


def _resolution(text: str) -> float:
    value = positive_hz(text)
    if value < MIN_RESOLUTION_HZ:
        raise argparse.ArgumentTypeError(f"{text!r} is finer than {MIN_RESOLUTION_HZ:g} Hz")
    return value


def register(subparsers: Any) -> None:
    """Add the ``grade`` command."""
    from . import EXIT_STATUS_HELP, SAFETY_LINE

    p = subparsers.add_parser(
        "grade",
        help="measure a transmitter's recording and grade it pass / warn / fail",
        description="Measure carrier and sideband suppression, bandwidth, IMD, spurs and drift "
        "of each recording (as the mode allows) and grade every figure against a limits "
        "profile (--limits; by default the 'home-built' preset, named in the report).",
        epilog=EXIT_STATUS_HELP + "\n" + SAFETY_LINE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="recordings: .sigmf-meta/.sigmf, .wav, .h5, raw")
    s = p.add_argument_group("signal")
    s.add_argument("--mode", choices=MODE_CHOICES, default="auto", help="emission mode (default: auto, detects cw/am/dsb)")
    s.add_argument(
        "--carrier",
        metavar="HZ",
        type=hz,
        help="carrier frequency: within +/- fs/2 an offset from the capture centre, else absolute RF",
    )
    s.add_argument("--tone", metavar="HZ", type=positive_hz, help="the test tone's audio frequency (SSB)")
    s.add_argument("--resolution", metavar="HZ", type=_resolution, help="spectrum bin spacing (default: from the signal)")
    s.add_argument("--reference", metavar="HZ", type=hz, help="a stable reference line for drift (offset or absolute)")
    s.add_argument("--drift-window", metavar="S", type=positive_seconds, default=120.0, help="window for the worst drift excursion, s (default 120)")
    s.add_argument("--calibration", metavar="FILE", help="calibration from 'iqscope calibrate' (power in dBm and W)")
    g = p.add_argument_group("limits and output")
    g.add_argument(
        "--limits",
        metavar="FILE|NAME",
        action="append",
        help="limits profile: a TOML file or a preset (iqscope limits list); repeat to combine "
        "(a later profile's rules replace an earlier one's for the same measurement)",
    )
    g.add_argument("--json", action="store_true", help="print exactly one JSON object on stdout (docs/json.md)")
    g.add_argument("--report", metavar="FILE", help="write a self-contained HTML report (plots embedded)")
    g.add_argument("--plot", metavar="DIR", help="write PNG plots into DIR (created if missing)")
    g.add_argument("--annotate", action="store_true", help="write STEM.graded.sigmf-meta beside each SigMF input")
    g.add_argument("--force", action="store_true", help="overwrite existing output files")
    g.add_argument("--quiet", "-q", action="store_true", help="no progress; text output reduced to one line per file")
    add_input_options(p, several=True)
    p.set_defaults(func=run)


def output_stem(path: str) -> str:
    """``bench/dsb40m.sigmf-meta`` -> ``dsb40m``: the base of a recording's output names."""
    name = Path(path).name
    if ":" in name and not Path(path).exists():  # HDF5 "file.h5:/dataset"
        name = name.split(":", 1)[0]
    for suffix in (".sigmf-meta", ".sigmf-data", ".sigmf"):
        if name.endswith(suffix):
            return name[: -len(suffix)] or "recording"
    return Path(name).stem or "recording"


@dataclass
class _Failure:
    path: str
    error: IqscopeError

    def to_json(self) -> dict[str, Any]:
        return {"path": self.path, "error": str(self.error), "exit_status": self.error.exit_status}


def _stems(files: list[str]) -> list[str]:
    out: list[str] = []
    for f in files:
        stem = output_stem(f)
        base, n = stem, 2
        while stem in out:
            stem = f"{base}-{n}"
            n += 1
        out.append(stem)
    return out


def _check_outputs(args: argparse.Namespace, stems: list[str]) -> None:
    """Refuse before any work when an output exists (without --force) or cannot be made."""
    from ..io._atomic import check_can_write
    from ..report._plots import PLOT_NAMES
    from ._options import check_plot_folder

    if args.report:
        check_can_write(args.report, force=args.force)
    if args.plot:
        check_plot_folder(
            args.plot, [f"{stem}-{name}.png" for stem in stems for name in PLOT_NAMES], force=args.force
        )
    if args.annotate:
        from ..report._annotate import annotated_meta_path

        for f in args.files:
            target = annotated_meta_path(f)
            if target is None:
                raise UsageError(
                    f"--annotate needs a SigMF recording given as .sigmf-meta or .sigmf-data; {f} is not"
                )
            check_can_write(target, force=args.force)


def run(args: argparse.Namespace) -> int:
    """Grade every file; return the exit status."""
    from ..grading import combine_profiles, grade, load_limits
    from ._options import open_input
    from ..measure._context import AnalysisRequest
    from ..report._theme import make_console

    check_format(args.format)
    limits = combine_profiles([load_limits(spec) for spec in args.limits]) if args.limits else None
    stems = _stems(list(args.files))
    _check_outputs(args, stems)
    options: dict[str, Any] = {}
    if args.calibration:
        from ..measure.power import load_calibration

        options["calibration"] = load_calibration(args.calibration)
    from ..measure.pipeline import analyse

    err = make_console(stderr=True)
    out = make_console()
    show_progress = not args.quiet and err.is_terminal
    results: list[Any] = []
    result_stems: list[str] = []
    failures: list[_Failure] = []
    several = len(args.files) > 1
    for path, stem in zip(args.files, stems):
        try:
            with open_input(path, args) as rec:
                if args.annotate and rec.format != "sigmf":
                    raise UsageError(f"--annotate needs a SigMF recording; {path} is {rec.format}")
                from ..report._progress import progress_reporter

                with progress_reporter(err, f"grading {Path(path).name}", enabled=show_progress) as progress:
                    request = AnalysisRequest(
                        mode=args.mode,
                        carrier_hz=args.carrier,
                        tone_hz=args.tone,
                        resolution_hz=args.resolution,
                        reference_hz=args.reference,
                        drift_window_s=args.drift_window,
                        options=options,
                        progress=progress,
                    )
                    analysis = analyse(rec, request)
            results.append(grade(analysis, limits))
            result_stems.append(stem)
        except (InputError, MeasurementError) as exc:
            if not several:
                raise
            failures.append(_Failure(path, exc))
            if not args.quiet or not args.json:
                print(f"iqscope: error: {exc}", file=sys.stderr)

    _print_results(args, results, failures, out)
    _write_outputs(args, results, result_stems, err)

    if failures:
        if any(isinstance(f.error, InputError) for f in failures):
            return EXIT_INPUT
        return max(f.error.exit_status for f in failures)
    return max((r.exit_status for r in results), default=EXIT_OK)


def _print_results(args: argparse.Namespace, results: list[Any], failures: list[_Failure], out: Any) -> None:
    from ..report._json import batch_document, dumps
    from ..report._text import print_grade, render_summary
    from ..report._theme import is_ascii, verdict_label

    if args.json:
        if len(args.files) == 1 and results:
            document = results[0].to_json()
        else:
            document = batch_document(results, [f.to_json() for f in failures])
        sys.stdout.write(dumps(document) + "\n")
        return
    if args.quiet:
        # the marks of the verdict table on this terminal (ASCII only where it cannot show more)
        ascii_only = is_ascii(out)
        for r in results:
            sys.stdout.write(f"{r.analysis.recording.path}: {verdict_label(r.overall, ascii_only=ascii_only)}\n")
        return
    for i, r in enumerate(results):
        if i:
            out.print()
        print_grade(r, out)
    if len(args.files) > 1:
        rows = [(r.analysis.recording.path, r.overall, r.profile.name) for r in results]
        rows += [(f.path, "error", str(f.error)) for f in failures]
        out.print()
        out.print(render_summary(rows, ascii_only=is_ascii(out)))


def _write_outputs(args: argparse.Namespace, results: list[Any], stems: list[str], err: Any) -> None:
    if not results:
        return
    images: list[dict[str, bytes]] = []
    if args.plot or args.report:
        from ..report._plots import render_plots

        images = [render_plots(r) for r in results]
    if args.plot:
        from ._options import write_plots

        for stem, pngs in zip(stems, images):
            write_plots(args.plot, pngs, force=args.force, prefix=f"{stem}-",
                        note=lambda message: _note(args, err, message))
    if args.report:
        from ..io._atomic import atomic_write_text
        from ..report._html import render_html

        atomic_write_text(args.report, render_html(results, images), force=args.force)
        _note(args, err, f"wrote {args.report}")
    if args.annotate:
        from ..report._annotate import write_annotated_meta

        for r in results:
            target = write_annotated_meta(r, force=args.force)
            _note(args, err, f"wrote {target}")


def _note(args: argparse.Namespace, err: Any, text: str) -> None:
    if not args.quiet:
        err.print(f"iqscope: {text}", highlight=False, markup=False)
