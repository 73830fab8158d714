"""Frozen dataclasses that describe a synthetic signal completely (with its seed).

A :class:`SignalSpec` is the whole recipe of a complex baseband recording: the
transmitter's modulation (:class:`Cw`, :class:`Am`, :class:`Dsb`, :class:`Ssb`) fed by an
audio source (:class:`Tone`, :class:`TwoTone`, :class:`BandNoise`), its amplifier
(:class:`Amplifier`), its frequency behaviour (:class:`FrequencyPlan`), the noise at the
receiver and the receiver's own defects (:class:`Receiver`). :class:`AudioSpec` describes a
real-valued audio test signal for a transmitter's microphone input.

Every parameter name carries its unit (``_hz``, ``_s``, ``_db``, ``_dbc``, ``_dbfs``,
``_deg`` ...). Levels in dBFS refer to full scale ``|x| = 1`` (0 dBFS).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Any, Literal, Union

__all__ = [
    "Tone",
    "TwoTone",
    "BandNoise",
    "Audio",
    "Cw",
    "Am",
    "Dsb",
    "Ssb",
    "Modulation",
    "FrequencyPlan",
    "Amplifier",
    "Receiver",
    "SignalSpec",
    "AudioSpec",
    "spec_to_dict",
    "spec_from_dict",
]

#: Which sideband an SSB transmitter sends.
Sideband = Literal["usb", "lsb"]


def _finite(name: str, value: float) -> None:
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(value):
        raise ValueError(f"{name}={value!r} must be a finite number")


def _positive(name: str, value: float) -> None:
    _finite(name, value)
    if value <= 0:
        raise ValueError(f"{name}={value!r} must be > 0")


def _optional_finite(name: str, value: float | None) -> None:
    if value is not None:
        _finite(name, value)


def _nonnegative(name: str, value: float) -> None:
    _finite(name, value)
    if value < 0:
        raise ValueError(f"{name}={value} must be >= 0")


def _seed(value: object) -> None:
    if isinstance(value, bool) or not isinstance(value, int) or value < 0:
        raise ValueError(f"seed={value!r} must be a non-negative integer")


# -- audio sources -----------------------------------------------------------------------
@dataclass(frozen=True)
class Tone:
    """One audio tone (a single modulating sinusoid)."""

    frequency_hz: float = 1000.0
    """Audio frequency, Hz (> 0)."""
    phase_deg: float = 0.0
    """Phase at t = 0, degrees."""

    def __post_init__(self) -> None:
        _positive("frequency_hz", self.frequency_hz)
        _finite("phase_deg", self.phase_deg)

    @property
    def highest_hz(self) -> float:
        return self.frequency_hz


@dataclass(frozen=True)
class TwoTone:
    """Two audio tones, the classic linearity test (pick frequencies not harmonically related)."""

    f1_hz: float = 700.0
    """Lower tone, Hz."""
    f2_hz: float = 1900.0
    """Upper tone, Hz."""
    balance_db: float = 0.0
    """Power of tone 2 over tone 1, dB (0: equal tones)."""

    def __post_init__(self) -> None:
        _positive("f1_hz", self.f1_hz)
        _positive("f2_hz", self.f2_hz)
        _finite("balance_db", self.balance_db)
        if self.f1_hz == self.f2_hz:
            raise ValueError(f"f1_hz={self.f1_hz} and f2_hz={self.f2_hz} must differ")

    @property
    def highest_hz(self) -> float:
        return max(self.f1_hz, self.f2_hz)


@dataclass(frozen=True)
class BandNoise:
    """Voice-like audio: noise with a flat spectrum from ``low_hz`` to ``high_hz``.

    Made as a random-phase multitone repeating every ``period_s`` (lines every
    ``2/period_s`` Hz, see :func:`iqscope.synth.band_noise_table`), so its spectrum is
    exactly flat, its Hilbert transform exact and the phase continuous across blocks.
    """

    low_hz: float = 300.0
    """Lower band edge, Hz."""
    high_hz: float = 2700.0
    """Upper band edge, Hz."""
    period_s: float = 1.0
    """Repeat period of the noise, s (the line spacing is 2 / period_s Hz)."""

    def __post_init__(self) -> None:
        _positive("low_hz", self.low_hz)
        _positive("high_hz", self.high_hz)
        _positive("period_s", self.period_s)
        if self.high_hz <= self.low_hz:
            raise ValueError(f"high_hz={self.high_hz} must be above low_hz={self.low_hz}")

    @property
    def highest_hz(self) -> float:
        return self.high_hz


Audio = Union[Tone, TwoTone, BandNoise]


# -- transmitter modulations -------------------------------------------------------------
@dataclass(frozen=True)
class Cw:
    """CW: a carrier keyed on and off with raised-cosine edges.

    ``message=None`` is steady key-down. Otherwise the message is sent in Morse at
    ``words_per_minute`` starting at ``start_s`` (element boundaries at half amplitude),
    repeating every ``repeat_period_s`` if given. The level (``SignalSpec.level_dbfs``) is
    the key-down carrier power.
    """

    message: str | None = None
    """Text to key in Morse (letters, digits, spaces), or None for steady key-down."""
    words_per_minute: float = 20.0
    """Keying speed; a dot lasts 1.2 / words_per_minute s."""
    rise_time_s: float = 0.005
    """10-90 % amplitude rise (and fall) time of each edge, s; 0 is hard keying."""
    start_s: float = 0.0
    """Time of the first key-down, s."""
    repeat_period_s: float | None = None
    """Repeat the message with this period, s (None: send it once)."""

    def __post_init__(self) -> None:
        _positive("words_per_minute", self.words_per_minute)
        _nonnegative("rise_time_s", self.rise_time_s)
        _finite("start_s", self.start_s)
        if self.repeat_period_s is not None:
            _positive("repeat_period_s", self.repeat_period_s)


@dataclass(frozen=True)
class Am:
    """AM (A3E): ``Ac·(1 + m·s(t))`` with ``s`` the audio scaled like a unit cosine.

    For a :class:`Tone` each sideband has amplitude ``m·Ac/2`` (``20·log10(m/2)`` dBc) and
    the total power is ``Pc·(1 + m²/2)``. For any audio the sidebands carry
    ``m²/2`` of the carrier power (the audio has the mean square of a unit cosine, 1/2).
    ``SignalSpec.level_dbfs`` is the unmodulated carrier power.
    """

    modulation_index: float = 0.5
    """Modulation index m (dimensionless, 1 = 100 % for a tone)."""
    audio: Audio = field(default_factory=Tone)
    """The modulating audio."""

    def __post_init__(self) -> None:
        _nonnegative("modulation_index", self.modulation_index)


@dataclass(frozen=True)
class Dsb:
    """DSB with suppressed carrier, as from a (possibly unbalanced) diode-ring modulator.

    ``SignalSpec.level_dbfs`` is the total sideband power (both sidebands).
    """

    audio: Audio = field(default_factory=Tone)
    """The modulating audio."""
    carrier_leak_dbc: float | None = None
    """Residual carrier power relative to the total sideband power, dB (e.g. -30);
    None: perfectly balanced. ``carrier_suppression_db`` is its negative."""
    carrier_leak_phase_deg: float = 0.0
    """Phase of the residual carrier relative to the sidebands' reference, degrees."""
    sideband_imbalance_db: float = 0.0
    """Upper over lower sideband power, dB (``sideband_balance_db``; 0 ideal)."""
    sideband_phase_error_deg: float = 0.0
    """Extra phase of the lower sideband, degrees."""

    def __post_init__(self) -> None:
        _optional_finite("carrier_leak_dbc", self.carrier_leak_dbc)
        _finite("carrier_leak_phase_deg", self.carrier_leak_phase_deg)
        _finite("sideband_imbalance_db", self.sideband_imbalance_db)
        _finite("sideband_phase_error_deg", self.sideband_phase_error_deg)


