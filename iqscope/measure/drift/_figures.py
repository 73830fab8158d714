"""Figures from a frequency track: :class:`DriftResult` and :func:`drift_measurements`
(offset, slope, peak-to-peak, worst window, settling, Allan deviation).

References
----------
.. [1] W. J. Riley, *Handbook of Frequency Stability Analysis*, NIST SP 1065, 2008
   (overlapping Allan deviation, eq. 11).
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from ...dsp._allan import AllanResult, oadev, ohdev
from .._analysis import Trace
from .._result import Measurement, failed
from ._constants import (
    ADEV_QUOTE_TAU_S,
    DEFAULT_SETTLE_BAND_HZ,
    DEFAULT_WINDOW_S,
    MIN_BLOCKS,
    NOTE_INCLUDES_RECEIVER,
    NOTE_RELATIVE,
)
from ._plan import LinePlan
from ._tracker import FrequencyTrack


#: The stability figures (all need the RF frequency): overlapping Allan deviation, the
#: overlapping Hadamard deviation, and the overlapping Allan deviation after removing the
#: fitted linear drift.
STABILITY_NAMES = ("allan_deviation", "hadamard_deviation", "allan_deviation_drift_removed")


# --------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DriftResult:
    """A track and the figures drawn from it."""

    track: FrequencyTrack
    measurements: Mapping[str, Measurement]
    allan: AllanResult | None = None
    """Overlapping ADEV of fractional frequency (None when the RF frequency is unknown)."""
    fit: tuple[float, float] | None = None
    """Regression line of the reference frequency: (intercept Hz at t = 0, slope Hz/s)."""
    nominal_offset_hz: float = 0.0
    """The nominal carrier (Hz offset) the trace and ``frequency_error_hz`` are measured
    from (0: the capture centre, no nominal given)."""
    warnings: tuple[str, ...] = ()
    details: Mapping[str, Any] = field(default_factory=dict)

    def frequency_trace(self) -> Trace:
        """Time versus reference-frequency offset, for plots."""
        t, f, s = self.track.corrected()
        return Trace(
            x=t,
            y=f - self.nominal_offset_hz,
            x_label="time (s)",
            y_label="frequency offset (Hz)" if self.nominal_offset_hz == 0.0 else "frequency error from nominal (Hz)",
            extra={
                "sigma": s,
                "fit": self.fit,
                "nominal_offset_hz": self.nominal_offset_hz,
                "block_s": self.track.block_s,
                "what": self.track.plan.description,
                "relative": self.track.stable_hz is not None,
                "settling_s": (self.measurements.get("warmup_settling_s") or failed("s", "")).value,
                "key_down_s": self.details.get("key_down_s"),
            },
        )

    def allan_trace(self) -> Trace | None:
        """tau versus ADEV (with error bars in ``extra``), for plots."""
        if self.allan is None or self.allan.taus_s.size == 0:
            return None
        return Trace(
            x=self.allan.taus_s,
            y=self.allan.deviation,
            x_label="averaging time tau (s)",
            y_label="overlapping Allan deviation",
            extra={"error": self.allan.error, "n": self.allan.n_terms},
        )


def _slope(t: npt.NDArray[np.float64], f: npt.NDArray[np.float64]) -> tuple[float, float, float, float]:
    """OLS slope (Hz/s), intercept, standard error of the slope and lag-1 residual correlation.

    The standard error is inflated by sqrt((1 + rho) / (1 - rho)) for positively
    correlated residuals (effective sample size of an AR(1) series; from memory:
    common practice in regression on time series).
    """
    n = t.size
    tm = float(t.mean())
    dt = t - tm
    sxx = float(np.sum(dt * dt))
    slope = float(np.sum(dt * (f - f.mean()))) / sxx
    icpt = float(f.mean()) - slope * tm
    r = f - (icpt + slope * t)
    s2 = float(np.sum(r * r)) / max(n - 2, 1)
    se = math.sqrt(s2 / sxx)
    rr = float(np.sum(r * r))
    rho = float(np.sum(r[1:] * r[:-1])) / rr if rr > 0 and n > 3 else 0.0
    if rho > 0:
        rho = min(rho, 1.0 - 2.0 / n)  # keep n_eff >= ~1
        se *= math.sqrt((1 + rho) / (1 - rho))
    return slope, icpt, se, rho


def _window_excursion(t: npt.NDArray[np.float64], f: npt.NDArray[np.float64], w: float) -> tuple[float, float]:
    """Largest max - min within any window of length ``w`` seconds, and its start time."""
    w = max(w, 0.0)  # a window shorter than the spacing holds one point at a time
    best, best_t = 0.0, float(t[0])
    dq_max: deque[int] = deque()
    dq_min: deque[int] = deque()
    lo = 0
    for hi in range(t.size):
        while dq_max and f[dq_max[-1]] <= f[hi]:
            dq_max.pop()
        dq_max.append(hi)
        while dq_min and f[dq_min[-1]] >= f[hi]:
            dq_min.pop()
        dq_min.append(hi)
        while t[hi] - t[lo] > w:
            lo += 1
            if dq_max[0] < lo:
                dq_max.popleft()
            if dq_min[0] < lo:
                dq_min.popleft()
        exc = float(f[dq_max[0]] - f[dq_min[0]])
        if exc > best:
            best, best_t = exc, float(t[lo])
    return best, best_t


def _noise_pp(n: int, sigma: float) -> float:
    """Expected max - min of n independent N(0, sigma^2): ~ 2 sigma sqrt(2 ln n)."""
    return 2.0 * sigma * math.sqrt(2.0 * math.log(max(n, 2)))


def _longest_run(mask: npt.NDArray[np.bool_]) -> tuple[int, int]:
    best = (0, 0)
    start = None
    for i, v in enumerate(list(mask) + [False]):
        if v and start is None:
            start = i
        elif not v and start is not None:
            if i - start > best[1] - best[0]:
                best = (start, i)
            start = None
    return best


def drift_measurements(
    track: FrequencyTrack,
    *,
    nominal_offset_hz: float | None = None,
    window_s: float = DEFAULT_WINDOW_S,
    settle_band_hz: float = DEFAULT_SETTLE_BAND_HZ,
) -> DriftResult:
    """The drift figures of a track (definitions in ``docs/drift.md``).

    Parameters
    ----------
    track : FrequencyTrack
        From :func:`track_frequency` or :class:`LineTracker`.
    nominal_offset_hz : float, optional
        Where the carrier should be, Hz offset (the user's ``--carrier``). When given,
        ``frequency_error_hz`` (mean frequency minus it) is added and the trace is drawn
        relative to it. ``frequency_offset_hz`` is always from the capture centre.
    window_s : float
        Window for ``drift_worst_window_hz``, s.
    settle_band_hz : float
        Half-width of the settling band, Hz (widened to 5 sigma of one block if larger).

    Returns
    -------
    DriftResult

    Notes
    -----
    - ``drift_hz_per_min``: least-squares slope of the reference frequency against time,
      x 60; its standard error from the residual scatter, inflated for correlated
      residuals by ``sqrt((1 + rho1)/(1 - rho1))`` (lag-1 autocorrelation rho1).
    - ``drift_peak_to_peak_hz``: max - min of the per-block frequency over the whole
      track. Noise adds about ``2 sigma sqrt(2 ln n)``; when the value is within 1.5x
      of that it is flagged as noise-limited (an upper bound).
    - ``allan_deviation``: overlapping ADEV (NIST SP 1065 eq. 11) of fractional frequency
      ``y = (f - mean f) / f_RF`` at octave taus from the block length, on the longest run
      of usable blocks; value at the octave tau nearest 10 s.
    """
    if not window_s > 0:
        raise ValueError(f"{window_s=} must be > 0")
    warnings: list[str] = []
    nominal = 0.0 if nominal_offset_hz is None else float(nominal_offset_hz)
    t, f, s = track.corrected()
    names = ("frequency_offset_hz", "drift_hz_per_min", "drift_peak_to_peak_hz",
             "drift_worst_window_hz", "warmup_settling_s")
    units = ("Hz", "Hz/min", "Hz", "Hz", "s")
    relative = track.stable_hz is not None
    rel_note = NOTE_RELATIVE if relative else NOTE_INCLUDES_RECEIVER
    details: dict[str, Any] = {}
    if t.size < MIN_BLOCKS:
        why = (f"only {t.size} of {track.n_blocks} blocks had the line above the noise "
               f"(need {MIN_BLOCKS})")
        nulls = {nm: failed(u, f"not measured: {why}.") for nm, u in zip(names, units)}
        if track.center_frequency_hz is not None:
            for nm in STABILITY_NAMES:
                nulls[nm] = failed("1", f"not measured: {why}.")
        return DriftResult(track, nulls, None, None, nominal, (why,), details)

    T = track.block_s
    sig_med = float(np.median(s))
    ms: dict[str, Measurement] = {}
    mean_f = float(np.mean(f))
    where = _where(track.plan)
    ms.update(_offset_measurements(track, s, mean_f, where, nominal_offset_hz, nominal))
    slope_m, slope, icpt = _slope_measurement(t, f, T, where, rel_note, nominal)
    ms["drift_hz_per_min"] = slope_m
    pp_m, pp = _peak_to_peak_measurement(t, f, T, sig_med, rel_note)
    ms["drift_peak_to_peak_hz"] = pp_m
    ms["drift_worst_window_hz"] = _worst_window_measurement(t, f, T, sig_med, pp, window_s, rel_note)
    settle_m, key_i, key_down = _settling_measurement(track, t, f, T, sig_med, settle_band_hz, nominal, rel_note)
    ms["warmup_settling_s"] = settle_m
    details["key_down_s"] = key_down
    allan: AllanResult | None = None
    if track.center_frequency_hz is not None:
        adev_m, allan, extra_ms = _allan_measurement(track, track.center_frequency_hz, t, f, s, T, mean_f, rel_note)
        ms["allan_deviation"] = adev_m
        ms.update(extra_ms)
    warnings.extend(_track_warnings(track, key_i))
    return DriftResult(track, ms, allan, (icpt, slope), nominal, tuple(warnings), details)


def _where(plan: LinePlan) -> str:
    """What the figures describe: the carrier, the carrier inferred from a tone, or the line."""
    if plan.kind in ("carrier", "carrier leak", "sideband pair"):
        return "the carrier"
    if plan.kind == "tone" and plan.carrier_shift_hz is not None:
        return "the carrier (tone line minus the tone's audio frequency)"
    return "the followed line"


def _offset_measurements(
    track: FrequencyTrack,
    s: npt.NDArray[np.float64],
    mean_f: float,
    where: str,
    nominal_offset_hz: float | None,
    nominal: float,
) -> dict[str, Measurement]:
    """``frequency_offset_hz`` and, with a nominal carrier, ``frequency_error_hz``: the
    time-mean frequency, with the standard error of the mean of independent block
    estimates (1-sigma ``s`` each)."""
    ms: dict[str, Measurement] = {}
    relative = track.stable_hz is not None
    what = track.plan.description
    if track.plan.kind == "tone" and track.plan.carrier_shift_hz is None:
        why = "not measured: the SSB tone's audio frequency is unknown (give --tone)."
        ms["frequency_offset_hz"] = failed("Hz", why)
        if nominal_offset_hz is not None:
            ms["frequency_error_hz"] = failed("Hz", why)
    else:
        u_stat = math.sqrt(float(np.sum(s * s))) / s.size
        cal = (
            " The receiver's frequency error is removed using the stable line's stated frequency."
            if relative and track.stable_is_absolute
            else " Excludes the receiver's own frequency calibration error (its reference oscillator)."
        )
        absolute = (track.center_frequency_hz + mean_f) if track.center_frequency_hz is not None else None
        det: dict[str, Any] = {}
        if absolute is not None:
            det["mean_frequency_hz"] = absolute
        ms["frequency_offset_hz"] = Measurement(
            value=mean_f,
            unit="Hz",
            uncertainty=u_stat,
            note=f"Time-mean frequency of {where} minus the capture centre, from {what}.{cal}",
            details=det,
        )
        if nominal_offset_hz is not None:
            ms["frequency_error_hz"] = Measurement(
                value=mean_f - nominal,
                unit="Hz",
                uncertainty=u_stat,
                note=f"Time-mean frequency of {where} minus the nominal carrier (--carrier).{cal}",
                details=dict(det, nominal_offset_hz=nominal),
            )
    return ms


def _slope_measurement(
    t: npt.NDArray[np.float64],
    f: npt.NDArray[np.float64],
    T: float,
    where: str,
    rel_note: str,
    nominal: float,
) -> tuple[Measurement, float, float]:
    """``drift_hz_per_min`` (:func:`_slope` x 60), the slope in Hz/s and the intercept, Hz."""
    slope, icpt, se, rho = _slope(t, f)
    m = Measurement(
        value=slope * 60.0,
        unit="Hz/min",
        uncertainty=se * 60.0,
        note=(f"Least-squares slope of the frequency of {where} over {t[-1] - t[0] + T:.0f} s "
              f"({t.size} blocks of {T:g} s); standard error from the residuals"
              + (f", widened for their correlation (rho={rho:.2f})" if rho > 0.05 else "")
              + "." + rel_note),
        details={"intercept_hz": icpt - nominal, "residual_lag1_correlation": rho},
    )
    return m, slope, icpt


def _peak_to_peak_measurement(
    t: npt.NDArray[np.float64],
    f: npt.NDArray[np.float64],
    T: float,
    sig_med: float,
    rel_note: str,
) -> tuple[Measurement, float]:
    """``drift_peak_to_peak_hz`` over the whole track (noise-limited within 1.5x of
    :func:`_noise_pp`), and the peak-to-peak value, Hz."""
    pp = float(f.max() - f.min())
    noise_pp = _noise_pp(f.size, sig_med)
    pp_noise = pp <= 1.5 * noise_pp
    m = Measurement(
        value=pp,
        unit="Hz",
        uncertainty=math.sqrt(2.0) * sig_med,
        limited_by_noise=pp_noise,
        bound="upper" if pp_noise else None,
        note=(f"Max minus min of the {T:g}-s block frequency over the whole track"
              + (f"; within the noise of the estimates (~{noise_pp:.2g} Hz expected from noise "
                 "alone), so the true figure is at most this" if pp_noise else "")
              + "." + rel_note),
        details={"noise_peak_to_peak_hz": noise_pp, "t_max_s": float(t[np.argmax(f)]),
                 "t_min_s": float(t[np.argmin(f)])},
    )
    return m, pp


def _worst_window_measurement(
    t: npt.NDArray[np.float64],
    f: npt.NDArray[np.float64],
    T: float,
    sig_med: float,
    pp: float,
    window_s: float,
    rel_note: str,
) -> Measurement:
    """``drift_worst_window_hz``: the largest excursion within any ``window_s`` window
    (:func:`_window_excursion`); the whole track's ``pp`` when the track is not longer
    than the window; null when the window holds fewer than two blocks."""
    span_s = float(t[-1] - t[0] + T)
    if window_s < 2.0 * T:
        return Measurement(
            value=None, unit="Hz",
            note=(f"not measured: the {window_s:g}-s window holds fewer than two {T:g}-s blocks "
                  "(a longer --window or a shorter --block)."),
            details={"window_s": window_s},
        )
    if span_s <= window_s:
        ww, wt = pp, float(t[0] - T / 2)
        wnote = (f"The recording ({span_s:.0f} s of usable blocks) is not longer than the "
                 f"{window_s:g}-s window: this is the peak-to-peak of the whole track.")
    else:
        ww, wt = _window_excursion(t, f, window_s - T)
        wnote = f"Largest max-minus-min frequency within any {window_s:g}-s window."
    n_win = max(2, int(round(min(window_s, span_s) / T)))
    wnoise = _noise_pp(n_win, sig_med)
    w_noise = ww <= 1.5 * wnoise
    return Measurement(
        value=ww,
        unit="Hz",
        uncertainty=math.sqrt(2.0) * sig_med,
        limited_by_noise=w_noise,
        bound="upper" if w_noise else None,
        note=wnote + (" Within the noise of the estimates." if w_noise else "") + rel_note,
        details={"window_s": window_s, "window_start_s": wt},
    )


def _settling_measurement(
    track: FrequencyTrack,
    t: npt.NDArray[np.float64],
    f: npt.NDArray[np.float64],
    T: float,
    sig_med: float,
    settle_band_hz: float,
    nominal: float,
    rel_note: str,
) -> tuple[Measurement, int, float]:
    """``warmup_settling_s`` from key-down (the first block with the line) until the
    frequency stays within the settling band of its final value (median of the tail); the
    index of that first block and the key-down time, s."""
    key_i = int(np.argmax(track.valid))
    key_down = float(track.times_s[key_i]) - T / 2  # start of the first block with the line
    band = max(settle_band_hz, 5.0 * sig_med)
    # final value: the last 20 % of the track, at least 60 s, at most half of it
    n_tail = max(MIN_BLOCKS, int(math.ceil(0.2 * f.size)), int(math.ceil(60.0 / T)))
    n_tail = min(n_tail, max(MIN_BLOCKS, f.size // 2))
    tail = f[-n_tail:]
    f_end = float(np.median(tail))
    started = "the start of the recording (line present from the start)" if key_i == 0 else \
        f"key-down at {key_down:.1f} s (first block with the line)"
    if np.any(np.abs(tail - f_end) > band):
        tail_slope = _slope(t[-n_tail:], tail)[0] * 60.0
        m = Measurement(
            value=None,
            unit="s",
            note=(f"Did not settle within +/-{band:.2g} Hz before the end: the last "
                  f"{n_tail} blocks still move ({tail_slope:+.2g} Hz/min); settling time > "
                  f"{t[-1] - key_down:.0f} s after {started}."),
            details={"band_hz": band, "lower_bound_s": float(t[-1] + T / 2 - key_down)},
        )
    else:
        outside = np.flatnonzero(np.abs(f - f_end) > band)
        settle_t = float(t[outside[-1] + 1] - T / 2) if outside.size else float(t[0] - T / 2)
        value = max(0.0, settle_t - key_down)
        m = Measurement(
            value=value,
            unit="s",
            uncertainty=T / math.sqrt(12.0) if value > 0 else T / 2,
            note=(f"Time from {started} until the frequency stays within +/-{band:.2g} Hz of "
                  f"its final value ({f_end - nominal:+.2f} Hz, median of the last {n_tail} "
                  f"blocks)." + rel_note),
            details={"band_hz": band, "final_offset_hz": f_end - nominal},
        )
    return m, key_i, key_down


def _curve_details(r: AllanResult) -> dict[str, Any]:
    return {"tau_s": r.taus_s.tolist(), "deviation": r.deviation.tolist(),
            "error": r.error.tolist(), "n": r.n_terms.tolist()}


def _allan_measurement(
    track: FrequencyTrack,
    center_frequency_hz: float,
    t: npt.NDArray[np.float64],
    f: npt.NDArray[np.float64],
    s: npt.NDArray[np.float64],
    T: float,
    mean_f: float,
    rel_note: str,
) -> tuple[Measurement, AllanResult | None, dict[str, Measurement]]:
    """``allan_deviation`` (``center_frequency_hz``: the track's capture centre, Hz): overlapping ADEV of fractional
    frequency on the longest run of usable blocks, quoted at the octave tau nearest
    :data:`ADEV_QUOTE_TAU_S`; the whole ADEV curve, or None; and the two companions
    ``hadamard_deviation`` (overlapping Hadamard deviation, insensitive to a linear
    frequency drift) and ``allan_deviation_drift_removed`` (overlapping ADEV of the same
    series less its least-squares line), quoted at the same tau when they reach it.

    References
    ----------
    .. [1] W. J. Riley, *Handbook of Frequency Stability Analysis*, NIST SP 1065, 2008,
       eq. 11 (OADEV), sections 5.2.8-5.2.9 (Hadamard and overlapping Hadamard;
       equation and section numbers from memory).
    """
    f_rf = center_frequency_hz + mean_f + (track.plan.carrier_shift_hz or 0.0)
    ok = track.valid if track.stable_valid is None else (track.valid & track.stable_valid)
    a, b = _longest_run(ok)
    if b - a < MIN_BLOCKS or f_rf <= 0:
        why = f"not measured: the longest run of usable blocks is {b - a} (need {MIN_BLOCKS})."
        return failed("1", why), None, {nm: failed("1", why) for nm in STABILITY_NAMES[1:]}
    sel = np.isin(track.times_s, track.times_s[a:b])
    tf = np.isin(t, track.times_s[a:b])
    y = (f[tf] - mean_f) / f_rf
    allan = oadev(y, T, data_type="frequency")
    if allan.taus_s.size == 0:
        why = "not measured: too few blocks for any tau."
        return failed("1", why), None, {nm: failed("1", why) for nm in STABILITY_NAMES[1:]}
    tau, dev, err = allan.at(ADEV_QUOTE_TAU_S)
    floor = float(np.median(s[tf])) / f_rf
    n_run = int(sel.sum())
    m = Measurement(
        value=dev,
        unit="1",
        uncertainty=err,
        note=(f"Overlapping Allan deviation of fractional frequency at tau = {tau:g} s "
              f"(NIST SP 1065 eq. 11), RF {f_rf / 1e6:.6f} MHz, {n_run} "
              f"contiguous blocks of {T:g} s. The estimator's own noise gives about "
              f"{floor:.1e} at tau = {T:g} s, falling as tau^-1.5." + rel_note),
        details={
            "tau_s": allan.taus_s.tolist(),
            "adev": allan.deviation.tolist(),
            "error": allan.error.tolist(),
            "n": allan.n_terms.tolist(),
            "tau_quoted_s": tau,
            "rf_frequency_hz": f_rf,
        },
    )
    extra: dict[str, Measurement] = {}
    hd = ohdev(y, T, data_type="frequency")
    if hd.taus_s.size == 0:
        extra["hadamard_deviation"] = failed("1", "not measured: too few blocks for any tau (needs 4).")
    else:
        # quoted at the ADEV's tau when the Hadamard reaches it, else at its nearest
        h_tau, h_dev, h_err = hd.at(tau)
        extra["hadamard_deviation"] = Measurement(
            value=h_dev, unit="1", uncertainty=h_err,
            note=(f"Overlapping Hadamard deviation of fractional frequency at tau = {h_tau:g} s "
                  "(NIST SP 1065 eq. 18): third differences of phase, so a linear frequency "
                  "drift does not count; beside the Allan deviation it tells a quiet oscillator "
                  "that drifts (Hadamard well below Allan) from a noisy one (the two alike)."
                  + rel_note),
            details=dict(_curve_details(hd), tau_quoted_s=h_tau, rf_frequency_hz=f_rf),
        )
    tt = t[tf]
    if tt.size >= 3:
        tm = float(tt.mean())
        slope = float(np.sum((tt - tm) * (y - y.mean()))) / float(np.sum((tt - tm) ** 2))
        y_res = y - y.mean() - slope * (tt - tm)
        dr = oadev(y_res, T, data_type="frequency")
        d_tau, d_dev, d_err = dr.at(tau)
        extra["allan_deviation_drift_removed"] = Measurement(
            value=d_dev, unit="1", uncertainty=d_err,
            note=(f"Overlapping Allan deviation (NIST SP 1065 eq. 11) at tau = {d_tau:g} s of the "
                  f"fractional frequency less its least-squares line (slope "
                  f"{slope * f_rf * 60:+.3g} Hz/min over this run): what is left when the "
                  "drift is taken out (drift removal before a stability analysis: common "
                  "practice, NIST SP 1065)." + rel_note),
            details=dict(_curve_details(dr), tau_quoted_s=d_tau, rf_frequency_hz=f_rf,
                         removed_drift_hz_per_min=slope * f_rf * 60.0),
        )
    else:
        extra["allan_deviation_drift_removed"] = failed("1", "not measured: too few blocks.")
    return m, allan, extra


def _track_warnings(track: FrequencyTrack, key_i: int) -> list[str]:
    """Warnings about the track: blocks without the stable line, the plan's own warnings,
    and blocks without the followed line after it first appeared at the start."""
    warnings: list[str] = []
    if track.stable_hz is not None and track.stable_valid is not None:
        lost = int(np.sum(~track.stable_valid))
        if lost:
            warnings.append(f"the stable reference line was not seen in {lost} of {track.n_blocks} blocks")
    warnings.extend(track.plan.warnings)
    lost_line = int(np.sum(~track.valid))
    if lost_line and key_i == 0:
        warnings.append(f"the followed line was below the noise in {lost_line} of {track.n_blocks} blocks")
    return warnings
