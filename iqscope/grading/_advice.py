"""What a builder can do about a measurement that warns or fails: short, actionable text.

Advice is bench wisdom (common practice), keyed by measurement and, where the cure
differs, by mode. A rule's own ``advice`` (from the limits file) takes precedence.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Final

__all__ = ["advice_for", "INCONCLUSIVE_ADVICE", "ARTEFACT_ADVICE"]

#: Advice when a noise-limited bound cannot show that a limit is met.
INCONCLUSIVE_ADVICE: Final = (
    "inconclusive: noise floor too high - record for longer or with a finer --resolution, "
    "or use less attenuation (within the receiver's safe input level) so the residual rises "
    "above the noise"
)

#: Advice for receiver artefacts, by Artefact.kind.
ARTEFACT_ADVICE: Final[Mapping[str, str]] = {
    "dc_line": "a line at the capture centre is often the receiver's own DC offset: retune the "
    "receiver so the signal sits well away from the centre and record again",
    "iq_image": "a mirror image about the capture centre is the receiver's I/Q imbalance, not "
    "the transmitter: retune, or treat the opposite-sideband figure as a receiver limit",
    "clipping": "the receiver's ADC clipped: add attenuation or reduce the receiver gain; "
    "clipping makes distortion that is not the transmitter's",
    "sideband_reversed": "the power sits on the other side of the carrier from the mode given: "
    "wrong --mode, or I and Q swapped (a sound card or driver delivering them the other way round): "
    "grade with the other --mode, or add --swap-iq",
    "other": "check the receiver chain before blaming the transmitter",
}

_DRIFT: Final = (
    "frequency wanders: let the oscillator warm up, shield it from heat and draughts, regulate "
    "its supply (and check with --reference that the drift is not the receiver's)"
)

_BY_MEASUREMENT: Final[Mapping[str, str]] = {
    "carrier_suppression_db": "carrier leak: trim the modulator balance (balance potentiometer "
    "and trimmer), check the diode matching and the carrier-oscillator drive level",
    "carrier_below_pep_db": "carrier leak: trim the modulator balance and check that the carrier "
    "sits on the filter skirt where it should",
    "opposite_sideband_suppression_db": "opposite sideband high: check the filter (alignment, "
    "carrier-oscillator frequency against the filter skirt) / phasing network (audio phase "
    "shift, I/Q gain and phase balance)",
    "sideband_balance_db": "sidebands unequal: check for incidental FM or phase modulation of the "
    "carrier oscillator and for tuned circuits aligned off centre",
    "modulation_index": "over-modulation: reduce the audio drive or the modulation depth; the "
    "envelope must never pinch off",
    "occupied_bandwidth_hz": "bandwidth wide: reduce audio drive / check audio low-pass",
    "bandwidth_26db_hz": "bandwidth wide: reduce audio drive / check audio low-pass and the "
    "linearity of the stages after the modulator",
    "imd3_dbc": "overdriven: reduce drive or audio level, check the bias of the linear stages",
    "imd3_db_pep": "overdriven: reduce drive or audio level, check the bias of the linear stages",
    "imd5_dbc": "overdriven: reduce drive or audio level, check the bias of the linear stages",
    "imd7_dbc": "overdriven: reduce drive or audio level, check the bias of the linear stages",
    "imd5_db_pep": "overdriven: reduce drive or audio level, check the bias of the linear stages",
    "imd7_db_pep": "overdriven: reduce drive or audio level, check the bias of the linear stages",
    "tone_balance_db": "tones unequal: set the two audio tones to equal level and check the audio "
    "and filter response across them (a tilt makes one tone stronger)",
    "worst_spur_dbc": "spur too strong: check the output low-pass filter, mixer products and "
    "screening; step the attenuation to see whether it is the receiver's (it then moves about 3:1)",
    "necessary_bandwidth_hz": "bandwidth wide: reduce audio drive / check audio low-pass",
    "frequency_error_hz": "off frequency: trim the carrier oscillator (and check the receiver's own "
    "frequency error with --reference)",
    "warmup_settling_s": _DRIFT,
    "allan_deviation": _DRIFT,
    "hadamard_deviation": _DRIFT,
    "allan_deviation_drift_removed": _DRIFT,
    "clipped_fraction": ARTEFACT_ADVICE["clipping"],
    "peak_dbfs": "the signal is close to the receiver's full scale: add attenuation",
    "drift_hz_per_min": _DRIFT,
    "drift_peak_to_peak_hz": _DRIFT,
    "drift_worst_window_hz": _DRIFT,
}

_BY_MEASUREMENT_MODE: Final[Mapping[tuple[str, str], str]] = {
    ("occupied_bandwidth_hz", "cw"): "keying too hard: soften the keying waveform "
    "(rise and fall of about 4-6 ms) to cut key clicks",
    ("bandwidth_26db_hz", "cw"): "key clicks: soften the keying waveform (rise and fall of about "
    "4-6 ms, raised-cosine shaping)",
    ("occupied_bandwidth_hz", "am"): "bandwidth wide: reduce audio drive / check audio low-pass "
    "and avoid over-modulation",
}


def advice_for(measurement: str, mode: str) -> str:
    """Advice for a warn or fail of ``measurement`` in ``mode`` ('' when none is known)."""
    return _BY_MEASUREMENT_MODE.get((measurement, mode), _BY_MEASUREMENT.get(measurement, ""))
