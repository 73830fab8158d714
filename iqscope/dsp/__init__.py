"""Pure array functions for spectral analysis of complex baseband (no I/O).

Spectra and windows
    :class:`SpectrumAccumulator`, :func:`averaged_spectrum`, :class:`AveragedSpectrum`,
    :func:`equivalent_averages`, :func:`get_window`, :func:`window_figures`,
    :class:`WindowFigures`, :func:`nenbw_bins`, :func:`enbw_hz`, :func:`coherent_gain`,
    :func:`scallop_loss_db`, :func:`overlap_correlation`.
Noise floor and lines
    :func:`noise_floor`, :class:`NoiseFloor`, :func:`averaged_quantile_bias`,
    :func:`line_power`, :func:`band_power`, :func:`find_peaks`, :class:`LinePower`,
    :class:`BandPower`, :class:`Peak`, :func:`track_line`, :class:`LineTrack`.
Envelope
    :func:`block_envelope`, :class:`EnvelopeExtremes`, :func:`envelope_modulation_index`.
Levels, tones, stability (other modules)
    :class:`LevelAccumulator`, :class:`Levels`, :func:`estimate_tone`, :func:`adev` ...
"""

from __future__ import annotations

from ._envelope import BlockEnvelope, EnvelopeExtremes, block_envelope, envelope_modulation_index
from ._lines import (
    BOUND_SIGMAS,
    DETECTION_SIGMAS,
    BandPower,
    LinePower,
    LineTrack,
    Peak,
    band_power,
    find_peaks,
    line_power,
    lobe_half_width_bins,
    local_floor,
    track_line,
)
from ._noise import (
    NoiseFloor,
    averaged_quantile_bias,
    bin_correlation,
    cross_term_factor,
    noise_floor,
    realized_power_factor,
    spectrum_dof,
    sum_variance_factor,
)
from ._spectrum import AveragedSpectrum, SpectrumAccumulator, averaged_spectrum, equivalent_averages, n_segments
from ._types import Spectrum
from ._windows import (
    WINDOW_COEFFICIENTS,
    WindowFigures,
    WindowName,
    coherent_gain,
    enbw_hz,
    get_window,
    nenbw_bins,
    overlap_correlation,
    scallop_loss_db,
    window_figures,
    window_names,
)

__all__ = [
    "Spectrum",
    "AveragedSpectrum",
    "SpectrumAccumulator",
    "averaged_spectrum",
    "equivalent_averages",
    "n_segments",
    "WINDOW_COEFFICIENTS",
    "WindowFigures",
    "WindowName",
    "coherent_gain",
    "enbw_hz",
    "get_window",
    "nenbw_bins",
    "overlap_correlation",
    "scallop_loss_db",
    "window_figures",
    "window_names",
    "NoiseFloor",
    "averaged_quantile_bias",
    "bin_correlation",
    "cross_term_factor",
    "noise_floor",
    "realized_power_factor",
    "spectrum_dof",
    "sum_variance_factor",
    "BOUND_SIGMAS",
    "DETECTION_SIGMAS",
    "BandPower",
    "LinePower",
    "Peak",
    "band_power",
    "find_peaks",
    "line_power",
    "lobe_half_width_bins",
    "local_floor",
    "LineTrack",
    "track_line",
    "BlockEnvelope",
    "EnvelopeExtremes",
    "block_envelope",
    "envelope_modulation_index",
]

# Modules written alongside: levels, single-tone estimation, Allan deviation.
from ._allan import AllanResult, adev, frequency_to_phase, hdev, mdev, oadev, ohdev  # noqa: E402
from ._levels import IqCorrelation, LevelAccumulator, Levels, Plateau, RailTracker, levels_of_blocks, power_to_dbfs  # noqa: E402
from ._tone import (  # noqa: E402
    LinePeak,
    ToneEstimate,
    crlb_frequency_std,
    estimate_tone,
    estimate_tones,
    find_lines,
)

__all__ += [
    "LevelAccumulator",
    "RailTracker",
    "IqCorrelation",
    "Plateau",
    "Levels",
    "levels_of_blocks",
    "power_to_dbfs",
    "LinePeak",
    "ToneEstimate",
    "crlb_frequency_std",
    "estimate_tone",
    "estimate_tones",
    "find_lines",
    "AllanResult",
    "adev",
    "frequency_to_phase",
    "mdev",
    "hdev",
    "ohdev",
    "oadev",
]
