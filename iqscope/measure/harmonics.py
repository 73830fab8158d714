"""Harmonics from several recordings (f, 2f, 3f ...): levels in dBc re the fundamental's mean power.

A small receiver's recording spans a few tens of kHz to a few MHz, so the harmonics of
an HF transmitter lie outside the recording of its fundamental. The builder records the
fundamental, then retunes the receiver to 2f, 3f ... with the same gain and attenuator
chain (or a calibration), and this module combines the recordings into a table of
harmonic levels relative to the mean power of the fundamental.

Each recording is read once, in chunks (streaming Welch spectrum and level statistics).
The fundamental's emission band is its 99 % occupied band; harmonic ``n`` is looked for
in the band ``n`` times as wide around ``n`` times the fundamental's frequency (a
harmonic of a modulated signal is ``n`` times as wide), widened by a line's main lobe.
Its mean power is the noise-subtracted PSD integrated over that band; when it is not
detectable above the noise its level is an upper bound.

This module only measures. Which limits apply (47 CFR 97.307, RR Appendix 3 ...) and
whether a harmonic meets them is decided in :mod:`iqscope.grading` from a limits profile
(:func:`iqscope.grading.grade_harmonics`).

The receiver-or-transmitter check (:func:`attenuation_step_check`): change the
attenuation before the receiver by a known step; a product made by the transmitter
moves 1 dB per dB, one made in the receiver by a second-order process 2 dB per dB and
by a third-order process 3 dB per dB (REFERENCES.md item 11, common practice; the slope
of an n-th order product is n, the standard power-series result of item 6).

References
----------
.. [1] 47 CFR 97.307(d) and (e): spurious levels are the mean power of the emission
   relative to the mean power of the fundamental (the dBc reference used here).
.. [2] ITU RR No. 1.145 (spurious emission includes harmonic emissions).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Final, Literal

import numpy as np

from ..dsp._levels import LevelAccumulator
from ..dsp._lines import BOUND_SIGMAS, band_power
from ..dsp._noise import noise_floor
from ..dsp._spectrum import SpectrumAccumulator
from ..dsp._types import Spectrum
from ..errors import MetadataError, UsageError
from ..io._recording import Recording
from .designator import emission_band
from .imd import line_half_width_hz

__all__ = [
    "StepVerdict",
    "RecordingLevels",
    "HarmonicRow",
    "HarmonicsTable",
    "StepCheck",
    "attenuation_step_check",
    "analyse_levels",
    "harmonics_table",
]

#: Outcome of the attenuation-step check.
StepVerdict = Literal["transmitter", "receiver (2nd order)", "receiver (3rd order)", "unclear"]

#: Frequency budget for finding a harmonic: main lobe plus this fraction of n f (a
#: receiver reference drifting 1 ppm between recordings; our assumption).
FREQUENCY_MARGIN_PPM: Final = 1.0
#: Systematic 1-sigma of a level from one recording to another with the same settings:
#: receiver gain flatness across bands (our estimate; calibrate for better).
RECEIVER_FLATNESS_DB: Final = 0.5
#: Metadata key ``iqscope capture`` writes for the receiver gain (see measure/power.py).
GAIN_KEY: Final = "iqscope:gain_db"


# --------------------------------------------------------------------------------------
# The attenuation-step check (pure)
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class StepCheck:
    """Result of :func:`attenuation_step_check`."""

    slope: float
    """dB the product moved per dB of attenuation step."""
    verdict: StepVerdict
    note: str


def attenuation_step_check(
    level_a_db: float, level_b_db: float, step_db: float, tolerance: float = 0.4
) -> StepCheck:
    """Is a product made by the transmitter or by the receiver? Use a known attenuation step.

    Parameters
    ----------
    level_a_db, level_b_db : float
        Absolute level of the product (dBFS or dBm, not dBc) in recording A and in
        recording B, made with ``step_db`` more attenuation before the receiver.
    step_db : float
        Attenuation added for recording B, dB (> 0).
    tolerance : float
        How far from 1, 2 or 3 the slope may be and still be named, dB/dB.

    Returns
    -------
    StepCheck
        The slope (level change / step) and what it suggests.

    Notes
    -----
    A product present at the receiver input drops by exactly the step (slope 1). A
    product the receiver makes itself from a stronger signal drops by the order of the
    process times the step: about 2 for second order, about 3 for third-order
    intermodulation (REFERENCES.md item 11: "a true transmitter product moves 1:1, a
    receiver-generated IMD3 product moves ~3:1"; power-series result, item 6). Steps of
    6-10 dB work best: large enough to see, small enough to keep the product above the
    noise.

    Examples
    --------
    >>> attenuation_step_check(-60.0, -70.0, 10.0).verdict
    'transmitter'
    >>> attenuation_step_check(-60.0, -90.0, 10.0).verdict
    'receiver (3rd order)'
    """
    if not step_db > 0 or not math.isfinite(step_db):
        raise ValueError(f"{step_db=} must be a positive attenuation step in dB")
    if not (math.isfinite(level_a_db) and math.isfinite(level_b_db)):
        raise ValueError("levels must be finite")
    slope = (level_a_db - level_b_db) / step_db
    if abs(slope - 1.0) <= tolerance:
        return StepCheck(slope, "transmitter", f"moved {slope:.2f} dB per dB: made by the transmitter")
    if abs(slope - 2.0) <= tolerance:
        return StepCheck(slope, "receiver (2nd order)", f"moved {slope:.2f} dB per dB: likely a receiver product")
    if abs(slope - 3.0) <= tolerance:
        return StepCheck(
            slope, "receiver (3rd order)", f"moved {slope:.2f} dB per dB: likely the receiver's own intermodulation"
        )
    return StepCheck(slope, "unclear", f"moved {slope:.2f} dB per dB: neither 1, 2 nor 3; repeat with another step")


# --------------------------------------------------------------------------------------
# One recording
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RecordingLevels:
    """What one streaming pass over a recording gives: spectrum, noise floor, levels."""

    path: str
    center_frequency_hz: float
    sample_rate_hz: float
    spectrum: Spectrum
    noise_psd: float
    """Noise floor, FS²/Hz (bias-corrected median of the bins)."""
    mean_power: float
    """Mean power of the samples, FS²."""
    peak_power: float
    """Largest |x|², FS²."""
    gain_db: float | None
    """Receiver gain from the metadata (``iqscope:gain_db``), when recorded."""


def _choose_nfft(rec: Recording, target_bin_hz: float = 5.0) -> int:
    want = rec.sample_rate_hz / target_bin_hz
    nfft = 1 << max(8, int(math.ceil(math.log2(max(want, 1.0)))))
    while nfft > 256 and nfft * 4 > rec.n_samples:
        nfft //= 2
    return nfft


def analyse_levels(rec: Recording, nfft: int | None = None, chunk: int = 1 << 18) -> RecordingLevels:
    """One streaming pass: averaged spectrum, noise floor, mean and peak power.

    Raises
    ------
    MetadataError
        When the recording has no centre frequency (harmonics need absolute frequencies).
    """
    if rec.center_frequency_hz is None:
        raise MetadataError(
            "the capture centre frequency is unknown; harmonics need it (give it in the metadata: SigMF "
            "core:frequency, an HDF5 attribute, or the .iqscope.json sidecar of a WAV or raw file)",
            rec.path,
        )
    n = _choose_nfft(rec) if nfft is None else nfft
    if rec.n_samples < n:
        raise MetadataError(f"recording too short ({rec.n_samples} samples) for a {n}-point spectrum", rec.path)
    acc = SpectrumAccumulator(n, rec.sample_rate_hz, workers=1)
    lev = LevelAccumulator(getattr(rec, "clip_level", 1.0))
    for block in rec.chunks(chunk):
        acc.update(block)
        lev.update(block)
    spec = acc.result()
    levels = lev.result()
    gain = rec.metadata.get(GAIN_KEY) if isinstance(rec.metadata, Mapping) else None
    if gain is None and isinstance(rec.metadata, Mapping):
        glob = rec.metadata.get("global")
        if isinstance(glob, Mapping):
            gain = glob.get(GAIN_KEY)
    return RecordingLevels(
        path=str(rec.path) if rec.path is not None else "<array>",
        center_frequency_hz=float(rec.center_frequency_hz),
        sample_rate_hz=rec.sample_rate_hz,
        spectrum=spec,
        noise_psd=noise_floor(spec).psd,
        mean_power=levels.mean_power,
        peak_power=levels.peak_power,
        gain_db=float(gain) if isinstance(gain, (int, float)) else None,
    )


def _band_power(spec: Spectrum, lo: float, hi: float, noise_psd: float) -> tuple[float, float, bool]:
    """Noise-subtracted power in [lo, hi] (Hz offsets), its 1-sigma, and whether detected."""
    n_bins = int(np.count_nonzero((spec.freqs_hz >= lo) & (spec.freqs_hz <= hi)))
    # A narrow band is a line (deterministic); dsp.band_power's random-signal term also
    # needs more bins than its 33-tap correlation kernel.
    bp = band_power(spec, lo, hi, noise_psd, random_signal=n_bins > 40)
    if bp.n_bins == 0:
        return math.nan, math.nan, False
    return bp.power, bp.sigma, bp.detected


# --------------------------------------------------------------------------------------
# The table
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class HarmonicRow:
    """One harmonic (n >= 2) or the fundamental (n = 1)."""

    n: int
    frequency_hz: float
    """Expected frequency, n times the fundamental's, Hz."""
    path: str
    band_hz: tuple[float, float]
    """Absolute band integrated, Hz."""
    level_dbfs: float | None
    """Mean power in the band, dBFS, gain-corrected to the fundamental's receiver gain."""
    level_dbm: float | None
    level_dbc: float | None
    """Re mean power of the fundamental, dB (negative); a bound when limited_by_noise."""
    uncertainty_db: float | None
    limited_by_noise: bool
    step: StepCheck | None = None
    note: str = ""

    def to_json(self) -> dict[str, Any]:
        return {
            "n": self.n,
            "frequency_hz": self.frequency_hz,
            "path": self.path,
            "band_hz": list(self.band_hz),
            "level_dbfs": _finite(self.level_dbfs),
            "level_dbm": _finite(self.level_dbm),
            "level_dbc": _finite(self.level_dbc),
            "uncertainty_db": _finite(self.uncertainty_db),
            "limited_by_noise": self.limited_by_noise,
            "bound": "upper" if self.limited_by_noise else None,
            "attenuation_step": None
            if self.step is None
            else {"slope_db_per_db": self.step.slope, "verdict": self.step.verdict, "note": self.step.note},
            "note": self.note,
        }


@dataclass(frozen=True)
class HarmonicsTable:
    """The combined result of :func:`harmonics_table`."""

    fundamental: HarmonicRow
    harmonics: tuple[HarmonicRow, ...]
    fundamental_mean_dbfs: float
    pep_dbfs: float
    pep_w: float | None
    """PEP in W: from the calibrated envelope peak, else as given, else None."""
    pep_source: str
    """Where ``pep_w`` comes from: "calibrated envelope peak", "given" or "" (unknown)."""
    assumptions: tuple[str, ...]
    worst: HarmonicRow | None

    def to_json(self) -> dict[str, Any]:
        return {
            "schema": "iqscope.harmonics/1",
            "fundamental": self.fundamental.to_json(),
            "fundamental_mean_dbfs": self.fundamental_mean_dbfs,
            "pep_dbfs": self.pep_dbfs,
            "pep_w": _finite(self.pep_w),
            "pep_source": self.pep_source,
            "harmonics": [h.to_json() for h in self.harmonics],
            "worst_harmonic_dbc": None if self.worst is None else _finite(self.worst.level_dbc),
            "assumptions": list(self.assumptions),
        }


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def harmonics_table(
    fundamental: RecordingLevels,
    others: Sequence[RecordingLevels],
    *,
    dbfs_to_dbm_db: float | None = None,
    calibration_gain_db: float | None = None,
    pep_w: float | None = None,
    stepped: Mapping[int, tuple[RecordingLevels, float]] | None = None,
) -> HarmonicsTable:
    """Combine a fundamental and harmonic recordings into a table of harmonic levels.

    Measures only; grade the table with :func:`iqscope.grading.grade_harmonics`.

    Parameters
    ----------
    fundamental : RecordingLevels
        The recording of the fundamental.
    others : sequence of RecordingLevels
        Recordings tuned near n f (n >= 2); n is taken from each recording's centre.
    dbfs_to_dbm_db : float, optional
        Calibration offset (dBm = dBFS + offset) for the fundamental's receiver gain.
    calibration_gain_db : float, optional
        Receiver gain the calibration was made at (to correct a different gain).
    pep_w : float, optional
        PEP in watts, recorded in the table when no calibration is given (the grading of
        power-dependent limits such as RR Appendix 3 uses it).
    stepped : mapping n -> (RecordingLevels, step_db), optional
        For harmonic n, a second recording with ``step_db`` more attenuation: runs
        :func:`attenuation_step_check` on the harmonic.

    Returns
    -------
    HarmonicsTable

    Raises
    ------
    UsageError
        When a recording is not near a harmonic of the fundamental, or there is no
        emission in the fundamental's recording.
    """
    assumptions: list[str] = []
    fs = fundamental.spectrum
    try:
        lo, hi = emission_band(fs, fundamental.noise_psd)
    except ValueError:
        raise UsageError("no emission above the noise in the fundamental's recording", fundamental.path) from None
    h = line_half_width_hz(fs)
    lo_abs = fundamental.center_frequency_hz + lo
    hi_abs = fundamental.center_frequency_hz + hi
    f1 = 0.5 * (lo_abs + hi_abs)
    p_fund, sig_fund, _ = _band_power(fs, lo - h, hi + h, fundamental.noise_psd)
    if not p_fund > 0:
        raise UsageError("no emission above the noise in the fundamental's recording", fundamental.path)
    fund_dbfs = 10.0 * math.log10(p_fund)
    pep_dbfs = 10.0 * math.log10(fundamental.peak_power) if fundamental.peak_power > 0 else math.nan

    def to_dbm(dbfs: float, gain: float | None) -> float | None:
        if dbfs_to_dbm_db is None:
            return None
        corr = 0.0
        if gain is not None and calibration_gain_db is not None:
            corr = gain - calibration_gain_db
        return dbfs - corr + dbfs_to_dbm_db

    # PEP in watts: the calibrated envelope peak wins over a given value.
    pep_dbm = to_dbm(pep_dbfs, fundamental.gain_db)
    if pep_dbm is not None and math.isfinite(pep_dbm):
        pep_w = 10.0 ** ((pep_dbm - 30.0) / 10.0)
        pep_source = "calibrated envelope peak"
    else:
        pep_source = "given" if pep_w is not None else ""

    fund_row = HarmonicRow(
        n=1,
        frequency_hz=f1,
        path=fundamental.path,
        band_hz=(lo_abs - h, hi_abs + h),
        level_dbfs=fund_dbfs,
        level_dbm=to_dbm(fund_dbfs, fundamental.gain_db),
        level_dbc=0.0,
        uncertainty_db=10.0 * math.log10(1.0 + sig_fund / p_fund),
        limited_by_noise=False,
        note="99 % occupied band of the fundamental; reference for dBc",
    )
    if fundamental.gain_db is None:
        assumptions.append("receiver gain not recorded: all recordings assumed made with the same gain and attenuation")
    assumptions.append(
        f"receiver response assumed flat across the bands (systematic {RECEIVER_FLATNESS_DB} dB allowed in the uncertainty)"
    )

    rows: list[HarmonicRow] = []
    for rec in sorted(others, key=lambda r: r.center_frequency_hz):
        rows.append(_harmonic_row(rec, f1, lo_abs, hi_abs, h, fundamental, fund_dbfs, to_dbm, stepped))
    worst = max(
        (r for r in rows if r.level_dbc is not None),
        key=lambda r: r.level_dbc if r.level_dbc is not None else -math.inf,
        default=None,
    )
    return HarmonicsTable(
        fundamental=fund_row,
        harmonics=tuple(rows),
        fundamental_mean_dbfs=fund_dbfs,
        pep_dbfs=pep_dbfs,
        pep_w=pep_w,
        pep_source=pep_source,
        assumptions=tuple(assumptions),
        worst=worst,
    )


def _harmonic_row(
    rec: RecordingLevels,
    f1: float,
    lo_abs: float,
    hi_abs: float,
    h: float,
    fundamental: RecordingLevels,
    fund_dbfs: float,
    to_dbm: Any,
    stepped: Mapping[int, tuple[RecordingLevels, float]] | None,
) -> HarmonicRow:
    n = int(round(rec.center_frequency_hz / f1))
    if n < 2:
        raise UsageError(
            f"centre {rec.center_frequency_hz:.0f} Hz is not near a harmonic (n >= 2) of {f1:.0f} Hz", rec.path
        )
    spec = rec.spectrum
    hh = line_half_width_hz(spec)
    margin = hh + FREQUENCY_MARGIN_PPM * 1e-6 * n * f1
    band = (n * lo_abs - margin, n * hi_abs + margin)
    lo_off, hi_off = band[0] - rec.center_frequency_hz, band[1] - rec.center_frequency_hz
    nyq = rec.sample_rate_hz / 2.0
    if lo_off < -nyq or hi_off > nyq:
        raise UsageError(
            f"harmonic {n} ({band[0]:.0f}-{band[1]:.0f} Hz) is not inside this recording "
            f"({rec.center_frequency_hz - nyq:.0f}-{rec.center_frequency_hz + nyq:.0f} Hz)",
            rec.path,
        )
    p, sigma, detected = _band_power(spec, lo_off, hi_off, rec.noise_psd)
    gain_corr = 0.0
    note = ""
    if rec.gain_db is not None and fundamental.gain_db is not None and rec.gain_db != fundamental.gain_db:
        gain_corr = rec.gain_db - fundamental.gain_db
        note = f"corrected for {gain_corr:+.1f} dB receiver gain difference"
    power = p if detected else max(p, 0.0) + BOUND_SIGMAS * sigma
    dbfs = 10.0 * math.log10(power) - gain_corr
    dbc = dbfs - fund_dbfs
    unc = math.hypot(10.0 * math.log10(1.0 + sigma / power), RECEIVER_FLATNESS_DB) if detected else None
    step = None
    if stepped and n in stepped:
        other, step_db = stepped[n]
        p2, _, det2 = _band_power(other.spectrum, lo_off, hi_off, other.noise_psd)
        if detected and det2:
            step = attenuation_step_check(10.0 * math.log10(p), 10.0 * math.log10(p2), step_db)
        else:
            step = StepCheck(math.nan, "unclear", "harmonic not above the noise in both recordings")
    if lo_off - hh <= 0.0 <= hi_off + hh:
        note = (note + "; " if note else "") + (
            "the harmonic lies on the receiver's DC line (capture centre): tune the receiver a few kHz off it"
        )
    if not detected:
        note = (note + "; " if note else "") + "not above the noise: upper bound"
    return HarmonicRow(
        n=n,
        frequency_hz=n * f1,
        path=rec.path,
        band_hz=band,
        level_dbfs=dbfs,
        level_dbm=to_dbm(dbfs, fundamental.gain_db),
        level_dbc=dbc,
        uncertainty_db=unc,
        limited_by_noise=not detected,
        step=step,
        note=note,
    )
