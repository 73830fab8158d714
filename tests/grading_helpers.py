"""Hand-made :class:`Analysis` objects for the grading and report tests.

The grading and report layers only read an Analysis; these builders make small,
plausible ones without running the measurement pipeline. The spectrum of
:func:`dsb_analysis` is a periodogram of a synthetic DSB signal (two sideband lines and
a carrier leak a known number of dB below the sideband power, in white noise), averaged
with numpy only: it is test data, not a measurement.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from iqscope.dsp._types import Spectrum
from iqscope.measure._analysis import Analysis, RecordingInfo, SignalInfo, Trace
from iqscope.measure._result import Artefact, Measurement

FS = 48_000.0
CENTER = 7_100_000.0
CARRIER = 3_210.0
TONE = 1_000.0
#: Mean power of dsb_spectrum's two sideband lines (amplitude 0.25 each): 10 log10(2 x 0.0625).
SIGNAL_DBFS = -9.030899869919435


def recording_info(path: str = "bench/dsb40m.sigmf-meta", n: int = 480_000) -> RecordingInfo:
    return RecordingInfo(
        path=path, format="sigmf", sample_rate_hz=FS, center_frequency_hz=CENTER, n_samples=n, datatype="ci16_le"
    )


def dsb_spectrum(carrier_below_db: float, *, nfft: int = 4096, averages: int = 8, seed: int = 7) -> Spectrum:
    """Averaged Hann periodogram (dBFS scaling of Heinzel 2002 section 9, complex form)."""
    rng = np.random.default_rng(seed)
    n = np.arange(nfft * averages)
    a_sb = 0.25  # each sideband line amplitude
    p_sb_total = 2 * a_sb**2
    a_c = np.sqrt(p_sb_total * 10 ** (-carrier_below_db / 10))
    x = (
        a_sb * np.exp(2j * np.pi * (CARRIER + TONE) / FS * n)
        + a_sb * np.exp(2j * np.pi * (CARRIER - TONE) / FS * n)
        + a_c * np.exp(2j * np.pi * CARRIER / FS * n)
    )
    noise_psd = 10 ** (-120 / 10)  # FS^2/Hz
    x = x + np.sqrt(noise_psd * FS / 2) * (rng.standard_normal(n.size) + 1j * rng.standard_normal(n.size))
    w = np.hanning(nfft + 1)[:-1]
    s2 = float(np.sum(w**2))
    blocks = x.reshape(averages, nfft) * w
    psd = np.mean(np.abs(np.fft.fftshift(np.fft.fft(blocks, axis=1), axes=1)) ** 2, axis=0) / (FS * s2)
    freqs = np.fft.fftshift(np.fft.fftfreq(nfft, 1 / FS))
    return Spectrum(
        freqs_hz=freqs,
        psd=psd,
        bin_hz=FS / nfft,
        enbw_hz=1.5 * FS / nfft,
        window="hann",
        n_averages=averages,
        sample_rate_hz=FS,
    )


def traces() -> dict[str, Trace]:
    t = np.linspace(0, 10, 500)
    env = np.abs(np.cos(2 * np.pi * 0.9 * t)) * 0.5
    times = np.linspace(0, 10, 40)
    freqs = np.linspace(-FS / 2, FS / 2, 256, endpoint=False)
    img = -120 + 80 * np.exp(-(((freqs[None, :] - CARRIER) / 800.0) ** 2)) + 0 * times[:, None]
    # Layouts of iqscope.measure.pipeline: envelope in dBFS per block with the peak in
    # extra; spectrogram with x = frequencies and one row per time in extra["rows"].
    mean_db = 10 * np.log10(np.maximum(env**2, 1e-6))
    return {
        "envelope": Trace(
            x=t, y=mean_db, x_label="Time (s)", y_label="Mean power (dBFS)", extra={"peak_dbfs": mean_db + 3.0}
        ),
        "spectrogram": Trace(
            x=freqs,
            y=img,
            x_label="Frequency offset (Hz)",
            y_label="Time (s)",
            extra={"rows": times, "z_label": "PSD (dBFS/Hz)"},
        ),
    }


def dsb_measurements(carrier_db: float, *, noise_limited: bool = False) -> dict[str, Measurement]:
    return {
        "carrier_suppression_db": Measurement(
            value=carrier_db,
            unit="dB",
            uncertainty=None if noise_limited else 0.2,
            limited_by_noise=noise_limited,
            bound="lower" if noise_limited else None,
            note="sideband power over residual carrier power",
        ),
        "sideband_balance_db": Measurement(value=0.12, unit="dB", uncertainty=0.05, note="upper over lower"),
        "occupied_bandwidth_hz": Measurement(value=2_100.0, unit="Hz", uncertainty=15.0, note="99 % power"),
        "bandwidth_26db_hz": Measurement(value=2_050.0, unit="Hz", uncertainty=12.0, note="26 dB below peak"),
        "noise_floor_dbfs_per_hz": Measurement(value=-120.0, unit="dBFS/Hz", uncertainty=0.1, note="median"),
        "peak_dbfs": Measurement(value=-6.02, unit="dBFS", uncertainty=None, note="|x|^2 max"),
        "clipped_fraction": Measurement(value=0.0, unit="1", uncertainty=None, note="samples at full scale"),
        "worst_spur_dbc": spur_measurement(),
    }


def spur_measurement(level_dbc: float = -61.3) -> Measurement:
    """A spur 16 kHz above the carrier (spurious domain: beyond 2.5 x 6 kHz, SM.1539) and
    the receiver's DC line at the capture centre (out-of-band domain, flagged)."""
    spurs = [
        {"offset_hz": 0.0, "frequency_hz": CENTER, "level_dbc": -52.0, "level_dbm": None,
         "uncertainty_db": 0.1, "domain": "out-of-band", "artefact": "dc"},
        {"offset_hz": CARRIER + 16_000.0, "frequency_hz": CENTER + CARRIER + 16_000.0, "level_dbc": level_dbc,
         "level_dbm": None, "uncertainty_db": 0.4, "domain": "spurious", "artefact": None},
    ]
    return Measurement(
        value=level_dbc,
        unit="dBc",
        uncertainty=0.4,
        note="strongest line in the spurious domain, re mean power of the fundamental",
        details={
            "spurs": spurs,
            "necessary_bandwidth_hz": 6_000.0,
            "emission_centre_hz": CARRIER,
            "spurious_boundary_hz": 15_000.0,
            "searched_spurious_hz": 14_580.0,
            "reference_dbfs": SIGNAL_DBFS,
        },
    )


