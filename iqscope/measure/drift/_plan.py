"""Line plan: what to follow, from the user's frequencies and a survey spectrum at the start;
the block length (automatic choice and checks) and the search window."""

from __future__ import annotations

import math
import os
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, replace

import numpy as np
from scipy import fft as sp_fft
from scipy import special
from scipy.signal import windows

from ...dsp._lines import split_dc_lines
from ...dsp._tone import LinePeak, Window, find_lines
from ...dsp._types import Spectrum
from ...errors import IqscopeError, MeasurementError, UsageError
from ...io._recording import Recording
from ._constants import (
    LINE_CONTRAST_DB,
    MIN_AUTO_BLOCK_S,
    MIN_BLOCKS,
    MIN_BLOCK_SAMPLES,
    MIN_BLOCK_SNR,
    TARGET_SIGMA_HZ,
    _BLOCK_CHOICES,
)


# --------------------------------------------------------------------------------------
# Line plan
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LinePlan:
    """Which line(s) to follow and how they relate to the carrier."""

    lines_hz: tuple[float, ...]
    """Starting frequency of each followed line, Hz offset from the capture centre. One
    line, or two whose mean is the reference frequency (DSB sidebands, two tones)."""
    carrier_shift_hz: float | None
    """Carrier = mean(lines) - carrier_shift_hz. 0 when the mean is the carrier (CW, AM,
    DSB pair, carrier leak), +/-tone for an SSB tone, None when the relation is unknown
    (then the offset figure describes the line itself)."""
    kind: str
    """"carrier", "carrier leak", "tone", "sideband pair", "line pair" or "line"."""
    description: str
    """A sentence for reports: what is followed and why."""
    snr: float = math.nan
    """Per-sample SNR of the weakest followed line, from the survey spectrum (linear)."""
    separation_hz: float = math.inf
    """Distance from the followed line(s) to the nearest other line, Hz."""
    neighbour_ratio: float = 0.0
    """Largest amplitude ratio (other line / followed line) among the other lines,
    weighted by 1/distance in Hz: sets whether the Hann taper is needed."""
    warnings: tuple[str, ...] = ()
    """Doubts about the choice, for the report."""


def resolve_frequency(
    value_hz: float, sample_rate_hz: float, center_frequency_hz: float | None, what: str
) -> tuple[float, bool]:
    """Turn a user frequency into an offset from the capture centre.

    A value within +/- fs/2 is an offset; a larger one is an absolute RF frequency
    (DESIGN.md section 4, ``--carrier``). Returns ``(offset_hz, was_absolute)``.

    Raises
    ------
    UsageError
        An absolute frequency while the capture centre is unknown, or one outside the
        captured band.
    """
    if not math.isfinite(value_hz):
        raise UsageError(f"{what} {value_hz!r} is not a finite frequency")
    if abs(value_hz) <= sample_rate_hz / 2:
        return float(value_hz), False
    if center_frequency_hz is None:
        raise UsageError(
            f"{what} {value_hz:g} Hz is outside +/- fs/2 so it must be an absolute frequency, "
            "but the recording has no centre frequency (give it with --center)"
        )
    off = float(value_hz) - center_frequency_hz
    if abs(off) > sample_rate_hz / 2:
        raise UsageError(
            f"{what} {value_hz:g} Hz lies outside the captured band "
            f"({center_frequency_hz - sample_rate_hz / 2:.0f} .. "
            f"{center_frequency_hz + sample_rate_hz / 2:.0f} Hz)"
        )
    return off, True


