"""``iqscope inspect FILE``: what a recording is, and its levels (peak, mean, DC, clipping)."""

from __future__ import annotations

import argparse
import json
import math
import sys
from typing import Any

from ..dsp._levels import Levels, LevelAccumulator
from ..io import Recording
from ._options import add_input_options, open_input, parse_hz

__all__ = ["register", "run", "inspect_data", "parse_hz", "CHUNK_SAMPLES", "PROGRESS_MIN_SAMPLES"]

#: Samples per block read while measuring levels.
CHUNK_SAMPLES = 1 << 18
#: Recordings at least this long get a progress bar (when stderr is a terminal).
PROGRESS_MIN_SAMPLES = 1 << 24


def register(subparsers: Any) -> None:
    """Add the ``inspect`` command to the CLI."""
    p = subparsers.add_parser(
        "inspect",
        help="show a recording's format, rate, centre frequency, length and levels",
        description="Show what a recording holds: format and datatype, sample rate, centre "
        "frequency, length, capture segments, and its peak, mean, DC offset and clipping "
        "levels (dBFS, full scale |x| = 1). Reads the file once, in blocks.",
    )
    p.add_argument("file", help="recording: .sigmf-meta/.sigmf, .wav, .h5[:/dataset], or a raw file")
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout and nothing else")
    add_input_options(p)
    p.set_defaults(func=run)


def _finite(value: float | None) -> float | None:
    return value if value is not None and math.isfinite(value) else None


def inspect_data(rec: Recording, levels: Levels) -> dict[str, Any]:
    """The plain data ``inspect`` prints (the ``--json`` object)."""
    return {
        "schema": "iqscope.inspect/1",
        "path": None if rec.path is None else str(rec.path),
        "format": rec.format,
        "datatype": rec.datatype,
        "sample_rate_hz": rec.sample_rate_hz,
        "center_frequency_hz": _finite(rec.center_frequency_hz),
        "n_samples": rec.n_samples,
        "duration_s": rec.duration_s,
        "peak_dbfs": _finite(levels.peak_dbfs),
        "mean_dbfs": _finite(levels.mean_dbfs),
        "clipped_fraction": _finite(levels.clipped_fraction),
        "dc_offset_dbfs": _finite(levels.dc_offset_dbfs),
        "clip_level": rec.clip_level,
        "nonfinite_samples": rec.nonfinite_count + levels.n_nonfinite,
        "segments": [
            {"start": s.start, "center_frequency_hz": _finite(s.center_frequency_hz), "datetime": s.datetime}
            for s in rec.segments
        ],
        "annotations": len(rec.annotations),
        "warnings": list(rec.warnings),
        "full_scale": rec.full_scale,
        "swap_iq": rec.swap_iq,
    }


def run(args: argparse.Namespace) -> int:
    """Open, measure levels in one pass, print a table or one JSON object."""
    from ..report._inspect import render_inspect
    from ..report._progress import progress_reporter

    with open_input(args.file, args) as rec:
        acc = LevelAccumulator(rec.clip_level, float_data=rec.is_float)
        show = sys.stderr.isatty() and rec.n_samples >= PROGRESS_MIN_SAMPLES
        with progress_reporter(None, rec.name, enabled=show) as progress:
            done = 0
            for block in rec.chunks(CHUNK_SAMPLES):
                acc.update(block)
                done += block.size
                if progress is not None:
                    progress(done, rec.n_samples)
        data = inspect_data(rec, acc.result())
    if args.json:
        sys.stdout.write(json.dumps(data, allow_nan=False) + "\n")
        sys.stdout.flush()
    else:
        render_inspect(data)
    return 0
