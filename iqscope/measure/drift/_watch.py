"""Live status for ``iqscope watch``: :class:`WatchStatus` from a running tracker."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ._figures import _slope
from ._tracker import LineTracker


# --------------------------------------------------------------------------------------
# Live status (watch)
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class WatchStatus:
    """What ``iqscope watch`` shows after each block (plain data for the renderer)."""

    elapsed_s: float
    """Recording time tracked so far, s."""
    n_blocks: int
    n_valid: int
    """Blocks in which the line was seen."""
    level_dbfs: float | None
    """Power of the followed line(s) in the last block, dBFS."""
    snr_db: float | None
    """Per-sample SNR of the followed line in the last block, dB."""
    offset_hz: float | None
    """Last block's reference frequency, Hz offset (from the nominal carrier or centre)."""
    sigma_hz: float | None
    drift_hz_per_min: float | None
    """Regression slope so far, Hz/min."""
    drift_se_hz_per_min: float | None
    peak_to_peak_hz: float | None
    """Max - min so far, Hz."""
    carrier_suppression_db: float | None
    """Sideband power over carrier power (averaged over the blocks so far), dB."""
    carrier_limited_by_noise: bool
    """True when the carrier is not above the noise: the value is a lower bound."""
    what: str
    """What is followed."""


def watch_status(tracker: LineTracker, nominal_offset_hz: float | None = None) -> WatchStatus:
    """Summary of a tracker's blocks so far (cheap: O(blocks))."""
    blocks = tracker.blocks
    nominal = nominal_offset_hz or 0.0
    if not blocks:
        return WatchStatus(0.0, 0, 0, None, None, None, None, None, None, None, None, False,
                           tracker.plan.description)
    last = blocks[-1]
    tr = tracker.track()
    t, f, s = tr.corrected()
    slope = se = pp = None
    if t.size >= 3:
        b, _, e, _ = _slope(t, f)
        slope, se = b * 60.0, e * 60.0
        pp = float(f.max() - f.min())
    cs: float | None = None
    limited = False
    good = [b for b in blocks if b.valid and b.carrier_power is not None]
    if good:
        p_sb = float(np.mean([sum(e.amplitude**2 for e in b.lines) for b in good]))
        p_c = float(np.mean([b.carrier_power or 0.0 for b in good]))
        noise = float(np.mean([b.lines[0].noise_power / b.lines[0].n_samples for b in good]))
        # the mean of K single-bin powers of noise has std noise / sqrt(K): 3 sigma above it
        floor = noise * (1.0 + 3.0 / math.sqrt(len(good)))
        if p_c > floor:
            cs = 10 * math.log10(p_sb / (p_c - noise))
        else:  # carrier not seen: it is at most 3 sigma of the averaged noise
            cs = 10 * math.log10(p_sb / (floor - noise))
            limited = True
    return WatchStatus(
        elapsed_s=len(blocks) * tracker.block_s,
        n_blocks=len(blocks),
        n_valid=int(sum(b.valid for b in blocks)),
        level_dbfs=last.level_dbfs if last.valid else None,
        snr_db=min(e.snr_db for e in last.lines) if last.valid else None,
        offset_hz=(float(f[-1]) - nominal) if (f.size and last.valid) else None,
        sigma_hz=float(s[-1]) if (s.size and last.valid) else None,
        drift_hz_per_min=slope,
        drift_se_hz_per_min=se,
        peak_to_peak_hz=pp,
        carrier_suppression_db=cs,
        carrier_limited_by_noise=limited,
        what=tracker.plan.description,
    )
