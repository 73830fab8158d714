"""Tracker: one decimated channel per followed line (polyphase first stage), block by
block single-tone estimates, and :func:`track_frequency` over a whole recording.

References
----------
.. [1] D. C. Rife and R. R. Boorstyn, IEEE Trans. Inf. Theory IT-20(5):591-598, 1974
   (single-tone estimation and its Cramér–Rao bound).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import numpy.typing as npt
from scipy import signal

from ...dsp._tone import ToneEstimate, Window, estimate_tones
from ...errors import MeasurementError
from ...io._recording import Recording
from .._context import ProgressFn
from ._plan import LinePlan, _window_for, _with_survey, choose_block_s, default_span_hz, survey_at_start


# --------------------------------------------------------------------------------------
# Tracker
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BlockEstimate:
    """What one block gave."""

    index: int
    """Block number from the start."""
    time_s: float
    """Block centre, s from the start of the recording."""
    lines: tuple[ToneEstimate, ...]
    """One estimate per followed line."""
    stable: ToneEstimate | None
    """The stable (reference) line's estimate, in reference mode."""
    carrier_power: float | None = None
    """Power at the carrier frequency in this block, FS^2 (single-bin DFT, includes noise
    of variance ``noise_power / N``); None when the carrier's place is not known or the
    carrier is the followed line."""

    @property
    def valid(self) -> bool:
        """Every followed line was detected in this block."""
        return all(e.detected for e in self.lines)

    @property
    def frequency_hz(self) -> float:
        """Mean frequency of the followed lines, Hz offset."""
        return float(np.mean([e.frequency_hz for e in self.lines]))

    @property
    def sigma_hz(self) -> float:
        """1-sigma of that mean, Hz."""
        return math.sqrt(sum(e.sigma_hz**2 for e in self.lines)) / len(self.lines)

    @property
    def level_dbfs(self) -> float:
        """Summed power of the followed lines, dBFS."""
        p = sum(e.amplitude**2 for e in self.lines)
        return 10 * math.log10(p) if p > 0 else -math.inf


@dataclass(frozen=True)
class FrequencyTrack:
    """The followed line's frequency, block by block."""

    times_s: npt.NDArray[np.float64]
    """Block centres, s from the start of the recording."""
    frequency_hz: npt.NDArray[np.float64]
    """Mean frequency of the followed lines per block, Hz offset from the capture centre."""
    sigma_hz: npt.NDArray[np.float64]
    """1-sigma of each block's frequency (Cramér–Rao at the block's SNR), Hz."""
    level_dbfs: npt.NDArray[np.float64]
    """Power of the followed line(s) per block, dBFS."""
    snr_db: npt.NDArray[np.float64]
    """Per-sample SNR of the weakest followed line per block, dB."""
    valid: npt.NDArray[np.bool_]
    """True where every followed line was detected."""
    lines_hz: npt.NDArray[np.float64]
    """Each followed line's frequency per block, shape (n_blocks, n_lines), Hz."""
    block_s: float
    """Block length (also the ADEV tau0), s."""
    sample_rate_hz: float
    center_frequency_hz: float | None
    """Capture centre, Hz (None when unknown)."""
    plan: LinePlan
    """What was followed."""
    span_hz: float
    """Search half-width per block, Hz."""
    window: str
    """Estimator taper ("rect" or "hann")."""
    stable_hz: npt.NDArray[np.float64] | None = None
    """Stable line's frequency per block (reference mode), Hz offset."""
    stable_sigma_hz: npt.NDArray[np.float64] | None = None
    stable_valid: npt.NDArray[np.bool_] | None = None
    stable_nominal_hz: float | None = None
    """Where the stable line is said to be, Hz offset (from ``--reference``)."""
    stable_is_absolute: bool = False
    """True when ``--reference`` gave an absolute RF frequency: the stable line's measured
    offset from it is then the receiver's frequency error, and is removed."""

    @property
    def n_blocks(self) -> int:
        return int(self.times_s.size)

    @property
    def duration_s(self) -> float:
        return self.n_blocks * self.block_s

    def corrected(self) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[np.float64]]:
        """Times, reference frequency (Hz offset) and 1-sigma of the usable blocks.

        The reference frequency is the carrier when the plan knows its relation to the
        lines (``carrier_shift_hz``), else the followed line(s) themselves. In reference
        mode the stable line's excursion is subtracted: ``f - (s - s_ref)`` with
        ``s_ref`` the stable line's stated frequency when absolute, else its mean.
        """
        shift = self.plan.carrier_shift_hz or 0.0
        ok = self.valid.copy()
        f = self.frequency_hz - shift
        sig = self.sigma_hz.copy()
        if self.stable_hz is not None and self.stable_valid is not None and self.stable_sigma_hz is not None:
            ok &= self.stable_valid
            if not ok.any():
                return np.zeros(0), np.zeros(0), np.zeros(0)
            if self.stable_is_absolute and self.stable_nominal_hz is not None:
                s_ref = self.stable_nominal_hz
            else:
                s_ref = float(np.mean(self.stable_hz[ok]))
            f = f - (self.stable_hz - s_ref)
            sig = np.hypot(sig, self.stable_sigma_hz)
        return self.times_s[ok], f[ok], sig[ok]