@dataclass(frozen=True)
class Ssb:
    """SSB (J3E) from a phasing model, with opposite sideband and carrier leak.

    The unwanted sideband is set either directly (``opposite_sideband_dbc``) or by the
    phasing network's errors (``gain_error_db``, ``phase_error_deg``; level then follows
    :func:`iqscope.synth.image_rejection_db`). ``SignalSpec.level_dbfs`` is the wanted
    sideband power.
    """

    sideband: Sideband = "usb"
    """Wanted sideband, "usb" or "lsb"."""
    audio: Audio = field(default_factory=Tone)
    """The modulating audio."""
    opposite_sideband_dbc: float | None = None
    """Unwanted sideband power relative to the wanted one, dB (e.g. -40); None: set by
    the gain/phase errors (ideal when both are 0)."""
    opposite_sideband_phase_deg: float = 0.0
    """Phase of the unwanted sideband term, degrees (with ``opposite_sideband_dbc``)."""
    gain_error_db: float = 0.0
    """Amplitude error of the phasing network's Q path, dB."""
    phase_error_deg: float = 0.0
    """Quadrature error of the phasing network, degrees."""
    carrier_leak_dbc: float | None = None
    """Residual carrier power relative to the wanted sideband power, dB; None: none."""
    carrier_leak_phase_deg: float = 0.0
    """Phase of the residual carrier, degrees."""

    def __post_init__(self) -> None:
        if self.sideband not in ("usb", "lsb"):
            raise ValueError(f"sideband={self.sideband!r} must be 'usb' or 'lsb'")
        _optional_finite("opposite_sideband_dbc", self.opposite_sideband_dbc)
        _finite("opposite_sideband_phase_deg", self.opposite_sideband_phase_deg)
        _finite("gain_error_db", self.gain_error_db)
        _finite("phase_error_deg", self.phase_error_deg)
        _optional_finite("carrier_leak_dbc", self.carrier_leak_dbc)
        _finite("carrier_leak_phase_deg", self.carrier_leak_phase_deg)
        if self.opposite_sideband_dbc is not None and (self.gain_error_db or self.phase_error_deg):
            raise ValueError(
                "give opposite_sideband_dbc or gain_error_db/phase_error_deg, not both"
            )


