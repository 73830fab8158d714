"""Frequency drift and stability: follow a reference line block by block, then figure.

The *reference line* is the line whose frequency stands for the transmitter's:

- CW, AM, or a DSB/SSB signal with a carrier leak: the carrier;
- SSB with a test tone: the tone (carrier = tone line -/+ the tone's audio frequency);
- DSB (or a two-tone test) with tones: both sideband lines are followed and averaged,
  which cancels the audio oscillator's own drift (for DSB the mean is the carrier).

It is chosen automatically from an averaged spectrum (:func:`plan_lines`) and can be set.
The recording is streamed in contiguous blocks of ``block_s`` seconds (memory bounded by
one block); in each block the line is measured with the single-tone estimator of
:mod:`iqscope.dsp._tone`, searching only ``+/- span_hz`` around where it was last seen,
so it is followed as it moves. :func:`drift_measurements` turns the track into figures
(see ``docs/drift.md`` for the exact definitions):

``frequency_offset_hz`` (and ``frequency_error_hz`` from a nominal carrier),
``drift_hz_per_min``, ``drift_peak_to_peak_hz``, ``drift_worst_window_hz``,
``warmup_settling_s``, ``allan_deviation``, ``hadamard_deviation`` and
``allan_deviation_drift_removed``.

With a *stable line* (``--reference``: a standard-frequency transmission or a disciplined
marker received in the same capture) the stable line is followed too and the drift is
reported relative to it, which removes the receiver's own oscillator drift. Without it,
every figure includes the receiver's drift.

References
----------
.. [1] D. C. Rife and R. R. Boorstyn, IEEE Trans. Inf. Theory IT-20(5):591-598, 1974
   (single-tone estimation and its Cramér–Rao bound).
.. [2] W. J. Riley, *Handbook of Frequency Stability Analysis*, NIST SP 1065, 2008
   (overlapping Allan deviation, eq. 11).

The package is split by stage: ``_constants`` (defaults and thresholds), ``_plan`` (which
line to follow, block length, options), ``_tracker`` (the block-by-block tracker and
:func:`track_frequency`), ``_bands`` (tracking from the bands captured during the
pipeline's pass), ``_figures`` (:func:`drift_measurements`), ``_watch`` (live status);
the whole job (:func:`analyse_drift`) and the pipeline provider (:func:`drift_figures`)
are here, and every public name is importable from ``iqscope.measure.drift``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import replace

from ...dsp._spectrum import SubbandCapture
from ...dsp._types import Spectrum
from ...errors import MeasurementError, UsageError
from ...io._recording import Recording
from .._context import AnalysisContext, FigureSet, ProgressFn
from ._bands import plan_capture, track_bands
from ._constants import (
    ADEV_QUOTE_TAU_S as ADEV_QUOTE_TAU_S,
    CAPTURE_BYTES as CAPTURE_BYTES,
    CAPTURE_LINES as CAPTURE_LINES,
    CAPTURE_RATE_HZ as CAPTURE_RATE_HZ,
    DEFAULT_SETTLE_BAND_HZ,
    DEFAULT_WINDOW_S,
    LINE_CONTRAST_DB as LINE_CONTRAST_DB,
    MIN_AUTO_BLOCK_S as MIN_AUTO_BLOCK_S,
    MIN_BLOCK_SAMPLES,
    MIN_BLOCK_SNR as MIN_BLOCK_SNR,
    MIN_BLOCKS as MIN_BLOCKS,
    NOTE_INCLUDES_RECEIVER,
    NOTE_RELATIVE,
    TARGET_SIGMA_HZ as TARGET_SIGMA_HZ,
)
from ._figures import DriftResult, drift_measurements
from ._figures import _window_excursion as _window_excursion  # tests check it directly
from ._plan import (
    LinePlan,
    TrackingSetup,
    check_block_s,
    check_window_s,
    choose_block_s,
    default_span_hz,
    naming_the_file,
    plan_lines,
    prepare_tracking,
    resolve_frequency,
    survey_at_start,
    survey_spectrum,
)
from ._tracker import BlockEstimate, FrequencyTrack, LineTracker, track_frequency
from ._watch import WatchStatus, watch_status

__all__ = [
    "LinePlan",
    "BlockEstimate",
    "FrequencyTrack",
    "DriftResult",
    "LineTracker",
    "WatchStatus",
    "watch_status",
    "survey_spectrum",
    "survey_at_start",
    "plan_lines",
    "choose_block_s",
    "default_span_hz",
    "track_frequency",
    "drift_measurements",
    "analyse_drift",
    "TrackingSetup",
    "prepare_tracking",
    "drift_figures",
    "resolve_frequency",
    "check_block_s",
    "check_window_s",
    "naming_the_file",
    "MIN_BLOCK_SAMPLES",
    "DEFAULT_WINDOW_S",
    "NOTE_RELATIVE",
    "NOTE_INCLUDES_RECEIVER",
    "DEFAULT_SETTLE_BAND_HZ",
    "plan_capture",
    "track_bands",
]


# --------------------------------------------------------------------------------------
# Whole job (CLI) and pipeline provider
# --------------------------------------------------------------------------------------
def analyse_drift(
    recording: Recording,
    *,
    mode: str | None = None,
    carrier_hz: float | None = None,
    tone_hz: float | None = None,
    line_hz: float | None = None,
    reference_hz: float | None = None,
    nominal_hz: float | None = None,
    block_s: float | None = None,
    span_hz: float | None = None,
    window_s: float = DEFAULT_WINDOW_S,
    settle_band_hz: float = DEFAULT_SETTLE_BAND_HZ,
    progress: ProgressFn | None = None,
    spectrum: tuple[Spectrum, float] | None = None,
    hint_tol_hz: float = 5.0,
    bands: Sequence[SubbandCapture] = (),
    refuse_short_window: bool = True,
) -> DriftResult:
    """Survey, plan, track and figure: what ``iqscope drift`` runs.

    Frequencies as in :func:`prepare_tracking`; ``spectrum`` is an averaged spectrum of
    the start of the recording and its noise floor PSD (default: :func:`survey_at_start`).
    ``bands`` are narrow bands captured during the pipeline's pass (:func:`plan_capture`):
    when they hold the planned lines the track comes from them (:func:`track_bands`)
    instead of a second read of the recording.

    The options are checked before anything is read (:func:`check_block_s`,
    :func:`check_window_s`): a ``block_s`` under :data:`MIN_BLOCK_SAMPLES` samples or
    longer than the recording, a non-finite span or window, and (with
    ``refuse_short_window``, as ``iqscope drift`` does) a window shorter than two blocks
    are :class:`~iqscope.errors.UsageError`; without it that window leaves only
    ``drift_worst_window_hz`` null, with a note.

    Raises
    ------
    UsageError, MeasurementError
        Naming the recording's file (``error.path``), like every error raised here.
    """
    with naming_the_file(recording.path):
        return _analyse_drift(
            recording, mode=mode, carrier_hz=carrier_hz, tone_hz=tone_hz, line_hz=line_hz,
            reference_hz=reference_hz, nominal_hz=nominal_hz, block_s=block_s, span_hz=span_hz,
            window_s=window_s, settle_band_hz=settle_band_hz, progress=progress, spectrum=spectrum,
            hint_tol_hz=hint_tol_hz, bands=bands, refuse_short_window=refuse_short_window,
        )


def _analyse_drift(
    recording: Recording,
    *,
    mode: str | None,
    carrier_hz: float | None,
    tone_hz: float | None,
    line_hz: float | None,
    reference_hz: float | None,
    nominal_hz: float | None,
    block_s: float | None,
    span_hz: float | None,
    window_s: float,
    settle_band_hz: float,
    progress: ProgressFn | None,
    spectrum: tuple[Spectrum, float] | None,
    hint_tol_hz: float,
    bands: Sequence[SubbandCapture],
    refuse_short_window: bool,
) -> DriftResult:
    if block_s is not None:
        check_block_s(block_s, recording.sample_rate_hz, recording.duration_s)
    if span_hz is not None and not (span_hz > 0 and math.isfinite(span_hz)):
        raise UsageError(f"--span {span_hz!r} must be a positive number of hertz")
    check_window_s(window_s)
    if not (settle_band_hz > 0 and math.isfinite(settle_band_hz)):
        raise UsageError(f"--settle-band {settle_band_hz!r} must be a positive number of hertz")
    spec, noise = spectrum if spectrum is not None else survey_at_start(recording)[:2]
    setup = prepare_tracking(recording, spec, noise, mode=mode, carrier_hz=carrier_hz, tone_hz=tone_hz,
                             line_hz=line_hz, reference_hz=reference_hz, nominal_hz=nominal_hz,
                             hint_tol_hz=hint_tol_hz)
    plan = setup.plan
    if block_s is None:
        block_s = choose_block_s(plan.snr, recording.sample_rate_hz, recording.duration_s)
    if refuse_short_window:
        check_window_s(window_s, block_s)
    track = None
    if bands:
        track = track_bands(bands, plan, block_s=block_s, span_hz=span_hz, progress=progress,
                            stable_line_hz=setup.stable_search_hz, stable_is_absolute=setup.stable_is_absolute,
                            center_frequency_hz=recording.center_frequency_hz)
        if track is not None and track.n_blocks < MIN_BLOCKS:
            # The bands start half a segment late and stop at the last whole segment, so a
            # short recording can lose the block that made it trackable: read it again
            # (cheap at that length) rather than report nothing.
            track = None
    if track is None:
        track = track_frequency(
            recording, plan, block_s=block_s, span_hz=span_hz, progress=progress,
            stable_line_hz=setup.stable_search_hz, stable_is_absolute=setup.stable_is_absolute,
        )
    if setup.stable_is_absolute:
        track = replace(track, stable_nominal_hz=setup.stable_nominal_hz)
    result = drift_measurements(track, nominal_offset_hz=setup.nominal_offset_hz, window_s=window_s,
                                settle_band_hz=settle_band_hz)
    warns = list(result.warnings) + list(recording.warnings)
    if len({s.center_frequency_hz for s in recording.segments}) > 1:
        warns.append("the capture centre changes between segments: offsets jump there")
    return replace(result, warnings=tuple(warns))


def drift_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider for the grade pipeline: drift figures and a "frequency" trace.

    Skips cleanly (no figures, one warning) when there is no line to follow or the
    recording is too short.
    """
    out = FigureSet()
    rec = ctx.recording
    req = ctx.request
    opts = req.options.get("drift", {}) if isinstance(req.options, Mapping) else {}
    stats = getattr(ctx, "stats", None)
    survey = getattr(stats, "line_survey", None)
    bands = tuple(getattr(stats, "line_bands", ()))
    try:
        # The line positions come from a survey at the start of the recording (where
        # tracking starts): the pipeline's whole-recording average smears a drifting line.
        # Its mode and carrier place are hints, within 50 Hz.
        result = analyse_drift(
            rec,
            mode=ctx.signal.mode,
            carrier_hz=ctx.signal.carrier_offset_hz,
            tone_hz=req.tone_hz,
            line_hz=opts.get("line_hz"),
            reference_hz=req.reference_hz,
            nominal_hz=req.carrier_hz,
            block_s=opts.get("block_s"),
            span_hz=opts.get("span_hz"),
            window_s=req.drift_window_s,
            settle_band_hz=float(opts.get("settle_band_hz", DEFAULT_SETTLE_BAND_HZ)),
            progress=req.progress,
            hint_tol_hz=50.0,
            spectrum=survey,
            bands=bands,
            refuse_short_window=False,  # grade: only drift_worst_window_hz is then null
        )
    except (MeasurementError, UsageError) as exc:
        out.warnings.append(f"drift not measured: {exc.message}")
        return out
    out.measurements.update(result.measurements)
    out.traces["frequency"] = result.frequency_trace()
    adev_trace = result.allan_trace()
    if adev_trace is not None:
        out.traces["allan_deviation"] = adev_trace
    out.warnings.extend(result.warnings)
    return out


def _drift_provides(ctx: AnalysisContext) -> Mapping[str, str]:
    """The figures :func:`drift_figures` reports when it follows a line (pipeline
    ``provides``): none without a signal or without enough samples to look for a line
    (it then skips, with a warning); ``frequency_error_hz`` only with ``--carrier``,
    ``allan_deviation`` only with a known capture centre."""
    if ctx.signal.mode == "none" or ctx.recording.n_samples < 64:
        return {}
    out = {"frequency_offset_hz": "Hz", "drift_hz_per_min": "Hz/min", "drift_peak_to_peak_hz": "Hz",
           "drift_worst_window_hz": "Hz", "warmup_settling_s": "s"}
    if ctx.request.carrier_hz is not None:
        out["frequency_error_hz"] = "Hz"
    if ctx.recording.center_frequency_hz is not None:
        out["allan_deviation"] = "1"
        out["hadamard_deviation"] = "1"
        out["allan_deviation_drift_removed"] = "1"
    return out


drift_figures.provides = _drift_provides  # type: ignore[attr-defined]
