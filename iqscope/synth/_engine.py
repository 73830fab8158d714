"""Block-wise generation of a :class:`SignalSpec` or :class:`AudioSpec`.

Deterministic parts are computed in closed form from the absolute sample index and the
random parts draw from generators spawned from the spec's seed, one per source, in
sample order; so the samples do not depend on the block size (tested), and a one-hour
recording is written block by block without holding it in memory.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from ._signals import (
    apply_image,
    band_noise_table,
    clip_full_scale,
    cubic,
    frac_cycles,
    key_envelope,
    morse_intervals,
    quadrature_coefficients,
    quantize,
    rc_edge_duration_s,
    soft_clip,
    tone_sum,
)
from ._specs import (
    Am,
    Audio,
    AudioSpec,
    BandNoise,
    Cw,
    Dsb,
    FrequencyPlan,
    Receiver,
    SignalSpec,
    Ssb,
    Tone,
    TwoTone,
)

__all__ = [
    "DEFAULT_BLOCK_SIZE",
    "Block",
    "generate",
    "generate_blocks",
    "synthesize",
    "generate_audio",
    "synthesize_audio",
    "audio_lines",
    "envelope_coefficients",
    "receiver_coefficients",
    "deterministic_cycles",
    "deterministic_frequency_hz",
]

#: Samples per block unless asked otherwise (1 MiB of complex128 work space).
DEFAULT_BLOCK_SIZE = 65536

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]

# Child seeds (SeedSequence.spawn order): one independent stream per random source.
_SEED_AUDIO, _SEED_NOISE, _SEED_WALK = 0, 1, 2


@dataclass(frozen=True)
class Block:
    """One block of a synthesized recording with its per-sample truth."""

    start: int
    """Index of the first sample."""
    samples: npt.NDArray[np.complex64]
    """The samples as they go to the file (full scale 1)."""
    frequency_hz: FloatArray
    """Instantaneous carrier frequency offset at each sample, Hz (exact)."""
    phase_cycles: FloatArray
    """Carrier phase at each sample, cycles (the integral of ``frequency_hz``)."""


def _children(seed: int) -> list[np.random.Generator]:
    return [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(3)]


# -- audio -------------------------------------------------------------------------------
def audio_lines(audio: Tone | TwoTone) -> tuple[list[float], list[complex]]:
    """Frequencies (Hz) and complex amplitudes of the analytic audio ``u``, mean ``|u|²`` = 1.

    A :class:`Tone` is ``e^{j(ωt + φ)}``; a :class:`TwoTone` is two lines of powers
    ``1/(1 + r)`` and ``r/(1 + r)`` with ``r = 10^(balance_db/10)``, both of phase 0.
    """
    if isinstance(audio, Tone):
        phi = math.radians(audio.phase_deg)
        return [audio.frequency_hz], [complex(math.cos(phi), math.sin(phi))]
    r = 10.0 ** (audio.balance_db / 10.0)
    return [audio.f1_hz, audio.f2_hz], [
        complex(math.sqrt(1.0 / (1.0 + r))),
        complex(math.sqrt(r / (1.0 + r))),
    ]


class _AudioSource:
    """Analytic audio ``u`` (mean ``|u|²`` = 1) at absolute sample indices."""

    def __init__(self, audio: Audio, sample_rate_hz: float, rng: np.random.Generator) -> None:
        if audio.highest_hz >= sample_rate_hz / 2:
            raise ValueError(
                f"audio up to {audio.highest_hz} Hz does not fit sample_rate_hz={sample_rate_hz}"
            )
        self.fs = sample_rate_hz
        self.table: ComplexArray | None = None
        if isinstance(audio, BandNoise):
            period = int(round(audio.period_s * sample_rate_hz))
            self.table = band_noise_table(audio.low_hz, audio.high_hz, sample_rate_hz, period, rng)
        else:
            self.freqs, self.amps = audio_lines(audio)

    def __call__(self, n: npt.NDArray[np.int64]) -> ComplexArray:
        if self.table is not None:
            return self.table[n % self.table.size]
        return tone_sum(n, self.fs, self.freqs, self.amps)

    def peak(self) -> float:
        """Largest ``|Re u|`` the audio can reach (exact for noise, the bound for tones)."""
        if self.table is not None:
            return float(np.max(np.abs(self.table.real)))
        return float(sum(abs(a) for a in self.amps))


# -- the transmitter's envelope ----------------------------------------------------------
def envelope_coefficients(spec: SignalSpec) -> tuple[complex, complex, complex]:
    """``(A, B, C)`` with the transmitter envelope ``e = A·u + B·u* + C`` (not for CW).

    ``u`` is the analytic audio with mean ``|u|²`` = 1 (so ``Re u`` has the mean square
    of a unit cosine). AM: ``A = B = m·√Pc/2``, ``C = √Pc``. DSB: ``A, B`` share the
    sideband power ``P`` in the ratio ``10^(sideband_imbalance_db/10)``; ``C`` is the
    leak. SSB: wanted term ``√P``, unwanted ``√P·ρ``; LSB swaps ``u`` and ``u*``.
    """
    m = spec.modulation
    p = 10.0 ** (spec.level_dbfs / 10.0)
    root_p = math.sqrt(p)
    if isinstance(m, Cw):
        raise ValueError("CW has no audio envelope")
    if isinstance(m, Am):
        return m.modulation_index * root_p / 2, m.modulation_index * root_p / 2, complex(root_p)

    def leak(level_dbc: float | None, phase_deg: float) -> complex:
        if level_dbc is None:
            return 0j
        amp = math.sqrt(p * 10.0 ** (level_dbc / 10.0))
        ph = math.radians(phase_deg)
        return amp * complex(math.cos(ph), math.sin(ph))

    if isinstance(m, Dsb):
        r = 10.0 ** (m.sideband_imbalance_db / 10.0)
        gu = math.sqrt(2.0 * r / (1.0 + r))
        gl = math.sqrt(2.0 / (1.0 + r))
        psi = math.radians(m.sideband_phase_error_deg)
        a = root_p * gu / math.sqrt(2.0)
        b = root_p * gl / math.sqrt(2.0) * complex(math.cos(psi), math.sin(psi))
        return complex(a), b, leak(m.carrier_leak_dbc, m.carrier_leak_phase_deg)
    assert isinstance(m, Ssb)
    if m.opposite_sideband_dbc is not None:
        ph = math.radians(m.opposite_sideband_phase_deg)
        rho = 10.0 ** (m.opposite_sideband_dbc / 20.0) * complex(math.cos(ph), math.sin(ph))
    else:
        k1, k2 = quadrature_coefficients(m.gain_error_db, m.phase_error_deg)
        rho = k2 / k1
    wanted, unwanted = complex(root_p), root_p * rho
    c = leak(m.carrier_leak_dbc, m.carrier_leak_phase_deg)
    if m.sideband == "usb":
        return wanted, unwanted, c
    return unwanted, wanted, c


def receiver_coefficients(rx: Receiver) -> tuple[complex, complex]:
    """``(K1, K2)`` of the receiver's ``y = K1·x + K2·x*``, normalised so ``K1 = 1``."""
    if rx.image_dbc is not None:
        ph = math.radians(rx.image_phase_deg)
        return 1 + 0j, 10.0 ** (rx.image_dbc / 20.0) * complex(math.cos(ph), math.sin(ph))
    if rx.iq_gain_imbalance_db == 0.0 and rx.iq_phase_error_deg == 0.0:
        return 1 + 0j, 0j
    k1, k2 = quadrature_coefficients(rx.iq_gain_imbalance_db, rx.iq_phase_error_deg)
    return 1 + 0j, k2 / k1


