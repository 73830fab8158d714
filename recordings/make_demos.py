"""Regenerate the demo recordings of this folder, bit for bit.

Scenario: a radio club's bench evening. Members bring home-built rigs to the club's
dummy load and a sampling tap feeding a small SDR receiver, and record each one:

=======================  ==============================================================
file                     what is on the bench
=======================  ==============================================================
am80m_bench              an 80 m AM rig, 1 kHz test tone at m = 0.85 (cf32_le)
ssb20m_kit               a 20 m phasing SSB kit, USB, voice-like noise 300-2700 Hz
ssb20m_twotone           the same kit on a two-tone test, its PA slightly compressing
dsb40m_bench             a 40 m DSB rig whose diode ring is out of balance (carrier leak)
beacon30m_warmup.wav     a 30 m beacon's carrier drifting while its crystal warms up
dsb40m_counts            a second 40 m DSB rig, recorded by a member's own 12-bit receiver
                         whose program writes cf32 in ADC counts (|I|, |Q| up to 2048),
                         tuned so that the carrier sits 250 Hz from the capture centre
=======================  ==============================================================

Every signal is synthesized by :mod:`iqscope.synth` from a fixed seed; the SigMF files
carry their recipe and analytic truth in the global key ``iqscope:synth``, and
``demos.json`` lists every file's recipe, truth and SHA-256 (the WAV file has no room
for metadata: its centre frequency is in the sidecar ``.wav.iqscope.json``).

Usage::

    python recordings/make_demos.py            # rewrite the files next to this script
    python recordings/make_demos.py --out DIR  # write them somewhere else

The output does not depend on the machine's block size or load; the test suite
regenerates everything into a temporary folder and compares the hashes.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import sys
from pathlib import Path
from typing import Any

import numpy as np

from iqscope.synth._files import SYNTH_EXTENSION
from iqscope.synth import (
    Am,
    Amplifier,
    BandNoise,
    Cw,
    Dsb,
    FrequencyPlan,
    Receiver,
    SignalSpec,
    SYNTH_KEY,
    Ssb,
    Tone,
    TwoTone,
    cubic_k_for_imd3,
    describe,
    synth_metadata,
    write_signal,
)

#: Fixed ``core:recorder`` / generator text, so the files do not change with the version.
GENERATOR = "iqscope synth (recordings/make_demos.py)"

#: The 20 m kit's phasing network: 0.15 dB amplitude and 1.2 degree quadrature error.
KIT_GAIN_ERROR_DB = 0.15
KIT_PHASE_ERROR_DEG = 1.2


def demo_specs() -> dict[str, tuple[SignalSpec, dict[str, Any]]]:
    """The demo recordings: name -> (spec, writer options)."""
    # the SSB captures: receiver DC only (an image would land in the mirror band and make
    # the opposite-sideband figure partly the receiver's, see the AM file for an image)
    rx_dc = Receiver(dc_offset_dbfs=-58.0, dc_phase_deg=-30.0, adc_bits=16)
    specs: dict[str, tuple[SignalSpec, dict[str, Any]]] = {}

    specs["am80m_bench"] = (
        SignalSpec(
            Am(0.85, Tone(1000.0)),
            sample_rate_hz=24000.0,
            duration_s=6.0,
            level_dbfs=-14.0,
            frequency=FrequencyPlan(carrier_offset_hz=4000.0, drift_hz_per_s=0.3 / 60.0),
            noise_dbfs_per_hz=-115.0,
            # float file: quantise to 24 bits so every value is exact in float32
            receiver=Receiver(image_dbc=-42.0, dc_offset_dbfs=-60.0, adc_bits=24),
            center_frequency_hz=3_700_000.0,
            seed=1080,
        ),
        {"format": "sigmf", "datatype": "cf32_le"},
    )

    specs["ssb20m_kit"] = (
        SignalSpec(
            Ssb("usb", BandNoise(300.0, 2700.0, period_s=1.0), gain_error_db=KIT_GAIN_ERROR_DB,
                phase_error_deg=KIT_PHASE_ERROR_DEG, carrier_leak_dbc=-46.0,
                carrier_leak_phase_deg=70.0),
            sample_rate_hz=48000.0,
            duration_s=6.0,
            level_dbfs=-16.0,
            frequency=FrequencyPlan(carrier_offset_hz=1000.0),
            noise_dbfs_per_hz=-122.0,
            receiver=rx_dc,
            center_frequency_hz=14_200_000.0,
            seed=20,
        ),
        {"format": "sigmf", "datatype": "ci16_le"},
    )

    level = -12.0
    tone_amplitude = (10 ** (level / 10) / 2) ** 0.5  # each tone: half the sideband power
    specs["ssb20m_twotone"] = (
        SignalSpec(
            Ssb("usb", TwoTone(700.0, 1900.0), gain_error_db=KIT_GAIN_ERROR_DB,
                phase_error_deg=KIT_PHASE_ERROR_DEG, carrier_leak_dbc=-46.0,
                carrier_leak_phase_deg=70.0),
            sample_rate_hz=48000.0,
            duration_s=4.0,
            level_dbfs=level,
            frequency=FrequencyPlan(carrier_offset_hz=1000.0),
            amplifier=Amplifier(cubic_k_per_fs2=cubic_k_for_imd3(-32.0, tone_amplitude)),
            noise_dbfs_per_hz=-122.0,
            receiver=rx_dc,
            center_frequency_hz=14_200_000.0,
            seed=1021,
        ),
        {"format": "sigmf", "datatype": "ci16_le"},
    )

    specs["dsb40m_bench"] = (
        SignalSpec(
            Dsb(Tone(1000.0), carrier_leak_dbc=-27.0, carrier_leak_phase_deg=35.0,
                sideband_imbalance_db=0.7),
            sample_rate_hz=24000.0,
            duration_s=8.0,
            level_dbfs=-12.0,
            frequency=FrequencyPlan(carrier_offset_hz=3210.0),
            noise_dbfs_per_hz=-118.0,
            receiver=Receiver(dc_offset_dbfs=-58.0, adc_bits=16),
            center_frequency_hz=7_150_000.0,
            seed=2040,
        ),
        {"format": "sigmf", "datatype": "ci16_le"},
    )

    specs["beacon30m_warmup.wav"] = (
        SignalSpec(
            Cw(None),
            sample_rate_hz=8000.0,
            duration_s=80.0,
            level_dbfs=-16.0,
            frequency=FrequencyPlan(carrier_offset_hz=1200.0, drift_hz_per_s=-0.6 / 60.0,
                                    warmup_hz=-18.0, warmup_time_constant_s=25.0),
            noise_dbfs_per_hz=-125.0,
            receiver=Receiver(dc_offset_dbfs=-62.0, adc_bits=16),
            center_frequency_hz=10_140_000.0,
            seed=2030,
        ),
        {"format": "wav", "bits": 16},
    )
    specs["dsb40m_counts"] = (
        SignalSpec(
            Dsb(Tone(1000.0), carrier_leak_dbc=-38.0, carrier_leak_phase_deg=20.0),
            sample_rate_hz=24000.0,
            duration_s=4.0,
            level_dbfs=-9.0,
            frequency=FrequencyPlan(carrier_offset_hz=250.0),
            noise_dbfs_per_hz=-112.0,
            # a small 12-bit receiver: its DC line 250 Hz from the carrier, a -45 dBc image
            receiver=Receiver(dc_offset_dbfs=-52.0, dc_phase_deg=40.0, image_dbc=-45.0, adc_bits=12),
            center_frequency_hz=7_120_000.0,
            seed=4012,
        ),
        # written as float32 of the converter's codes: full scale is 2048, not 1.0
        {"format": "sigmf", "datatype": "cf32_le", "adc_counts": 2048},
    )
    return specs


def _write_counts(path: Path, spec: SignalSpec, counts: int) -> None:
    """Write ``spec`` as a receiver program that stores ADC counts in cf32 does: the
    samples (already quantised to the converter's codes, full scale 1) times ``counts``,
    exact in float32."""
    from iqscope.io import write_sigmf
    from iqscope.synth import generate

    blocks = (b * np.float32(counts) for b in generate(spec))
    write_sigmf(
        path, blocks, spec.sample_rate_hz, center_frequency_hz=spec.center_frequency_hz, datatype="cf32_le",
        description=describe(spec) + f"; written in ADC counts (full scale {counts})",
        extra_global={SYNTH_KEY: synth_metadata(spec, GENERATOR), "core:extensions": [SYNTH_EXTENSION],
                      "core:recorder": GENERATOR},
        force=True,
    )


def _files(out: Path, name: str, fmt: str) -> list[Path]:
    if fmt == "wav":
        return [out / name, out / (name + ".iqscope.json")]
    return [out / (name + ".sigmf-meta"), out / (name + ".sigmf-data")]


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def make_demos(out: Path) -> list[Path]:
    """Write every demo recording and ``demos.json`` into ``out``; return the paths."""
    out.mkdir(parents=True, exist_ok=True)
    written: list[Path] = []
    manifest: dict[str, Any] = {"generator": GENERATOR, "recordings": {}}
    for name, (spec, options) in demo_specs().items():
        path = out / name
        options = dict(options)
        counts = options.pop("adc_counts", None)
        if counts is None:
            write_signal(path, spec, generator=GENERATOR, force=True, **options)
        else:
            _write_counts(path, spec, int(counts))
        files = _files(out, name, options["format"])
        written += files
        entry = synth_metadata(spec, GENERATOR)
        del entry["generator"]
        manifest["recordings"][name] = {
            "open": files[0].name,
            "description": describe(spec),
            "files": {f.name: _sha256(f) for f in files},
            **entry,
        }
        if counts is not None:
            manifest["recordings"][name]["full_scale"] = counts
    index = out / "demos.json"
    index.write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    written.append(index)
    return written


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                        help="folder to write into (default: this script's folder)")
    args = parser.parse_args(argv)
    for path in make_demos(args.out):
        print(f"{path}  {path.stat().st_size / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
