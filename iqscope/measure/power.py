"""Absolute power: a calibration of dBFS against dBm, and mean power and PEP in dBm and watts.

A receiver reports levels relative to its own full scale (dBFS). Feeding it a reference
signal of known power gives the offset between the two for that receiver, frequency and
gain: ``P_dBm = P_dBFS + offset_db``. With the offset referred to the transmitter's output
(the attenuator or tap chain included), a later recording of the transmitter made through
the same chain and receiver settings can be reported in dBm, watts and milliwatts.

Three parts:

* unit relations :func:`dbm_from_watts` and :func:`watts_from_dbm`;
* the calibration: :func:`measure_line_power` (power of the reference line in dBFS, one
  streaming pass), :func:`make_calibration`, :class:`Calibration`, :func:`save_calibration`
  and :func:`load_calibration` (a small JSON file of our own, schema
  ``iqscope.calibration/1``);
* the figure provider :func:`power_figures` for the analysis pipeline, which reads the
  calibration from ``ctx.request.options["calibration"]`` and adds ``mean_power_dbm``,
  ``pep_dbm``, ``mean_power_w`` and ``pep_w``.

References
----------
.. [1] ITU Radio Regulations, Article 1, No. 1.157 (peak envelope power) and No. 1.158
       (mean power).
.. [2] G. Heinzel, A. Ruediger, R. Schilling, "Spectrum and spectral density estimation by
       the Discrete Fourier transform (DFT), including a comprehensive list of window
       functions and some new flat-top windows", Max-Planck-Institut fuer
       Gravitationsphysik, Hannover, 2002, section 9 (PSD normalisation, ENBW).
.. [3] H. L. Krauss, C. W. Bostian, F. H. Raab, *Solid State Radio Engineering*, Wiley,
       1980, p. 509 (n equal incoherent tones: mean power n P, peak envelope power n^2 P).
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Final

import numpy as np

from ..errors import FormatError, InputMissingError, MeasurementError
from ..io._recording import Recording
from ._context import AnalysisContext, FigureSet
from ._result import Measurement, failed

__all__ = [
    "CALIBRATION_SCHEMA",
    "Calibration",
    "LinePower",
    "dbm_from_watts",
    "watts_from_dbm",
    "measure_line_power",
    "make_calibration",
    "save_calibration",
    "load_calibration",
    "power_figures",
    "line_power_dbm",
]

#: Schema name and version written into every calibration file (contract: add keys only).
CALIBRATION_SCHEMA: Final = "iqscope.calibration/1"

#: What ``offset_db`` means, written into the file so it explains itself.
OFFSET_MEANING: Final = "dBm at the transmitter output (reference plane) = dBFS + offset_db"

#: Namespaced SigMF global keys that ``iqscope capture`` writes (read back here).
KEY_GAIN_DB: Final = "iqscope:gain_db"
KEY_DEVICE: Final = "core:hw"

_DB_PER_NEPER_POWER: Final = 10.0 / math.log(10.0)  # d(10 log10 P)/d(ln P) = 4.3429 dB


# --------------------------------------------------------------------------------------
# unit relations
# --------------------------------------------------------------------------------------
def dbm_from_watts(power_w: float) -> float:
    """Power in dBm from watts: ``10 log10(P / 1 mW)``.

    Parameters
    ----------
    power_w : float
        Power, W (> 0).

    Returns
    -------
    float
        Power, dBm (decibels relative to one milliwatt).

    Examples
    --------
    >>> dbm_from_watts(1.0), round(dbm_from_watts(5.0), 2), dbm_from_watts(100.0)
    (30.0, 36.99, 50.0)
    """
    if not power_w > 0:
        raise ValueError(f"{power_w=} must be > 0")
    return 10.0 * math.log10(power_w / 1e-3)


def watts_from_dbm(level_dbm: float) -> float:
    """Power in watts from dBm: ``1 mW x 10^(dBm / 10)``.

    Examples
    --------
    >>> watts_from_dbm(30.0), watts_from_dbm(0.0)
    (1.0, 0.001)
    """
    if not math.isfinite(level_dbm):
        raise ValueError(f"{level_dbm=} must be finite")
    return float(1e-3 * 10.0 ** (level_dbm / 10.0))


def _db(x: float) -> float:
    return 10.0 * math.log10(x)


# --------------------------------------------------------------------------------------
# the reference line's power
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LinePower:
    """Power of the strongest line of a recording, measured from an averaged spectrum."""

    power_dbfs: float
    """Power of the line, dBFS (noise floor subtracted)."""
    uncertainty_db: float
    """1-sigma statistical uncertainty of ``power_dbfs``, dB (noise only)."""
    offset_hz: float
    """Frequency of the line as an offset from the capture centre, Hz (bin resolution)."""
    snr_db: float
    """Line power over the noise power in the bins it was integrated over, dB."""
    total_power_dbfs: float
    """Mean power of everything in the analysed samples (time domain), dBFS."""
    noise_floor_dbfs_per_hz: float
    """Noise floor (median of the spectrum away from the line, bias corrected), dBFS/Hz."""
    nfft: int
    """Segment length of the averaged spectrum, samples."""
    n_averages: int
    """Number of segments averaged."""
    note: str
    """How it was measured, and any caveat (e.g. the line sits on the receiver's DC)."""


#: Bins on each side of the peak integrated as "the line". With a Hann window, a line half
#: a bin off a bin centre keeps all but 2.7e-5 dB of its power inside +/- 5 bins
#: (computed: energy of a 64x zero-padded Hann spectrum outside the span).
LINE_HALF_WIDTH_BINS: Final = 5


def _median_bias(dof: float) -> float:
    """Median over mean of a chi-square variable with ``dof`` degrees of freedom.

    Wilson-Hilferty approximation ``(1 - 2/(9 dof))^3`` (from memory: N. L. Johnson, S. Kotz,
    N. Balakrishnan, *Continuous Univariate Distributions*, vol. 1, 2nd ed., Wiley 1994,
    ch. 18); exact enough here because it only corrects a subtracted noise term.
    """
    return float((1.0 - 2.0 / (9.0 * dof)) ** 3)


def measure_line_power(
    recording: Recording,
    *,
    nfft: int = 4096,
    max_samples: int | None = None,
) -> LinePower:
    """Measure the power of the strongest line in a recording, in dBFS.

    One streaming pass: Hann-windowed segments of ``nfft`` samples with 50 % overlap are
    averaged into a two-sided power spectral density normalised as in [1]_
    (``PSD = |X|^2 / (fs S2)``, FS^2/Hz), so that ``sum(PSD) x fs/N`` is the mean power. The
    line's power is the PSD integrated over +/- ``LINE_HALF_WIDTH_BINS`` bins around the
    strongest bin, minus the noise floor over the same span. The noise floor is the median
    PSD of the other bins, corrected for the median's bias.

    Parameters
    ----------
    recording : Recording
        The reference recording: a single steady line (a signal generator or a keyed
        carrier of known power).
    nfft : int
        Segment length, samples (bin spacing ``fs / nfft``); reduced to fit a short
        recording.
    max_samples : int, optional
        Analyse at most this many samples from the start.

    Returns
    -------
    LinePower

    Raises
    ------
    MeasurementError
        Fewer than 64 samples, or no line above the noise.

    Notes
    -----
    1-sigma statistical uncertainty (noise only): the cross term between the line and the
    noise in the integrated bins gives ``sigma_P / P ~ sqrt(2 Pn / (P M))`` for line power
    P, in-span noise power Pn and M averaged segments; in dB that is multiplied by
    10/ln 10. The accuracy of the reference's stated level is not part of it.

    References
    ----------
    .. [1] G. Heinzel, A. Ruediger, R. Schilling, "Spectrum and spectral density estimation
           by the Discrete Fourier transform (DFT) ...", MPI Gravitationsphysik, 2002,
           section 9 (PS and PSD normalisation, ENBW = fs S2 / S1^2).
    """
    if nfft < 64:
        raise ValueError(f"{nfft=} must be >= 64")
    n_total = recording.n_samples if max_samples is None else min(recording.n_samples, max_samples)
    if n_total < 64:
        raise MeasurementError(
            f"{n_total} samples are too few to measure a reference line (need >= 64)",
            recording.path,
        )
    while nfft > n_total:
        nfft //= 2
    fs = recording.sample_rate_hz
    n_idx = np.arange(nfft)
    window = (0.5 - 0.5 * np.cos(2.0 * np.pi * n_idx / nfft)).astype(np.float64)  # periodic Hann
    s2 = float(np.sum(window**2))
    acc = np.zeros(nfft, np.float64)
    m = 0
    energy = 0.0
    n_energy = 0
    step = nfft // 2
    for block in recording.chunks(nfft, overlap=nfft - step, stop=n_total):
        if block.size < nfft:
            break
        x = block.astype(np.complex128)
        acc += np.abs(np.fft.fft(x * window)) ** 2
        m += 1
        # time-domain power over non-overlapping halves (each sample counted once)
        new = x[nfft - step :] if m > 1 else x
        energy += float(np.sum(np.abs(new) ** 2))
        n_energy += new.size
    if m == 0:  # pragma: no cover - guarded by the length check above
        raise MeasurementError("no complete spectrum segment", recording.path)
    psd = np.fft.fftshift(acc / (m * fs * s2))
    freqs = np.fft.fftshift(np.fft.fftfreq(nfft, 1.0 / fs))
    bin_hz = fs / nfft
    k = LINE_HALF_WIDTH_BINS
    peak = int(np.argmax(psd))
    lo, hi = max(0, peak - k), min(nfft, peak + k + 1)
    span_bins = hi - lo
    mask = np.ones(nfft, bool)
    mask[max(0, peak - 3 * k) : min(nfft, peak + 3 * k + 1)] = False
    others = psd[mask]
    # Each averaged bin is a chi-square variable with about 2M degrees of freedom
    # (overlap correlation ignored: it only moves a small correction term).
    noise_psd = float(np.median(others) / _median_bias(2.0 * m)) if others.size else 0.0
    span_power = float(np.sum(psd[lo:hi]) * bin_hz)
    noise_power = noise_psd * span_bins * bin_hz
    line = span_power - noise_power
    if not line > 0 or (noise_power > 0 and line < 3.0 * noise_power):
        raise MeasurementError(
            "no reference line stands clear of the noise (need at least 5 dB above the noise "
            "in its bins); record the reference at a higher level",
            recording.path,
        )
    snr = line / noise_power if noise_power > 0 else math.inf
    rel = math.sqrt(2.0 * noise_power / (line * m)) if noise_power > 0 else 0.0
    # A line within a few bins of 0 Hz coincides with the receiver's own DC offset / LO leak.
    offset = float(freqs[peak])
    notes = [
        f"power of the strongest line from a {m}-segment averaged Hann spectrum "
        f"({nfft}-point, {bin_hz:.4g} Hz bins), integrated over +/-{k} bins, noise floor "
        "subtracted"
    ]
    if abs(offset) <= 3 * bin_hz:
        notes.append(
            "the line sits on the capture centre, where the receiver's own DC offset adds to "
            "it: tune the receiver a few kHz away from the reference"
        )
    return LinePower(
        power_dbfs=_db(line),
        uncertainty_db=_DB_PER_NEPER_POWER * rel,
        offset_hz=offset,
        snr_db=_db(snr) if math.isfinite(snr) else math.inf,
        total_power_dbfs=_db(energy / n_energy) if energy > 0 else -math.inf,
        noise_floor_dbfs_per_hz=_db(noise_psd) if noise_psd > 0 else -math.inf,
        nfft=nfft,
        n_averages=m,
        note="; ".join(notes),
    )


# --------------------------------------------------------------------------------------
# the calibration file
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Calibration:
    """The relation between a receiver's dBFS and dBm at the transmitter's output.

    ``P_dBm = P_dBFS + offset_db`` for a recording made with the same receiver, frequency,
    gain and attenuator chain.
    """

    offset_db: float
    """dBm at the reference plane minus dBFS in the recording, dB."""
    uncertainty_db: float
    """1-sigma uncertainty of ``offset_db``, dB (measurement and stated reference accuracy)."""
    reference_level_dbm: float
    """Stated power of the reference where it was fed in, dBm."""
    attenuation_db: float = 0.0
    """Attenuation between the reference plane and the receiver that the reference did not
    pass through (0 when it went through the same chain), dB."""
    reference_uncertainty_db: float = 0.0
    """Stated 1-sigma accuracy of the reference level, dB."""
    measured_dbfs: float = 0.0
    """Measured power of the reference line, dBFS."""
    measured_uncertainty_db: float = 0.0
    """1-sigma statistical uncertainty of ``measured_dbfs``, dB."""
    method: str = ""
    """How the dBFS figure was measured."""
    created_utc: str = ""
    """When the calibration was made, ISO-8601 UTC."""
    reference_path: str | None = None
    """The reference recording."""
    receiver: str | None = None
    """Receiver description from the recording's metadata, when known."""
    center_frequency_hz: float | None = None
    """Receiver centre frequency of the reference recording, Hz."""
    line_frequency_hz: float | None = None
    """Frequency of the reference line: absolute when the centre is known, else an offset."""
    gain_db: float | None = None
    """Receiver gain setting of the reference recording, dB, when known."""
    sample_rate_hz: float | None = None
    """Sample rate of the reference recording, Hz."""
    extra: Mapping[str, Any] = field(default_factory=dict)
    """Keys of the file this version does not know (kept, not interpreted)."""

    def dbm(self, dbfs: float) -> float:
        """Convert a level in dBFS to dBm at the reference plane."""
        return dbfs + self.offset_db

    def to_json(self) -> dict[str, Any]:
        """The file's content (schema ``iqscope.calibration/1``)."""
        return {
            "schema": CALIBRATION_SCHEMA,
            "meaning": OFFSET_MEANING,
            "offset_db": self.offset_db,
            "uncertainty_db": self.uncertainty_db,
            "created_utc": self.created_utc,
            "reference": {
                "path": self.reference_path,
                "level_dbm": self.reference_level_dbm,
                "level_uncertainty_db": self.reference_uncertainty_db,
                "attenuation_db": self.attenuation_db,
                "measured_dbfs": self.measured_dbfs,
                "measured_uncertainty_db": self.measured_uncertainty_db,
                "line_frequency_hz": self.line_frequency_hz,
                "method": self.method,
            },
            "receiver": {
                "description": self.receiver,
                "center_frequency_hz": self.center_frequency_hz,
                "gain_db": self.gain_db,
                "sample_rate_hz": self.sample_rate_hz,
            },
            **dict(self.extra),
        }

    @classmethod
    def from_json(cls, data: Any, path: str | os.PathLike[str] | None = None) -> Calibration:
        """Build from a parsed calibration file; raises ``FormatError`` when malformed."""
        if not isinstance(data, dict):
            raise FormatError("a calibration file holds one JSON object", path)
        schema = data.get("schema")
        if not isinstance(schema, str) or not schema.startswith("iqscope.calibration/"):
            raise FormatError(
                f"not an iqscope calibration file (schema {schema!r}, expected "
                f"{CALIBRATION_SCHEMA!r})",
                path,
            )
        if schema != CALIBRATION_SCHEMA:
            raise FormatError(f"calibration schema {schema!r} is newer than this iqscope", path)
        ref = data.get("reference") or {}
        rx = data.get("receiver") or {}
        if not isinstance(ref, dict) or not isinstance(rx, dict):
            raise FormatError("'reference' and 'receiver' must be JSON objects", path)

        def num(value: Any, name: str, *, required: bool = False) -> float | None:
            if value is None and not required:
                return None
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise FormatError(f"{name} must be a number, not {value!r}", path)
            if not math.isfinite(value):
                raise FormatError(f"{name} must be finite, not {value!r}", path)
            return float(value)

        def text(value: Any) -> str | None:
            return None if value is None else str(value)

        offset = num(data.get("offset_db"), "offset_db", required=True)
        level = num(ref.get("level_dbm"), "reference.level_dbm", required=True)
        assert offset is not None and level is not None
        known = {"schema", "meaning", "offset_db", "uncertainty_db", "created_utc", "reference",
                 "receiver"}
        return cls(
            offset_db=offset,
            uncertainty_db=num(data.get("uncertainty_db"), "uncertainty_db") or 0.0,
            reference_level_dbm=level,
            attenuation_db=num(ref.get("attenuation_db"), "reference.attenuation_db") or 0.0,
            reference_uncertainty_db=num(ref.get("level_uncertainty_db"),
                                         "reference.level_uncertainty_db") or 0.0,
            measured_dbfs=num(ref.get("measured_dbfs"), "reference.measured_dbfs") or 0.0,
            measured_uncertainty_db=num(ref.get("measured_uncertainty_db"),
                                        "reference.measured_uncertainty_db") or 0.0,
            method=str(ref.get("method") or ""),
            created_utc=str(data.get("created_utc") or ""),
            reference_path=text(ref.get("path")),
            receiver=text(rx.get("description")),
            center_frequency_hz=num(rx.get("center_frequency_hz"), "receiver.center_frequency_hz"),
            line_frequency_hz=num(ref.get("line_frequency_hz"), "reference.line_frequency_hz"),
            gain_db=num(rx.get("gain_db"), "receiver.gain_db"),
            sample_rate_hz=num(rx.get("sample_rate_hz"), "receiver.sample_rate_hz"),
            extra={k: v for k, v in data.items() if k not in known},
        )


def _metadata_value(recording: Recording, key: str) -> Any:
    """A SigMF global field from a recording's metadata (flat or under ``"global"``)."""
    meta = recording.metadata
    if key in meta:
        return meta[key]
    glob = meta.get("global")
    if isinstance(glob, Mapping):
        return glob.get(key)
    return None


def _float_or_none(value: Any) -> float | None:
    if isinstance(value, bool):
        return None
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


def make_calibration(
    recording: Recording,
    level_dbm: float,
    attenuation_db: float = 0.0,
    *,
    level_uncertainty_db: float = 0.0,
    now: _dt.datetime | None = None,
) -> Calibration:
    """Measure a reference recording and return the dBFS-to-dBm calibration.

    Parameters
    ----------
    recording : Recording
        The receiver's recording of a reference line of known power.
    level_dbm : float
        The reference's power where it was fed in, dBm. If it was fed through the same
        attenuator or tap chain that the transmitter measurements will use, give the level
        at the chain's input and leave ``attenuation_db`` at 0.
    attenuation_db : float
        Attenuation (dB, >= 0) between the transmitter's output and the point where the
        reference was fed in, i.e. the part of the chain the reference did not pass through.
    level_uncertainty_db : float
        The reference level's own 1-sigma accuracy, dB (from its datasheet or power meter).
    now : datetime, optional
        Clock injection for tests (UTC).

    Returns
    -------
    Calibration
        ``offset_db = level_dbm + attenuation_db - measured_dbfs``, so that a level of
        ``L`` dBFS in a later recording is ``L + offset_db`` dBm at the transmitter's output.
    """
    for name, value in (("level_dbm", level_dbm), ("attenuation_db", attenuation_db),
                        ("level_uncertainty_db", level_uncertainty_db)):
        if not math.isfinite(value):
            raise ValueError(f"{name}={value!r} must be finite")
    if attenuation_db < 0:
        raise ValueError(f"{attenuation_db=} must be >= 0 (an attenuation, not a gain)")
    if level_uncertainty_db < 0:
        raise ValueError(f"{level_uncertainty_db=} must be >= 0")
    line = measure_line_power(recording)
    offset = level_dbm + attenuation_db - line.power_dbfs
    unc = math.hypot(line.uncertainty_db, level_uncertainty_db)
    when = (now or _dt.datetime.now(_dt.timezone.utc)).astimezone(_dt.timezone.utc)
    centre = recording.center_frequency_hz
    line_freq = line.offset_hz + centre if centre is not None else line.offset_hz
    hw = _metadata_value(recording, KEY_DEVICE)
    return Calibration(
        offset_db=offset,
        uncertainty_db=unc,
        reference_level_dbm=float(level_dbm),
        attenuation_db=float(attenuation_db),
        reference_uncertainty_db=float(level_uncertainty_db),
        measured_dbfs=line.power_dbfs,
        measured_uncertainty_db=line.uncertainty_db,
        method=line.note,
        created_utc=when.strftime("%Y-%m-%dT%H:%M:%SZ"),
        reference_path=None if recording.path is None else str(recording.path),
        receiver=None if hw is None else str(hw),
        center_frequency_hz=centre,
        line_frequency_hz=line_freq,
        gain_db=_float_or_none(_metadata_value(recording, KEY_GAIN_DB)),
        sample_rate_hz=recording.sample_rate_hz,
    )


def save_calibration(
    calibration: Calibration, path: str | os.PathLike[str], *, force: bool = False
) -> Path:
    """Write a calibration file atomically (refuses to overwrite without ``force``)."""
    from ..io._atomic import atomic_write_text

    text = json.dumps(calibration.to_json(), indent=2, allow_nan=False) + "\n"
    atomic_write_text(path, text, force=force)
    return Path(path)


def load_calibration(path: str | os.PathLike[str]) -> Calibration:
    """Read a calibration file written by :func:`save_calibration`.

    Raises
    ------
    InputMissingError
        No such file.
    FormatError
        Not JSON, or not a calibration of a schema this version reads.
    """
    p = Path(path)
    try:
        raw = p.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise InputMissingError("calibration file not found", p) from exc
    except IsADirectoryError as exc:
        raise InputMissingError("calibration path is a folder, not a file", p) from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise FormatError(f"cannot read the calibration file: {exc}", p) from exc
    try:
        data = json.loads(raw)
    except json.JSONDecodeError as exc:
        raise FormatError(f"calibration file is not valid JSON ({exc.msg}, line {exc.lineno})",
                          p) from exc
    return Calibration.from_json(data, p)


# --------------------------------------------------------------------------------------
# the figure provider
# --------------------------------------------------------------------------------------
def _calibration_from_options(options: Mapping[str, Any]) -> Calibration | None:
    cal = options.get("calibration")
    if cal is None or isinstance(cal, Calibration):
        return cal
    if isinstance(cal, (str, os.PathLike)):
        return load_calibration(cal)
    if isinstance(cal, Mapping):
        return Calibration.from_json(dict(cal))
    raise TypeError(f"options['calibration'] must be a Calibration or a path, not {type(cal)}")


def _consistency_warnings(cal: Calibration, recording: Recording) -> list[str]:
    """Say where the recording's receiver settings differ from the calibration's."""
    out: list[str] = []
    gain = _float_or_none(_metadata_value(recording, KEY_GAIN_DB))
    if cal.gain_db is not None and gain is not None and abs(gain - cal.gain_db) > 0.05:
        out.append(
            f"calibration was made at receiver gain {cal.gain_db:g} dB but this recording at "
            f"{gain:g} dB: the dBm figures are off by about the difference"
        )
    fc = recording.center_frequency_hz
    if cal.center_frequency_hz is not None and fc is not None and cal.center_frequency_hz > 0:
        if abs(fc - cal.center_frequency_hz) > 0.05 * cal.center_frequency_hz:
            out.append(
                f"calibration was made at {cal.center_frequency_hz / 1e6:.6g} MHz but this "
                f"recording is at {fc / 1e6:.6g} MHz: a receiver's gain changes with frequency"
            )
    if cal.sample_rate_hz is not None and recording.sample_rate_hz != cal.sample_rate_hz:
        out.append(
            f"calibration was made at {cal.sample_rate_hz:g} samples/s but this recording at "
            f"{recording.sample_rate_hz:g}: some receivers scale differently per rate"
        )
    return out


def _watts(dbm: float, sigma_db: float, note: str) -> Measurement:
    w = watts_from_dbm(dbm)
    return Measurement(
        value=w,
        unit="W",
        uncertainty=w * sigma_db / _DB_PER_NEPER_POWER,
        note=note,
        details={"milliwatts": w * 1e3},
    )


def power_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: mean power and PEP in dBm and watts, given a calibration.

    Reads :class:`Calibration` (or a path to a calibration file) from
    ``ctx.request.options["calibration"]``; without one it adds nothing.

    Mean power [1]_ is the emission's power from the averaged spectrum with the noise
    floor subtracted (``ctx.signal_power``); PEP [1]_ is the largest ``|x|^2`` of the
    recording (``ctx.peak_power``): for complex baseband, ``|x|^2`` is the RF power
    averaged over one carrier cycle, which is the definition of envelope power. Each is
    converted with ``P_dBm = P_dBFS + offset_db`` and ``P_W = 1 mW x 10^(P_dBm / 10)``.

    Uncertainty (1 sigma): the calibration's, combined in quadrature with, for the mean
    power, the noise-floor subtraction, ``(10/ln 10) Pn / (P sqrt(M))`` with ``Pn`` the
    noise power of the whole band and ``M`` the spectrum's averages (conservative); for
    PEP, the lift the noise can give the envelope's largest sample,
    ``20 log10(1 + sqrt(ln N) sqrt(Pn / PEP))`` over N samples (an upward bias counted as
    1 sigma: conservative).

    References
    ----------
    .. [1] ITU Radio Regulations, Article 1, Nos. 1.157 and 1.158.
    """
    cal = _calibration_from_options(ctx.request.options)
    out = FigureSet()
    if cal is None:
        return out
    out.warnings.extend(_consistency_warnings(cal, ctx.recording))
    fs = ctx.recording.sample_rate_hz
    noise_total = max(0.0, ctx.noise_floor_psd) * fs  # noise power in the whole band, FS^2
    cal_note = f"calibration offset {cal.offset_db:+.2f} dB (dBm = dBFS + offset)"

    sig = ctx.signal_power
    if sig is not None and math.isfinite(sig) and sig > 0:
        mean_dbfs = _db(sig)
        noise_share = noise_total / sig
        # Subtracting the noise floor leaves its estimation error: with M averaged
        # periodograms that is at most ~1/sqrt(M) of the noise power, and at most the
        # whole band's noise was subtracted (conservative; capped at 3 dB).
        m_avg = max(1, int(ctx.spectrum.n_averages))
        sub_db = min(3.0, _DB_PER_NEPER_POWER * noise_share / math.sqrt(m_avg))
        sigma = math.hypot(cal.uncertainty_db, sub_db)
        mean_dbm = cal.dbm(mean_dbfs)
        note = f"mean power of the emission (spectrum, noise floor subtracted); {cal_note}"
        out.measurements["mean_power_dbm"] = Measurement(
            value=mean_dbm, unit="dBm", uncertainty=sigma, note=note,
            details={"dbfs": mean_dbfs},
        )
        out.measurements["mean_power_w"] = _watts(mean_dbm, sigma, note)
    else:
        out.measurements["mean_power_dbm"] = failed("dBm", "no emission power above the noise")
        out.measurements["mean_power_w"] = failed("W", "no emission power above the noise")

    pep = ctx.peak_power
    if pep is not None and math.isfinite(pep) and pep > 0:
        pep_dbfs = _db(pep)
        # Noise lifts the largest |x|^2: the in-phase noise component (rms sqrt(Pn/2))
        # reaches about sqrt(2 ln N) of its rms somewhere in N samples (Gaussian extreme
        # value, from memory), i.e. sqrt(ln N) x sqrt(Pn) in amplitude.
        n_samp = max(2, ctx.recording.n_samples)
        lift = math.sqrt(math.log(n_samp)) * math.sqrt(noise_total / pep)
        noise_db = 20.0 * math.log10(1.0 + lift)
        sigma = math.hypot(cal.uncertainty_db, noise_db)
        pep_dbm = cal.dbm(pep_dbfs)
        note = (
            "peak envelope power: the largest |x|^2 of the recording (between samples the "
            f"envelope may peak slightly higher); {cal_note}"
        )
        out.measurements["pep_dbm"] = Measurement(
            value=pep_dbm, unit="dBm", uncertainty=sigma, note=note, details={"dbfs": pep_dbfs}
        )
        out.measurements["pep_w"] = _watts(pep_dbm, sigma, note)
    else:
        out.measurements["pep_dbm"] = failed("dBm", "the recording is silent")
        out.measurements["pep_w"] = failed("W", "the recording is silent")
    return out


def line_power_dbm(calibration: Calibration, power_fs2: float) -> float:
    """Convert a power in full-scale units (FS^2, linear) to dBm with a calibration."""
    if not power_fs2 > 0:
        raise ValueError(f"{power_fs2=} must be > 0")
    return calibration.dbm(_db(power_fs2))


def _power_provides(ctx: AnalysisContext) -> Mapping[str, str]:
    """The four power figures when a calibration is given, none otherwise (pipeline ``provides``)."""
    opts = ctx.request.options
    if not (isinstance(opts, Mapping) and opts.get("calibration") is not None):
        return {}
    return {"mean_power_dbm": "dBm", "mean_power_w": "W", "pep_dbm": "dBm", "pep_w": "W"}


power_figures.provides = _power_provides  # type: ignore[attr-defined]
