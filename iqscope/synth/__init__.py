"""Deterministic synthesizer of complex baseband test signals with a known answer.

Describe a signal with a :class:`SignalSpec` (a transmitter modulation fed by an audio
source, its amplifier, its frequency behaviour, noise and the receiver's defects), then
stream it with :func:`generate` (complex64 blocks with continuous phase) or get it whole
with :func:`synthesize`. :func:`truth` and :func:`expected_lines` give the figures and
spectral lines it must measure as, from closed forms. :class:`AudioSpec` and
:func:`generate_audio` make real audio test signals (tone, two-tone, level ramp) for a
transmitter's audio input. :func:`write_signal` and :func:`write_audio` write files
(SigMF or WAV) that carry their recipe and truth in the metadata.

Every parameter name carries its unit; the same spec and seed always give identical
samples, whatever the block size.

Modulations
    :class:`Cw`, :class:`Am`, :class:`Dsb`, :class:`Ssb`
Audio sources
    :class:`Tone`, :class:`TwoTone`, :class:`BandNoise`
Around them
    :class:`FrequencyPlan`, :class:`Amplifier`, :class:`Receiver`
Building blocks (pure functions)
    :func:`cubic`, :func:`soft_clip`, :func:`quantize`, :func:`image_rejection_db`,
    :func:`quadrature_coefficients`, :func:`key_envelope`, :func:`morse_intervals`,
    :func:`band_noise_table`, :func:`cubic_k_for_imd3`
"""

from __future__ import annotations

from ._engine import (
    DEFAULT_BLOCK_SIZE,
    Block,
    audio_lines,
    deterministic_cycles,
    deterministic_frequency_hz,
    envelope_coefficients,
    generate,
    generate_audio,
    generate_blocks,
    receiver_coefficients,
    synthesize,
    synthesize_audio,
)
from ._signals import (
    MORSE_CODE,
    RC_RISE_FRACTION,
    apply_image,
    band_noise_lines,
    band_noise_table,
    clip_full_scale,
    cubic,
    cubic_k_for_imd3,
    image_dbc,
    image_rejection_db,
    key_envelope,
    morse_intervals,
    quadrature_coefficients,
    quantize,
    rc_edge_duration_s,
    soft_clip,
)
from ._specs import (
    Am,
    Amplifier,
    Audio,
    AudioSpec,
    BandNoise,
    Cw,
    Dsb,
    FrequencyPlan,
    Modulation,
    Receiver,
    SignalSpec,
    Ssb,
    Tone,
    TwoTone,
    spec_from_dict,
    spec_to_dict,
)
from ._files import SYNTH_KEY, describe, synth_metadata, write_audio, write_signal
from ._truth import Line, envelope_lines, envelope_peak, expected_lines, occupied_bandwidth_hz, truth

__all__ = [
    "DEFAULT_BLOCK_SIZE",
    "SYNTH_KEY",
    "MORSE_CODE",
    "RC_RISE_FRACTION",
    "Am",
    "Amplifier",
    "Audio",
    "AudioSpec",
    "BandNoise",
    "Block",
    "Cw",
    "Dsb",
    "FrequencyPlan",
    "Line",
    "Modulation",
    "Receiver",
    "SignalSpec",
    "Ssb",
    "Tone",
    "TwoTone",
    "apply_image",
    "audio_lines",
    "band_noise_lines",
    "band_noise_table",
    "clip_full_scale",
    "cubic",
    "cubic_k_for_imd3",
    "deterministic_cycles",
    "describe",
    "deterministic_frequency_hz",
    "envelope_coefficients",
    "envelope_lines",
    "envelope_peak",
    "expected_lines",
    "generate",
    "generate_audio",
    "generate_blocks",
    "image_dbc",
    "image_rejection_db",
    "key_envelope",
    "morse_intervals",
    "occupied_bandwidth_hz",
    "quadrature_coefficients",
    "quantize",
    "rc_edge_duration_s",
    "receiver_coefficients",
    "soft_clip",
    "spec_from_dict",
    "spec_to_dict",
    "synth_metadata",
    "synthesize",
    "synthesize_audio",
    "truth",
    "write_audio",
    "write_signal",
]
