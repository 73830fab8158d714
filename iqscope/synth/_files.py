"""Writing synthesized signals to files that carry their own recipe and answer.

SigMF files get the spec and its :func:`truth` in the global key ``iqscope:synth``
(and a one-line summary in ``core:description``); two-channel WAV files cannot hold
metadata, so their centre frequency goes to the reader's sidecar and the caller keeps
the recipe (see ``recordings/demos.json``). Audio test signals are mono WAV files.
All files are written atomically by the io layer's writers and never overwrite without
``force``.
"""

from __future__ import annotations

import math
import wave
from pathlib import Path
from typing import Any, Literal

import numpy as np

from .. import __version__
from ..errors import OutputError
from ..io import atomic_write, check_can_write, write_sigmf, write_wav
from ._engine import DEFAULT_BLOCK_SIZE, generate, generate_audio
from ._specs import Am, AudioSpec, BandNoise, Cw, Dsb, SignalSpec, Ssb, Tone, TwoTone, spec_to_dict
from ._truth import truth

__all__ = ["SYNTH_KEY", "describe", "synth_metadata", "write_signal", "write_audio"]

#: SigMF global key holding ``{"generator", "spec", "truth"}`` of a synthesized file.
SYNTH_KEY = "iqscope:synth"

#: SigMF ``core:extensions`` entry declaring the ``iqscope`` namespace (optional to readers).
SYNTH_EXTENSION: dict[str, Any] = {"name": "iqscope", "version": "1.0.0", "optional": True}

FileFormat = Literal["sigmf", "wav"]


def _audio_text(audio: Tone | TwoTone | BandNoise) -> str:
    if isinstance(audio, Tone):
        return f"tone {audio.frequency_hz:g} Hz"
    if isinstance(audio, TwoTone):
        return f"two-tone {audio.f1_hz:g}+{audio.f2_hz:g} Hz"
    return f"band noise {audio.low_hz:g}-{audio.high_hz:g} Hz"


def describe(spec: SignalSpec | AudioSpec) -> str:
    """A one-line human summary of a spec (used as ``core:description``)."""
    if isinstance(spec, AudioSpec):
        text = f"audio {_audio_text(spec.audio)}, peak {spec.peak_dbfs:g} dBFS"
        if spec.ramp_from_dbfs is not None:
            text += f" (ramp from {spec.ramp_from_dbfs:g} dBFS)"
        return f"synthesized {text}, seed {spec.seed}"
    m = spec.modulation
    parts: list[str] = []
    if isinstance(m, Cw):
        parts.append("CW " + ("key-down" if m.message is None else
                              f"'{m.message}' {m.words_per_minute:g} wpm, rise {m.rise_time_s * 1e3:g} ms"))  # fmt: skip
    elif isinstance(m, Am):
        parts.append(f"AM m={m.modulation_index:g}, {_audio_text(m.audio)}")
    elif isinstance(m, Dsb):
        parts.append(f"DSB, {_audio_text(m.audio)}")
        if m.carrier_leak_dbc is not None:
            parts.append(f"carrier leak {m.carrier_leak_dbc:g} dBc")
        if m.sideband_imbalance_db:
            parts.append(f"sideband imbalance {m.sideband_imbalance_db:g} dB")
    else:
        assert isinstance(m, Ssb)
        parts.append(f"{m.sideband.upper()}, {_audio_text(m.audio)}")
        if m.opposite_sideband_dbc is not None:
            parts.append(f"opposite sideband {m.opposite_sideband_dbc:g} dBc")
        elif m.gain_error_db or m.phase_error_deg:
            parts.append(f"phasing error {m.gain_error_db:g} dB / {m.phase_error_deg:g} deg")
        if m.carrier_leak_dbc is not None:
            parts.append(f"carrier leak {m.carrier_leak_dbc:g} dBc")
    parts.append(f"level {spec.level_dbfs:g} dBFS")
    f = spec.frequency
    parts.append(f"offset {f.carrier_offset_hz:g} Hz")
    if f.drift_hz_per_s:
        parts.append(f"drift {f.drift_hz_per_s * 60:g} Hz/min")
    if f.warmup_hz:
        parts.append(f"warm-up {f.warmup_hz:g} Hz, tau {f.warmup_time_constant_s:g} s")
    if f.random_walk_hz_per_sqrt_s:
        parts.append(f"random walk {f.random_walk_hz_per_sqrt_s:g} Hz/sqrt(s)")
    if spec.amplifier.cubic_k_per_fs2:
        parts.append(f"cubic k {spec.amplifier.cubic_k_per_fs2:g}")
    if spec.noise_dbfs_per_hz is not None:
        parts.append(f"noise {spec.noise_dbfs_per_hz:g} dBFS/Hz")
    rx = spec.receiver
    if rx.image_dbc is not None:
        parts.append(f"receiver image {rx.image_dbc:g} dBc")
    elif rx.iq_gain_imbalance_db or rx.iq_phase_error_deg:
        parts.append(f"receiver I/Q error {rx.iq_gain_imbalance_db:g} dB / {rx.iq_phase_error_deg:g} deg")
    if rx.dc_offset_dbfs is not None:
        parts.append(f"receiver DC {rx.dc_offset_dbfs:g} dBFS")
    if rx.adc_bits is not None:
        parts.append(f"{rx.adc_bits}-bit ADC")
    return f"synthesized {', '.join(parts)}; seed {spec.seed}"


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def synth_metadata(spec: SignalSpec | AudioSpec, generator: str | None = None) -> dict[str, Any]:
    """``{"generator", "spec", "truth"}``, JSON-ready (non-finite numbers become null).

    ``generator`` defaults to ``"iqscope <version>"``; pass a fixed text for files that
    must not change with the version (the demo recordings).
    """
    gen = f"iqscope {__version__}" if generator is None else generator
    out: dict[str, Any] = {"generator": gen, "spec": spec_to_dict(spec)}
    if isinstance(spec, SignalSpec):
        out["truth"] = truth(spec)
    result: dict[str, Any] = _jsonable(out)
    return result