# -- frequency plan ----------------------------------------------------------------------
def deterministic_frequency_hz(plan: FrequencyPlan, t_s: FloatArray) -> FloatArray:
    """Deterministic part of the instantaneous frequency offset at times ``t_s``, Hz."""
    t = np.asarray(t_s, np.float64)
    f = plan.carrier_offset_hz + plan.drift_hz_per_s * t
    if plan.warmup_hz:
        f = f + plan.warmup_hz * -np.expm1(-t / plan.warmup_time_constant_s)
    return f


def deterministic_cycles(plan: FrequencyPlan, t_s: FloatArray) -> FloatArray:
    """Exact integral of :func:`deterministic_frequency_hz` from 0 to ``t_s``, plus the
    initial phase, in cycles::

        f0·t + d·t²/2 + W·(t - τ·(1 - e^{-t/τ})) + φ0/360
    """
    t = np.asarray(t_s, np.float64)
    cyc = plan.carrier_offset_hz * t + 0.5 * plan.drift_hz_per_s * t * t
    if plan.warmup_hz:
        tau = plan.warmup_time_constant_s
        cyc = cyc + plan.warmup_hz * (t + tau * np.expm1(-t / tau))
    return cyc + plan.initial_phase_deg / 360.0


class _RandomWalk:
    """Random-walk FM, its frequency piecewise linear between samples, integrated exactly."""

    def __init__(self, sigma_hz_per_sqrt_s: float, sample_rate_hz: float,
                 rng: np.random.Generator) -> None:  # fmt: skip
        self.step = sigma_hz_per_sqrt_s * math.sqrt(1.0 / sample_rate_hz)
        self.ts = 1.0 / sample_rate_hz
        self.rng = rng
        self.r = 0.0  # frequency at the next sample, Hz
        self.integral = 0.0  # its integral up to the next sample, cycles

    def next(self, count: int) -> tuple[FloatArray, FloatArray]:
        inc = self.rng.standard_normal(count) * self.step
        r = np.add.accumulate(np.concatenate(([self.r], inc)))
        trap = (r[:-1] + r[1:]) * (0.5 * self.ts)
        cyc = np.add.accumulate(np.concatenate(([self.integral], trap)))
        self.r = float(r[-1])
        self.integral = float(cyc[-1])
        return r[:-1], cyc[:-1]


