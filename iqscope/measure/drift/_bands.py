"""Band tracker: follow the lines in the narrow sub-bands the pipeline captured during its
pass (:func:`track_bands`), and choose those bands before the pass (:func:`plan_capture`)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from typing import Any

import numpy as np
import numpy.typing as npt

from ...dsp._spectrum import SubbandCapture, subband_decimation
from ...dsp._tone import ToneEstimate, Window, estimate_rows, estimate_tones, find_lines, same_search
from ...dsp._types import Spectrum
from ...errors import MeasurementError, UsageError
from ...io._recording import Recording
from .._context import ProgressFn
from ._constants import CAPTURE_BYTES, CAPTURE_LINES, CAPTURE_RATE_HZ, LINE_CONTRAST_DB
from ._plan import LinePlan, _nearest, resolve_frequency, survey_at_start
from ._tracker import BlockEstimate, FrequencyTrack, LineTracker, _Channel


class _LeftBand(Exception):
    """A followed line is not (or no longer) well inside its captured band."""


class _BandTracker(LineTracker):
    """:class:`LineTracker` on bands captured during the pipeline's pass.

    Each followed line (and the stable line) has its own input stream: a
    :class:`~iqscope.dsp._spectrum.SubbandCapture` of the recording, mixed down by the band's
    centre and decimated to its rate. Each line's channel (the same CIC-less Kaiser
    stage as :class:`_Channel`, now at the band's rate) is built and re-centred inside
    that stream; estimates are converted back to recording frequencies, and the noise
    and SNR to per-sample figures at the recording's rate.
    """

    def __init__(self, bands: Sequence[SubbandCapture], plan: LinePlan, *, block_s: float,
                 span_hz: float | None, stable_hz: float | None, stable_is_absolute: bool,
                 window: Window | None, center_frequency_hz: float | None) -> None:
        rate = bands[0].sample_rate_hz
        super().__init__(rate, plan, block_s=block_s, span_hz=span_hz, stable_hz=stable_hz,
                         stable_is_absolute=stable_is_absolute, window=window,
                         center_frequency_hz=center_frequency_hz)
        starts = list(plan.lines_hz) + ([stable_hz] if stable_hz is not None else [])
        self._offsets = [b.centre_hz for b in bands]
        self._pass_decim = bands[0].decimation
        # flat part of each band: a main-lobe half-width (4 bins) plus one inside its edges
        self._flat_hz = [0.5 * b.sample_rate_hz - 5.0 * b.bin_hz for b in bands]
        self._channels = [_Channel(rate, c - o, self.span_hz, self.block_s) for c, o in zip(starts, self._offsets)]
        for ch, flat in zip(self._channels, self._flat_hz):
            self._check(ch, flat)
        self._histories: list[npt.NDArray[np.complex64] | None] = [None] * len(self._channels)
        self.delay_s = max(ch.delay_s for ch in self._channels)

    @staticmethod
    def _check(ch: _Channel, flat_hz: float) -> None:
        if ch.decim == 1 or abs(ch.mix_hz) + 2.0 * ch.half_band_hz > flat_hz:
            raise _LeftBand()

    def process_blocks(self, blocks: Sequence[npt.NDArray[np.complex64]]) -> BlockEstimate:
        """Measure one block of every band (same times, ``block_n`` samples each)."""
        centres: list[float] = list(self._centres)
        if self._stable_centre is not None:
            centres.append(self._stable_centre)
        done: list[ToneEstimate] = []
        d = self._pass_decim
        for i, ch in enumerate(self._channels):
            block, off, hist = blocks[i], self._offsets[i], self._histories[i]
            ext = block if hist is None else np.concatenate((hist, block))
            y = ch.output(ext)
            if y.size < 8:
                raise ValueError("block too short for the channel decimator")
            e = estimate_tones(y, ch.rate_hz, [ch.to_channel(centres[i] - off)], span_hz=self.span_hz,
                               window=self.window,
                               noise_band_hz=(ch.to_channel(ch.mix_hz), ch.half_band_hz))[0]
            f_loc = ch.from_channel(e.frequency_hz)
            amp = e.amplitude / ch.response(f_loc)
            noise = e.noise_power * ch.decim * d  # per sample at the recording's rate
            done.append(replace(e, frequency_hz=f_loc + off, amplitude=amp, noise_power=noise,
                                snr=amp * amp / noise, n_samples=block.size * d))
            if e.detected:
                ch.follow(f_loc)
                self._check(ch, self._flat_hz[i])
            if ch.history_samples:
                self._histories[i] = block[max(0, block.size - ch.history_samples):].copy()
        n_lines = len(self._centres)
        line_ests = tuple(done[:n_lines])
        stable = done[n_lines] if self._stable_centre is not None else None
        if all(e.detected for e in line_ests):
            self._centres = [e.frequency_hz for e in line_ests]
        if stable is not None and stable.detected:
            self._stable_centre = stable.frequency_hz
        i = len(self._blocks)
        est = BlockEstimate(i, (i + 0.5) * self.block_s - self.delay_s, line_ests, stable, None)
        self._blocks.append(est)
        return est


    def process_epoch(self, streams: Sequence[npt.NDArray[np.complex64]], b0: int, b1: int) -> int:
        """Estimate blocks ``b0 .. b1-1`` of every stream in one batch (``b0 >= 1``);
        returns how many were accepted (0: the search centres did not settle)."""
        bn = self.block_n
        d = self._pass_decim
        rows = b1 - b0
        n_ch = len(self._channels)
        ys = []
        for i, ch in enumerate(self._channels):
            h = min(ch.history_samples, bn)
            seg = streams[i][b0 * bn - h : b1 * bn]
            ext = np.lib.stride_tricks.sliding_window_view(seg, h + bn)[::bn]
            ys.append(ch.output_rows(ext))
        start = list(self._centres) + ([self._stable_centre] if self._stable_centre is not None else [])
        used = np.tile(np.asarray(start, dtype=np.float64), (rows, 1))  # search centre of each row
        res: list[dict[str, Any]] = [{} for _ in range(n_ch)]
        todo = np.ones(rows, dtype=bool)
        n_lines = len(self._centres)
        last = rows - 1
        for _round in range(4):
            idx = np.flatnonzero(todo)
            for i, ch in enumerate(self._channels):
                off = self._offsets[i]
                cen = np.asarray([ch.to_channel(float(c) - off) for c in used[idx, i]])
                r = estimate_rows(ys[i][idx], ch.rate_hz, cen, self.span_hz, window=self.window,
                                  noise_band_hz=(ch.to_channel(ch.mix_hz), ch.half_band_hz))
                r["f_loc"] = np.asarray([ch.from_channel(float(f)) for f in r["frequency_hz"]])
                r["centre"] = cen
                if not res[i]:
                    res[i] = r
                else:
                    for key, v in r.items():
                        res[i][key][idx] = v
            # replay the sequential rules over the estimates
            cur = np.asarray(start, dtype=np.float64)
            need = used.copy()
            last = rows - 1
            for j in range(rows):
                need[j] = cur
                det = [bool(res[i]["detected"][j]) for i in range(n_ch)]
                if all(det[:n_lines]):
                    cur[:n_lines] = [res[i]["f_loc"][j] + self._offsets[i] for i in range(n_lines)]
                if n_ch > n_lines and det[n_lines]:
                    cur[n_lines] = res[n_lines]["f_loc"][j] + self._offsets[n_lines]
                if any(det[i] and abs(res[i]["f_loc"][j] - self._channels[i].mix_hz) > self._channels[i].span_hz
                       for i in range(n_ch)):
                    last = j  # a channel re-centres after this block
                    break
            todo = np.zeros(rows, dtype=bool)
            todo[: last + 1] = np.any(need[: last + 1] != used[: last + 1], axis=1)
            idx = np.flatnonzero(todo)
            if idx.size:
                # a different search centre that changes nothing needs no new estimate
                unchanged = np.ones(idx.size, dtype=bool)
                for i, ch in enumerate(self._channels):
                    off = self._offsets[i]
                    sub = {key: v[idx] for key, v in res[i].items()}
                    new_c = np.asarray([ch.to_channel(float(c) - off) for c in need[idx, i]])
                    unchanged &= same_search(sub, ch.rate_hz, ys[i].shape[1], sub["centre"], new_c, self.span_hz)
                todo[idx[unchanged]] = False
            used[: last + 1] = need[: last + 1]
            if not todo.any():
                break
        else:
            return 0
        for j in range(last + 1):
            ests = []
            for i, ch in enumerate(self._channels):
                r = res[i]
                f_loc = float(r["f_loc"][j])
                amp = float(r["amplitude"][j]) / ch.response(f_loc)
                noise = float(r["noise_power"][j]) * ch.decim * d
                ests.append(ToneEstimate(
                    frequency_hz=f_loc + self._offsets[i], sigma_hz=float(r["sigma_hz"][j]), amplitude=amp,
                    phase_rad=float(r["phase_rad"][j]), snr=amp * amp / noise, noise_power=noise,
                    n_samples=bn * d, detected=bool(r["detected"][j])))
            line_ests = tuple(ests[:n_lines])
            stable = ests[n_lines] if n_ch > n_lines else None
            if all(e.detected for e in line_ests):
                self._centres = [e.frequency_hz for e in line_ests]
            if stable is not None and stable.detected:
                self._stable_centre = stable.frequency_hz
            k = len(self._blocks)
            self._blocks.append(BlockEstimate(k, (k + 0.5) * self.block_s - self.delay_s, line_ests, stable, None))
        for i, ch in enumerate(self._channels):
            if res[i]["detected"][last]:
                ch.follow(float(res[i]["f_loc"][last]))
                self._check(ch, self._flat_hz[i])
            if ch.history_samples:
                blk = streams[i][(b0 + last) * bn : (b0 + last + 1) * bn]
                self._histories[i] = blk[max(0, bn - ch.history_samples):].copy()
        return last + 1

#: Blocks estimated together by the captured-band tracker (one batch of array operations).
_EPOCH_BLOCKS = 128


def _run_bands(tracker: _BandTracker, streams: Sequence[npt.NDArray[np.complex64]], n_blocks: int,
               progress: ProgressFn | None) -> None:
    """Drive a :class:`_BandTracker` over whole streams, many blocks per batch.

    The first block (no filter history) goes through :meth:`_BandTracker.process_blocks`;
    then blocks are estimated in epochs of up to :data:`_EPOCH_BLOCKS` with
    :func:`~iqscope.dsp._tone.estimate_rows`. The sequential rules still hold exactly:
    each block is searched around where its line was last seen (found by replaying the
    rules over the epoch's estimates and re-estimating the blocks whose search would
    differ, until nothing changes), and an epoch ends at the block after which a channel
    re-centres. An epoch that does not settle in four rounds is done block by block.
    """
    bn = tracker.block_n
    d = tracker._pass_decim
    tracker.process_blocks([s[:bn] for s in streams])
    b = 1
    while b < n_blocks:
        e = min(n_blocks, b + _EPOCH_BLOCKS)
        got = tracker.process_epoch(streams, b, e)
        if got == 0:  # did not settle: block by block
            tracker.process_blocks([s[b * bn : (b + 1) * bn] for s in streams])
            got = 1
        b += got
        if progress is not None:
            progress(b * bn * d, n_blocks * bn * d)


def track_bands(
    bands: Sequence[SubbandCapture],
    plan: LinePlan,
    *,
    block_s: float,
    span_hz: float | None = None,
    stable_line_hz: float | None = None,
    stable_is_absolute: bool = False,
    window: Window | None = None,
    center_frequency_hz: float | None = None,
    progress: ProgressFn | None = None,
) -> FrequencyTrack | None:
    """Follow the planned line(s) through bands captured during the pipeline's pass.

    The same tracking as :func:`track_frequency` (block length, span, channel, estimator,
    figures), on :class:`~iqscope.dsp._spectrum.SubbandCapture` streams instead of a second read of
    the recording. Returns None when it cannot stand in for the full-rate tracker: a
    line without a band, a channel that does not fit well inside its band (wide span,
    short blocks) or a line that drifts out of it; the caller then reads the recording.
    Block times count from the start of the recording (the bands start half a pass
    segment in, so the first block starts there).
    """
    want = list(plan.lines_hz) + ([stable_line_hz] if stable_line_hz is not None else [])
    chosen: list[SubbandCapture] = []
    for f in want:
        near = [b for b in bands if abs(f - b.centre_hz) < 0.5 * b.sample_rate_hz]
        if not near:
            return None
        chosen.append(min(near, key=lambda b: abs(f - b.centre_hz)))
    try:
        tracker = _BandTracker(chosen, plan, block_s=block_s, span_hz=span_hz, stable_hz=stable_line_hz,
                               stable_is_absolute=stable_is_absolute, window=window,
                               center_frequency_hz=center_frequency_hz)
    except _LeftBand:
        return None
    streams = [b.samples() for b in chosen]
    bn = tracker.block_n
    n_blocks = min(s.size for s in streams) // bn
    if n_blocks < 1:
        return None
    d = chosen[0].decimation
    try:
        _run_bands(tracker, streams, n_blocks, progress)
    except _LeftBand:
        return None
    track = tracker.track()
    t0 = chosen[0].start_sample / (chosen[0].sample_rate_hz * d)
    return replace(track, times_s=track.times_s + t0, sample_rate_hz=chosen[0].sample_rate_hz * d)


def plan_capture(
    recording: Recording,
    nfft: int,
    step: int,
    window: str,
    *,
    reference_hz: float | None = None,
    line_hz: float | None = None,
    max_bytes: int = CAPTURE_BYTES,
) -> tuple[tuple[Spectrum, float] | None, list[SubbandCapture]]:
    """Before the pipeline's pass: the start survey and the bands to capture for drift.

    The survey (:func:`survey_at_start`) is what the drift provider plans from; the bands
    are :class:`~iqscope.dsp._spectrum.SubbandCapture` objects around the strongest
    :data:`CAPTURE_LINES` lines it shows (and the lines near ``--reference`` and
    ``--line``), at about :data:`CAPTURE_RATE_HZ`, as many as fit in ``max_bytes``.
    None and no bands when there is no survey; no bands when the pass's segments do not
    overlap by half, the rate is too low to gain from decimating (< 4x), or no line
    stands out.
    """
    try:
        spec, noise, _ = survey_at_start(recording)
    except MeasurementError:
        return None, []
    fs = recording.sample_rate_hz
    d = subband_decimation(nfft, step, fs, CAPTURE_RATE_HZ)
    if d < 4:
        return (spec, noise), []
    lines = find_lines(spec.freqs_hz, spec.psd, noise, min_ratio_db=10.0, max_lines=24,
                       min_contrast_db=LINE_CONTRAST_DB)
    wanted: list[float] = []
    for hint in (reference_hz, line_hz):
        if hint is None:
            continue
        try:
            off = resolve_frequency(hint, fs, recording.center_frequency_hz, "frequency")[0]
        except UsageError:
            continue
        near = _nearest(lines, off, 50.0)
        if near is not None:
            wanted.append(near.frequency_hz)
    wanted += [ln.frequency_hz for ln in lines[:CAPTURE_LINES]]
    rate = fs / d
    per_band = 8.0 * rate * recording.duration_s + 8.0 * rate
    bands: list[SubbandCapture] = []
    for f in wanted:
        if len(bands) >= CAPTURE_LINES or (len(bands) + 1) * per_band > max_bytes:
            break
        if any(abs(f - b.centre_hz) <= 0.25 * b.sample_rate_hz for b in bands):
            continue
        bands.append(SubbandCapture(nfft, fs, window, f, d, capacity=recording.n_samples // d + nfft))
    return (spec, noise), bands
