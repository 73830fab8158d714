"""Drift tracking of a 1-hour 48 kS/s recording: time and peak memory.

Writes (once, streamed in blocks) a raw cf32 SigMF recording of a CW carrier drifting
linearly (2.37 Hz/min, plus a slow 0.8 Hz sine wander) in white noise: 3600 s x 48 kS/s
= 172.8 M samples, 1.38 GB. Then, in a fresh child process, ``iqscope.measure.drift.
analyse_drift`` follows it and the child reports wall time and peak resident memory
(``VmHWM``). Target: peak memory under 300 MB.

Usage::

    python benchmarks/bench_drift.py [--seconds 3600] [--rate 48000] [--keep]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

from _memory import peak_rss_mb  # benchmarks/ is on sys.path when a script runs

BENCH = Path(__file__).resolve().parent / "_data"
DRIFT_HZ_PER_MIN = 2.37


def make_file(seconds: float, fs: float) -> Path:
    """Write the recording once (blocks of 2^22 samples); return its meta path."""
    import numpy as np

    from iqscope.io import write_sigmf

    n = int(seconds * fs)
    base = BENCH / f"cw_drift_{int(seconds)}s_{int(fs)}"
    meta = base.with_suffix(".sigmf-meta")
    if meta.exists() and base.with_suffix(".sigmf-data").exists():
        return meta
    BENCH.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(20261201)
    f0, rate = 1234.5, DRIFT_HZ_PER_MIN / 60.0

    def blocks():  # type: ignore[no-untyped-def]
        step = 1 << 22
        for s in range(0, n, step):
            m = min(step, n - s)
            t = (np.arange(s, s + m) / fs).astype(np.float64)
            # closed-form phase of f(t) = f0 + r t + 0.8 sin(2 pi t / 600)
            ph = 2 * np.pi * (f0 * t + 0.5 * rate * t * t) - 0.8 * 600.0 * np.cos(2 * np.pi * t / 600.0)
            x = 0.2 * np.exp(1j * ph) + 0.02 / np.sqrt(2) * (rng.standard_normal(m) + 1j * rng.standard_normal(m))
            yield x.astype(np.complex64)

    return write_sigmf(base, blocks(), fs, center_frequency_hz=10.1e6, description="iqscope drift benchmark")


def child(meta: str) -> None:
    from iqscope.io import open_recording
    from iqscope.measure.drift import analyse_drift

    t0 = time.perf_counter()
    with open_recording(meta) as rec:
        res = analyse_drift(rec)
    dt = time.perf_counter() - t0
    m = res.measurements
    print(json.dumps({
        "seconds": dt,
        "maxrss_mb": peak_rss_mb(),
        "blocks": res.track.n_blocks,
        "block_s": res.track.block_s,
        "drift_hz_per_min": m["drift_hz_per_min"].value,
        "drift_se": m["drift_hz_per_min"].uncertainty,
        "peak_to_peak_hz": m["drift_peak_to_peak_hz"].value,
    }))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=3600.0)
    ap.add_argument("--rate", type=float, default=48000.0)
    ap.add_argument("--keep", action="store_true", help="keep the recording for later runs")
    ap.add_argument("--child", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.child:
        child(a.child)
        return
    t0 = time.perf_counter()
    meta = make_file(a.seconds, a.rate)
    data = meta.with_suffix(".sigmf-data")
    print(f"recording: {meta} ({os.path.getsize(data) / 2**20:.0f} MiB; made/found in {time.perf_counter() - t0:.1f} s)")
    out = subprocess.run([sys.executable, __file__, "--child", str(meta)], check=True, capture_output=True, text=True)
    r = json.loads(out.stdout.strip().splitlines()[-1])
    # expected peak-to-peak of the truth: linear part over the record plus the sine's swing
    print(f"tracked {r['blocks']} blocks of {r['block_s']:g} s in {r['seconds']:.1f} s, "
          f"peak RSS {r['maxrss_mb']:.0f} MB")
    print(f"drift {r['drift_hz_per_min']:.4f} +/- {r['drift_se']:.4f} Hz/min (synthesized {DRIFT_HZ_PER_MIN} "
          f"Hz/min plus a 0.8 Hz, 10-min sine), peak-to-peak {r['peak_to_peak_hz']:.2f} Hz")
    if not a.keep:
        for p in (meta, data):
            p.unlink(missing_ok=True)


if __name__ == "__main__":
    main()
