"""``iqscope watch FILE``: follow a recording that is still being written. Wiring only.

A recorder appends to a raw, SigMF (``.sigmf-data``) or WAV file; ``watch`` re-opens it
at every poll (the readers size the data from the file), reads the new samples, feeds
them to a :class:`~iqscope.measure.drift.LineTracker` block by block and redraws a live
panel (level, offset, drift so far, carrier suppression when the carrier's place is
known). It stops on Ctrl-C or when the file has not grown for ``--idle`` seconds, then
prints the same summary as ``iqscope drift`` (or its JSON with ``--json``).

WAV recorders that write a data-chunk size of 0 until they close cannot be followed
(the reader sees no samples); ones that write the final size or 0xFFFFFFFF can.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from ..errors import InputError, MeasurementError

__all__ = ["register", "run", "watch", "WatchOutcome"]

#: Samples needed before the line is chosen: this many seconds of the recording.
SURVEY_S = 2.0
#: Longest block watch uses by default (the display should move), s.
MAX_AUTO_BLOCK_S = 1.0
#: Most samples read from the file at once.
READ_SAMPLES = 1 << 20


def register(subparsers: Any) -> None:
    """Add the ``watch`` command."""
    from ._drift import add_tracking_options
    from ._options import positive_seconds

    p = subparsers.add_parser(
        "watch",
        help="follow a recording while it is being written: live level, offset, drift",
        description="Follow a raw, SigMF or WAV recording that a recorder is still appending to. "
        "Every block the live display shows the line's level, its offset, the drift so far and "
        "(when the carrier's place is known) the carrier suppression. Stops on Ctrl-C or when the "
        "file stops growing for --idle seconds, then prints the drift summary.",
    )
    p.add_argument("file", help="the recording being written")
    add_tracking_options(p)
    w = p.add_argument_group("following")
    w.add_argument("--idle", metavar="S", type=positive_seconds, default=5.0,
                   help="stop when the file has not grown for this long, s (default 5)")
    w.add_argument("--poll", metavar="S", type=positive_seconds, default=0.25,
                   help="how often to look at the file, s (default 0.25)")
    w.add_argument("--json", action="store_true", help="print the final summary as one JSON object")
    w.add_argument("--no-live", action="store_true", help="no live display (only the final summary)")
    p.set_defaults(func=run)


@dataclass
class WatchOutcome:
    """What a watch session ended with."""

    result: Any
    """The :class:`~iqscope.measure.drift.DriftResult` of everything followed."""
    recording: Any
    """The recording as last opened (for the report header)."""
    reason: str
    """"idle", "interrupted" or "stopped"."""
    n_updates: int
    """How many times the status was handed to ``on_status``."""


def _open(path: str, args: argparse.Namespace) -> Any:
    from ._options import open_input

    return open_input(path, args, accept_truncated=True)


def watch(
    args: argparse.Namespace,
    *,
    on_status: Callable[[Any, str], None] | None = None,
    clock: Callable[[], float] = time.monotonic,
    sleep: Callable[[float], None] = time.sleep,
    should_stop: Callable[[], bool] = lambda: False,
) -> WatchOutcome:
    """Follow ``args.file`` until it stops growing (or Ctrl-C); return the final result.

    ``on_status(status, state)`` is called after every processed poll with a
    :class:`~iqscope.measure.drift.WatchStatus`; ``clock``, ``sleep`` and ``should_stop``
    are injectable for tests.
    """
    from ..measure.drift import (
        LineTracker,
        check_block_s,
        check_window_s,
        choose_block_s,
        drift_measurements,
        naming_the_file,
        prepare_tracking,
        survey_at_start,
        watch_status,
    )

    path = args.file
    last_growth = clock()
    rec = None
    last_error: InputError | None = None
    # 1. wait for enough data to choose the line
    while True:
        try:
            if rec is not None:
                rec.close()
            rec = _open(path, args)
            last_error = None
            if rec.n_samples >= int(SURVEY_S * rec.sample_rate_hz):
                break
        except InputError as exc:  # not there yet, header not written yet ...
            rec, last_error = None, exc
        if clock() - last_growth > args.idle or should_stop():
            if last_error is not None:
                raise last_error
            if rec is None:
                raise MeasurementError("the recording never appeared", Path(path))
            break
        if on_status is not None:
            on_status(None, "waiting for data")
        sleep(args.poll)
    assert rec is not None
    with naming_the_file(rec.path):  # the one error line names the file
        if args.block is not None:
            check_block_s(args.block, rec.sample_rate_hz)  # the file grows: no length bound
        check_window_s(args.window)
        spec, noise, _ = survey_at_start(rec)
        setup = prepare_tracking(rec, spec, noise, mode=args.mode, carrier_hz=args.carrier, nominal_hz=args.carrier,
                                 tone_hz=args.tone, line_hz=args.line, reference_hz=args.reference)
        block_s = args.block or choose_block_s(setup.plan.snr, rec.sample_rate_hz, 8 * MAX_AUTO_BLOCK_S)
        check_window_s(args.window, block_s)
    tracker = LineTracker(rec.sample_rate_hz, setup.plan, block_s=block_s, span_hz=args.span,
                          stable_hz=setup.stable_search_hz, stable_is_absolute=setup.stable_is_absolute,
                          center_frequency_hz=rec.center_frequency_hz, measure_carrier=True)
    carrier = setup.nominal_offset_hz
    pos = 0
    reason = "stopped"
    updates = 0
    last_growth = clock()
    # 2. follow
    try:
        while not should_stop():
            n = rec.n_samples
            if n > pos:
                while pos < n:
                    k = min(READ_SAMPLES, n - pos)
                    tracker.push(rec.read(pos, k))
                    pos += k
                last_growth = clock()
                if on_status is not None:
                    on_status(watch_status(tracker, carrier), "following")
                    updates += 1
            elif clock() - last_growth > args.idle:
                reason = "idle"
                break
            sleep(args.poll)
            try:
                new = _open(path, args)
            except InputError:
                continue  # a header being rewritten: look again next poll
            rec.close()
            rec = new
    except KeyboardInterrupt:
        reason = "interrupted"
    track = tracker.track()
    if setup.stable_is_absolute:
        track = replace(track, stable_nominal_hz=setup.stable_nominal_hz)
    result = drift_measurements(track, nominal_offset_hz=carrier, window_s=args.window,
                                settle_band_hz=args.settle_band)
    rec.close()
    return WatchOutcome(result, rec, reason, updates)


def run(args: argparse.Namespace) -> int:
    """Follow the file with a live display, then print the summary."""
    from ..report._drift import drift_document, live_watch, render_drift
    from ..report._json import dumps
    from ..report._theme import is_ascii, make_console
    from ._options import check_format

    check_format(args.format)
    out = make_console()
    live_ok = sys.stdout.isatty() and not args.no_live and not args.json
    title = f"iqscope watch {Path(args.file).name}"
    if live_ok:
        with live_watch(out, title) as show:
            outcome = watch(args, on_status=show)
    else:
        outcome = watch(args)
    why = {"idle": f"the file stopped growing for {args.idle:g} s", "interrupted": "interrupted",
           "stopped": "stopped"}[outcome.reason]
    print(f"iqscope: watch ended ({why})", file=sys.stderr)
    if args.json:
        sys.stdout.write(dumps(drift_document(outcome.result, outcome.recording)) + "\n")
        sys.stdout.flush()
    else:
        out.print(render_drift(outcome.result, outcome.recording, ascii_only=is_ascii(out)))
    return 0