Modulation = Union[Cw, Am, Dsb, Ssb]


# -- everything around the modulation ----------------------------------------------------
@dataclass(frozen=True)
class FrequencyPlan:
    """The carrier's frequency offset from the capture centre and how it moves.

    Instantaneous frequency (Hz)::

        f(t) = carrier_offset_hz + drift_hz_per_s·t
               + warmup_hz·(1 - exp(-t / warmup_time_constant_s)) + r(t)

    with ``r`` a random walk (Brownian motion) of ``random_walk_hz_per_sqrt_s`` Hz/√s
    (``r(0) = 0``; between samples linear). The phase is its exact integral.
    """

    carrier_offset_hz: float = 0.0
    """Carrier (suppressed-carrier reference) offset from the capture centre at t = 0, Hz."""
    drift_hz_per_s: float = 0.0
    """Linear drift, Hz/s."""
    warmup_hz: float = 0.0
    """Total frequency change of an exponential warm-up, Hz."""
    warmup_time_constant_s: float = 60.0
    """Time constant of the warm-up, s."""
    random_walk_hz_per_sqrt_s: float = 0.0
    """Random-walk FM: standard deviation of the frequency change over 1 s, Hz."""
    initial_phase_deg: float = 0.0
    """Carrier phase at t = 0, degrees."""

    def __post_init__(self) -> None:
        for f in fields(self):
            _finite(f.name, getattr(self, f.name))
        _positive("warmup_time_constant_s", self.warmup_time_constant_s)
        if self.random_walk_hz_per_sqrt_s < 0:
            raise ValueError(f"random_walk_hz_per_sqrt_s={self.random_walk_hz_per_sqrt_s} < 0")

    @property
    def is_deterministic(self) -> bool:
        return self.random_walk_hz_per_sqrt_s == 0.0


@dataclass(frozen=True)
class Amplifier:
    """The transmitter's memoryless amplitude nonlinearity (applied to the envelope)."""

    cubic_k_per_fs2: float = 0.0
    """``k`` of ``y = x + k·|x|²·x`` per full-scale amplitude squared (< 0 compresses)."""
    soft_clip_dbfs: float | None = None
    """Envelope limit of a tanh soft clipper, dBFS (None: no clipper)."""

    def __post_init__(self) -> None:
        _finite("cubic_k_per_fs2", self.cubic_k_per_fs2)
        _optional_finite("soft_clip_dbfs", self.soft_clip_dbfs)

    @property
    def is_linear(self) -> bool:
        return self.cubic_k_per_fs2 == 0.0 and self.soft_clip_dbfs is None