# -- the generator -----------------------------------------------------------------------
def generate_blocks(spec: SignalSpec, block_size: int = DEFAULT_BLOCK_SIZE) -> Iterator[Block]:
    """Yield the recording described by ``spec`` as :class:`Block` objects with truth.

    Parameters
    ----------
    spec : SignalSpec
        The recipe, seed included.
    block_size : int
        Samples per block (the last one may be shorter); does not change the samples.

    Notes
    -----
    Chain: audio ``u`` -> envelope ``A·u + B·u* + C`` (or the CW key) -> amplifier
    (:func:`cubic`, then :func:`soft_clip`) -> carrier phasor ``exp(2πj·φ(n))`` with
    ``φ`` the exact integral of the instantaneous frequency -> receiver image
    ``K1·x + K2·x*`` -> complex white Gaussian noise with ``E|n|² = 10^(N0/10)·fs`` ->
    DC offset -> clipping / quantisation -> complex64.
    """
    if block_size <= 0:
        raise ValueError(f"{block_size=} must be > 0")
    fs = spec.sample_rate_hz
    total = spec.n_samples
    children = _children(spec.seed)
    rng_audio, rng_noise, rng_walk = children[_SEED_AUDIO], children[_SEED_NOISE], children[_SEED_WALK]
    mod = spec.modulation
    root_p = math.sqrt(10.0 ** (spec.level_dbfs / 10.0))

    key: tuple[FloatArray, FloatArray, float | None] | None = None
    source: _AudioSource | None = None
    coeffs = (0j, 0j, 0j)
    if isinstance(mod, Cw):
        if mod.message is not None:
            on, off, _ = morse_intervals(mod.message, mod.words_per_minute)
            edge = rc_edge_duration_s(mod.rise_time_s)
            if mod.repeat_period_s is not None and mod.repeat_period_s < off[-1] + edge:
                raise ValueError(
                    f"repeat_period_s={mod.repeat_period_s} is shorter than the message "
                    f"({off[-1] + edge:.3f} s)"
                )
            key = (on, off, mod.repeat_period_s)
    else:
        source = _AudioSource(mod.audio, fs, rng_audio)
        coeffs = envelope_coefficients(spec)
        reach = abs(spec.frequency.carrier_offset_hz) + mod.audio.highest_hz
        if reach >= fs / 2:
            raise ValueError(
                f"the signal reaches {reach:g} Hz from the capture centre, beyond "
                f"sample_rate_hz/2 = {fs / 2:g} Hz; lower the offset or raise the rate"
            )

    plan = spec.frequency
    walk = (
        None
        if plan.random_walk_hz_per_sqrt_s == 0
        else _RandomWalk(plan.random_walk_hz_per_sqrt_s, fs, rng_walk)
    )
    k1, k2 = receiver_coefficients(spec.receiver)
    amp = spec.amplifier
    clip_level = None if amp.soft_clip_dbfs is None else 10.0 ** (amp.soft_clip_dbfs / 20.0)
    noise_sigma = (
        0.0
        if spec.noise_dbfs_per_hz is None
        else math.sqrt(10.0 ** (spec.noise_dbfs_per_hz / 10.0) * fs / 2.0)
    )
    rx = spec.receiver
    dc = 0j
    if rx.dc_offset_dbfs is not None:
        ph = math.radians(rx.dc_phase_deg)
        dc = math.sqrt(10.0 ** (rx.dc_offset_dbfs / 10.0)) * complex(math.cos(ph), math.sin(ph))

    start = 0
    while start < total:
        count = min(block_size, total - start)
        n = np.arange(start, start + count, dtype=np.int64)
        t = n / fs
        # transmitter envelope
        if isinstance(mod, Cw):
            if key is None:
                env = np.full(count, root_p, np.complex128)
            else:
                on, off, period = key
                k = key_envelope(t - mod.start_s, on, off, mod.rise_time_s, period)
                if period is not None:
                    k = np.where(t < mod.start_s, 0.0, k)
                env = (root_p * k).astype(np.complex128)
        else:
            assert source is not None
            u = source(n)
            a, b, c = coeffs
            env = a * u + b * np.conj(u) + c
        if amp.cubic_k_per_fs2:
            env = cubic(env, amp.cubic_k_per_fs2)
        if clip_level is not None:
            env = soft_clip(env, clip_level)
        # carrier frequency and phase
        freq = deterministic_frequency_hz(plan, t)
        cyc = deterministic_cycles(plan, t)
        if walk is not None:
            r, rc = walk.next(count)
            freq = freq + r
            cyc = cyc + rc
        x = env * np.exp(2j * np.pi * frac_cycles(cyc))
        # receiver
        if k2 != 0:
            x = apply_image(x, k1, k2)
        if noise_sigma:
            w = rng_noise.standard_normal(2 * count).reshape(count, 2)
            x = x + noise_sigma * (w[:, 0] + 1j * w[:, 1])
        if dc:
            x = x + dc
        if rx.adc_bits is not None:
            x = quantize(x, rx.adc_bits)
        elif rx.clip_full_scale:
            x = clip_full_scale(x)
        yield Block(start, x.astype(np.complex64), freq, cyc)
        start += count


