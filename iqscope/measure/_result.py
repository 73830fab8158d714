"""Typed results of measurements: one :class:`Measurement` per figure, plus flags.

These are plain data: no verdicts (see ``iqscope.grading``) and no rendering (see
``iqscope.report``). ``to_json`` gives the shape of DESIGN.md section 4 (contract).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

__all__ = ["Measurement", "Artefact", "Bound", "failed", "finite_or_none"]

#: Direction of a noise-limited bound: the true value is >= ("lower") or <= ("upper").
Bound = Literal["lower", "upper"]


def finite_or_none(x: float | None) -> float | None:
    """Return ``x`` as a float, or None when it is None, NaN or infinite."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class Measurement:
    """One measured figure with its unit, 1-sigma uncertainty and provenance.

    A figure whose unwanted component is not detectable above the noise carries the
    value the noise floor allows and ``limited_by_noise=True``; ``bound`` then says
    whether the true value is at least (``"lower"``) or at most (``"upper"``) that.
    A figure that applies but could not be measured has ``value=None`` and a note.
    """

    value: float | None
    """The figure, in ``unit``; None when it could not be measured."""
    unit: str
    """Unit symbol: "dB", "dBc", "dBFS", "dBFS/Hz", "Hz", "Hz/min", "1" (ratio) ..."""
    uncertainty: float | None = None
    """1-sigma standard uncertainty in ``unit`` (None when not estimable)."""
    limited_by_noise: bool = False
    """True when the value is a bound set by the noise floor, not a detection."""
    bound: Bound | None = None
    """With ``limited_by_noise``: the true value is >= ("lower") or <= ("upper") ``value``."""
    note: str = ""
    """How it was obtained, in a short sentence; caveats (e.g. receiver artefacts)."""
    details: Mapping[str, Any] = field(default_factory=dict)
    """Extra numbers a report may show (e.g. envelope index, positive/negative peaks)."""

    def __post_init__(self) -> None:
        object.__setattr__(self, "value", finite_or_none(self.value))
        object.__setattr__(self, "uncertainty", finite_or_none(self.uncertainty))
        if self.limited_by_noise and self.bound is None:
            raise ValueError("a noise-limited measurement needs bound='lower' or 'upper'")

    def to_json(self) -> dict[str, Any]:
        """The contract shape: value, unit, uncertainty, limited_by_noise, note (+ extras)."""
        out: dict[str, Any] = {
            "value": self.value,
            "unit": self.unit,
            "uncertainty": self.uncertainty,
            "limited_by_noise": self.limited_by_noise,
            "note": self.note,
        }
        if self.bound is not None:
            out["bound"] = self.bound
        if self.details:
            out["details"] = {k: _jsonable(v) for k, v in self.details.items()}
        return out


def failed(unit: str, note: str) -> Measurement:
    """A measurement that applies but could not be made (value None, with the reason)."""
    return Measurement(value=None, unit=unit, note=note)


@dataclass(frozen=True)
class Artefact:
    """Something in the recording that may be the receiver's, not the transmitter's."""

    kind: Literal["dc_line", "iq_image", "clipping", "sideband_reversed", "real_only", "other"]
    """What was seen."""
    offset_hz: float | None
    """Where, as an offset from the capture centre (None for clipping)."""
    level_dbc: float | None
    """Its level relative to the signal's mean power, dB (None for clipping)."""
    note: str
    """A sentence for the report, including which figures it may affect."""

    def to_json(self) -> dict[str, Any]:
        return {
            "kind": self.kind,
            "offset_hz": finite_or_none(self.offset_hz),
            "level_dbc": finite_or_none(self.level_dbc),
            "note": self.note,
        }


def _jsonable(v: Any) -> Any:
    if isinstance(v, float):
        return finite_or_none(v)
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, Mapping):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if hasattr(v, "item") and callable(v.item):  # numpy scalar
        return _jsonable(v.item())
    return v