@dataclass(frozen=True)
class Receiver:
    """Defects of the receiving SDR: I/Q imbalance image, DC offset, ADC.

    Order of effects: I/Q imbalance on the incoming signal, then additive noise (so the
    noise density in the file is exactly the one asked for), then DC offset, then
    clipping and quantisation.
    """

    image_dbc: float | None = None
    """Image level relative to the signal, dB (e.g. -35); None: set by the gain/phase
    errors below (no image when both are 0)."""
    image_phase_deg: float = 0.0
    """Phase of the image term, degrees (with ``image_dbc``)."""
    iq_gain_imbalance_db: float = 0.0
    """Q over I amplitude ratio, dB."""
    iq_phase_error_deg: float = 0.0
    """Quadrature phase error of the receiver's LO, degrees."""
    dc_offset_dbfs: float | None = None
    """Power of a DC offset at the capture centre, dBFS (None: none)."""
    dc_phase_deg: float = 0.0
    """Phase of the DC offset, degrees."""
    adc_bits: int | None = None
    """Quantise to this many bits per component with two's-complement clipping."""
    clip_full_scale: bool = False
    """Clip I and Q to ±1 (implied by ``adc_bits``)."""

    def __post_init__(self) -> None:
        _optional_finite("image_dbc", self.image_dbc)
        _finite("image_phase_deg", self.image_phase_deg)
        _finite("iq_gain_imbalance_db", self.iq_gain_imbalance_db)
        _finite("iq_phase_error_deg", self.iq_phase_error_deg)
        _optional_finite("dc_offset_dbfs", self.dc_offset_dbfs)
        _finite("dc_phase_deg", self.dc_phase_deg)
        if self.adc_bits is not None and (
            isinstance(self.adc_bits, bool) or not 2 <= int(self.adc_bits) <= 32
        ):
            raise ValueError(f"adc_bits={self.adc_bits!r} must be an integer in 2..32")
        if self.image_dbc is not None and (self.iq_gain_imbalance_db or self.iq_phase_error_deg):
            raise ValueError("give image_dbc or iq_gain_imbalance_db/iq_phase_error_deg, not both")


@dataclass(frozen=True)
class SignalSpec:
    """A complete, seeded recipe for a complex baseband recording.

    ``level_dbfs`` is the mean power of the modulation's reference component: the
    key-down carrier (CW), the unmodulated carrier (AM), the total sideband power (DSB),
    the wanted sideband (SSB); before the amplifier's nonlinearity.
    """

    modulation: Modulation = field(default_factory=Cw)
    """What the transmitter sends."""
    sample_rate_hz: float = 48000.0
    """Complex sample rate, Hz."""
    duration_s: float = 1.0
    """Length, s (rounded to whole samples)."""
    level_dbfs: float = -10.0
    """Power of the reference component, dBFS (see class docstring)."""
    frequency: FrequencyPlan = field(default_factory=FrequencyPlan)
    """Carrier offset and drift."""
    amplifier: Amplifier = field(default_factory=Amplifier)
    """The transmitter's nonlinearity."""
    noise_dbfs_per_hz: float | None = None
    """Complex white Gaussian noise density, two-sided, dBFS/Hz (None: no noise):
    ``E|n|² = 10^(noise_dbfs_per_hz/10)·sample_rate_hz``."""
    receiver: Receiver = field(default_factory=Receiver)
    """The receiver's defects."""
    center_frequency_hz: float | None = None
    """Capture centre frequency (RF), Hz, recorded as metadata only."""
    seed: int = 0
    """Seed of every random choice (noise, random walk, noise-audio phases)."""

    def __post_init__(self) -> None:
        _positive("sample_rate_hz", self.sample_rate_hz)
        _nonnegative("duration_s", self.duration_s)
        _finite("level_dbfs", self.level_dbfs)
        _optional_finite("noise_dbfs_per_hz", self.noise_dbfs_per_hz)
        _optional_finite("center_frequency_hz", self.center_frequency_hz)
        _seed(self.seed)
        if not isinstance(self.modulation, (Cw, Am, Dsb, Ssb)):
            raise ValueError(f"modulation={self.modulation!r} is not Cw, Am, Dsb or Ssb")

    @property
    def n_samples(self) -> int:
        """Number of complex samples, ``round(duration_s·sample_rate_hz)``."""
        return int(round(self.duration_s * self.sample_rate_hz))

    @property
    def kind(self) -> str:
        """Short name of the modulation: cw, am, dsb, usb, lsb."""
        m = self.modulation
        if isinstance(m, Ssb):
            return m.sideband
        return type(m).__name__.lower()