def write_signal(
    path: str | Path,
    spec: SignalSpec,
    *,
    format: FileFormat = "sigmf",
    datatype: str = "cf32_le",
    bits: int | str = 16,
    description: str | None = None,
    generator: str | None = None,
    force: bool = False,
    block_size: int = DEFAULT_BLOCK_SIZE,
) -> Path:
    """Synthesize ``spec`` block by block straight into a SigMF or two-channel WAV file.

    Parameters
    ----------
    path : path-like
        Output file (SigMF: base name or either file name).
    spec : SignalSpec
        The signal.
    format : {"sigmf", "wav"}
        File format.
    datatype : str
        SigMF datatype (``cf32_le``, ``ci16_le``, ``ci8``, ``cu8`` ...).
    bits : {8, 16, 24, 32, "float"}
        WAV sample format.
    description : str, optional
        ``core:description``; default :func:`describe`.
    generator : str, optional
        ``core:recorder`` and the ``generator`` of ``iqscope:synth``; default
        ``"iqscope <version>"`` (give a fixed text for files that must not change).
    force : bool
        Overwrite existing files.

    Returns
    -------
    Path
        The written file (SigMF: the ``.sigmf-meta``).
    """
    blocks = generate(spec, block_size)
    if format == "sigmf":
        extra: dict[str, Any] = {
            SYNTH_KEY: synth_metadata(spec, generator),
            "core:extensions": [SYNTH_EXTENSION],
        }
        if generator is not None:
            extra["core:recorder"] = generator
        return write_sigmf(
            path,
            blocks,
            spec.sample_rate_hz,
            center_frequency_hz=spec.center_frequency_hz,
            datatype=datatype,
            description=describe(spec) if description is None else description,
            extra_global=extra,
            force=force,
        )
    if format == "wav":
        return write_wav(
            path, blocks, spec.sample_rate_hz, bits=bits,
            center_frequency_hz=spec.center_frequency_hz, force=force,
        )  # fmt: skip
    raise ValueError(f"{format=} must be 'sigmf' or 'wav'")


def write_audio(
    path: str | Path,
    spec: AudioSpec,
    *,
    bits: int = 16,
    force: bool = False,
    block_size: int = DEFAULT_BLOCK_SIZE,
) -> Path:
    """Write an audio test signal as a mono PCM WAV file (8, 16, 24 or 32 bits).

    Samples are rounded to the nearest code and saturate at the end codes (signed
    ``x·2^(bits-1)``; 8-bit WAV is unsigned with offset 128).
    """
    if bits not in (8, 16, 24, 32):
        raise ValueError(f"{bits=} must be 8, 16, 24 or 32")
    rate = spec.sample_rate_hz
    if rate != math.floor(rate):
        raise ValueError(f"sample_rate_hz={rate} must be a whole number of Hz for WAV")
    target = Path(path)
    check_can_write(target, force=force)
    scale = float(2 ** (bits - 1))
    try:
        with atomic_write(target, force=force) as fh:
            with wave.open(fh, "wb") as wav:
                wav.setnchannels(1)
                wav.setsampwidth(bits // 8)
                wav.setframerate(int(rate))
                for block in generate_audio(spec, block_size):
                    codes = np.clip(np.rint(block * scale), -scale, scale - 1).astype(np.int64)
                    if bits == 8:
                        raw = (codes + 128).astype(np.uint8).tobytes()
                    elif bits == 24:
                        le = codes.astype("<i4").view(np.uint8).reshape(-1, 4)[:, :3]
                        raw = np.ascontiguousarray(le).tobytes()
                    else:
                        raw = codes.astype(f"<i{bits // 8}").tobytes()
                    wav.writeframesraw(raw)
    except wave.Error as exc:
        raise OutputError(f"cannot write WAV: {exc}", target) from exc
    return target
