"""The analytic answer of a :class:`SignalSpec`: its spectral lines and its figures.

For tone-modulated signals the complex envelope is a finite sum of complex exponentials,
and so is its image through the cubic amplifier (a triple sum), the receiver's
``K1·x + K2·x*`` and a DC offset: :func:`expected_lines` lists them exactly. For
band-noise audio the spectrum is piecewise flat and the 99 % occupied bandwidth follows
exactly (:func:`occupied_bandwidth_hz`). :func:`truth` collects the figures iqscope
measures, under the measurement names of the JSON contract where one exists.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from ._engine import audio_lines, envelope_coefficients, receiver_coefficients
from ._signals import image_dbc as _image_dbc
from ._specs import Am, BandNoise, Cw, Dsb, SignalSpec, Ssb, Tone, TwoTone

__all__ = ["Line", "envelope_lines", "envelope_peak", "expected_lines", "occupied_bandwidth_hz", "truth"]

_FREQ_DIGITS = 9  # lines closer than 1 nHz are one line


@dataclass(frozen=True)
class Line:
    """A spectral line: frequency and complex amplitude (power ``|amplitude|²``)."""

    frequency_hz: float
    """Frequency, Hz (relative to the carrier or to the capture centre, as stated)."""
    amplitude: complex
    """Complex amplitude, full scale 1."""

    @property
    def power(self) -> float:
        """Mean power, full-scale² (linear)."""
        return abs(self.amplitude) ** 2

    @property
    def power_dbfs(self) -> float:
        """Mean power, dBFS (-inf for a zero line)."""
        p = self.power
        return 10.0 * math.log10(p) if p > 0 else -math.inf


def _merge(pairs: Iterable[tuple[float, complex]], floor: float = 0.0) -> tuple[Line, ...]:
    acc: dict[float, complex] = {}
    for f, a in pairs:
        key = round(float(f), _FREQ_DIGITS) + 0.0
        acc[key] = acc.get(key, 0j) + complex(a)
    return tuple(
        Line(f, a) for f, a in sorted(acc.items()) if abs(a) > floor
    )


def _cubic_lines(lines: Sequence[Line], k: float) -> tuple[Line, ...]:
    """Lines of ``x + k·|x|²·x`` for ``x = Σ a_i e^{j2πf_i t}`` (exact triple sum)."""
    pairs: list[tuple[float, complex]] = [(ln.frequency_hz, ln.amplitude) for ln in lines]
    for p in lines:
        for q in lines:
            for r in lines:
                f = p.frequency_hz - q.frequency_hz + r.frequency_hz
                pairs.append((f, k * p.amplitude * q.amplitude.conjugate() * r.amplitude))
    scale = max((abs(a) for _, a in pairs), default=0.0)
    return _merge(pairs, floor=scale * 1e-15)


def envelope_lines(spec: SignalSpec) -> tuple[Line, ...]:
    """Lines of the transmitter's envelope after its amplifier, Hz relative to the carrier.

    Raises ``ValueError`` when the envelope is not a finite line spectrum (keyed CW,
    band-noise audio, a soft clipper).
    """
    mod = spec.modulation
    if spec.amplifier.soft_clip_dbfs is not None:
        raise ValueError("a soft-clipped envelope has no closed-form line spectrum")
    if isinstance(mod, Cw):
        if mod.message is not None:
            raise ValueError("a keyed CW signal has no line spectrum")
        lines = _merge([(0.0, math.sqrt(10.0 ** (spec.level_dbfs / 10.0)))])
    else:
        if isinstance(mod.audio, BandNoise):
            raise ValueError("band-noise audio has a continuous spectrum, not lines")
        a, b, c = envelope_coefficients(spec)
        freqs, amps = audio_lines(mod.audio)
        pairs: list[tuple[float, complex]] = [(0.0, c)]
        for f, u in zip(freqs, amps):
            pairs.append((f, a * u))
            pairs.append((-f, b * u.conjugate()))
        lines = _merge(pairs)
    if spec.amplifier.cubic_k_per_fs2:
        lines = _cubic_lines(lines, spec.amplifier.cubic_k_per_fs2)
    return lines


def expected_lines(spec: SignalSpec, include_dc: bool = True) -> tuple[Line, ...]:
    """Lines of the recording (before noise and quantisation), Hz from the capture centre.

    Needs a constant carrier frequency (no drift, warm-up or random walk). The carrier's
    initial phase, the receiver image and (``include_dc``) the DC offset are included.
    """
    plan = spec.frequency
    if plan.drift_hz_per_s or plan.warmup_hz or plan.random_walk_hz_per_sqrt_s:
        raise ValueError("a drifting carrier has no fixed line spectrum")
    rot = complex(math.cos(math.radians(plan.initial_phase_deg)),
                  math.sin(math.radians(plan.initial_phase_deg)))  # fmt: skip
    k1, k2 = receiver_coefficients(spec.receiver)
    pairs: list[tuple[float, complex]] = []
    for ln in envelope_lines(spec):
        f = ln.frequency_hz + plan.carrier_offset_hz
        a = ln.amplitude * rot
        pairs.append((f, k1 * a))
        if k2:
            pairs.append((-f, k2 * a.conjugate()))
    rx = spec.receiver
    if include_dc and rx.dc_offset_dbfs is not None:
        ph = math.radians(rx.dc_phase_deg)
        amp = math.sqrt(10.0 ** (rx.dc_offset_dbfs / 10.0))
        pairs.append((0.0, amp * complex(math.cos(ph), math.sin(ph))))
    return _merge(pairs)


def occupied_bandwidth_hz(
    bands: Sequence[tuple[float, float, float]],
    lines: Sequence[tuple[float, float]] = (),
    fraction: float = 0.99,
) -> tuple[float, float]:
    """Exact ``fraction`` occupied bandwidth of flat bands plus lines.

    Parameters
    ----------
    bands : sequence of (low_hz, high_hz, power)
        Bands of flat power density holding ``power`` (linear) each.
    lines : sequence of (frequency_hz, power)
        Discrete lines.
    fraction : float
        Power fraction inside the band; ``(1 - fraction)/2`` lies below the lower and above
        the upper limit (RR No. 1.153: 0.5 % each side for 99 %).

    Returns
    -------
    (lower_hz, upper_hz) : tuple of float
        The limits; the occupied bandwidth is their difference.

    References
    ----------
    .. [1] ITU Radio Regulations, Article 1, No. 1.153 (occupied bandwidth).
    """
    total = sum(p for _, _, p in bands) + sum(p for _, p in lines)
    if total <= 0:
        raise ValueError("no power")
    target = (1.0 - fraction) / 2.0 * total

    def below(x: float) -> float:  # power at frequencies <= x
        s = sum(p for f, p in lines if f <= x)
        for lo, hi, p in bands:
            s += p * min(1.0, max(0.0, (x - lo) / (hi - lo)))
        return s

    def above(x: float) -> float:  # power at frequencies >= x
        s = sum(p for f, p in lines if f >= x)
        for lo, hi, p in bands:
            s += p * min(1.0, max(0.0, (hi - x) / (hi - lo)))
        return s

    edges = [f for f, _ in lines] + [b for lo, hi, _ in bands for b in (lo, hi)]
    lo_x, hi_x = min(edges) - 1.0, max(edges) + 1.0

    def solve(fun: Any, increasing: bool) -> float:
        a, b = lo_x, hi_x
        for _ in range(200):
            mid = 0.5 * (a + b)
            ok = fun(mid) >= target
            if ok == increasing:
                b = mid
            else:
                a = mid
        return 0.5 * (a + b)

    # lower limit: smallest x with below(x) >= target; upper: largest x with above(x) >= target
    return solve(below, True), solve(above, False)


def envelope_peak(lines: Sequence[Line], max_period_s: float = 10.0) -> float | None:
    """Largest ``|Σ a_i e^{j2πf_i t}|`` over all t, or None if it cannot be pinned down.

    The magnitude depends only on the frequency differences; when they share a common
    divisor (frequencies on a 1 mHz grid, period at most ``max_period_s``) the envelope
    is periodic and its peak is found on a dense grid over one period, refined by a
    bounded scalar search (scipy). One line: its magnitude; two lines: ``|a1| + |a2|``
    (exact, the phases line up once per beat period).
    """
    if not lines:
        return 0.0
    if len(lines) <= 2:
        return float(sum(abs(ln.amplitude) for ln in lines))
    import numpy as np
    from scipy.optimize import minimize_scalar

    milli = [round(ln.frequency_hz * 1000.0) for ln in lines]
    if any(abs(m / 1000.0 - ln.frequency_hz) > 1e-9 for m, ln in zip(milli, lines)):
        return None
    g = 0
    for m in milli[1:]:
        g = math.gcd(g, abs(m - milli[0]))
    period = 1000.0 / g
    if period > max_period_s:
        return None
    f = np.array([ln.frequency_hz - lines[0].frequency_hz for ln in lines])
    a = np.array([ln.amplitude for ln in lines])
    span = float(np.max(np.abs(f))) * period
    n = int(min(1 << 22, max(4096, 64 * math.ceil(span))))
    t = np.arange(n) * (period / n)
    mag = np.abs(np.exp(2j * np.pi * np.outer(t, f)) @ a) if n * f.size <= 1 << 24 else None
    if mag is None:
        return None
    i = int(np.argmax(mag))
    step = period / n

    def neg(x: float) -> float:
        return -float(abs(np.sum(a * np.exp(2j * np.pi * f * x))))

    res = minimize_scalar(neg, bounds=(t[i] - step, t[i] + step), method="bounded",
                          options={"xatol": step * 1e-9})  # fmt: skip
    return max(float(mag[i]), -float(res.fun))


def _db(x: float) -> float:
    return 10.0 * math.log10(x) if x > 0 else -math.inf


def _band_model(spec: SignalSpec) -> tuple[list[tuple[float, float, float]], list[tuple[float, float]]]:
    """Bands and lines of a linear band-noise transmitter signal (capture-centre frame).

    Receiver defects (image, DC) are not included: the truth describes the transmitter.
    """
    mod = spec.modulation
    assert not isinstance(mod, Cw) and isinstance(mod.audio, BandNoise)
    lo, hi = mod.audio.low_hz, mod.audio.high_hz
    a, b, c = envelope_coefficients(spec)
    f0 = spec.frequency.carrier_offset_hz
    bands = [(f0 + lo, f0 + hi, abs(a) ** 2), (f0 - hi, f0 - lo, abs(b) ** 2)]
    lines = [(f0, abs(c) ** 2)]
    return [x for x in bands if x[2] > 0], [x for x in lines if x[1] > 0]


def truth(spec: SignalSpec) -> dict[str, float]:
    """The figures a perfect analyser would report for ``spec``, from closed forms.

    Keys follow the measurement names of the JSON contract (DESIGN.md section 4) where
    one exists (``carrier_suppression_db``, ``opposite_sideband_suppression_db``,
    ``sideband_balance_db``, ``modulation_index``, ``occupied_bandwidth_hz``,
    ``imd3_dbc``, ``imd3_db_pep``, ``frequency_offset_hz``, ``drift_hz_per_min``,
    ``drift_peak_to_peak_hz``, ``noise_floor_dbfs_per_hz``) plus levels such as
    ``carrier_dbfs``, ``sideband_power_dbfs``, ``tone_dbfs``, ``pep_dbfs``,
    ``image_dbc``, ``dc_offset_dbfs``. Figures without a closed form for this spec
    (e.g. IMD through a soft clipper) are left out. ``imd3_dbc`` is the stronger
    third-order product relative to the mean power of one output tone. Through a
    nonlinear amplifier the carrier and sideband figures are taken from the output lines:
    sideband power is the power of the audio tones' own lines (products excluded), the
    opposite sideband the power of their mirror lines.

    The figures describe the transmitted signal (after its amplifier, before noise); the
    receiver's own defects are reported separately (``image_dbc``, ``dc_offset_dbfs``)
    and not folded into e.g. the occupied bandwidth. The receiver model keeps the
    signal's level (``K1 = 1``), so levels in dBFS hold in the file too.
    """
    out: dict[str, float] = {}
    mod = spec.modulation
    plan = spec.frequency
    linear_amp = spec.amplifier.is_linear

    # frequency behaviour
    out["frequency_offset_hz"] = plan.carrier_offset_hz
    if plan.random_walk_hz_per_sqrt_s == 0:
        dur = spec.n_samples / spec.sample_rate_hz
        f_end = plan.carrier_offset_hz + plan.drift_hz_per_s * dur
        f_end += plan.warmup_hz * -math.expm1(-dur / plan.warmup_time_constant_s)
        out["frequency_end_hz"] = f_end
        if not plan.warmup_hz:
            out["drift_hz_per_min"] = plan.drift_hz_per_s * 60.0
        if (plan.drift_hz_per_s == 0 or plan.warmup_hz == 0
                or (plan.drift_hz_per_s > 0) == (plan.warmup_hz > 0)):  # fmt: skip
            out["drift_peak_to_peak_hz"] = abs(f_end - plan.carrier_offset_hz)  # monotonic
    if spec.noise_dbfs_per_hz is not None:
        out["noise_floor_dbfs_per_hz"] = spec.noise_dbfs_per_hz

    # receiver
    rx = spec.receiver
    if rx.image_dbc is not None:
        out["image_dbc"] = rx.image_dbc
    elif rx.iq_gain_imbalance_db or rx.iq_phase_error_deg:
        out["image_dbc"] = _image_dbc(rx.iq_gain_imbalance_db, rx.iq_phase_error_deg)
    if rx.dc_offset_dbfs is not None:
        out["dc_offset_dbfs"] = rx.dc_offset_dbfs

    # modulation
    if isinstance(mod, Cw):
        out["carrier_dbfs"] = spec.level_dbfs
        out["pep_dbfs"] = spec.level_dbfs
        if mod.message is not None:
            out["rise_time_s"] = mod.rise_time_s
            out["words_per_minute"] = mod.words_per_minute
        return out
    a, b, c = envelope_coefficients(spec)
    if isinstance(mod, Am):
        m = mod.modulation_index
        out["carrier_dbfs"] = spec.level_dbfs
        out["modulation_index"] = m
        out["sideband_power_dbc"] = _db(m * m / 2.0)
        out["total_power_dbfs"] = spec.level_dbfs + _db(1.0 + m * m / 2.0)
        out["sideband_balance_db"] = 0.0
        if isinstance(mod.audio, Tone):
            out["sideband_dbc"] = _db(m * m / 4.0)  # 20·log10(m/2)
            if linear_amp:
                out["pep_dbfs"] = spec.level_dbfs + _db((1.0 + m) ** 2)
    elif isinstance(mod, Dsb):
        out["sideband_power_dbfs"] = spec.level_dbfs
        out["sideband_balance_db"] = mod.sideband_imbalance_db
        if mod.carrier_leak_dbc is not None:
            out["carrier_suppression_db"] = -mod.carrier_leak_dbc
            out["carrier_dbfs"] = spec.level_dbfs + mod.carrier_leak_dbc
    else:
        assert isinstance(mod, Ssb)
        out["sideband_power_dbfs"] = spec.level_dbfs
        wanted, unwanted = (a, b) if mod.sideband == "usb" else (b, a)
        if unwanted:
            out["opposite_sideband_suppression_db"] = _db(abs(wanted) ** 2 / abs(unwanted) ** 2)
        if mod.carrier_leak_dbc is not None:
            out["carrier_suppression_db"] = -mod.carrier_leak_dbc
            out["carrier_dbfs"] = spec.level_dbfs + mod.carrier_leak_dbc

    audio = mod.audio
    if isinstance(audio, BandNoise):
        constant_f = not (plan.drift_hz_per_s or plan.warmup_hz or plan.random_walk_hz_per_sqrt_s)
        if linear_amp and constant_f:
            bands, lines = _band_model(spec)
            lo, hi = occupied_bandwidth_hz(bands, lines)
            out["occupied_bandwidth_hz"] = hi - lo
            out["occupied_lower_hz"] = lo
            out["occupied_upper_hz"] = hi
        return out

    # tone audio: PEP and IMD from the exact envelope lines
    if spec.amplifier.soft_clip_dbfs is not None:
        return out
    env = envelope_lines(spec)
    if "pep_dbfs" not in out:
        peak = envelope_peak(env)
        if peak is not None:
            out["pep_dbfs"] = _db(peak**2)
    by_f = {round(ln.frequency_hz, _FREQ_DIGITS) + 0.0: ln.power for ln in env}

    def power_at(f: float) -> float:
        return by_f.get(round(f, _FREQ_DIGITS) + 0.0, 0.0)

    tones = audio_lines(audio)[0]
    upper = sum(power_at(f) for f in tones)  # the modulation's own lines, not products
    lower = sum(power_at(-f) for f in tones)
    carrier = power_at(0.0)
    if not linear_amp:
        # the amplifier moves every line: take the figures from the output lines
        if isinstance(mod, Am):
            out["modulation_index"] = math.sqrt(2.0 * (upper + lower) / carrier)
            out["sideband_balance_db"] = _db(upper / lower)
        elif isinstance(mod, Dsb):
            out["sideband_power_dbfs"] = _db(upper + lower)
            out["sideband_balance_db"] = _db(upper / lower)
            if carrier > 0:
                out["carrier_suppression_db"] = _db((upper + lower) / carrier)
                out["carrier_dbfs"] = _db(carrier)
        elif isinstance(mod, Ssb):
            wanted, mirror = (upper, lower) if mod.sideband == "usb" else (lower, upper)
            out["sideband_power_dbfs"] = _db(wanted)
            if mirror > 0:
                out["opposite_sideband_suppression_db"] = _db(wanted / mirror)
            if carrier > 0:
                out["carrier_suppression_db"] = _db(wanted / carrier)
                out["carrier_dbfs"] = _db(carrier)
    if isinstance(audio, TwoTone) and isinstance(mod, Ssb):
        sign = 1.0 if mod.sideband == "usb" else -1.0
        f1, f2 = sign * audio.f1_hz, sign * audio.f2_hz
        tone = 0.5 * (power_at(f1) + power_at(f2))
        out["tone_dbfs"] = _db(tone)
        for order, name in ((3, "imd3"), (5, "imd5"), (7, "imd7")):
            j = (order + 1) // 2
            prod = max(power_at(j * f1 - (j - 1) * f2), power_at(j * f2 - (j - 1) * f1))
            if prod > 0:
                out[f"{name}_dbc"] = _db(prod / tone)
                if "pep_dbfs" in out:
                    out[f"{name}_db_pep"] = _db(prod) - out["pep_dbfs"]
    return out
