"""What every figure provider receives and returns inside the analysis pipeline.

The pipeline (``iqscope.measure.pipeline``) reads the recording once into an averaged
spectrum and level statistics, locates the signal, then hands an
:class:`AnalysisContext` to each *figure provider*: a callable
``provider(ctx) -> FigureSet``. Providers add measurements (stable keys of DESIGN.md
section 4), traces for plots, markers and artefacts. A provider that needs the samples
again (drift tracking, envelope) streams them from ``ctx.recording`` in chunks.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

from ..dsp._types import Spectrum
from ..io._recording import Recording
from ._analysis import SignalInfo, Trace
from ._result import Artefact, Measurement

__all__ = ["AnalysisRequest", "AnalysisContext", "FigureSet", "FigureProvider", "ProgressFn"]

#: Called with (samples done, samples total) while the pipeline streams a recording.
ProgressFn = Callable[[int, int], None]


@dataclass(frozen=True)
class AnalysisRequest:
    """What the user asked for (built by the CLI from its options)."""

    mode: str = "auto"
    """auto, cw, am, dsb, usb, lsb or two-tone."""
    carrier_hz: float | None = None
    """--carrier: within +/- fs/2 an offset from the capture centre, else absolute RF (Hz)."""
    tone_hz: float | None = None
    """--tone: the test tone's audio frequency (SSB), Hz."""
    resolution_hz: float | None = None
    """Requested bin spacing of the spectrum, Hz (None: chosen from the signal)."""
    reference_hz: float | None = None
    """--reference: a second, stable line for drift relative to it (offset or absolute, Hz)."""
    drift_window_s: float = 120.0
    """Window for the worst drift excursion, s."""
    options: Mapping[str, Any] = field(default_factory=dict)
    """Provider-specific options (e.g. calibration), keyed by provider."""
    progress: ProgressFn | None = None
    """Progress callback; None for silence."""


@dataclass(frozen=True)
class AnalysisContext:
    """Everything computed once by the pipeline and shared with every provider."""

    recording: Recording
    request: AnalysisRequest
    spectrum: Spectrum
    """Averaged, calibrated spectrum of the whole recording (high-dynamic-range window)."""
    signal: SignalInfo
    """Resolved mode and carrier location."""
    noise_floor_psd: float
    """Noise floor estimate, linear FS²/Hz (bias corrected)."""
    mean_power: float
    """Mean power of the whole recording, FS² (time domain)."""
    signal_power: float
    """Power of the emission (spectrum integrated, noise subtracted), FS²."""
    peak_power: float
    """Peak envelope power |x|² max, FS² (PEP of the recording)."""


@dataclass
class FigureSet:
    """What a provider adds to the analysis."""

    measurements: dict[str, Measurement] = field(default_factory=dict)
    traces: dict[str, Trace] = field(default_factory=dict)
    markers: dict[str, float] = field(default_factory=dict)
    artefacts: list[Artefact] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


class FigureProvider(Protocol):
    def __call__(self, ctx: AnalysisContext) -> FigureSet: ...
