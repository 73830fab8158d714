"""Receiver artefacts: the I/Q image of the emission mirrored about the capture centre.

A receiver whose I and Q paths differ in gain or phase puts a copy of every component
at ``+f`` also at ``-f``, ``IRR = (1 + 2 g cos(phi) + g^2) / (1 - 2 g cos(phi) + g^2)``
below it for gain ratio ``g`` and phase error ``phi`` (standard image-rejection result,
e.g. B. Razavi, *RF Microelectronics*, 2nd ed., Prentice Hall 2011, section 4.2.4).
This provider looks for power in the mirror of the emission band (when the mirror does
not overlap the emission itself) and for lines at the mirror frequencies of the
strongest lines. What it finds is flagged as the receiver's and left out of the figures.
The DC line and clipping are flagged by :mod:`.carrier` and :mod:`.levels`.
"""

from __future__ import annotations

import math

from ..dsp._lines import line_power
from ._context import AnalysisContext, FigureSet
from ._result import Artefact
from .locate import layout_of

__all__ = ["artefact_figures"]


def artefact_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: flags receiver I/Q images (no measurements)."""
    out = FigureSet()
    lay = layout_of(ctx)
    if not lay.has_signal:
        return out
    spec = ctx.spectrum
    ref = ctx.signal_power if ctx.signal_power > 0 else ctx.mean_power
    lo, hi = lay.lo_hz, lay.hi_hz
    mlo, mhi = -hi, -lo
    overlaps = min(hi, mhi) > max(lo, mlo) - 2 * lay.gap_hz
    found = False
    if not overlaps:
        # Lines first: the image of each strong line, where lines dominate.
        for p in lay.peaks[:6]:
            if not lo <= p.frequency_hz <= hi or p.power < 0.01 * ref:
                continue
            img = line_power(spec, -p.frequency_hz, lay.floor.psd, search_bins=2, floor_sigma_rel=lay.floor.sigma_rel)
            if img.detected:
                irr = 10 * math.log10(p.power / img.power)
                out.artefacts.append(
                    Artefact(
                        kind="iq_image",
                        offset_hz=img.frequency_hz,
                        level_dbc=10 * math.log10(img.power / ref) if ref > 0 else None,
                        note=(
                            f"image of the line at {p.frequency_hz:.1f} Hz mirrored about the capture centre, "
                            f"{irr:.1f} dB below it: the receiver's I/Q imbalance, not the transmitter's; "
                            "spur and sideband figures near it may be the receiver's"
                        ),
                    )
                )
                found = True
        if not found:
            b = lay.band(spec, mlo, mhi, carrier=False, random=True)
            if b.detected and ref > 0:
                out.artefacts.append(
                    Artefact(
                        kind="iq_image",
                        offset_hz=0.5 * (mlo + mhi),
                        level_dbc=10 * math.log10(b.power / ref),
                        note=(
                            f"power in the mirror image of the emission band ({mlo:.0f}..{mhi:.0f} Hz), "
                            f"{10 * math.log10(ref / b.power):.1f} dB below it: the receiver's I/Q imbalance, "
                            "not the transmitter's"
                        ),
                    )
                )
    return out


#: Flags only, no measurement (pipeline ``provides``).
artefact_figures.provides = {}  # type: ignore[attr-defined]
