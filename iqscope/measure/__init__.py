"""Measurements: one module per figure, run by the pipeline (:func:`analyse`).

Entry point
    :func:`analyse` ``(recording, request=AnalysisRequest(), providers=None) -> Analysis``;
    :data:`PROVIDERS` is the ordered list of figure providers.
Types
    :class:`Analysis`, :class:`RecordingInfo`, :class:`SignalInfo`, :class:`Trace`,
    :class:`Measurement`, :class:`Artefact`, :class:`AnalysisRequest`,
    :class:`AnalysisContext`, :class:`FigureSet`, :class:`FigureProvider`.
Core providers
    :func:`carrier_figures`, :func:`sideband_figures`, :func:`modulation_figures`,
    :func:`bandwidth_figures`, :func:`artefact_figures`, :func:`level_figures`.
"""

from __future__ import annotations

from ._analysis import Analysis, Mode, RecordingInfo, SignalInfo, Trace
from ._context import AnalysisContext, AnalysisRequest, FigureProvider, FigureSet, ProgressFn
from ._result import Artefact, Bound, Measurement, failed, finite_or_none
from .artefacts import artefact_figures
from .bandwidth import bandwidth_figures, occupied_bandwidth, x_db_bandwidth
from .carrier import carrier_figures
from .levels import level_figures
from .locate import MODES, carrier_offset_from_arg, locate_signal
from .modulation import index_from_powers, modulation_figures
from .pipeline import MEASUREMENT_ORDER, PROVIDERS, analyse, plan_pass
from .sidebands import sideband_figures

__all__ = [
    "analyse",
    "plan_pass",
    "PROVIDERS",
    "MEASUREMENT_ORDER",
    "MODES",
    "Analysis",
    "Mode",
    "RecordingInfo",
    "SignalInfo",
    "Trace",
    "AnalysisContext",
    "AnalysisRequest",
    "FigureProvider",
    "FigureSet",
    "ProgressFn",
    "Artefact",
    "Bound",
    "Measurement",
    "failed",
    "finite_or_none",
    "carrier_figures",
    "sideband_figures",
    "modulation_figures",
    "bandwidth_figures",
    "artefact_figures",
    "level_figures",
    "occupied_bandwidth",
    "x_db_bandwidth",
    "index_from_powers",
    "carrier_offset_from_arg",
    "locate_signal",
]