def dsb_analysis(
    carrier_db: float = 37.6,
    *,
    noise_limited: bool = False,
    measurements: Mapping[str, Measurement] | None = None,
    artefacts: tuple[Artefact, ...] = (),
    spectrum: bool = True,
    with_traces: bool = True,
    path: str = "bench/dsb40m.sigmf-meta",
) -> Analysis:
    ms = dict(dsb_measurements(carrier_db, noise_limited=noise_limited) if measurements is None else measurements)
    return Analysis(
        recording=recording_info(path),
        signal=SignalInfo(
            mode="dsb", carrier_offset_hz=CARRIER, carrier_frequency_hz=CENTER + CARRIER, how="centre of symmetry"
        ),
        measurements=ms,
        artefacts=artefacts,
        spectrum=dsb_spectrum(carrier_db) if spectrum else None,
        markers={
            "carrier": CARRIER,
            "usb": CARRIER + TONE,
            "lsb": CARRIER - TONE,
            "obw_lower": CARRIER - 1_050.0,
            "obw_upper": CARRIER + 1_050.0,
            "bw26_lower": CARRIER - 1_025.0,
            "bw26_upper": CARRIER + 1_025.0,
        },
        traces=traces() if with_traces else {},
    )


def analysis_with(mode: str, measurements: Mapping[str, Measurement]) -> Analysis:
    """A bare analysis (no spectrum or traces) of ``mode`` with the given figures."""
    return Analysis(
        recording=recording_info(),
        signal=SignalInfo(mode=mode, carrier_offset_hz=CARRIER, carrier_frequency_hz=CENTER + CARRIER),
        measurements=dict(measurements),
    )