class _Polyphase:
    """A complex FIR filter followed by decimation by D, as one small matrix product.

    ``taps`` (length L) are split into Q = ceil(L / D) phases; for a block x reshaped to
    (K, D) rows, output k = sum_q row(k + q) . phase(q). Stateless per block: only
    outputs whose taps lie wholly inside the block are produced.
    """

    def __init__(self, taps: npt.NDArray[np.complex128], decim: int) -> None:
        q = -(-taps.size // decim)
        padded = np.zeros(q * decim, np.complex128)
        padded[: taps.size] = taps
        self.decim = decim
        self.matrix = np.ascontiguousarray(padded.reshape(q, decim).T).astype(np.complex64)  # (D, Q)

    def __call__(self, x: npt.NDArray[np.complex64]) -> npt.NDArray[np.complex64]:
        d, q = self.matrix.shape
        k = x.size // d
        if k <= q:
            return np.zeros(0, np.complex64)
        m = np.ascontiguousarray(x[: k * d], dtype=np.complex64).reshape(k, d) @ self.matrix
        out = m[: k - q + 1, 0].copy()
        for j in range(1, q):
            out += m[j : k - q + 1 + j, j]
        return out

    def rows(self, x: npt.NDArray[np.complex64]) -> npt.NDArray[np.complex64]:
        """:meth:`__call__` on each row of ``x`` (rows of equal length), as ``D`` FFT
        convolutions of the polyphase components (no tall, skinny matrix product: BLAS
        threads handle those badly on a busy machine). Equal to the per-row result to
        float32 rounding."""
        d, q = self.matrix.shape
        n_rows = x.shape[0]
        k = x.shape[1] // d
        if k <= q:
            return np.zeros((n_rows, 0), np.complex64)
        xs = np.ascontiguousarray(x[:, : k * d], dtype=np.complex64).reshape(n_rows, k, d)
        out = np.zeros((n_rows, k - q + 1), np.complex64)
        for p in range(d):
            out += signal.fftconvolve(xs[:, :, p], self.matrix[p, ::-1][None, :], mode="valid", axes=1)
        return out


class _Channel:
    """One followed line's own narrow channel: two decimating complex band-pass stages.

    Stage 1 (when the rate allows a ratio D1 >= 4): a 4-stage boxcar (the response of a
    CIC decimator, Hogenauer 1981) shifted to the channel centre, down to a rate of at
    least 16 x the channel half-width H; it only has to keep aliases away from what
    stage 2 keeps (> 70 dB). Stage 2: a Kaiser-window FIR (Kaiser 1974 design rules,
    80 dB stopband) shifted to the channel centre, flat to 1.2 H and stopping from 2 H,
    down to a rate of 4 H. So the channel sees +/- H around the line and nothing from
    beyond 2 H: a continuous spectrum (voice) or strong lines a few hundred hertz away
    cannot leak into the estimate. A tone at f comes out at ``f mod rate`` with gain
    ``response(f)``. No channel (the whole band) when the rate is under 8 H.

    References
    ----------
    .. [1] E. B. Hogenauer, "An economical class of digital filters for decimation and
       interpolation", IEEE Trans. ASSP 29(2):155-162, 1981 (citation from memory).
    .. [2] J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
       function", Proc. IEEE ISCAS 1974, pp. 20-23 (from memory; the design rule is
       ``scipy.signal.kaiserord``'s).
    """

    ORDER = 4

    def __init__(self, fs: float, centre_hz: float, span_hz: float, block_s: float) -> None:
        self.fs = fs
        self.span_hz = span_hz
        self.half_band_hz = max(3.0 * span_hz + 50.0, 16.0 / block_s)
        h = self.half_band_hz
        d1 = int(fs // (16.0 * h))
        self.d1 = d1 if d1 >= 4 else 1
        fs1 = fs / self.d1
        d2 = int(fs1 // (4.0 * h))
        self.d2 = d2 if d2 >= 2 else 1
        self.decim = self.d1 * self.d2
        self.mix_hz = float(centre_hz) if self.decim > 1 else 0.0
        self._stage1: _Polyphase | None = None
        self._stage2: _Polyphase | None = None
        if self.decim > 1:
            self._box = np.ones(1)
            if self.d1 > 1:
                box = np.ones(self.d1)
                for _ in range(self.ORDER - 1):
                    box = np.convolve(box, np.ones(self.d1))
                self._box = box / float(self.d1) ** self.ORDER
            if self.d2 > 1:
                numtaps, beta = signal.kaiserord(80.0, 0.8 * h / (0.5 * fs1))
                numtaps |= 1  # odd: a whole-sample delay
                self._fir = signal.firwin(numtaps, 1.6 * h, window=("kaiser", beta), fs=fs1)
            self._make_filters()

    def _make_filters(self) -> None:
        fs1 = self.fs / self.d1
        if self.d1 > 1:
            g1 = self._box * np.exp(-2j * np.pi * (self.mix_hz / self.fs) * np.arange(self._box.size))
            self._stage1 = _Polyphase(g1, self.d1)
        if self.d2 > 1:
            c1 = self._wrap(self.mix_hz, fs1)  # where the centre sits after stage 1
            g2 = self._fir * np.exp(-2j * np.pi * (c1 / fs1) * np.arange(self._fir.size))
            self._stage2 = _Polyphase(g2, self.d2)

    @staticmethod
    def _wrap(f: float, rate: float) -> float:
        return (f + rate / 2) % rate - rate / 2

    @property
    def rate_hz(self) -> float:
        return self.fs / self.decim

    def to_channel(self, f_hz: float) -> float:
        """Where a frequency (Hz offset) appears in the channel's output."""
        return self._wrap(f_hz, self.rate_hz) if self.decim > 1 else f_hz

    def from_channel(self, f_out_hz: float) -> float:
        """The input frequency near ``mix_hz`` that appears at ``f_out_hz``."""
        if self.decim == 1:
            return f_out_hz
        d = f_out_hz - self.to_channel(self.mix_hz)
        return self.mix_hz + self._wrap(d, self.rate_hz)

    def follow(self, centre_hz: float) -> None:
        """Re-centre the channel when the line has moved more than a span from its centre."""
        if self.decim > 1 and abs(centre_hz - self.mix_hz) > self.span_hz:
            self.mix_hz = float(centre_hz)
            self._make_filters()

    def disable(self) -> None:
        """Process the full band (no channel)."""
        self.decim, self.d1, self.d2, self.mix_hz = 1, 1, 1, 0.0
        self._stage1 = self._stage2 = None

    @property
    def history_samples(self) -> int:
        """Input samples before a block that the filters need to cover the whole block."""
        if self.decim == 1:
            return 0
        n1 = self._box.size - 1 if self.d1 > 1 else 0
        n2 = (self._fir.size - 1) * self.d1 if self.d2 > 1 else 0
        return n1 + n2

    @property
    def delay_s(self) -> float:
        """Group delay of the channel filters (both linear phase), s."""
        return 0.5 * self.history_samples / self.fs

    def output(self, block: npt.NDArray[np.complex64]) -> npt.NDArray[np.complex64]:
        """The channel's samples for ``block`` (at ``rate_hz``): the outputs whose filter
        spans lie inside it. Prepend :attr:`history_samples` of the previous block to
        cover the whole block (shifted by :attr:`delay_s`)."""
        if self.decim == 1:
            return block
        y = block
        if self._stage1 is not None:
            y = self._stage1(y)
        if self._stage2 is not None:
            y = self._stage2(y)
        return y

    def output_rows(self, blocks: npt.NDArray[np.complex64]) -> npt.NDArray[np.complex64]:
        """:meth:`output` on each row of ``blocks``."""
        y = blocks
        if self._stage1 is not None:
            y = self._stage1.rows(y)
        if self._stage2 is not None:
            y = self._stage2.rows(y)
        return y

    def response(self, f_hz: float) -> float:
        """Amplitude response at input frequency ``f_hz`` (about 1 at the channel centre)."""
        if self.decim == 1:
            return 1.0
        g = 1.0
        off = f_hz - self.mix_hz
        if self.d1 > 1:
            x = math.pi * off / self.fs
            if abs(x) > 1e-12:
                g *= abs(math.sin(self.d1 * x) / (self.d1 * math.sin(x))) ** self.ORDER
        if self.d2 > 1:
            fs1 = self.fs / self.d1
            n = np.arange(self._fir.size)
            g *= abs(complex(np.sum(self._fir * np.exp(-2j * np.pi * off / fs1 * n))))
        return g


class LineTracker:
    """Follow the planned line(s) through blocks pushed in order (streaming).

    Parameters
    ----------
    sample_rate_hz : float
        Sample rate, Hz.
    plan : LinePlan
        What to follow.
    block_s : float
        Block length, s (rounded to whole samples).
    span_hz : float, optional
        Search half-width around the last seen frequency (default :func:`default_span_hz`).
    stable_hz : float, optional
        Offset of a stable line to follow as well (reference mode).
    window : {"rect", "hann"}, optional
        Estimator taper (default chosen from the neighbouring lines).
    center_frequency_hz : float, optional
        Capture centre, Hz (carried into the track for the ADEV).
    measure_carrier : bool
        Also measure the power at the carrier frequency in each block (for ``watch``'s
        carrier suppression; costs one full-rate DFT bin per block).
    decimate : bool
        Put each line in its own mixed and CIC-decimated channel when the sample rate
        allows (default; much faster at high rates). False processes the full band.
    """

    def __init__(
        self,
        sample_rate_hz: float,
        plan: LinePlan,
        *,
        block_s: float,
        span_hz: float | None = None,
        stable_hz: float | None = None,
        stable_is_absolute: bool = False,
        window: Window | None = None,
        center_frequency_hz: float | None = None,
        measure_carrier: bool = False,
        decimate: bool = True,
    ) -> None:
        if not (math.isfinite(block_s * sample_rate_hz) and block_s > 0):
            raise ValueError(f"{block_s=} must be a positive, finite number of seconds")
        self.sample_rate_hz = float(sample_rate_hz)
        self.plan = plan
        self.block_n = max(8, int(round(block_s * sample_rate_hz)))
        self.block_s = self.block_n / self.sample_rate_hz
        self.span_hz = float(span_hz) if span_hz is not None else default_span_hz(plan, self.block_s)
        if not self.span_hz > 0:
            raise ValueError(f"{span_hz=} must be > 0")
        self.window: Window = window or _window_for(plan, self.block_s)
        self.stable_hz = stable_hz
        self.stable_is_absolute = stable_is_absolute
        self.center_frequency_hz = center_frequency_hz
        self._centres: list[float] = list(plan.lines_hz)
        self._stable_centre = stable_hz
        self.measure_carrier = measure_carrier
        starts = list(plan.lines_hz) + ([stable_hz] if stable_hz is not None else [])
        self._channels = [_Channel(self.sample_rate_hz, c, self.span_hz, self.block_s) for c in starts]
        if not decimate:
            for ch in self._channels:
                ch.disable()
        self._history_n = max((ch.history_samples for ch in self._channels), default=0)
        self._history: npt.NDArray[np.complex64] | None = None
        #: Block times are the centres of what the channels see: the block shifted back by
        #: the channel filters' group delay (the same for every channel of one tracker).
        self.delay_s = max((ch.delay_s for ch in self._channels), default=0.0)
        self._pending: list[npt.NDArray[np.complex64]] = []
        self._n_pending = 0
        self._blocks: list[BlockEstimate] = []

    @property
    def blocks(self) -> Sequence[BlockEstimate]:
        """Estimates so far."""
        return self._blocks

    def push(self, samples: npt.ArrayLike) -> list[BlockEstimate]:
        """Add samples; return the estimates of the blocks they completed."""
        arr = np.asarray(samples, dtype=np.complex64).ravel()
        if arr.size:
            self._pending.append(arr)
            self._n_pending += arr.size
        out: list[BlockEstimate] = []
        while self._n_pending >= self.block_n:
            buf = np.concatenate(self._pending) if len(self._pending) > 1 else self._pending[0]
            block, rest = buf[: self.block_n], buf[self.block_n :]
            self._pending = [rest] if rest.size else []
            self._n_pending = rest.size
            out.append(self.process_block(block))
        return out

    def process_block(self, block: npt.NDArray[np.complex64]) -> BlockEstimate:
        """Measure one whole block (``block_n`` samples) and move the search centres."""
        centres: list[float] = list(self._centres)
        if self._stable_centre is not None:
            centres.append(self._stable_centre)
        ests: list[ToneEstimate | None] = [None] * len(centres)
        wide = [i for i, ch in enumerate(self._channels) if ch.decim == 1]
        if wide:  # undecimated lines share one FFT of the whole block
            got = estimate_tones(block, self.sample_rate_hz, [centres[i] for i in wide],
                                 span_hz=self.span_hz, window=self.window)
            for i, e in zip(wide, got):
                ests[i] = e
        for i, ch in enumerate(self._channels):
            if ch.decim == 1:
                continue
            ext = block
            if self._history is not None and ch.history_samples:
                ext = np.concatenate((self._history[self._history.size - ch.history_samples :], block))
            y = ch.output(ext)
            if y.size < 8:
                raise ValueError("block too short for the channel decimator")
            e = estimate_tones(y, ch.rate_hz, [ch.to_channel(centres[i])], span_hz=self.span_hz,
                               window=self.window,
                               noise_band_hz=(ch.to_channel(ch.mix_hz), ch.half_band_hz))[0]
            f_in = ch.from_channel(e.frequency_hz)
            amp = e.amplitude / ch.response(f_in)
            # in-band noise PSD is the input's (CIC gain 1 near 0 Hz): the white-equivalent
            # variance per input sample is D times that per channel sample
            noise = e.noise_power * ch.decim
            ests[i] = replace(e, frequency_hz=f_in, amplitude=amp, noise_power=noise,
                              snr=amp * amp / noise, n_samples=block.size)
        done = [e for e in ests if e is not None]
        for ch, est_i in zip(self._channels, done):
            if est_i.detected:
                ch.follow(est_i.frequency_hz)
        n_lines = len(self._centres)
        line_ests = tuple(done[:n_lines])
        stable = done[n_lines] if self._stable_centre is not None else None
        # follow: move each centre to where its line was seen (only when seen)
        if all(e.detected for e in line_ests):
            self._centres = [e.frequency_hz for e in line_ests]
        if stable is not None and stable.detected:
            self._stable_centre = stable.frequency_hz
        carrier_p: float | None = None
        if self.measure_carrier and self.plan.carrier_shift_hz is not None and self.plan.kind in ("sideband pair", "tone"):
            fc = float(np.mean([e.frequency_hz for e in line_ests])) - self.plan.carrier_shift_hz
            ph = np.exp(-2j * np.pi * fc / self.sample_rate_hz * np.arange(block.size))
            carrier_p = abs(complex(np.dot(block.astype(np.complex128), ph))) ** 2 / block.size**2
        if self._history_n:
            self._history = block[max(0, block.size - self._history_n) :].copy()
        i = len(self._blocks)
        est = BlockEstimate(i, (i + 0.5) * self.block_s - self.delay_s, line_ests, stable, carrier_p)
        self._blocks.append(est)
        return est

    def track(self) -> FrequencyTrack:
        """The track so far."""
        b = self._blocks
        n = len(b)
        k = len(self.plan.lines_hz)
        stable = self.stable_hz is not None

        def arr(vals: Sequence[float]) -> npt.NDArray[np.float64]:
            return np.asarray(vals, dtype=np.float64).reshape(-1)

        return FrequencyTrack(
            times_s=arr([e.time_s for e in b]),
            frequency_hz=arr([e.frequency_hz for e in b]),
            sigma_hz=arr([e.sigma_hz for e in b]),
            level_dbfs=arr([e.level_dbfs for e in b]),
            snr_db=arr([min(x.snr_db for x in e.lines) for e in b]),
            valid=np.asarray([e.valid for e in b], dtype=bool).reshape(-1),
            lines_hz=np.asarray([[x.frequency_hz for x in e.lines] for e in b], dtype=np.float64).reshape(n, k),
            block_s=self.block_s,
            sample_rate_hz=self.sample_rate_hz,
            center_frequency_hz=self.center_frequency_hz,
            plan=self.plan,
            span_hz=self.span_hz,
            window=self.window,
            stable_hz=arr([e.stable.frequency_hz for e in b if e.stable]) if stable else None,
            stable_sigma_hz=arr([e.stable.sigma_hz for e in b if e.stable]) if stable else None,
            stable_valid=np.asarray([bool(e.stable and e.stable.detected) for e in b], dtype=bool)
            if stable
            else None,
            stable_nominal_hz=self.stable_hz,
            stable_is_absolute=self.stable_is_absolute,
        )


def track_frequency(
    recording: Recording,
    reference_offset_hz: float | Sequence[float] | LinePlan,
    *,
    block_s: float | None = None,
    span_hz: float | None = None,
    progress: ProgressFn | None = None,
    stable_line_hz: float | None = None,
    stable_is_absolute: bool = False,
    window: Window | None = None,
) -> FrequencyTrack:
    """Follow a line through a recording, block by block, at bounded memory.

    Parameters
    ----------
    recording : Recording
        The recording (streamed with ``chunks``; only one block is in memory).
    reference_offset_hz : float, sequence of float, or LinePlan
        The line to follow (Hz offset from the capture centre), or two lines whose mean
        is followed (DSB sidebands), or a full :class:`LinePlan`.
    block_s : float, optional
        Block length, s. Default: :func:`choose_block_s` from the line's SNR in a survey
        spectrum.
    span_hz : float, optional
        Search half-width around the last seen frequency, Hz.
    progress : callable, optional
        ``progress(samples_done, samples_total)`` after each block.
    stable_line_hz : float, optional
        Offset of a stable line in the same capture (reference mode).
    stable_is_absolute : bool
        The stable line's frequency was given as absolute RF (so it is exact).
    window : {"rect", "hann"}, optional
        Estimator taper; default chosen from the neighbouring lines.

    Returns
    -------
    FrequencyTrack
        The last partial block is dropped so every block has the same length.

    References
    ----------
    .. [1] D. C. Rife and R. R. Boorstyn, IEEE Trans. Inf. Theory IT-20(5):591-598, 1974.
    """
    fs = recording.sample_rate_hz
    if isinstance(reference_offset_hz, LinePlan):
        plan = reference_offset_hz
    else:
        offs = (
            (float(reference_offset_hz),)
            if isinstance(reference_offset_hz, (int, float))
            else tuple(float(v) for v in reference_offset_hz)
        )
        if not 1 <= len(offs) <= 2:
            raise ValueError("reference_offset_hz must name one or two lines")
        plan = LinePlan(offs, 0.0, "line" if len(offs) == 1 else "line pair",
                        "the line(s) as given")
    if block_s is None or (not math.isfinite(plan.snr) and window is None):
        spectrum, noise, _ = survey_at_start(recording)
        plan = _with_survey(plan, spectrum, noise)
    if block_s is None:
        block_s = choose_block_s(plan.snr, fs, recording.duration_s)
    tracker = LineTracker(
        fs,
        plan,
        block_s=block_s,
        span_hz=span_hz,
        stable_hz=stable_line_hz,
        stable_is_absolute=stable_is_absolute,
        window=window,
        center_frequency_hz=recording.center_frequency_hz,
    )
    n_blocks = recording.n_samples // tracker.block_n
    if n_blocks < 1:
        raise MeasurementError(
            f"the recording ({recording.duration_s:.2f} s) is shorter than one block ({tracker.block_s:.3g} s)",
            recording.path,
        )
    stop = n_blocks * tracker.block_n
    done = 0
    # read several blocks per call when blocks are small (fewer reader calls)
    per_read = max(1, (1 << 20) // tracker.block_n)
    for chunk in recording.chunks(tracker.block_n * per_read, stop=stop):
        tracker.push(chunk)
        done += chunk.size
        if progress is not None:
            progress(done, stop)
    return tracker.track()