def generate(
    spec: SignalSpec, block_size: int = DEFAULT_BLOCK_SIZE
) -> Iterator[npt.NDArray[np.complex64]]:
    """Yield the recording described by ``spec`` as complex64 blocks (continuous phase).

    Examples
    --------
    >>> from iqscope.synth import SignalSpec, Am, Tone, generate
    >>> spec = SignalSpec(Am(0.5, Tone(1000.0)), sample_rate_hz=8000.0, duration_s=1.0)
    >>> sum(b.size for b in generate(spec, block_size=3000))
    8000
    """
    for block in generate_blocks(spec, block_size):
        yield block.samples


def synthesize(spec: SignalSpec) -> npt.NDArray[np.complex64]:
    """The whole recording as one complex64 array (for short signals and tests)."""
    blocks = [b.samples for b in generate_blocks(spec, max(1, min(spec.n_samples, 1 << 20)))]
    if not blocks:
        return np.zeros(0, np.complex64)
    return np.concatenate(blocks)


# -- audio test signals ------------------------------------------------------------------
def generate_audio(
    spec: AudioSpec, block_size: int = DEFAULT_BLOCK_SIZE
) -> Iterator[npt.NDArray[np.float64]]:
    """Yield a real audio test signal (float64, full scale ±1) block by block.

    The audio is ``g(t)·Re u(t) / peak(u)`` with ``g`` the (possibly ramping) peak
    amplitude ``10^(level_dbfs(t)/20)``.
    """
    if block_size <= 0:
        raise ValueError(f"{block_size=} must be > 0")
    rng_audio = _children(spec.seed)[_SEED_AUDIO]
    source = _AudioSource(spec.audio, spec.sample_rate_hz, rng_audio)
    scale = 1.0 / source.peak()
    total = spec.n_samples
    duration = total / spec.sample_rate_hz
    start = 0
    while start < total:
        count = min(block_size, total - start)
        n = np.arange(start, start + count, dtype=np.int64)
        if spec.ramp_from_dbfs is None:
            gain: float | FloatArray = 10.0 ** (spec.peak_dbfs / 20.0)
        else:
            frac = (n / spec.sample_rate_hz) / duration if duration > 0 else np.zeros(count)
            level = spec.ramp_from_dbfs + (spec.peak_dbfs - spec.ramp_from_dbfs) * frac
            gain = 10.0 ** (level / 20.0)
        yield gain * scale * source(n).real
        start += count


def synthesize_audio(spec: AudioSpec) -> npt.NDArray[np.float64]:
    """The whole audio test signal as one float64 array."""
    blocks = list(generate_audio(spec, max(1, min(spec.n_samples, 1 << 20))))
    return np.concatenate(blocks) if blocks else np.zeros(0, np.float64)
