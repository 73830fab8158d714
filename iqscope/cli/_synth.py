"""``iqscope synth KIND -o FILE``: write a test signal whose answer is known.

Kinds: ``cw``, ``am``, ``dsb``, ``usb``, ``lsb``, ``two-tone`` (complex I/Q recordings,
SigMF or two-channel WAV) and ``audio`` (a real mono WAV for a transmitter's audio
input). Wiring only: the signal is built by :mod:`iqscope.synth`.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import Any, Literal

from ..errors import OutputError, UsageError
from ..synth import (
    Am,
    Amplifier,
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
    cubic_k_for_imd3,
    synth_metadata,
    write_audio,
    write_signal,
)
from ._options import parse_hz

__all__ = ["register", "run", "build_spec", "KINDS"]

#: The signal kinds, in the order ``--help`` lists them.
KINDS = ("cw", "am", "dsb", "usb", "lsb", "two-tone", "audio")

_HELP = {
    "cw": "keyed or steady carrier with raised-cosine edges",
    "am": "AM with modulation index m (tone or voice-like band noise)",
    "dsb": "DSB suppressed carrier with carrier leak and sideband imbalance",
    "usb": "upper-sideband SSB with opposite sideband and carrier leak",
    "lsb": "lower-sideband SSB with opposite sideband and carrier leak",
    "two-tone": "two-tone linearity test (SSB or DSB), optionally through a cubic amplifier",
    "audio": "audio test signal (tone, two-tone, band noise, level ramp) as a mono WAV",
}


def _pair(text: str) -> tuple[float, float]:
    parts = text.replace(" ", "").split(",")
    if len(parts) != 2:
        raise argparse.ArgumentTypeError(f"{text!r} is not two frequencies 'F1,F2' in Hz")
    return parse_hz(parts[0]), parse_hz(parts[1])


def _common(p: argparse.ArgumentParser, audio: bool = False) -> None:
    g = p.add_argument_group("output and timing")
    g.add_argument("-o", "--output", required=True, metavar="FILE",
                   help="output file (.sigmf-meta / base name, or .wav)")
    g.add_argument("--force", action="store_true", help="overwrite existing files")
    g.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    g.add_argument("--sample-rate", type=parse_hz, default=48000.0, metavar="HZ",
                   help="sample rate, Hz (default 48000)")
    g.add_argument("--duration", type=float, default=10.0, metavar="S", help="length, s (default 10)")
    g.add_argument("--json", action="store_true",
                   help="print the file, recipe and analytic truth as one JSON object")
    if audio:
        g.add_argument("--bits", type=int, default=16, choices=(8, 16, 24, 32),
                       help="WAV bits per sample (default 16)")
        return
    g.add_argument("--format", choices=("sigmf", "wav"),
                   help="file format (default: from the extension; sigmf otherwise)")
    g.add_argument("--datatype", default="cf32_le",
                   help="SigMF datatype: cf32_le (default), ci16_le, ci8, cu8 ...")
    g.add_argument("--bits", default="16", choices=("8", "16", "24", "32", "float"),
                   help="two-channel WAV sample format (default 16)")
    g.add_argument("--center", type=parse_hz, metavar="HZ",
                   help="capture centre frequency (RF), Hz, stored as metadata")
    g.add_argument("--level-dbfs", type=float, default=-10.0, metavar="DB",
                   help="power of the reference component (CW/AM carrier, DSB/SSB sidebands), "
                   "dBFS (default -10)")
    f = p.add_argument_group("frequency behaviour")
    f.add_argument("--offset", type=parse_hz, default=None, metavar="HZ",
                   help="carrier offset from the capture centre, Hz (default 0; 1 kHz for two-tone)")
    f.add_argument("--drift-hz-per-min", type=float, default=0.0, metavar="HZ",
                   help="linear drift, Hz/min")
    f.add_argument("--warmup-hz", type=float, default=0.0, metavar="HZ",
                   help="total frequency change of an exponential warm-up, Hz")
    f.add_argument("--warmup-tau-s", type=float, default=60.0, metavar="S",
                   help="warm-up time constant, s (default 60)")
    f.add_argument("--random-walk-hz-per-sqrt-s", type=float, default=0.0, metavar="HZ",
                   help="random-walk FM, Hz/sqrt(s)")
    n = p.add_argument_group("noise, amplifier and receiver")
    n.add_argument("--noise-dbfs-per-hz", type=float, metavar="DB",
                   help="complex white noise density (two-sided), dBFS/Hz")
    n.add_argument("--cubic-k", type=float, default=0.0, metavar="K",
                   help="amplifier y = x + k|x|^2 x, per full scale squared (< 0 compresses)")
    n.add_argument("--soft-clip-dbfs", type=float, metavar="DB", help="tanh envelope limiter level, dBFS")
    n.add_argument("--dc-offset-dbfs", type=float, metavar="DB", help="receiver DC offset, dBFS")
    n.add_argument("--image-dbc", type=float, metavar="DB", help="receiver I/Q image level, dBc")
    n.add_argument("--iq-gain-db", type=float, default=0.0, metavar="DB",
                   help="receiver Q/I gain imbalance, dB")
    n.add_argument("--iq-phase-deg", type=float, default=0.0, metavar="DEG",
                   help="receiver quadrature phase error, degrees")
    n.add_argument("--adc-bits", type=int, metavar="B", help="quantise to B bits with clipping")


def _audio_source(p: argparse.ArgumentParser, default_tone: float = 1000.0) -> None:
    g = p.add_argument_group("modulating audio (one of)")
    x = g.add_mutually_exclusive_group()
    x.add_argument("--tone", type=parse_hz, metavar="HZ",
                   help=f"single audio tone, Hz (default {default_tone:g})")
    x.add_argument("--two-tone", type=_pair, metavar="F1,F2", help="two audio tones, Hz")
    x.add_argument("--band-noise", type=_pair, metavar="LO,HI",
                   help="flat voice-like noise between LO and HI Hz (e.g. 300,2700)")


def _leak(p: argparse.ArgumentParser, what: str) -> None:
    p.add_argument("--carrier-leak-dbc", type=float, metavar="DB",
                   help=f"residual carrier relative to the {what} power, dB (e.g. -30)")
    p.add_argument("--carrier-leak-phase-deg", type=float, default=0.0, metavar="DEG",
                   help="phase of the residual carrier, degrees")


def _ssb_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--opposite-sideband-dbc", type=float, metavar="DB",
                   help="unwanted sideband relative to the wanted one, dB (e.g. -40)")
    p.add_argument("--gain-error-db", type=float, default=0.0, metavar="DB",
                   help="phasing network amplitude error, dB")
    p.add_argument("--phase-error-deg", type=float, default=0.0, metavar="DEG",
                   help="phasing network quadrature error, degrees")
    _leak(p, "wanted sideband")


def _dsb_options(p: argparse.ArgumentParser) -> None:
    _leak(p, "total sideband")
    p.add_argument("--sideband-imbalance-db", type=float, default=0.0, metavar="DB",
                   help="upper over lower sideband power, dB")
    p.add_argument("--sideband-phase-deg", type=float, default=0.0, metavar="DEG",
                   help="extra phase of the lower sideband, degrees")


def register(subparsers: Any) -> None:
    """Add the ``synth`` command (with one sub-command per signal kind) to the CLI."""
    from . import AUDIO_CAUTION

    parser = subparsers.add_parser(
        "synth",
        help="synthesize a test signal with a known answer",
        description="Write a deterministic (seeded) test signal whose figures are known "
        "analytically; SigMF files carry the recipe and the truth in 'iqscope:synth'.",
    )
    kinds = parser.add_subparsers(dest="kind", metavar="KIND", required=True,
                                  parser_class=type(parser))
    for kind in KINDS:
        p = kinds.add_parser(kind, help=_HELP[kind], description=_HELP[kind] + ".",
                             epilog=AUDIO_CAUTION if kind == "audio" else None)
        if kind == "cw":
            p.add_argument("--message", metavar="TEXT",
                           help="text to key in Morse (default: steady key-down)")
            p.add_argument("--wpm", type=float, default=20.0, help="keying speed (default 20)")
            p.add_argument("--rise-time-ms", type=float, default=5.0, metavar="MS",
                           help="10-90%% rise/fall time, ms (default 5)")
            p.add_argument("--repeat-s", type=float, metavar="S", help="repeat the message every S s")
        elif kind == "am":
            p.add_argument("--index", type=float, default=0.5, metavar="M",
                           help="modulation index m (default 0.5)")
            _audio_source(p)
        elif kind == "dsb":
            _audio_source(p)
            _dsb_options(p)
        elif kind in ("usb", "lsb"):
            _audio_source(p)
            _ssb_options(p)
        elif kind == "two-tone":
            p.add_argument("--tones", type=_pair, default=(700.0, 1900.0), metavar="F1,F2",
                           help="audio tones, Hz (default 700,1900: not harmonically related)")
            p.add_argument("--sideband", choices=("usb", "lsb", "dsb"), default="usb",
                           help="transmitter mode (default usb)")
            p.add_argument("--imd3-dbc", type=float, metavar="DB",
                           help="set the compressive cubic amplifier so IMD3 is DB below one tone")
            _ssb_options(p)
            p.add_argument("--sideband-imbalance-db", type=float, default=0.0, metavar="DB",
                           help="DSB only: upper over lower sideband power, dB")
        elif kind == "audio":
            _audio_source(p)
            p.add_argument("--peak-dbfs", type=float, default=-6.0, metavar="DB",
                           help="peak level, dBFS (default -6)")
            p.add_argument("--ramp-from-dbfs", type=float, metavar="DB",
                           help="start level of a slow ramp (linear in dB) up to --peak-dbfs")
        _common(p, audio=kind == "audio")
        p.set_defaults(func=run)


def _audio(args: argparse.Namespace, default_tone: float = 1000.0) -> Tone | TwoTone | BandNoise:
    if getattr(args, "two_tone", None):
        return TwoTone(*args.two_tone)
    if getattr(args, "band_noise", None):
        return BandNoise(*args.band_noise)
    return Tone(args.tone if args.tone is not None else default_tone)


def build_spec(args: argparse.Namespace) -> SignalSpec | AudioSpec:
    """The spec the parsed options describe (raises ``ValueError`` on impossible values)."""
    kind = args.kind
    if kind == "audio":
        return AudioSpec(_audio(args), sample_rate_hz=args.sample_rate, duration_s=args.duration,
                         peak_dbfs=args.peak_dbfs, ramp_from_dbfs=args.ramp_from_dbfs, seed=args.seed)
    level = args.level_dbfs
    mod: Cw | Am | Dsb | Ssb
    cubic_k = args.cubic_k
    offset = args.offset
    if kind == "cw":
        mod = Cw(args.message, words_per_minute=args.wpm, rise_time_s=args.rise_time_ms / 1e3,
                 repeat_period_s=args.repeat_s)
    elif kind == "am":
        mod = Am(args.index, _audio(args))
    elif kind == "dsb":
        mod = Dsb(_audio(args), carrier_leak_dbc=args.carrier_leak_dbc,
                  carrier_leak_phase_deg=args.carrier_leak_phase_deg,
                  sideband_imbalance_db=args.sideband_imbalance_db,
                  sideband_phase_error_deg=args.sideband_phase_deg)
    else:
        if kind == "two-tone":
            audio: Tone | TwoTone | BandNoise = TwoTone(*args.tones)
            sideband = args.sideband
            if offset is None:
                offset = 1000.0
            if args.imd3_dbc is not None:
                if cubic_k:
                    raise ValueError("give --imd3-dbc or --cubic-k, not both")
                # each tone carries half the sideband power (per sideband for DSB)
                share = 2.0 if sideband != "dsb" else 4.0
                cubic_k = cubic_k_for_imd3(args.imd3_dbc, math.sqrt(10 ** (level / 10) / share))
        else:
            audio, sideband = _audio(args), kind
        if sideband == "dsb":
            mod = Dsb(audio, carrier_leak_dbc=args.carrier_leak_dbc,
                      carrier_leak_phase_deg=args.carrier_leak_phase_deg,
                      sideband_imbalance_db=args.sideband_imbalance_db)
        else:
            mod = Ssb(sideband, audio, opposite_sideband_dbc=args.opposite_sideband_dbc,
                      gain_error_db=args.gain_error_db, phase_error_deg=args.phase_error_deg,
                      carrier_leak_dbc=args.carrier_leak_dbc,
                      carrier_leak_phase_deg=args.carrier_leak_phase_deg)
    return SignalSpec(
        mod,
        sample_rate_hz=args.sample_rate,
        duration_s=args.duration,
        level_dbfs=level,
        frequency=FrequencyPlan(
            carrier_offset_hz=0.0 if offset is None else offset,
            drift_hz_per_s=args.drift_hz_per_min / 60.0,
            warmup_hz=args.warmup_hz,
            warmup_time_constant_s=args.warmup_tau_s,
            random_walk_hz_per_sqrt_s=args.random_walk_hz_per_sqrt_s,
        ),
        amplifier=Amplifier(cubic_k_per_fs2=cubic_k, soft_clip_dbfs=args.soft_clip_dbfs),
        noise_dbfs_per_hz=args.noise_dbfs_per_hz,
        receiver=Receiver(image_dbc=args.image_dbc, iq_gain_imbalance_db=args.iq_gain_db,
                          iq_phase_error_deg=args.iq_phase_deg, dc_offset_dbfs=args.dc_offset_dbfs,
                          adc_bits=args.adc_bits),
        center_frequency_hz=args.center,
        seed=args.seed,
    )


def _check_outputs(out: Path, spec: SignalSpec | AudioSpec, args: argparse.Namespace) -> None:
    """Refuse an existing output (without --force) before a single sample is made."""
    from ..io._atomic import check_can_write
    from ..io._common import sidecar_path
    from ..io._sigmf import sigmf_paths

    if isinstance(spec, AudioSpec):
        targets = [out]
    elif (args.format or ("wav" if out.suffix.lower() == ".wav" else "sigmf")) == "wav":
        targets = [out, sidecar_path(out)]
    else:
        targets = list(sigmf_paths(out))
    for target in targets:
        check_can_write(target, force=args.force)


def _check_size(out: Path, spec: SignalSpec | AudioSpec, args: argparse.Namespace) -> None:
    """Refuse before writing when the file cannot fit: WAV's 4 GiB or the free disk space."""
    from ..io import check_free_space, parse_datatype

    if isinstance(spec, AudioSpec):
        n_bytes, wav = spec.n_samples * (int(args.bits) // 8), True
    else:
        wav = (args.format or ("wav" if out.suffix.lower() == ".wav" else "sigmf")) == "wav"
        if wav:
            n_bytes = spec.n_samples * 2 * (4 if args.bits == "float" else int(args.bits) // 8)
        else:
            try:
                n_bytes = spec.n_samples * parse_datatype(args.datatype).sample_bytes
            except ValueError:
                return  # the writer names the bad datatype
    if wav and n_bytes > 0xFFFFFFFF - 64:
        raise OutputError("WAV cannot hold more than 4 GiB of samples; write SigMF instead", out)
    check_free_space(out, n_bytes)


def run(args: argparse.Namespace) -> int:
    """Build the spec from the options and write the file; print a line (or JSON)."""
    try:
        spec = build_spec(args)
    except ValueError as exc:
        raise UsageError(f"synth {args.kind}: {exc}") from None
    out = Path(args.output)
    _check_outputs(out, spec, args)
    _check_size(out, spec, args)
    try:
        if isinstance(spec, AudioSpec):
            if out.suffix.lower() != ".wav":
                raise UsageError(f"synth audio writes a WAV file; name it .wav, not {out.name!r}")
            path = write_audio(out, spec, bits=args.bits, force=args.force)
        else:
            fmt: Literal["sigmf", "wav"] = args.format or (
                "wav" if out.suffix.lower() == ".wav" else "sigmf"
            )
            bits: int | str = args.bits if args.bits == "float" else int(args.bits)
            path = write_signal(out, spec, format=fmt, datatype=args.datatype, bits=bits,
                                force=args.force)
    except ValueError as exc:
        raise UsageError(f"synth {args.kind}: {exc}") from None
    if isinstance(spec, AudioSpec):  # a signal to feed a transmitter: the caution, on stderr
        from . import AUDIO_CAUTION

        print(f"iqscope: {AUDIO_CAUTION}", file=sys.stderr)
    if args.json:
        doc: dict[str, Any] = {"schema": "iqscope.synth/1", "path": str(path), **synth_metadata(spec)}
        print(json.dumps(doc, indent=2))
    else:
        print(f"wrote {path}: {spec.n_samples} samples at {spec.sample_rate_hz:g} Hz "
              f"({spec.n_samples / spec.sample_rate_hz:g} s)", file=sys.stdout)
    return 0
