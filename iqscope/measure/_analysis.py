"""The result of analysing one recording: facts, signal, measurements, artefacts, traces.

An :class:`Analysis` is everything a report needs, already computed: renderers draw it
and never compute. Verdicts are added by ``iqscope.grading``, not here.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import numpy.typing as npt

from ..dsp._types import Spectrum
from ._result import Artefact, Measurement, finite_or_none

__all__ = ["Mode", "RecordingInfo", "SignalInfo", "Trace", "Analysis"]

#: Emission mode: ``auto`` is resolved to one of the others by the pipeline.
Mode = Literal["auto", "cw", "am", "dsb", "usb", "lsb", "two-tone"]


@dataclass(frozen=True)
class RecordingInfo:
    """Facts about the analysed recording (the ``recording`` object of the JSON contract)."""

    path: str
    format: str
    sample_rate_hz: float
    center_frequency_hz: float | None
    n_samples: int
    datatype: str = ""
    swap_iq: bool = False
    """True when I and Q were swapped on reading (``--swap-iq``)."""

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz

    def to_json(self) -> dict[str, Any]:
        return {
            "path": self.path,
            "format": self.format,
            "datatype": self.datatype,
            "sample_rate_hz": self.sample_rate_hz,
            "center_frequency_hz": finite_or_none(self.center_frequency_hz),
            "n_samples": self.n_samples,
            "duration_s": self.duration_s,
            "swap_iq": self.swap_iq,
        }


@dataclass(frozen=True)
class SignalInfo:
    """The emission found: its mode and where its (suppressed) carrier sits."""

    mode: str
    """Resolved mode: cw, am, dsb, usb, lsb or two-tone."""
    carrier_offset_hz: float | None
    """Carrier offset from the capture centre, Hz (None when it could not be placed)."""
    carrier_frequency_hz: float | None
    """Absolute carrier frequency, Hz; None when the capture centre is unknown."""
    how: str = ""
    """How the carrier was located (e.g. "given with --carrier", "centre of symmetry")."""
    mode_detected: bool = False
    """True when the mode came from ``--mode auto``."""
    mode_confidence: str = "given"
    """How sure the mode is: "given" (named with ``--mode``), "high" (auto, the signal's
    structure is unambiguous) or "low" (auto, a guess: mode-dependent figures are not
    graded as a pass). See docs/measurements.md, "Locating the signal"."""
    carrier_error_hz: float | None = None
    """Where the signal's own structure puts the carrier minus where the user put it
    (``--carrier``, or a test-tone line minus ``--tone``), Hz; None when they agree
    within the resolution or nothing in the signal places the carrier."""
    carrier_found_offset_hz: float | None = None
    """With ``carrier_error_hz``: the carrier offset the signal's structure gives, Hz."""
    carrier_found_how: str = ""
    """With ``carrier_error_hz``: what in the signal placed it."""

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "mode": self.mode,
            "carrier_offset_hz": finite_or_none(self.carrier_offset_hz),
            "carrier_frequency_hz": finite_or_none(self.carrier_frequency_hz),
            "how": self.how,
            "mode_detected": self.mode_detected,
            "mode_confidence": self.mode_confidence,
            "carrier_error_hz": finite_or_none(self.carrier_error_hz),
        }
        if self.carrier_error_hz is not None:
            out["carrier_found_offset_hz"] = finite_or_none(self.carrier_found_offset_hz)
            out["carrier_found_how"] = self.carrier_found_how
        return out


@dataclass(frozen=True)
class Trace:
    """A curve for plots, computed by the pipeline (renderers never compute)."""

    x: npt.NDArray[np.float64]
    """Abscissa values."""
    y: npt.NDArray[np.float64]
    """Ordinate values (1-D), or a 2-D image with rows along ``extra['rows']``."""
    x_label: str
    y_label: str
    extra: Mapping[str, Any] = field(default_factory=dict)
    """Markers, image extents, secondary axes: whatever the renderer needs."""


@dataclass(frozen=True)
class Analysis:
    """Everything measured on one recording."""

    recording: RecordingInfo
    signal: SignalInfo
    measurements: Mapping[str, Measurement]
    """Stable keys of DESIGN.md section 4 (contract), in report order."""
    artefacts: tuple[Artefact, ...] = ()
    """Receiver artefacts and other flags found."""
    spectrum: Spectrum | None = None
    """The averaged spectrum the figures were taken from."""
    markers: Mapping[str, float] = field(default_factory=dict)
    """Frequencies (Hz offset) worth drawing: carrier, obw_lower, obw_upper, bw26_lower ..."""
    traces: Mapping[str, Trace] = field(default_factory=dict)
    """Named curves for plots: "envelope", "spectrogram", "frequency" ..."""
    warnings: tuple[str, ...] = ()
    """Soft problems met while reading or measuring, for the report."""
    not_graded: Mapping[str, str] = field(default_factory=dict)
    """Measurements the data cannot support a verdict on, with the reason (e.g. sideband
    figures of a real-only recording): :func:`iqscope.grading.grade` lists their rules
    under ``not_graded`` instead of judging them."""

    def to_json(self) -> dict[str, Any]:
        """The ``recording``, ``signal`` and ``measurements`` parts of the contract."""
        return {
            "recording": self.recording.to_json(),
            "signal": self.signal.to_json(),
            "measurements": {k: m.to_json() for k, m in self.measurements.items()},
            "artefacts": [a.to_json() for a in self.artefacts],
            "warnings": list(self.warnings),
        }
