"""The analysis pipeline: one streaming pass, signal location, then figure providers.

:func:`analyse` is the one entry point (used by ``iqscope grade``)::

    analyse(recording, request=AnalysisRequest(), providers=None) -> Analysis

1. **One pass** over the recording in chunks (never the whole file in memory) builds
   the averaged, calibrated spectrum (4-term Blackman-Harris, 50 % overlap, batched
   complex64 FFTs), the level statistics (peak, mean, DC, clipping), an envelope trace
   (mean and peak power of about 2000 blocks) and a small spectrogram, all from the
   same samples and the same FFTs.
2. The noise floor is estimated, the mode classified and the carrier placed
   (:mod:`.locate`).
3. Each figure provider in :data:`PROVIDERS` (or ``providers``) is called in order with
   the shared :class:`~iqscope.measure.AnalysisContext` and returns a
   :class:`~iqscope.measure.FigureSet`. A provider that raises does not stop the
   others: its exception becomes a warning, and the measurements it declares in its
   ``provides`` attribute are reported with value null and the reason. When two
   providers give the same key, the first value wins (a value beats a null).

``provides`` declares what a provider reports: a mapping ``{name: unit}``, or a
callable ``provides(ctx) -> {name: unit}`` when that depends on the context (the
resolved mode ``ctx.signal.mode``, the options). It lists only the figures that apply
in that context, since a figure that does not apply to the mode stays absent, never
null (DESIGN.md section 4). Every provider in :data:`PROVIDERS` declares one (a test
checks that what each reports is within it); a provider without it loses its figures
when it fails.

Resolution: by default the bin spacing is at most :data:`DEFAULT_BIN_HZ` (6.25 Hz), so
a carrier 100 Hz from a sideband is 16 bins away, outside both main lobes (+/- 4 bins
for Blackman-Harris), with room for the local noise estimate between them; a short
recording gets a coarser resolution (at least :data:`MIN_AVERAGES` averages) and a
warning. ``request.resolution_hz`` (``--resolution``) sets the bin spacing.

Adding a provider: append it to :data:`PROVIDERS` (one line) and give it a
``provides`` declaration. It receives the context (``ctx.spectrum``, ``ctx.signal``,
``ctx.noise_floor_psd`` ...) and may stream the recording again from ``ctx.recording``
if it must.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace
from collections.abc import Callable, Mapping, Sequence
from typing import Any, Final

import numpy as np
import numpy.typing as npt
from scipy import fft as sp_fft

from ..dsp._envelope import block_envelope
from ..dsp._levels import IqCorrelation, RailTracker
from ..dsp._noise import noise_floor
from ..dsp._spectrum import AveragedSpectrum, SpectrumAccumulator, SubbandCapture
from ..io._recording import MAX_FLOAT_COMPONENT, Recording
from ._analysis import Analysis, RecordingInfo, Trace
from ._context import AnalysisContext, AnalysisRequest, FigureProvider, FigureSet
from ._result import Artefact, Measurement, failed
from .artefacts import artefact_figures
from .bandwidth import bandwidth_figures
from .carrier import carrier_figures
from .designator import designator_figures
from .drift import drift_figures, plan_capture
from .imd import two_tone_figures
from .levels import level_figures
from .locate import CoreContext, StreamStats, compute_layout, locate_signal, signal_warnings
from .modulation import modulation_figures
from .power import power_figures
from .sidebands import sideband_figures
from .spurs import spur_figures

__all__ = [
    "PROVIDERS",
    "MEASUREMENT_ORDER",
    "DEFAULT_BIN_HZ",
    "MIN_AVERAGES",
    "Plan",
    "plan_pass",
    "analyse",
    "declared_figures",
]

#: Default largest bin spacing, Hz (sidebands 100 Hz from a carrier are 16 bins away).
DEFAULT_BIN_HZ: Final = 6.25
#: Fewest averaged segments a default-resolution spectrum may have.
MIN_AVERAGES: Final = 8
#: Window of the analysis spectrum (>= 90 dB sidelobe rejection).
WINDOW: Final = "blackmanharris"
#: Segment overlap of the analysis spectrum.
OVERLAP: Final = 0.5
#: Number of points of the envelope trace.
ENVELOPE_POINTS: Final = 2048
#: Largest number of spectrogram rows and columns.
SPECTROGRAM_ROWS: Final = 128
#: Target number of full-resolution block spectra kept for providers (a line followed
#: in time with dsp.track_line), within BLOCK_PSD_BYTES of memory (float32). It also sets
#: the read chunk (one row per chunk): 256 rows read a long recording in chunks of about
#: 70 segments, so per-chunk Python overhead is small (1024 rows cost ~0.3 s more on
#: the 64 Mi-sample benchmark).
BLOCK_ROWS: Final = 256
BLOCK_PSD_BYTES: Final = 64 << 20
SPECTROGRAM_COLS: Final = 512
#: Largest chunk read at once, samples (complex64: 32 MB).
MAX_CHUNK: Final = 1 << 22
#: Bounds of the FFT length (a spectrum needs some bins; memory needs a ceiling).
MIN_NFFT: Final = 16
MAX_NFFT: Final = 1 << 22

#: Figure providers run in order. Core figures first; others append theirs (one line each).
PROVIDERS: list[FigureProvider] = [
    carrier_figures,
    sideband_figures,
    modulation_figures,
    bandwidth_figures,
    artefact_figures,
    level_figures,
    power_figures,  # mean power and PEP in dBm / W when options["calibration"] is given
    two_tone_figures,  # imd3/5/7_dbc, imd3/5/7_db_pep, tone_balance_db in --mode two-tone
    spur_figures,  # worst_spur_dbc with the spur table (SM.1539 domains)
    designator_figures,  # necessary_bandwidth_hz with the emission designator
    drift_figures,  # drift_hz_per_min, drift_peak_to_peak_hz ... (streams the recording again)
]

#: Report order of the stable measurement keys (DESIGN.md section 4); others follow.
MEASUREMENT_ORDER: Final = (
    "carrier_suppression_db",
    "carrier_below_pep_db",
    "opposite_sideband_suppression_db",
    "sideband_balance_db",
    "modulation_index",
    "occupied_bandwidth_hz",
    "bandwidth_26db_hz",
    "imd3_dbc",
    "imd5_dbc",
    "imd3_db_pep",
    "frequency_offset_hz",
    "drift_hz_per_min",
    "drift_peak_to_peak_hz",
    "noise_floor_dbfs_per_hz",
    "peak_dbfs",
    "clipped_fraction",
)


class Plan:
    """Segment length, overlap and chunking of the single pass."""

    def __init__(self, nfft: int, overlap: float, chunk: int, warnings: tuple[str, ...]) -> None:
        self.nfft = nfft
        self.overlap = overlap
        self.chunk = chunk
        self.warnings = warnings

    def __repr__(self) -> str:
        return f"Plan(nfft={self.nfft}, overlap={self.overlap}, chunk={self.chunk})"


def _prev_fast_len(n: int) -> int:
    """Largest 5-smooth length <= n (n >= 1)."""
    p = 1
    while p * 2 <= n:
        p *= 2
    best = p
    for m in range(n, max(p, n - 4096), -1):
        if sp_fft.next_fast_len(m) == m:
            best = max(best, m)
            break
    return best


def plan_pass(sample_rate_hz: float, n_samples: int, resolution_hz: float | None = None) -> Plan:
    """Choose the FFT length, overlap and chunk size for a recording.

    Parameters
    ----------
    sample_rate_hz : float
        Sample rate, Hz.
    n_samples : int
        Length of the recording.
    resolution_hz : float, optional
        Requested bin spacing, Hz (``--resolution``); default :data:`DEFAULT_BIN_HZ`.

    Returns
    -------
    Plan
    """
    fs = float(sample_rate_hz)
    warnings: list[str] = []
    if resolution_hz is not None and not (math.isfinite(resolution_hz) and resolution_hz > 0):
        raise ValueError(f"{resolution_hz=} must be a positive number of Hz")
    target = DEFAULT_BIN_HZ if resolution_hz is None else float(resolution_hz)
    # Clamp the bin count as a float first: fs / 1e-300 Hz is no integer a C size holds.
    ratio = fs / target
    bins = 2 * MAX_NFFT if not (math.isfinite(ratio) and ratio <= 2 * MAX_NFFT) else max(1, math.ceil(ratio))
    nfft = int(sp_fft.next_fast_len(bins))
    if nfft < MIN_NFFT:
        warnings.append(f"--resolution {target:g} Hz is coarser than fs/{MIN_NFFT}: using {fs / MIN_NFFT:.3g} Hz")
        nfft = MIN_NFFT
    elif nfft > MAX_NFFT:
        warnings.append(f"--resolution {target:g} Hz needs more than {MAX_NFFT} bins: using {fs / MAX_NFFT:.3g} Hz")
        nfft = MAX_NFFT
    step_frac = 1.0 - OVERLAP
    max_nfft = int(n_samples / (1.0 + (MIN_AVERAGES - 1) * step_frac)) if resolution_hz is None else n_samples
    if n_samples < 16:
        nfft = 16  # no segment completes: an empty spectrum, every figure null with a note
    elif nfft > max_nfft:
        new = max(16, _prev_fast_len(max(16, max_nfft)))
        warnings.append(
            f"the recording is short ({n_samples} samples): resolution {fs / new:.3g} Hz instead of "
            f"{fs / nfft:.3g} Hz; lines closer than about {8 * fs / new:.3g} Hz are not separated"
        )
        nfft = new
    step = max(1, int(round(nfft * step_frac)))
    total_segments = max(1, (n_samples - nfft) // step + 1) if n_samples >= nfft else 1
    rows = max(SPECTROGRAM_ROWS, min(BLOCK_ROWS, BLOCK_PSD_BYTES // (4 * max(nfft, 1))))
    per_row = max(1, math.ceil(total_segments / rows))
    chunk = per_row * step
    if chunk > MAX_CHUNK:
        chunk = max(step, (MAX_CHUNK // step) * step)
    chunk = max(chunk, min(1 << 16, max(n_samples, 1)))
    return Plan(nfft=nfft, overlap=OVERLAP, chunk=int(chunk), warnings=tuple(warnings))


class _Levels:
    """Fast float32 level statistics of a stream (peak, mean, DC, clipping).

    It is also the pass's guard: a sample with a NaN/Inf component or one beyond
    :data:`~iqscope.io.MAX_FLOAT_COMPONENT` (which the readers already replace, but a
    :class:`~iqscope.io.Recording` that overrides ``read`` may hand out) is replaced by
    0 and counted, like the readers do, so that no float32 square or FFT of the pass can
    overflow. The check uses the largest component, which the clipping count needs
    anyway: no extra pass over the samples.
    """

    def __init__(self, clip_level: float) -> None:
        self.clip = float(clip_level)
        self.n = 0
        self.sum_p = 0.0
        self.peak = 0.0
        self.dc = 0j
        self.clipped = 0
        self.nonfinite = 0
        self.max_comp = 0.0
        self.n_at_max = 0
        self.rails = RailTracker()
        self.iq = IqCorrelation()

    def update(self, x: npt.NDArray[np.complex64]) -> tuple[npt.NDArray[np.complex64], npt.NDArray[np.float32]]:
        v = x.view(np.float32)
        vmax = max(float(v.max()), -float(v.min()))  # NaN when any component is NaN
        if not vmax <= MAX_FLOAT_COMPONENT:
            bad = ~(np.abs(v) <= MAX_FLOAT_COMPONENT).reshape(-1, 2).all(axis=1)
            self.nonfinite += int(np.count_nonzero(bad))
            x = np.where(bad, np.complex64(0), x).astype(np.complex64)
            v = x.view(np.float32)
            vmax = max(float(v.max()), -float(v.min()))
        p = v[0::2] * v[0::2]
        p += v[1::2] * v[1::2]
        s = float(p.sum(dtype=np.float64))
        self.n += x.size
        self.sum_p += s
        self.peak = max(self.peak, float(p.max()))
        self.dc += complex(np.sum(x, dtype=np.complex128))
        if vmax >= self.clip:
            self.clipped += int(np.count_nonzero((np.abs(x.real) >= self.clip) | (np.abs(x.imag) >= self.clip)))
        if vmax > self.max_comp:
            self.max_comp = vmax
            self.n_at_max = int(np.count_nonzero(np.abs(v) == vmax))
        elif vmax == self.max_comp and vmax > 0:
            self.n_at_max += int(np.count_nonzero(np.abs(v) == vmax))
        self.rails.update_components(v)
        self.rails.update_power(p)
        self.iq.update(v)
        return x, p


def _db(x: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    return np.asarray(10.0 * np.log10(np.maximum(x, 1e-30)), dtype=np.float64)


def _reduce_cols(row: npt.NDArray[np.float64], cols: int) -> npt.NDArray[np.float64]:
    n = row.size
    g = max(1, math.ceil(n / cols))
    m = (n // g) * g
    out: npt.NDArray[np.float64] = np.asarray(row[:m].reshape(-1, g).mean(axis=1), dtype=np.float64)
    if m < n:
        out = np.concatenate((out, [float(row[m:].mean())]))
    return out


def _stream(
    recording: Recording,
    plan: Plan,
    progress: Callable[[int, int], None] | None,
    bands: Sequence[SubbandCapture] = (),
) -> tuple[AveragedSpectrum, StreamStats, Trace | None, Trace | None]:
    fs = recording.sample_rate_hz
    n = recording.n_samples
    acc = SpectrumAccumulator(max(plan.nfft, 1), fs, window=WINDOW, overlap=plan.overlap)
    for band in bands:
        acc.capture(band)
    clip = float(getattr(recording, "clip_level", 1.0) or 1.0)
    lev = _Levels(clip)
    env_block = max(1, n // ENVELOPE_POINTS)
    env_mean: list[npt.NDArray[np.float64]] = []
    env_peak: list[npt.NDArray[np.float64]] = []
    env_count: list[npt.NDArray[np.int64]] = []
    rows: list[npt.NDArray[np.float64]] = []
    row_t: list[float] = []
    full_rows: list[npt.NDArray[np.float32]] = []
    row_counts: list[int] = []
    keep_full = True
    done = 0
    for block in recording.chunks(plan.chunk):
        x = np.ascontiguousarray(block, dtype=np.complex64)
        x, p = lev.update(x)
        be = block_envelope(p, max(1, round(x.size / env_block)))
        env_mean.append(be.mean_power)
        env_peak.append(be.peak_power)
        env_count.append(be.n_samples)
        acc.update(x)
        part, cnt = acc.take_partial()
        if cnt:
            rows.append(_reduce_cols(part, SPECTROGRAM_COLS))
            # Segments j0 .. j0+cnt-1 start at j*step: the row's centre time.
            j0 = acc.n_averages - cnt
            row_t.append(((j0 + (cnt - 1) / 2.0) * acc.step + acc.nfft / 2.0) / fs)
            row_counts.append(cnt)
            if keep_full:
                full_rows.append(part.astype(np.float32))
                keep_full = len(full_rows) * part.size * 4 < BLOCK_PSD_BYTES
        done += x.size
        if progress is not None:
            progress(done, n)
    spectrum = acc.result()
    counts = np.concatenate(env_count) if env_count else np.zeros(0, np.int64)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1])) if counts.size else np.zeros(0)
    times = (starts + counts / 2.0) / fs
    stats = StreamStats(
        n_samples=lev.n,
        peak_power=lev.peak,
        mean_power=lev.sum_p / lev.n if lev.n else 0.0,
        dc=lev.dc / lev.n if lev.n else 0j,
        n_clipped=lev.clipped,
        clip_level=clip,
        n_nonfinite=lev.nonfinite,
        max_component=lev.max_comp,
        n_at_max_component=lev.n_at_max,
        rails=lev.rails,
        iq=lev.iq,
        block_mean_power=np.concatenate(env_mean) if env_mean else np.zeros(0),
        block_peak_power=np.concatenate(env_peak) if env_peak else np.zeros(0),
        block_times_s=np.asarray(times, dtype=np.float64),
        block_psd=np.vstack(full_rows) if (full_rows and keep_full) else np.zeros((0, 0), np.float32),
        block_psd_times_s=np.asarray(row_t, dtype=np.float64) if keep_full else np.zeros(0),
        block_psd_counts=np.asarray(row_counts, dtype=np.int64) if keep_full else np.zeros(0, np.int64),
    )
    env_trace = None
    if stats.block_mean_power.size:
        env_trace = Trace(
            x=stats.block_times_s,
            y=_db(stats.block_mean_power),
            x_label="Time (s)",
            y_label="Mean power (dBFS)",
            extra={"peak_dbfs": _db(stats.block_peak_power), "block_samples": env_block},
        )
    spec_trace = None
    if rows:
        img = np.vstack(rows)
        if img.shape[0] > SPECTROGRAM_ROWS:  # merge neighbouring rows
            g = math.ceil(img.shape[0] / SPECTROGRAM_ROWS)
            m = (img.shape[0] // g) * g
            tt = np.asarray(row_t)
            img = img[:m].reshape(-1, g, img.shape[1]).mean(axis=1)
            row_t = list(tt[:m].reshape(-1, g).mean(axis=1))
        cols = _reduce_cols(spectrum.freqs_hz, SPECTROGRAM_COLS)
        spec_trace = Trace(
            x=np.asarray(cols, dtype=np.float64),
            y=_db(img).astype(np.float32).astype(np.float64),
            x_label="Frequency offset (Hz)",
            y_label="Time (s)",
            extra={"rows": np.asarray(row_t, dtype=np.float64), "z_label": "PSD (dBFS/Hz)"},
        )
    return spectrum, stats, env_trace, spec_trace


def _drift_option(request: AnalysisRequest, key: str) -> float | None:
    opts = request.options.get("drift", {}) if isinstance(request.options, Mapping) else {}
    v = opts.get(key) if isinstance(opts, Mapping) else None
    return float(v) if isinstance(v, (int, float)) else None


def declared_figures(provider: FigureProvider, ctx: AnalysisContext) -> dict[str, str]:
    """The figures ``provider`` declares for this context (``{name: unit}``, see the module
    docstring); empty when it declares none or its declaration itself fails."""
    provides: Any = getattr(provider, "provides", None)
    try:
        declared = provides(ctx) if callable(provides) else provides
    except Exception:  # noqa: BLE001 - a broken declaration must not sink the analysis
        return {}
    if not isinstance(declared, Mapping):
        return {}
    return {str(k): str(u) for k, u in declared.items()}


def _run_provider(provider: FigureProvider, ctx: AnalysisContext) -> tuple[FigureSet, float]:
    t0 = time.perf_counter()
    name = getattr(provider, "__name__", type(provider).__name__)
    try:
        fs = provider(ctx)
        if not isinstance(fs, FigureSet):
            raise TypeError(f"returned {type(fs).__name__}, not FigureSet")
    except Exception as exc:  # noqa: BLE001 - one failing provider must not sink the others
        reason = f"{name} failed: {type(exc).__name__}: {exc}"
        fs = FigureSet(warnings=[reason])
        for key, unit in declared_figures(provider, ctx).items():
            fs.measurements[key] = failed(unit, f"not measured ({reason})")
    return fs, time.perf_counter() - t0


def _dedupe(arts: list[Artefact], tol_hz: float) -> list[Artefact]:
    """Keep the first of several flags of one artefact (same kind, same place)."""
    out: list[Artefact] = []
    for a in arts:
        dup = False
        for b in out:
            if a.kind != b.kind:
                continue
            if a.offset_hz is None and b.offset_hz is None:
                dup = True
            elif a.offset_hz is not None and b.offset_hz is not None and abs(a.offset_hz - b.offset_hz) <= tol_hz:
                dup = True
            if dup:
                break
        if not dup:
            out.append(a)
    return out


def _ordered(meas: dict[str, Measurement]) -> dict[str, Measurement]:
    out: dict[str, Measurement] = {k: meas[k] for k in MEASUREMENT_ORDER if k in meas}
    out.update({k: v for k, v in meas.items() if k not in out})
    return out


#: Figures a real-only I/Q recording cannot support: which side of the receiver's LO a
#: component came from is lost (the positive half may be the emission or its mirror),
#: and what lay on the other side folds onto it.
REAL_ONLY_NOT_GRADED: Final[Mapping[str, str]] = {
    "opposite_sideband_suppression_db": "real-only recording: the sideband sense is lost (the mirror image folds "
    "the other side of the receiver's centre onto this one)",
    "sideband_balance_db": "real-only recording: upper and lower sidebands cannot be told from their mirror images",
    "frequency_offset_hz": "real-only recording: the sign of the offset from the receiver's centre is lost",
}


def _real_only(recording: Recording, stats: StreamStats) -> tuple[str, float] | None:
    """``(dominant channel, k)`` when I and Q of a complex recording carry one real signal
    (Q = 0, I = Q, Q = k I: a sound card or a mis-set driver), else None."""
    from ..io._formats import parse_datatype
    from ..io._real import RealAsComplex

    # fewer samples than a spectrum of useful resolution: toy data (two-level test
    # patterns are trivially collinear), never a recording worth re-reading
    if isinstance(recording, RealAsComplex) or stats.iq is None or recording.n_samples < 4096:
        return None
    try:
        q = parse_datatype(recording.datatype).quantisation_step * float(getattr(recording, "_scale", 1.0))
    except ValueError:
        q = 0.0
    ok, dom, k = stats.iq.real_only(q)
    return (dom, k) if ok else None


def _analyse_real_only(
    recording: Recording,
    request: AnalysisRequest,
    providers: Sequence[FigureProvider] | None,
    channel: str,
    k: float,
) -> Analysis:
    """Analyse a real-only I/Q recording from its positive-frequency half.

    The one real signal (the stronger channel) is translated by fs/4 and decimated
    (:class:`iqscope.io._real.RealAsComplex`), so the mirror image is gone from the
    analysed band; the figures that depend on which side of the receiver's centre a
    component lay (:data:`REAL_ONLY_NOT_GRADED`) are reported but not graded, and an
    artefact of kind ``real_only`` says what was found.
    """
    from ..io._real import RealAsComplex

    view = RealAsComplex(recording, channel=channel)
    inner = analyse(view, request, providers)
    if channel == "real":
        what = "Q is zero" if k == 0 else ("I and Q are equal" if abs(k - 1) < 1e-6 else f"Q = {k:.4g} x I")
    else:
        what = "I is zero" if k == 0 else f"I = {k:.4g} x Q"
    note = (
        f"real-only recording: {what} (to rounding): both channels carry one real signal (a sound card, or a "
        "receiver's driver set to real sampling), so everything has a mirror image about the capture centre. "
        f"Analysed from its positive-frequency half (fs/4 translation: rate {view.sample_rate_hz:g} Hz, centre "
        f"+{recording.sample_rate_hz / 4:g} Hz from the file's); sideband sense, sideband balance and the sign of "
        "the offset are not graded"
    )
    art = Artefact(kind="real_only", offset_hz=None, level_dbc=None, note=note)
    measurements = dict(inner.measurements)
    not_graded = {name: why for name, why in REAL_ONLY_NOT_GRADED.items()}
    for name in not_graded:
        m = measurements.get(name)
        if m is not None:
            measurements[name] = replace(m, note=(m.note + "; " if m.note else "") + "not graded: " + not_graded[name])
    return replace(
        inner,
        measurements=measurements,
        artefacts=(art, *inner.artefacts),
        warnings=(note, *inner.warnings),
        not_graded={**inner.not_graded, **not_graded},
    )


def analyse(
    recording: Recording,
    request: AnalysisRequest = AnalysisRequest(),
    providers: Sequence[FigureProvider] | None = None,
) -> Analysis:
    """Analyse a recording: one streaming pass, locate the signal, run the figure providers.

    Parameters
    ----------
    recording : Recording
        Any reader's recording (or an :class:`~iqscope.io.ArrayRecording`); read in chunks.
    request : AnalysisRequest
        Mode, ``--carrier``, ``--tone``, ``--resolution`` ..., and a progress callback
        ``request.progress(samples_done, samples_total)``.
    providers : sequence of FigureProvider, optional
        Providers to run instead of :data:`PROVIDERS`.

    Returns
    -------
    Analysis
        Recording facts, the resolved signal, the measurements (stable keys of DESIGN.md
        section 4, in report order), receiver artefacts, the spectrum, markers and traces
        ("envelope", "spectrogram").

    Raises
    ------
    UsageError
        SSB without ``--carrier``/``--tone``, an absolute ``--carrier`` without a known
        centre, an unknown mode, a non-positive ``--resolution``.

    Notes
    -----
    Memory stays bounded by the chunk size (at most 4 Mi samples) whatever the file size.

    References
    ----------
    Welch 1967 and Heinzel et al. 2002 for the spectrum (see :mod:`iqscope.dsp`);
    DESIGN.md section 3 for the definitions.
    """
    from ..errors import UsageError

    if request.resolution_hz is not None and not (
        math.isfinite(request.resolution_hz) and request.resolution_hz > 0
    ):
        raise UsageError(f"--resolution {request.resolution_hz!r} must be a positive number of Hz")
    fs = recording.sample_rate_hz
    n = recording.n_samples
    plan = plan_pass(fs, n, request.resolution_hz)
    warnings: list[str] = list(plan.warnings)
    run = PROVIDERS if providers is None else providers
    survey: tuple[Any, float] | None = None
    bands: list[SubbandCapture] = []
    if drift_figures in run and n >= 16:
        # The drift provider's start survey, and narrow bands around its lines captured
        # from this pass's FFTs, so that it need not read the recording again.
        step = max(1, int(round(plan.nfft * (1.0 - plan.overlap))))
        survey, bands = plan_capture(recording, plan.nfft, step, WINDOW, reference_hz=request.reference_hz,
                                     line_hz=_drift_option(request, "line_hz"))
    spectrum, stats, env_trace, spec_trace = _stream(recording, plan, request.progress, bands)
    real = _real_only(recording, stats)
    if real is not None:
        return _analyse_real_only(recording, request, providers, *real)
    stats = replace(stats, line_survey=survey, line_bands=tuple(bands))
    warnings.extend(w for w in getattr(recording, "warnings", ()) if w not in warnings)
    floor = noise_floor(spectrum)
    if n < 16:
        warnings.append(f"the recording has {n} sample(s): too short to measure")
    signal = locate_signal(
        spectrum,
        floor,
        request.mode,
        carrier_hz=request.carrier_hz,
        tone_hz=request.tone_hz,
        center_hz=recording.center_frequency_hz,
        keyed_fraction=stats.keyed_fraction,
    )
    warnings.extend(w for w in signal_warnings(signal) if w not in warnings)
    layout = compute_layout(spectrum, floor, signal, tone_hz=request.tone_hz)
    signal_power = 0.0
    if layout.has_signal:
        b = layout.band(spectrum, layout.lo_hz, layout.hi_hz, carrier=False)
        signal_power = max(b.power, 0.0)
    ctx = CoreContext(
        recording=recording,
        request=request,
        spectrum=spectrum,
        signal=signal,
        noise_floor_psd=floor.psd if math.isfinite(floor.psd) else 0.0,
        mean_power=stats.mean_power,
        signal_power=signal_power,
        peak_power=stats.peak_power,
        stats=stats,
        floor=floor,
        warnings=tuple(warnings),
    )
    from .locate import _CACHE

    _CACHE[id(ctx)] = (ctx, layout)
    measurements: dict[str, Measurement] = {}
    artefacts: list[Artefact] = []
    markers: dict[str, float] = {}
    traces: dict[str, Trace] = {}
    if env_trace is not None:
        traces["envelope"] = env_trace
    if spec_trace is not None:
        traces["spectrogram"] = spec_trace
    for provider in run:
        fset, _ = _run_provider(provider, ctx)
        for k, m in fset.measurements.items():
            # The first provider to give a figure wins, but a value beats a null.
            old = measurements.get(k)
            if old is None or (old.value is None and m.value is not None):
                measurements[k] = m
        artefacts.extend(fset.artefacts)
        markers.update({k: float(v) for k, v in fset.markers.items() if v is not None and math.isfinite(v)})
        traces.update(fset.traces)
        warnings.extend(w for w in fset.warnings if w not in warnings)
    _CACHE.pop(id(ctx), None)
    artefacts = _dedupe(artefacts, 2.0 * spectrum.bin_hz)
    if layout.has_signal:
        markers.setdefault("band_lower", layout.lo_hz)
        markers.setdefault("band_upper", layout.hi_hz)
    info = RecordingInfo(
        path=str(recording.path) if recording.path is not None else recording.name,
        format=recording.format,
        sample_rate_hz=fs,
        center_frequency_hz=recording.center_frequency_hz,
        n_samples=n,
        datatype=recording.datatype,
        swap_iq=bool(getattr(recording, "swap_iq", False)),
    )
    return Analysis(
        recording=info,
        signal=signal,
        measurements=_ordered(measurements),
        artefacts=tuple(artefacts),
        spectrum=spectrum,
        markers=markers,
        traces=traces,
        warnings=tuple(warnings),
    )
