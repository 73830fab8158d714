"""The receiver's input level from the transmitter's power and the attenuation before it.

A small receiver survives milliwatts, a transmitter delivers watts: the attenuator (or
tap) chain between them decides whether the receiver is linear, overdriven or damaged.
Before a capture, given the transmitter's power and the chain's attenuation, iqscope
works out the level at the receiver's input and the attenuation a safe level needs.

Levels used (common practice, REFERENCES.md item 11 — the receiver's datasheet decides):

* up to ``LINEAR_MAX_DBM`` (-20 dBm, with the gain at minimum and AGC off) the receiver's
  own intermodulation and harmonics stay well below what is being measured;
  -30 dBm (``COMFORT_DBM``) leaves margin;
* ``DAMAGE_DBM`` (+10 dBm) is a typical absolute-maximum input of a small receiver
  (some allow only 0 dBm).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final, Literal

from ..errors import CaptureError
from ..measure.power import dbm_from_watts

__all__ = [
    "LINEAR_MAX_DBM",
    "COMFORT_DBM",
    "DAMAGE_DBM",
    "InputLevel",
    "assess_input_level",
    "check_input_level",
]

#: Highest input level (dBm) for linear measurements (common practice).
LINEAR_MAX_DBM: Final = -20.0
#: A comfortable input level (dBm) with margin (common practice).
COMFORT_DBM: Final = -30.0
#: Typical absolute-maximum input of a small receiver (dBm; common practice).
DAMAGE_DBM: Final = 10.0

#: ``ok``: at or below the linear limit; ``overdrive``: above it (the figures may be the
#: receiver's); ``damage``: at or above the absolute-maximum level.
Verdict = Literal["ok", "overdrive", "damage"]


@dataclass(frozen=True)
class InputLevel:
    """The level at the receiver's input for a stated transmitter and attenuator chain."""

    tx_power_w: float
    """Transmitter power (PEP for SSB/two-tone, carrier for CW/AM peaks), W."""
    tx_dbm: float
    """The same in dBm."""
    attenuation_db: float
    """Attenuation between the transmitter and the receiver, dB."""
    input_dbm: float
    """Level at the receiver's input, dBm: ``tx_dbm - attenuation_db``."""
    limit_dbm: float
    """The highest input level accepted without ``--yes``, dBm."""
    needed_db: float
    """Attenuation that brings the input to ``limit_dbm``, dB."""
    comfort_db: float
    """Attenuation that brings the input to ``COMFORT_DBM``, dB."""
    verdict: Verdict
    """ok, overdrive or damage."""

    @property
    def safe(self) -> bool:
        """True when the input stays at or below the limit."""
        return self.verdict == "ok"

    def message(self) -> str:
        """Two short sentences for the terminal."""
        head = (
            f"transmitter {self.tx_power_w:g} W = {self.tx_dbm:+.1f} dBm, attenuation "
            f"{self.attenuation_db:g} dB -> receiver input {self.input_dbm:+.1f} dBm"
        )
        need = (
            f"keep it at or below {self.limit_dbm:+.0f} dBm: at least {self.needed_db:.0f} dB of "
            f"attenuation ({self.comfort_db:.0f} dB for {COMFORT_DBM:+.0f} dBm); the first "
            "attenuator must be rated for the full transmitter power (common practice; your "
            "receiver's datasheet decides)"
        )
        if self.verdict == "damage":
            return (
                f"{head}: at or above a typical absolute-maximum input ({DAMAGE_DBM:+.0f} dBm), "
                f"this can damage the receiver; {need}"
            )
        if self.verdict == "overdrive":
            return f"{head}: above {self.limit_dbm:+.0f} dBm the receiver is overdriven; {need}"
        return (
            f"{head}: within the linear range (at most {self.limit_dbm:+.0f} dBm; common "
            "practice, your receiver's datasheet decides)"
        )


def assess_input_level(
    tx_power_w: float,
    attenuation_db: float = 0.0,
    *,
    limit_dbm: float = LINEAR_MAX_DBM,
) -> InputLevel:
    """Work out the receiver's input level and the attenuation a safe level needs.

    Parameters
    ----------
    tx_power_w : float
        Transmitter output power, W (> 0). Use the peak envelope power for SSB and
        two-tone signals: the receiver sees the envelope's peaks.
    attenuation_db : float
        Total attenuation (pads, tap or coupler) between the transmitter and the
        receiver, dB (>= 0).
    limit_dbm : float
        Highest acceptable input level, dBm (default -20 dBm, common practice).

    Returns
    -------
    InputLevel

    Notes
    -----
    ``P_dBm = 10 log10(P / 1 mW)``; the input level is ``P_dBm - A``. With the default
    limit: 1 W (+30 dBm) needs 50 dB, 5 W (+36.99 dBm) 57 dB, 100 W (+50 dBm) 70 dB.
    """
    if not (math.isfinite(tx_power_w) and tx_power_w > 0):
        raise ValueError(f"{tx_power_w=} must be a positive number of watts")
    if not (math.isfinite(attenuation_db) and attenuation_db >= 0):
        raise ValueError(f"{attenuation_db=} must be >= 0 dB")
    if not math.isfinite(limit_dbm):
        raise ValueError(f"{limit_dbm=} must be finite")
    tx_dbm = dbm_from_watts(tx_power_w)
    level = tx_dbm - attenuation_db
    if level >= DAMAGE_DBM:
        verdict: Verdict = "damage"
    elif level > limit_dbm:
        verdict = "overdrive"
    else:
        verdict = "ok"
    return InputLevel(
        tx_power_w=float(tx_power_w),
        tx_dbm=tx_dbm,
        attenuation_db=float(attenuation_db),
        input_dbm=level,
        limit_dbm=float(limit_dbm),
        needed_db=max(0.0, tx_dbm - limit_dbm),
        comfort_db=max(0.0, tx_dbm - COMFORT_DBM),
        verdict=verdict,
    )


def check_input_level(level: InputLevel, *, confirmed: bool) -> None:
    """Refuse (``CaptureError``) an unsafe chain unless the user confirmed it (``--yes``)."""
    if level.safe or confirmed:
        return
    raise CaptureError(
        f"not starting: {level.message()}. Add attenuation, or give --yes if you know your "
        "receiver takes this level"
    )
