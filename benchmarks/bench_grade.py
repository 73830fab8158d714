"""Benchmark: a full analysis (``iqscope grade``'s pipeline) against scipy's welch alone.

Creates a 64 Mi-sample cf32 SigMF recording (a DSB signal with a residual carrier and
noise, 48 kS/s, about 23 minutes) in ``benchmarks/_data/`` (git-ignored; reused on
later runs), then, in one run and on the same file:

1. ``iqscope.measure.analyse`` on the recording opened with ``iqscope.io.open_recording``
   (spectrum, levels, envelope, spectrogram, location, every provider);
2. ``scipy.signal.welch(x, fs, nperseg=4096, return_onesided=False)`` alone on an
   ``np.memmap`` of the same data file.

Each runs in its own child process so that its peak resident memory (``VmHWM``) is its
own. Prints the times, their
ratio and both peaks. Not a test: nothing is asserted.

Usage::

    python benchmarks/bench_grade.py [--samples N] [--rate HZ] [--keep]
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

HERE = Path(__file__).resolve().parent
BENCH = HERE / "_data"


def make_file(n: int, fs: float) -> Path:
    """Write the benchmark recording once (streamed in blocks); return its meta path."""
    import numpy as np

    from iqscope.io import write_sigmf

    base = BENCH / f"dsb_{n}_{int(fs)}"
    meta = base.with_suffix(".sigmf-meta")
    if meta.exists() and base.with_suffix(".sigmf-data").exists():
        return meta
    BENCH.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(20261201)
    f0, fm, a = 3210.7, 1013.3, 0.25
    leak = np.sqrt(2 * a * a / 10 ** (37.6 / 10))  # carrier 37.6 dB below the sidebands

    def blocks():  # type: ignore[no-untyped-def]
        step = 1 << 22
        for s in range(0, n, step):
            m = min(step, n - s)
            t = (np.arange(s, s + m) / fs).astype(np.float64)
            x = a * np.exp(2j * np.pi * (f0 + fm) * t) + a * np.exp(2j * np.pi * (f0 - fm) * t + 0.7j)
            x += leak * np.exp(2j * np.pi * f0 * t)
            x += 1e-4 / np.sqrt(2) * (rng.standard_normal(m) + 1j * rng.standard_normal(m))
            yield x.astype(np.complex64)

    return write_sigmf(base, blocks(), fs, center_frequency_hz=7.1e6, description="iqscope benchmark")


def child_analyse(meta: str, core_only: bool = False) -> None:
    from iqscope.io import open_recording
    from iqscope.measure import PROVIDERS, analyse
    from iqscope.measure import pipeline as pl

    timings: dict[str, float] = {}
    run = pl._run_provider

    def timed(provider, ctx):  # type: ignore[no-untyped-def]
        fs, dt = run(provider, ctx)
        timings[getattr(provider, "__name__", "?")] = dt
        return fs, dt

    pl._run_provider = timed
    providers = PROVIDERS[:6] if core_only else None
    t0 = time.perf_counter()
    with open_recording(meta) as rec:
        an = analyse(rec, providers=providers)
    dt = time.perf_counter() - t0
    cs = an.measurements.get("carrier_suppression_db")
    print(
        json.dumps(
            {
                "seconds": dt,
                "maxrss_mb": peak_rss_mb(),
                "mode": an.signal.mode,
                "carrier_suppression_db": None if cs is None else cs.value,
                "nfft": None if an.spectrum is None else an.spectrum.psd.size,
                "n_averages": None if an.spectrum is None else an.spectrum.n_averages,
                "slowest_provider": max(timings.items(), key=lambda kv: kv[1]) if timings else None,
            }
        )
    )


def child_welch(data: str, fs: float) -> None:
    import numpy as np
    import scipy.signal

    t0 = time.perf_counter()
    x = np.memmap(data, dtype=np.complex64, mode="r")
    f, p = scipy.signal.welch(x, fs, nperseg=4096, return_onesided=False)
    dt = time.perf_counter() - t0
    print(json.dumps({"seconds": dt, "maxrss_mb": peak_rss_mb()}))


def run_child(args: list[str]) -> dict[str, float]:
    out = subprocess.run([sys.executable, __file__, *args], check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])  # type: ignore[no-any-return]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=64 * 2**20)
    ap.add_argument("--rate", type=float, default=48000.0)
    ap.add_argument("--keep", action="store_true", help="keep the recording for later runs")
    ap.add_argument("--child", choices=["analyse", "core", "welch"], help=argparse.SUPPRESS)
    ap.add_argument("--file", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.child in ("analyse", "core"):
        child_analyse(a.file, core_only=a.child == "core")
        return
    if a.child == "welch":
        child_welch(a.file, a.rate)
        return
    t0 = time.perf_counter()
    meta = make_file(a.samples, a.rate)
    data = meta.with_suffix(".sigmf-data")
    print(f"recording: {meta} ({a.samples} samples, {os.path.getsize(data) / 2**20:.0f} MiB; made/found in "
          f"{time.perf_counter() - t0:.1f} s)")
    # Warm the page cache for both (the same file).
    with open(data, "rb") as fh:
        while fh.read(1 << 24):
            pass
    ours = run_child(["--child", "analyse", "--file", str(meta)])
    core = run_child(["--child", "core", "--file", str(meta)])
    base = run_child(["--child", "welch", "--file", str(data), "--rate", str(a.rate)])
    slow = ours["slowest_provider"]
    print(f"iqscope analyse, all providers : {ours['seconds']:.2f} s, peak RSS {ours['maxrss_mb']:.0f} MB "
          f"(mode {ours['mode']}, carrier suppression {ours['carrier_suppression_db']:.2f} dB, "
          f"nfft {ours['nfft']}, {ours['n_averages']} averages; slowest provider {slow[0]} {slow[1]:.2f} s)")
    print(f"iqscope analyse, core providers: {core['seconds']:.2f} s, peak RSS {core['maxrss_mb']:.0f} MB")
    print(f"scipy welch alone              : {base['seconds']:.2f} s, peak RSS {base['maxrss_mb']:.0f} MB (nperseg 4096)")
    print(f"ratio welch / full analyse: {base['seconds'] / ours['seconds']:.1f}x; "
          f"welch / core analyse: {base['seconds'] / core['seconds']:.1f}x")
    if not a.keep:
        for p in (meta, data):
            p.unlink(missing_ok=True)


if __name__ == "__main__":
    main()