@dataclass(frozen=True)
class AudioSpec:
    """A real-valued audio test signal (for a transmitter's audio input).

    The peak level is the sum of the tone amplitudes (reached when the tones line up;
    for :class:`BandNoise` the true peak of the periodic waveform). With
    ``ramp_from_dbfs`` the level rises linearly in dB from that value at t = 0 to
    ``peak_dbfs`` at the end (a slow drive sweep).
    """

    audio: Audio = field(default_factory=lambda: TwoTone(700.0, 1900.0))
    """The audio source."""
    sample_rate_hz: float = 48000.0
    """Audio sample rate, Hz."""
    duration_s: float = 10.0
    """Length, s."""
    peak_dbfs: float = -6.0
    """Peak level, dBFS (a full-scale sine is 0 dBFS)."""
    ramp_from_dbfs: float | None = None
    """Start level of a linear-in-dB ramp, dBFS (None: constant level)."""
    seed: int = 0
    """Seed of the noise phases (BandNoise only)."""

    def __post_init__(self) -> None:
        _positive("sample_rate_hz", self.sample_rate_hz)
        _nonnegative("duration_s", self.duration_s)
        _finite("peak_dbfs", self.peak_dbfs)
        _optional_finite("ramp_from_dbfs", self.ramp_from_dbfs)
        _seed(self.seed)
        if self.audio.highest_hz >= self.sample_rate_hz / 2:
            raise ValueError(
                f"audio up to {self.audio.highest_hz} Hz needs sample_rate_hz above "
                f"{2 * self.audio.highest_hz}"
            )

    @property
    def n_samples(self) -> int:
        return int(round(self.duration_s * self.sample_rate_hz))

    @property
    def kind(self) -> str:
        return "audio"


# -- plain-dict form (for metadata and for rebuilding a spec) ----------------------------
_TYPES: dict[str, type] = {
    cls.__name__: cls
    for cls in (Tone, TwoTone, BandNoise, Cw, Am, Dsb, Ssb, FrequencyPlan, Amplifier,
                Receiver, SignalSpec, AudioSpec)
}  # fmt: skip


def spec_to_dict(obj: Any) -> dict[str, Any]:
    """A JSON-ready dict of a spec, every nested dataclass tagged with ``"type"``."""
    out: dict[str, Any] = {"type": type(obj).__name__}
    for f in fields(obj):
        value = getattr(obj, f.name)
        if type(value).__name__ in _TYPES and hasattr(value, "__dataclass_fields__"):
            out[f.name] = spec_to_dict(value)
        else:
            out[f.name] = value
    return out


def spec_from_dict(data: dict[str, Any]) -> Any:
    """Rebuild a spec from :func:`spec_to_dict` output (raises ``ValueError`` if malformed)."""
    if not isinstance(data, dict) or data.get("type") not in _TYPES:
        raise ValueError(f"not a synth spec: {data!r:.80}")
    cls = _TYPES[data["type"]]
    names = {f.name for f in fields(cls)}
    kwargs: dict[str, Any] = {}
    for key, value in data.items():
        if key == "type":
            continue
        if key not in names:
            raise ValueError(f"{cls.__name__} has no field {key!r}")
        kwargs[key] = spec_from_dict(value) if isinstance(value, dict) else value
    return cls(**kwargs)