def survey_spectrum(
    recording: Recording,
    *,
    resolution_hz: float = 2.0,
    max_segments: int = 16,
    start: int = 0,
) -> tuple[Spectrum, float]:
    """Averaged PSD of up to ``max_segments`` consecutive segments from sample ``start``.

    Used to choose the line(s) to follow and the block length. The segments are taken
    together near the start of tracking, not spread over the recording: a line that
    drifts over an hour would be smeared into several peaks by a whole-recording
    average. Blackman–Harris window (-92 dB sidelobes, Harris 1978), PSD scaled as
    ``|X|^2 / (fs sum w^2)`` (Heinzel 2002, two-sided).

    Returns
    -------
    (Spectrum, float)
        The spectrum and the noise floor PSD (FS^2/Hz): the median bin corrected for the
        median of an average of K exponentials (``gammaincinv(K, 0.5) / K``).
    """
    fs = recording.sample_rate_hz
    n_total = recording.n_samples - max(0, start)
    if n_total < 64:
        raise MeasurementError("the recording is too short to find a line (< 64 samples)", recording.path)
    nfft = 1 << max(6, math.ceil(math.log2(fs / resolution_hz)))
    nfft = min(nfft, 1 << 20)
    while nfft > n_total and nfft > 64:
        nfft //= 2
    k = max(1, min(max_segments, n_total // nfft))
    starts = max(0, start) + np.arange(k, dtype=np.int64) * nfft
    win = windows.blackmanharris(nfft, sym=False)
    s2 = float(np.sum(win**2))
    acc = np.zeros(nfft)
    for st in starts:
        seg = recording.read(int(st), nfft).astype(np.complex128)
        spec = sp_fft.fft(seg * win)
        acc += spec.real**2 + spec.imag**2
    psd = sp_fft.fftshift(acc / (k * fs * s2))
    freqs = sp_fft.fftshift(sp_fft.fftfreq(nfft, 1.0 / fs))
    spectrum = Spectrum(
        freqs_hz=freqs,
        psd=psd,
        bin_hz=fs / nfft,
        enbw_hz=fs * s2 / float(np.sum(win)) ** 2,
        window="blackmanharris",
        n_averages=int(k),
        sample_rate_hz=fs,
    )
    median_factor = float(special.gammaincinv(k, 0.5)) / k
    noise = float(np.median(psd)) / median_factor
    return spectrum, max(noise, 1e-300)


def survey_at_start(recording: Recording, *, tries: int = 8) -> tuple[Spectrum, float, int]:
    """A survey spectrum where the line is first seen: at the start of the recording, or
    (key up at the start) at the first of ``tries`` evenly spaced places holding a line
    10 dB above the noise. Returns (spectrum, noise PSD, start sample)."""
    n = recording.n_samples
    spec, noise = survey_spectrum(recording)
    for i in range(1, tries):
        if find_lines(spec.freqs_hz, spec.psd, noise, min_ratio_db=10.0, max_lines=1,
                      min_contrast_db=LINE_CONTRAST_DB):
            return spec, noise, int((i - 1) * n // tries)
        start = int(i * n // tries)
        spec, noise = survey_spectrum(recording, start=start)
    return spec, noise, int((tries - 1) * n // tries)


def _nearest(lines: Sequence[LinePeak], f: float, tol: float) -> LinePeak | None:
    near = [ln for ln in lines if abs(ln.frequency_hz - f) <= tol]
    return max(near, key=lambda ln: ln.power) if near else None


def plan_lines(
    spectrum: Spectrum,
    noise_psd: float,
    *,
    mode: str | None = None,
    carrier_offset_hz: float | None = None,
    tone_hz: float | None = None,
    line_hz: float | None = None,
    hint_tol_hz: float = 5.0,
) -> LinePlan:
    """Choose the line(s) to follow from an averaged spectrum.

    Parameters
    ----------
    spectrum : Spectrum
        Averaged PSD of the recording (FS^2/Hz).
    noise_psd : float
        Its noise floor, FS^2/Hz.
    mode : str, optional
        cw, am, dsb, usb, lsb or two-tone; None or "auto" picks from the lines seen.
    carrier_offset_hz : float, optional
        Where the carrier is (Hz offset), when known.
    tone_hz : float, optional
        SSB test tone's audio frequency, Hz.
    line_hz : float, optional
        Follow the line nearest this offset (overrides everything else).
    hint_tol_hz : float
        How far (Hz, at least 4 bins) a line may sit from where ``carrier_offset_hz`` and
        ``tone_hz`` put it (wider when the hint comes from a whole-recording average of a
        drifting signal).

    Raises
    ------
    MeasurementError
        No line stands at least 10 dB above the noise (nothing to follow).
    """
    fs = spectrum.sample_rate_hz
    lines = find_lines(spectrum.freqs_hz, spectrum.psd, noise_psd, min_ratio_db=10.0, max_lines=24,
                       min_contrast_db=LINE_CONTRAST_DB)
    if not lines:
        raise MeasurementError(
            "no discrete line stands 10 dB above the noise and its surroundings: nothing to track"
        )
    tol = max(4 * spectrum.bin_hz, hint_tol_hz)
    # A line at the capture centre is usually the receiver's DC offset (DESIGN.md section 3,
    # receiver artefacts): leave it out unless it is all there is or the user points at it.
    # Shared rule with the mode classification (locate.py): dsp._lines.split_dc_lines.
    split = split_dc_lines(lines, spectrum.bin_hz, hints=(carrier_offset_hz, line_hz), hint_tol_hz=tol)
    lines = list(split.kept)
    plan_warnings: tuple[str, ...] = ()
    if split.only_dc:
        plan_warnings = ("the only line sits at the capture centre: it may be the receiver's DC "
                         "offset rather than the transmitter",)
    mode = None if mode in (None, "auto") else mode
    strongest = lines[0]
    chosen: list[LinePeak]
    shift: float | None
    kind: str
    desc: str

    def pair_about(c: float) -> tuple[LinePeak, LinePeak] | None:
        for ln in lines:
            if abs(ln.frequency_hz - c) <= tol:
                continue
            partner = _nearest(lines, 2 * c - ln.frequency_hz, tol)
            if partner is not None and partner is not ln:
                if abs(10 * math.log10(partner.power / ln.power)) <= 20:
                    return (ln, partner)
        return None

    def equal_partner(ln0: LinePeak) -> LinePeak | None:
        # within 3 dB and at least 100 Hz away (tone pairs are hundreds of Hz apart)
        for ln in lines[1:]:
            if ln.power >= ln0.power / 2 and abs(ln.frequency_hz - ln0.frequency_hz) >= 100.0:
                return ln
        return None

    if line_hz is not None:
        ln = _nearest(lines, line_hz, max(tol, 50.0))
        if ln is None:
            raise MeasurementError(f"no line within 50 Hz of {line_hz:.1f} Hz to track")
        chosen = [ln]
        shift = (ln.frequency_hz - carrier_offset_hz) if carrier_offset_hz is not None else None
        kind, desc = "line", f"the line at {ln.frequency_hz:.1f} Hz (as asked)"
        if carrier_offset_hz is not None and abs(ln.frequency_hz - carrier_offset_hz) <= tol:
            shift, kind = 0.0, "carrier"
    elif mode in ("cw", "am") or (mode is None and carrier_offset_hz is not None and
                                    _nearest(lines, carrier_offset_hz, tol) is not None):
        ln = _nearest(lines, carrier_offset_hz, tol) if carrier_offset_hz is not None else None
        ln = ln or strongest  # CW/AM: the carrier is the strongest line anyway
        chosen, shift, kind = [ln], 0.0, "carrier"
        desc = f"the carrier at {ln.frequency_hz:.1f} Hz"
    elif mode in ("usb", "lsb") and tone_hz is None and carrier_offset_hz is not None and \
            _nearest(lines, carrier_offset_hz, tol) is not None:
        # no test tone named: the residual carrier is a line that stands for the carrier
        leak = _nearest(lines, carrier_offset_hz, tol)
        assert leak is not None
        chosen, shift, kind = [leak], 0.0, "carrier leak"
        desc = f"the residual carrier at {leak.frequency_hz:.1f} Hz"
    elif mode in ("usb", "lsb"):
        sign = 1.0 if mode == "usb" else -1.0
        ln = None
        if tone_hz is not None and carrier_offset_hz is not None:
            ln = _nearest(lines, carrier_offset_hz + sign * tone_hz, tol)
        if ln is None:
            side = [x for x in lines if carrier_offset_hz is None
                    or sign * (x.frequency_hz - carrier_offset_hz) > tol]
            ln = side[0] if side else strongest
        chosen, kind = [ln], "tone"
        if tone_hz is not None:
            shift = sign * tone_hz
        else:
            shift = None
        desc = f"the SSB test tone at {ln.frequency_hz:.1f} Hz"
        if shift is None:
            desc += " (its audio frequency is not known: give --tone for the carrier offset)"
    elif mode in ("dsb", "two-tone") or mode is None:
        pair = pair_about(carrier_offset_hz) if carrier_offset_hz is not None else None
        if pair is None and carrier_offset_hz is None:
            partner = equal_partner(strongest)
            if partner is not None:
                pair = (strongest, partner)
        if pair is not None:
            lo, hi = sorted(pair, key=lambda x: x.frequency_hz)
            chosen = [hi, lo]
            centre = 0.5 * (lo.frequency_hz + hi.frequency_hz)
            if mode == "dsb" or (mode is None and carrier_offset_hz is not None):
                shift, kind = 0.0, "sideband pair"
                desc = (f"the two sideband lines at {lo.frequency_hz:.1f} and {hi.frequency_hz:.1f} Hz, "
                        f"averaged (centre {centre:.1f} Hz = carrier)")
            else:
                shift = 0.0 if mode is None else None
                kind = "line pair"
                desc = (f"the two lines at {lo.frequency_hz:.1f} and {hi.frequency_hz:.1f} Hz, averaged "
                        f"(centre {centre:.1f} Hz)")
        else:
            leak = _nearest(lines, carrier_offset_hz, tol) if carrier_offset_hz is not None else None
            if leak is not None:
                chosen, shift, kind = [leak], 0.0, "carrier leak"
                desc = f"the residual carrier at {leak.frequency_hz:.1f} Hz"
            elif mode is None:
                chosen, shift, kind = [strongest], 0.0, "line"
                desc = f"the strongest line, at {strongest.frequency_hz:.1f} Hz"
            else:
                raise MeasurementError(
                    "no tone lines and no carrier leak to follow (a voice or noise-modulated "
                    "signal has no stable line): record a tone test for drift"
                )
    else:
        raise UsageError(f"unknown mode {mode!r}")

    # SNR per sample of the weakest followed line: P_line / (N0 fs)
    p_min = min(ln.power for ln in chosen)
    snr = p_min / (noise_psd * fs)
    others = [ln for ln in lines if all(abs(ln.frequency_hz - c.frequency_hz) > tol for c in chosen)]
    sep = min((min(abs(o.frequency_hz - c.frequency_hz) for c in chosen) for o in others), default=math.inf)
    ratio = max(
        (math.sqrt(o.power / p_min) / max(min(abs(o.frequency_hz - c.frequency_hz) for c in chosen), 1e-9)
         for o in others),
        default=0.0,
    )
    return LinePlan(tuple(c.frequency_hz for c in chosen), shift, kind, desc, snr, sep, ratio, plan_warnings)


def choose_block_s(
    snr: float,
    sample_rate_hz: float,
    duration_s: float,
    *,
    target_sigma_hz: float = TARGET_SIGMA_HZ,
) -> float:
    """Block length for the tracker from the line's per-sample SNR.

    The shortest octave length (1 .. 8 s) whose Cramér–Rao 1-sigma,
    ``sqrt(6 / ((2 pi)^2 SNR fs T^3))``, is at most ``target_sigma_hz`` and whose
    post-integration SNR ``SNR fs T`` reaches 60 (18 dB, well above the estimator's
    threshold), but no longer than a 1/8 of the recording (down to 1/128 s for short
    recordings).

    Raises
    ------
    MeasurementError
        The line is too weak to follow in blocks of 1/8 of the recording.
    """
    if not (snr > 0 and math.isfinite(snr)):
        raise MeasurementError("the line's SNR is unknown or zero: cannot choose a block length")
    fs = sample_rate_hz
    t_sigma = (6.0 / ((2 * math.pi) ** 2 * snr * fs * target_sigma_hz**2)) ** (1.0 / 3.0)
    t_det = MIN_BLOCK_SNR / (snr * fs)
    need = max(t_sigma, t_det, 64.0 / fs, MIN_AUTO_BLOCK_S)
    limit = duration_s / MIN_BLOCKS
    fits = [t for t in _BLOCK_CHOICES if t <= limit]
    if not fits or max(fits) < max(t_det, 64.0 / fs):
        raise MeasurementError(
            f"the recording ({duration_s:.1f} s) is too short to follow this line: it needs "
            f"{MIN_BLOCKS} blocks of at least {max(t_det, 64.0 / fs):.3g} s"
        )
    ok = [t for t in fits if t >= need]
    return min(ok) if ok else max(fits)


def check_block_s(block_s: float, sample_rate_hz: float, duration_s: float | None = None) -> None:
    """Refuse a ``--block`` the tracker cannot use (:class:`~iqscope.errors.UsageError`).

    A block must be a finite number of seconds holding at least
    :data:`MIN_BLOCK_SAMPLES` samples and, when the recording's length is known
    (``duration_s``; not for a growing file), no longer than the recording.
    """
    if not (math.isfinite(block_s) and block_s > 0):
        raise UsageError(f"--block {block_s!r} must be a positive number of seconds")
    shortest = MIN_BLOCK_SAMPLES / sample_rate_hz
    if block_s < shortest:
        raise UsageError(f"--block {block_s:g} s holds fewer than {MIN_BLOCK_SAMPLES} samples at "
                         f"{sample_rate_hz:g} S/s: use at least {shortest:.3g} s")
    if duration_s is not None and block_s > duration_s:
        raise UsageError(f"--block {block_s:g} s is longer than the recording ({duration_s:.3g} s)")


def check_window_s(window_s: float, block_s: float | None = None) -> None:
    """Refuse a ``--window`` the worst-excursion figure cannot use (UsageError).

    The window must be a positive, finite number of seconds and, once the block length
    is known, hold at least two blocks (a window of one block always shows 0 Hz).
    """
    if not (math.isfinite(window_s) and window_s > 0):
        raise UsageError(f"--window {window_s!r} must be a positive number of seconds")
    if block_s is not None and window_s < 2.0 * block_s:
        raise UsageError(f"--window {window_s:g} s is shorter than two {block_s:g}-s blocks: the worst "
                         f"excursion needs at least {2.0 * block_s:g} s (or a shorter --block)")


@contextmanager
def naming_the_file(path: str | os.PathLike[str] | None) -> Iterator[None]:
    """Re-raise an :class:`~iqscope.errors.IqscopeError` that names no file as the same
    error naming ``path``, so that the command line's one error line names the recording.
    """
    try:
        yield
    except IqscopeError as exc:
        if exc.path is not None or path is None:
            raise
        raise type(exc)(exc.message, path) from exc


def default_span_hz(plan: LinePlan, block_s: float) -> float:
    """Search half-width: 20 Hz or 8 bins, kept under 0.4x the distance to other lines."""
    span = max(20.0, 8.0 / block_s)
    if math.isfinite(plan.separation_hz):
        span = min(span, 0.4 * plan.separation_hz)
    return max(span, 2.0 / block_s)


def _window_for(plan: LinePlan, block_s: float, target_sigma_hz: float = TARGET_SIGMA_HZ) -> Window:
    """Hann when a rectangular window's leakage from other lines could bias the estimate.

    A line of relative amplitude r at distance d Hz leaks about r / (pi d T) through the
    rectangular window's sidelobes (Harris 1978, -6 dB/octave), biasing the frequency by
    up to about that fraction of a bin (1/T Hz).
    """
    bias = plan.neighbour_ratio / (math.pi * block_s) / block_s
    return "hann" if bias > 0.3 * target_sigma_hz else "rect"



def _with_survey(plan: LinePlan, spectrum: Spectrum, noise: float) -> LinePlan:
    """Fill a given plan's SNR and neighbour figures from a survey spectrum."""
    fs = spectrum.sample_rate_hz
    lines = find_lines(spectrum.freqs_hz, spectrum.psd, noise, min_ratio_db=10.0, max_lines=24,
                       min_contrast_db=LINE_CONTRAST_DB)
    tol = max(4 * spectrum.bin_hz, 5.0)
    powers = []
    for f in plan.lines_hz:
        near = _nearest(lines, f, tol)
        if near is None:
            raise MeasurementError(f"no line found near {f:.1f} Hz (10 dB above the noise) to track")
        powers.append(near.power)
    p_min = min(powers)
    others = [ln for ln in lines if all(abs(ln.frequency_hz - c) > tol for c in plan.lines_hz)]
    sep = min((min(abs(o.frequency_hz - c) for c in plan.lines_hz) for o in others), default=math.inf)
    ratio = max(
        (math.sqrt(o.power / p_min) / max(min(abs(o.frequency_hz - c) for c in plan.lines_hz), 1e-9)
         for o in others),
        default=0.0,
    )
    return replace(plan, snr=p_min / (noise * fs), separation_hz=sep, neighbour_ratio=ratio)


@dataclass(frozen=True)
class TrackingSetup:
    """Everything decided before tracking starts (from a survey spectrum and the options)."""

    plan: LinePlan
    """What to follow, with SNR and neighbour figures filled in."""
    nominal_offset_hz: float | None
    """Where the carrier should be (Hz offset), or None (capture centre)."""
    stable_search_hz: float | None
    """Where the stable reference line was found in the survey (Hz offset), or None."""
    stable_nominal_hz: float | None
    """The stable line's stated frequency, Hz offset (``--reference``), or None."""
    stable_is_absolute: bool
    """``--reference`` was an absolute RF frequency."""


def prepare_tracking(
    recording: Recording,
    spectrum: Spectrum,
    noise_psd: float,
    *,
    mode: str | None = None,
    carrier_hz: float | None = None,
    tone_hz: float | None = None,
    line_hz: float | None = None,
    reference_hz: float | None = None,
    nominal_hz: float | None = None,
    hint_tol_hz: float = 5.0,
) -> TrackingSetup:
    """Resolve the user's frequencies and choose the line(s) to follow.

    ``carrier_hz`` (where the carrier is: helps choose the line), ``line_hz`` (follow this
    line), ``reference_hz`` (a stable line: reference mode) and ``nominal_hz`` (where the
    carrier should be, the user's ``--carrier``: ``frequency_error_hz`` is measured from it)
    are offsets when within +/- fs/2, else absolute RF frequencies (need the capture centre).
    """
    fs = recording.sample_rate_hz
    cf = recording.center_frequency_hz
    carrier = resolve_frequency(carrier_hz, fs, cf, "--carrier")[0] if carrier_hz is not None else None
    line = resolve_frequency(line_hz, fs, cf, "--line")[0] if line_hz is not None else None
    nominal = resolve_frequency(nominal_hz, fs, cf, "--carrier")[0] if nominal_hz is not None else None
    stable: float | None = None
    stable_abs = False
    if reference_hz is not None:
        stable, stable_abs = resolve_frequency(reference_hz, fs, cf, "--reference")
    plan = plan_lines(spectrum, noise_psd, mode=mode, carrier_offset_hz=carrier, tone_hz=tone_hz, line_hz=line,
                      hint_tol_hz=hint_tol_hz)
    plan = _with_survey(plan, spectrum, noise_psd)
    stable_search: float | None = None
    if stable is not None:
        lines = find_lines(spectrum.freqs_hz, spectrum.psd, noise_psd, min_ratio_db=10.0, max_lines=24,
                           min_contrast_db=LINE_CONTRAST_DB)
        tol = max(4 * spectrum.bin_hz, 5.0)
        near = _nearest(lines, stable, max(tol, 50.0))
        if near is None:
            raise MeasurementError(f"no stable reference line within 50 Hz of {stable:.1f} Hz", recording.path)
        if any(abs(near.frequency_hz - f) <= tol for f in plan.lines_hz):
            raise UsageError("--reference names the same line that is being followed")
        stable_search = near.frequency_hz
        plan = replace(
            plan,
            snr=min(plan.snr, near.power / (noise_psd * fs)),
            separation_hz=min(plan.separation_hz, min(abs(near.frequency_hz - f) for f in plan.lines_hz)),
        )
    return TrackingSetup(plan, nominal, stable_search, stable, stable_abs)
