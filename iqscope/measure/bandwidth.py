"""Bandwidth figures: occupied_bandwidth_hz (99 %) and bandwidth_26db_hz.

- **Occupied bandwidth** (ITU Radio Regulations, Article 1, No. 1.153): the width of a
  band such that below its lower and above its upper limit the mean powers emitted are
  each 0.5 % of the total mean power. Computed from the noise-subtracted PSD over the
  emission band (padded), receiver artefacts left out: the cumulative power crosses
  0.5 % and 99.5 % of the total; each bin's power is spread uniformly over the bin, so
  the crossings are interpolated linearly.
- **x-dB bandwidth** (Rec. ITU-R SM.328 section 1.8, x = 26 as in SM.443 Annex 3): the
  band outside which the spectrum is at least 26 dB below its peak. The outermost
  crossings of the 26 dB level are interpolated linearly in dB between bins. It depends
  on the resolution bandwidth (the window's ENBW), which the note states.

Uncertainties (docs/measurements.md): an edge found where a cumulative sum ``C`` crosses
a level moves by ``delta C / S(edge)`` with ``S`` the PSD there; ``var C`` follows from
the chi-square statistics of the averaged bins (random-signal bound, conservative for
tones).
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

from ..dsp._noise import bin_correlation, realized_power_factor, spectrum_dof
from ..dsp._types import Spectrum
from ._context import AnalysisContext, FigureSet
from ._result import Measurement, failed
from .locate import Layout, layout_of

__all__ = ["bandwidth_figures", "occupied_bandwidth", "x_db_bandwidth"]

#: Fraction of the power left out on each side (RR No. 1.153: beta/2 = 0.5 %).
BETA_HALF = 0.005
#: A bandwidth narrower than this many resolution bandwidths (ENBW) is set by the
#: window, not by the signal: it is reported as resolution-limited.
RESOLUTION_LIMIT = 4.0


def _lower_crossing(cum: npt.NDArray[np.float64], level: float, edges: npt.NDArray[np.float64]) -> tuple[float, int]:
    """Frequency where the cumulative power from the left first reaches ``level``, and its bin.

    ``cum`` is the cumulative noise-subtracted power at the bin edges; it is not monotonic
    (a noise-subtracted bin can be negative), so the first edge with ``cum >= level`` is
    taken (``np.argmax`` on the boolean), not a binary search. Within that bin the power
    is spread uniformly (linear interpolation).
    """
    reach = cum >= level
    j = int(np.argmax(reach)) if reach.any() else cum.size - 1
    j = min(max(j, 1), cum.size - 1)
    c0, c1 = cum[j - 1], cum[j]
    t = 0.0 if c1 == c0 else (level - c0) / (c1 - c0)
    t = min(max(t, 0.0), 1.0)
    return float(edges[j - 1] + t * (edges[j] - edges[j - 1])), j - 1


def _upper_crossing(cum: npt.NDArray[np.float64], level: float, edges: npt.NDArray[np.float64]) -> tuple[float, int]:
    """Frequency where the cumulative power from the right first reaches ``level``, and its bin.

    The mirror of :func:`_lower_crossing` on ``rc = total - cum`` (the power above each
    edge), scanned from the upper end, so that the power above the upper limit is
    ``level`` (RR No. 1.153) whatever the noise does further in.
    """
    rc = cum[-1] - cum
    reach = rc >= level
    # Last edge (from the left) whose power above it still reaches the level.
    k = int(rc.size - 1 - np.argmax(reach[::-1])) if reach.any() else 0
    k = min(max(k, 0), rc.size - 2)
    c0, c1 = rc[k], rc[k + 1]
    t = 0.0 if c0 == c1 else (c0 - level) / (c0 - c1)
    t = min(max(t, 0.0), 1.0)
    return float(edges[k] + t * (edges[k + 1] - edges[k])), k


def occupied_bandwidth(
    spectrum: Spectrum,
    floor_psd: float,
    lo_hz: float,
    hi_hz: float,
    exclude: npt.NDArray[np.bool_] | None = None,
    beta_half: float = BETA_HALF,
) -> tuple[float, float, float, float]:
    """99 % occupied bandwidth of the noise-subtracted PSD within ``[lo_hz, hi_hz]``.

    Returns
    -------
    (obw_hz, lower_hz, upper_hz, sigma_hz)
        NaNs when there is no positive power in the band.

    References
    ----------
    ITU Radio Regulations, Article 1, No. 1.153 (occupied bandwidth).
    """
    f = spectrum.freqs_hz
    df = spectrum.bin_hz
    sel = (f >= lo_hz) & (f <= hi_hz)
    nan = float("nan")
    if not sel.any():
        return nan, nan, nan, nan
    idx = np.nonzero(sel)[0]
    a, b = int(idx[0]), int(idx[-1]) + 1
    psd = spectrum.psd[a:b]
    s = psd - floor_psd
    if exclude is not None:
        s = np.where(exclude[a:b], 0.0, s)
    p = s * df
    cum = np.concatenate(([0.0], np.cumsum(p)))
    total = float(cum[-1])
    if not total > 0:
        return nan, nan, nan, nan
    edges = np.concatenate((f[a:b] - df / 2, [f[b - 1] + df / 2]))
    f_lo, i_lo = _lower_crossing(cum, beta_half * total, edges)
    f_hi, i_hi = _upper_crossing(cum, beta_half * total, edges)
    # Uncertainty: var of the cumulative power outside each edge (bins' chi-square
    # variance psd^2 / K, widened by the bin correlation), over the PSD at the edge.
    k = spectrum_dof(spectrum)
    nfft = int(getattr(spectrum, "nfft", 0) or spectrum.psd.size)
    rho = bin_correlation(spectrum.window, nfft, 16)
    spread = float(rho[0] + 2 * rho[1:].sum())
    c = realized_power_factor(spectrum.window, nfft, float(getattr(spectrum, "overlap", 0.5)))
    var_bins = c * (psd * df) ** 2 * spread / k
    var_lo = float(var_bins[: i_lo + 1].sum()) + (beta_half**2) * float(var_bins.sum())
    var_hi = float(var_bins[i_hi:].sum()) + (beta_half**2) * float(var_bins.sum())
    s_lo = max(float(s[i_lo]), 1e-300)
    s_hi = max(float(s[min(i_hi, s.size - 1)]), 1e-300)
    # Plus the discretisation of the uniform-within-bin model: +/- half a bin, uniform.
    q = df * df / 12.0
    sigma = math.sqrt(var_lo / s_lo**2 + var_hi / s_hi**2 + 2 * q)
    sigma = min(sigma, f_hi - f_lo if f_hi > f_lo else sigma)
    return f_hi - f_lo, f_lo, f_hi, sigma


def x_db_bandwidth(
    spectrum: Spectrum,
    floor_psd: float,
    lo_hz: float,
    hi_hz: float,
    x_db: float = 26.0,
    exclude: npt.NDArray[np.bool_] | None = None,
) -> tuple[float, float, float, float, bool]:
    """x-dB bandwidth of the spectrum within ``[lo_hz, hi_hz]`` (ITU-R SM.328 section 1.8).

    Returns
    -------
    (width_hz, lower_hz, upper_hz, sigma_hz, noise_limited)
        ``noise_limited`` when the level x dB below the peak is not 3 bin-sigmas above
        the floor; the width is then where the spectrum meets the noise, a lower bound.
        NaNs when the band is empty or its peak is not 3 bin-sigmas above the floor.
    """
    f = spectrum.freqs_hz
    df = spectrum.bin_hz
    nan = float("nan")
    sel = (f >= lo_hz) & (f <= hi_hz)
    if exclude is not None:
        sel &= ~exclude
    if not sel.any():
        return nan, nan, nan, nan, False
    idx = np.nonzero(sel)[0]
    exc = spectrum.psd - floor_psd
    peak_i = int(idx[np.argmax(exc[idx])])
    peak = float(exc[peak_i])
    if not peak > 0:
        return nan, nan, nan, nan, False
    k = spectrum_dof(spectrum)
    bin_sigma = floor_psd / math.sqrt(k)
    level = peak * 10.0 ** (-x_db / 10.0)
    limited = level < 3.0 * bin_sigma
    if limited:
        level = 3.0 * bin_sigma
    if not peak >= level:
        # The peak itself is not 3 bin-sigmas above the floor: no edge can be placed.
        return nan, nan, nan, nan, False
    above = idx[exc[idx] >= level]
    i_lo, i_hi = int(above.min()), int(above.max())

    def edge(i_in: int, i_out: int) -> tuple[float, float]:
        if i_out < 0 or i_out >= exc.size:
            return float(f[i_in]), df / math.sqrt(12)
        y_in = 10 * math.log10(max(exc[i_in], 1e-300))
        y_out = 10 * math.log10(max(exc[i_out], 1e-300))
        y_l = 10 * math.log10(level)
        t = 0.0 if y_in == y_out else (y_in - y_l) / (y_in - y_out)
        t = min(max(t, 0.0), 1.0)
        fe = float(f[i_in] + t * (f[i_out] - f[i_in]))
        slope = abs(exc[i_in] - exc[i_out]) / df  # PSD per Hz across the crossing
        s_psd = (level + floor_psd) / math.sqrt(k)
        s = s_psd / slope if slope > 0 else df
        return fe, math.hypot(min(s, df), df / math.sqrt(12))

    fl, sl = edge(i_lo, i_lo - 1)
    fh, sh = edge(i_hi, i_hi + 1)
    return fh - fl, fl, fh, math.hypot(sl, sh), bool(limited)


def bandwidth_figures(ctx: AnalysisContext) -> FigureSet:
    """Figure provider: ``occupied_bandwidth_hz`` and ``bandwidth_26db_hz`` (+ markers)."""
    out = FigureSet()
    lay: Layout = layout_of(ctx)
    spec = ctx.spectrum
    if not lay.has_signal:
        for name in ("occupied_bandwidth_hz", "bandwidth_26db_hz"):
            out.measurements[name] = failed("Hz", "no signal above the noise floor")
        return out
    width = lay.hi_hz - lay.lo_hz
    pad = max(2 * lay.h * spec.bin_hz, 0.05 * width)
    lo, hi = lay.lo_hz - pad, lay.hi_hz + pad
    obw, fl, fh, s = occupied_bandwidth(spec, lay.floor.psd, lo, hi, exclude=lay.artefact_mask)
    rbw = f"RBW {spec.enbw_hz:.3g} Hz ({spec.window})"
    # A width within a few RBW is widened by the window's own response: the true width is
    # at most the figure. That is a resolution limit, not a noise bound, so limited_by_noise
    # stays False (DESIGN.md: that flag marks a noise bound) and details say
    # resolution_limited.
    narrow = (
        f"; within {RESOLUTION_LIMIT:g} RBW: widened by the window, the true width is at most this "
        "(use --resolution for a finer figure)"
    )
    if math.isfinite(obw):
        res_lim = obw < RESOLUTION_LIMIT * spec.enbw_hz
        hidden, hidden_note = _hidden_outside(ctx, lay, lo, hi)
        out.measurements["occupied_bandwidth_hz"] = Measurement(
            value=obw, unit="Hz", uncertainty=s,
            note=f"99 % power bandwidth (RR No. 1.153), noise subtracted, {fl:.1f} to {fh:.1f} Hz; {rbw}"
            + hidden_note
            + (narrow if res_lim else ""),
            details={
                "lower_hz": fl,
                "upper_hz": fh,
                "resolution_limited": res_lim,
                "search_lower_hz": lo,
                "search_upper_hz": hi,
                "hidden_outside_max_fraction": hidden,
            },
        )
        out.markers["obw_lower"] = fl
        out.markers["obw_upper"] = fh
    else:
        out.measurements["occupied_bandwidth_hz"] = failed("Hz", "no power above the noise floor")
    w, bl, bh, sb, limited = x_db_bandwidth(spec, lay.floor.psd, lo, hi, 26.0, exclude=lay.artefact_mask)
    if math.isfinite(w):
        res_lim26 = w < RESOLUTION_LIMIT * spec.enbw_hz
        out.measurements["bandwidth_26db_hz"] = Measurement(
            value=w, unit="Hz", uncertainty=None if limited else sb,
            limited_by_noise=limited, bound="lower" if limited else None,
            note=(
                f"outermost points 26 dB below the spectrum's peak (ITU-R SM.328 x-dB bandwidth), {bl:.1f} to "
                f"{bh:.1f} Hz; {rbw}"
                + ("; the -26 dB level is under the noise: width where the spectrum meets the noise" if limited else "")
                + (narrow if res_lim26 else "")
            ),
            details={"lower_hz": bl, "upper_hz": bh, "resolution_limited": res_lim26},
        )
        out.markers["bw26_lower"] = bl
        out.markers["bw26_upper"] = bh
    else:
        out.measurements["bandwidth_26db_hz"] = failed("Hz", "no power above the noise floor")
    return out


def _hidden_outside(ctx: AnalysisContext, lay: Layout, lo: float, hi: float) -> tuple[float, str]:
    """How much of the emission could hide under the noise just outside ``[lo, hi]``.

    The occupied bandwidth is integrated over the band where the spectrum stands above the
    noise (padded); skirts below the detection level beyond it are cut off. The
    noise-subtracted power within one band-width outside each edge, at its 97.7 % upper
    limit (:attr:`BandPower.upper_bound`), over the power inside, bounds what was cut: when
    it could exceed the 0.5 % that RR No. 1.153 leaves outside each limit, the true width
    may be larger, and the note says so.
    """
    spec = ctx.spectrum
    w = max(hi - lo, 0.0)
    inside = lay.band(spec, lo, hi, carrier=False, random=True)
    if not inside.power > 0 or w <= 0:
        return float("nan"), ""
    below = lay.band(spec, lo - w, lo - 0.5 * spec.bin_hz, carrier=False, random=True)
    above = lay.band(spec, hi + 0.5 * spec.bin_hz, hi + w, carrier=False, random=True)
    cut = sum(b.upper_bound for b in (below, above) if b.n_bins > 0 and math.isfinite(b.upper_bound) and b.upper_bound > 0)
    frac = cut / inside.power
    if frac > BETA_HALF:
        note = (
            f"; computed over {lo:.1f} to {hi:.1f} Hz, where the spectrum stands above the noise: up to "
            f"{100 * frac:.2g} % of the power could lie under the noise just outside (more than the 0.5 % "
            "RR No. 1.153 leaves beyond each limit), so the true width may be larger"
        )
    else:
        note = (
            f"; computed over {lo:.1f} to {hi:.1f} Hz: at most {100 * frac:.2g} % of the power lies under "
            "the noise just outside, under the 0.5 % left beyond each limit"
        )
    return float(frac), note


#: Both bandwidths apply in every mode (pipeline ``provides``).
bandwidth_figures.provides = {"occupied_bandwidth_hz": "Hz", "bandwidth_26db_hz": "Hz"}  # type: ignore[attr-defined]
