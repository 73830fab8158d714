"""Mode classification, carrier location and the emission's layout in the spectrum.

DESIGN.md section 3: AM/CW carrier = the carrier line; DSB carrier = the centre of
symmetry of the two sidebands (with a tone, the mean of the two sideband lines); SSB
needs ``--carrier`` or ``--tone``; ``--carrier`` always wins. A ``--carrier`` value
within +/- fs/2 is an offset from the capture centre, a larger one an absolute RF
frequency (which needs a known capture centre).

Automatic classification (``--mode auto``), on the noise-subtracted spectrum ``s``:

1. no line or band stands above the noise: no signal;
2. the strongest line holds at least 55 % of the emission power and has symmetric
   sidebands about itself above -40 dBc with a steady envelope: AM (a keyed carrier's
   envelope sits near zero for a large fraction of the time: CW);
3. an emission symmetric about a centre away from its strongest line is DSB (score
   >= 0.3 when one sideband dominates, an unbalanced modulator);
   otherwise a line with 55 % of the power is a carrier: CW;
4. otherwise, the symmetry score ``sum_k s(f0 + k) s(f0 - k) / sum_k s(k)^2`` (the
   autoconvolution of ``s`` at ``2 f0``, maximised over ``f0``) decides: >= 0.5, with
   the gap a DSB signal leaves beside its carrier (no audio below ~100 Hz), is DSB
   with its carrier at that centre; anything else is single sideband, which cannot be placed
   without ``--carrier`` or ``--tone`` (a :class:`~iqscope.errors.UsageError` says so).

Two about equal strongest lines (within 3 dB) with third-order products on both sides
and no line at their midpoint are a two-tone test (mode ``two-tone``, carrier not
placed: ``--carrier`` grades the carrier figures); with a line at the midpoint they are
DSB with a tone; with neither, DSB with ``mode_confidence="low"`` (a guess). An AM
carrier on the capture centre is kept as the carrier, not dropped as the receiver's DC
line, when it holds most of the power and has symmetric sidebands (:func:`_dc_is_carrier`).
With ``--tone`` alone, two lines ``2 * tone`` apart and within 10 dB are DSB.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any, Final

import numpy as np
import numpy.typing as npt
from scipy import fft as sp_fft

from ..dsp._levels import IqCorrelation, Levels, RailTracker
from ..dsp._lines import (
    BandPower,
    LinePower,
    Peak,
    band_power,
    bin_index,
    find_peaks,
    line_power,
    lobe_half_width_bins,
    split_dc_lines,
)
from ..dsp._noise import NoiseFloor, noise_floor, spectrum_dof, sum_variance_factor
from ..dsp._types import Spectrum
from ..errors import UsageError
from ._analysis import SignalInfo
from ._context import AnalysisContext

__all__ = [
    "MODES",
    "StreamStats",
    "CoreContext",
    "Layout",
    "carrier_offset_from_arg",
    "locate_signal",
    "layout_of",
    "stats_of",
    "floor_of",
    "db_ratio",
    "compute_layout",
    "symmetry_centre",
    "signal_warnings",
    "carrier_tolerance_hz",
]

#: Modes a request may name.
MODES: Final = ("auto", "cw", "am", "dsb", "usb", "lsb", "two-tone")

#: Fraction of the emission power in the strongest line above which it is a carrier.
_CARRIER_FRACTION: Final = 0.55
#: Lines at most this far from the carrier (or the strongest line), Hz, and within
#: ``_LINE_SEED_DB`` of the strongest, belong to the emission (modulating audio reaches
#: 10 kHz at most in the services served; common practice).
_LINE_SEED_HZ: Final = 10_000.0
_LINE_SEED_DB: Final = -40.0
#: Symmetry score above which a carrier-less emission is DSB.
_SYMMETRY_DSB: Final = 0.5
#: ... and when one sideband holds most of the power (an unbalanced DSB: 2r/(1 + r^2)
#: >= 0.3 for a power ratio r up to 6.5, i.e. 8 dB of imbalance).
_SYMMETRY_UNBALANCED: Final = 0.3
#: Width beside the carrier lobe that a DSB signal leaves nearly empty, Hz (speech audio
#: starts at 200-300 Hz, common practice).
_CENTRE_GAP_HZ: Final = 100.0
#: Fraction of the emission power in one line above which it is surely a carrier (CW).
_CW_FRACTION: Final = 0.9
#: Sideband power (dBc) above which a carrier with symmetric sidebands is AM.
_AM_SIDEBAND_DBC: Final = -40.0
#: Fraction of envelope blocks below 10 % of the median amplitude that marks keying (CW).
_KEYED_FRACTION: Final = 0.05


@dataclass(frozen=True)
class StreamStats:
    """What the pipeline's single pass measured besides the spectrum.

    The level figures are those of :class:`iqscope.dsp.LevelAccumulator` (see
    :meth:`levels`), computed on float32 views of the chunk already in memory, which is
    about ten times faster on a long recording.
    """

    n_samples: int = 0
    peak_power: float = 0.0
    """max |x|^2, FS^2."""
    mean_power: float = 0.0
    """mean |x|^2, FS^2."""
    dc: complex = 0j
    """mean x (the DC offset), FS."""
    n_clipped: int = 0
    """Samples with |Re x| or |Im x| at or above ``clip_level``."""
    clip_level: float = 1.0
    n_nonfinite: int = 0
    """Samples that were NaN/Inf (counted as 0)."""
    max_component: float = 0.0
    """Largest |Re x| or |Im x| seen."""
    n_at_max_component: int = 0
    """Samples whose |Re x| or |Im x| equals ``max_component`` (a pile-up hints at clipping)."""
    rails: RailTracker | None = None
    """The clipping-plateau tracker of the pass (:class:`iqscope.dsp.RailTracker`)."""
    iq: IqCorrelation | None = None
    """I/Q cross statistics of the pass (:class:`iqscope.dsp.IqCorrelation`): real-only test."""
    block_mean_power: npt.NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    """Mean |x|^2 per envelope block."""
    block_peak_power: npt.NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    """Max |x|^2 per envelope block."""
    block_times_s: npt.NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    """Centre time of each envelope block, s."""
    block_psd: npt.NDArray[np.float32] = field(default_factory=lambda: np.zeros((0, 0), np.float32))
    """Full-resolution PSD of consecutive blocks of the recording (rows x nfft, FS^2/Hz,
    same bins as the spectrum), from the same FFTs: a provider can follow a line in time
    with :func:`iqscope.dsp.track_line` without reading the file again. Empty when it
    would not fit in 64 MB."""
    block_psd_times_s: npt.NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    """Centre time of each ``block_psd`` row, s."""
    block_psd_counts: npt.NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, np.int64))
    """Segments averaged in each ``block_psd`` row."""
    line_survey: tuple[Spectrum, float] | None = None
    """Averaged spectrum of the start of the recording and its noise PSD
    (:func:`iqscope.measure.drift.survey_at_start`), taken before the pass when the drift
    provider runs; None otherwise."""
    line_bands: tuple[Any, ...] = ()
    """Narrow bands around the survey's strongest lines, rebuilt from the pass's FFTs
    (:class:`iqscope.dsp._spectrum.SubbandCapture`): the drift provider follows its lines in them
    instead of reading the recording again."""

    def levels(self) -> Levels:
        """The same statistics as :class:`iqscope.dsp.Levels` (what ``LevelAccumulator`` gives)."""
        return Levels(
            n_samples=self.n_samples,
            n_nonfinite=self.n_nonfinite,
            peak_power=self.peak_power,
            mean_power=self.mean_power,
            dc_power=abs(self.dc) ** 2,
            n_clipped=self.n_clipped,
            clip_level=self.clip_level,
        )

    @property
    def keyed_fraction(self) -> float:
        """Fraction of envelope blocks whose RMS is below 10 % of the key-down RMS.

        The key-down level is the 90th percentile of the block powers, so a keyed signal
        that is off most of the time is still recognised.
        """
        b = self.block_mean_power
        if b.size < 8:
            return 0.0
        top = float(np.quantile(b, 0.9))
        if top <= 0:
            return 0.0
        return float(np.mean(b < 0.01 * top))


@dataclass(frozen=True)
class CoreContext(AnalysisContext):
    """The pipeline's context with the stream statistics and the noise-floor details."""

    stats: StreamStats = field(default_factory=StreamStats)
    floor: NoiseFloor | None = None
    warnings: tuple[str, ...] = ()


def stats_of(ctx: AnalysisContext) -> StreamStats | None:
    """The stream statistics of a context built by the pipeline (None otherwise)."""
    return getattr(ctx, "stats", None)


def floor_of(ctx: AnalysisContext) -> NoiseFloor:
    f = getattr(ctx, "floor", None)
    if isinstance(f, NoiseFloor):
        return f
    return noise_floor(ctx.spectrum)


def carrier_offset_from_arg(carrier_hz: float, sample_rate_hz: float, center_hz: float | None) -> float:
    """Turn a ``--carrier`` value into an offset from the capture centre (Hz).

    Within +/- fs/2 it already is one; beyond, it is an absolute RF frequency and needs
    the capture centre.

    Raises
    ------
    UsageError
        An absolute frequency with no known centre, or one outside the captured band.
    """
    if not math.isfinite(carrier_hz):
        raise UsageError(f"--carrier {carrier_hz!r} is not a number")
    half = sample_rate_hz / 2.0
    if -half <= carrier_hz <= half:
        return float(carrier_hz)
    if center_hz is None:
        raise UsageError(
            f"--carrier {carrier_hz:g} Hz is outside +/- fs/2 = {half:g} Hz, so it is an absolute "
            "frequency, but the recording has no centre frequency: give the offset from the capture "
            "centre, or the centre frequency (e.g. --center HZ)"
        )
    off = float(carrier_hz) - float(center_hz)
    if not -half <= off <= half:
        raise UsageError(
            f"--carrier {carrier_hz:g} Hz lies {off:+g} Hz from the capture centre {center_hz:g} Hz, "
            f"outside the captured band (+/- {half:g} Hz)"
        )
    return off


def _excess(spectrum: Spectrum, floor: float) -> npt.NDArray[np.float64]:
    return np.maximum(spectrum.psd - floor, 0.0)


def symmetry_centre(
    s: npt.NDArray[np.float64], freqs: npt.NDArray[np.float64], bin_hz: float, near: int = 5
) -> tuple[float, float]:
    """Centre of symmetry of a non-negative spectrum ``s`` and its score in [0, 1].

    The autoconvolution ``c(u) = sum_k s(k) s(u - k)`` peaks at ``u = 2 f0`` for a spectrum
    symmetric about ``f0``; pairs of bins less than ``2 near`` apart (one line's own
    lobe) are left out. The score is ``c(2 f0) / sum s^2`` (1 for perfect symmetry).
    The peak is refined by a parabola through its three samples.
    """
    n = s.size
    if n < 3 or not np.any(s > 0):
        return float("nan"), 0.0
    m = sp_fft.next_fast_len(2 * n)
    S = sp_fft.rfft(s, m)
    c = sp_fft.irfft(S * S, m)[: 2 * n - 1]
    # Leave out pairs of bins within one lobe of each other: a single strong line is
    # symmetric about itself and would otherwise outvote a weaker pair of sidebands.
    for d in range(0, 2 * near + 1):
        prod = s[: n - d] * s[d:]
        c[d : d + 2 * (n - d) : 2] -= prod if d == 0 else 2.0 * prod
    e = float(np.dot(s, s))
    u = int(np.argmax(c))
    score = float(c[u] / e) if e > 0 else 0.0
    du = 0.0
    if 0 < u < c.size - 1:
        a, b, d = c[u - 1], c[u], c[u + 1]
        den = a - 2 * b + d
        if den < 0:
            du = 0.5 * (a - d) / den
    # index u in the convolution corresponds to bins i + j = u -> centre index u / 2
    centre_idx = (u + du) / 2.0
    return float(freqs[0] + centre_idx * bin_hz), min(score, 1.0)


@dataclass(frozen=True)
class Layout:
    """Where the emission sits in the spectrum, shared by the core figure providers."""

    mode: str
    f0: float | None
    """Carrier offset, Hz (None when not placed)."""
    floor: NoiseFloor
    h: int
    """Lobe half-width, bins."""
    gap_hz: float
    """Half-width of the carrier's lobe, Hz: sidebands start beyond f0 +/- gap."""
    has_signal: bool
    lo_hz: float
    """Lower edge of the emission band, Hz offset."""
    hi_hz: float
    """Upper edge of the emission band, Hz offset."""
    artefact_mask: npt.NDArray[np.bool_]
    """Bins occupied by receiver artefacts (DC line, images), left out of band powers."""
    carrier: LinePower | None
    """The carrier line at f0 (residual or full), if f0 is known."""
    peaks: tuple[Peak, ...]
    """Lines above the noise, strongest first."""
    dc_line: LinePower | None
    """A line at the capture centre, when one is detected."""
    lines_dominate: bool
    """True when lines hold >= 90 % of the emission power (tones: deterministic)."""
    tone_lines: tuple[LinePower, ...] = ()
    """The test-tone lines used (SSB with --tone: the wanted one; DSB: the two sidebands)."""
    extra: dict[str, Any] = field(default_factory=dict)

    def carrier_mask(self, spectrum: Spectrum) -> npt.NDArray[np.bool_]:
        """Bins of the carrier lobe (f0 +/- gap)."""
        if self.f0 is None:
            return np.zeros(spectrum.psd.size, bool)
        return np.abs(spectrum.freqs_hz - self.f0) <= self.gap_hz

    def exclude(self, spectrum: Spectrum, carrier: bool = True) -> npt.NDArray[np.bool_]:
        m = self.artefact_mask.copy()
        if carrier:
            m |= self.carrier_mask(spectrum)
        return m

    def mirrored_mask(self, spectrum: Spectrum) -> npt.NDArray[np.bool_]:
        """The artefact bins and their mirror images about the carrier.

        Ratios of the two sides (sideband balance, opposite-sideband suppression, AM
        index) leave out the same audio frequencies on both sides.
        """
        m = self.artefact_mask
        if self.f0 is None or not m.any():
            return m.copy()
        n = m.size
        c = (self.f0 - float(spectrum.freqs_hz[0])) / spectrum.bin_hz
        idx = np.nonzero(m)[0]
        j = np.rint(2 * c - idx).astype(np.int64)
        out = m.copy()
        ok = (j >= 0) & (j < n)
        out[j[ok]] = True
        return out

    def band(
        self,
        spectrum: Spectrum,
        lo: float,
        hi: float,
        *,
        carrier: bool = True,
        random: bool | None = None,
        symmetric: bool = False,
    ) -> BandPower:
        """Noise-subtracted power in [lo, hi] without artefacts (and without the carrier lobe).

        ``symmetric`` also leaves out the mirror images (about the carrier) of the artefact bins.
        """
        rnd = (not self.lines_dominate) if random is None else random
        ex = self.exclude(spectrum, carrier)
        if symmetric:
            ex |= self.mirrored_mask(spectrum)
        return band_power(
            spectrum,
            lo,
            hi,
            self.floor.psd,
            floor_sigma_rel=self.floor.sigma_rel,
            random_signal=rnd,
            exclude=ex,
        )


def _grow(above: npt.NDArray[np.bool_], lo: int, hi: int, gap: int) -> tuple[int, int]:
    """Extend [lo, hi] outwards over above-noise bins no more than ``gap`` bins apart."""
    idx = np.nonzero(above)[0]
    if idx.size == 0:
        return lo, hi
    k = int(np.searchsorted(idx, lo)) - 1
    edge = lo
    while k >= 0 and idx[k] >= edge - gap:
        edge = int(idx[k])
        k -= 1
    j = int(np.searchsorted(idx, hi, side="right"))
    top = hi
    while j < idx.size and idx[j] <= top + gap:
        top = int(idx[j])
        j += 1
    return min(lo, edge), max(hi, top)


def _above_noise(spectrum: Spectrum, floor: float, h: int, sigmas: float = 5.0) -> npt.NDArray[np.bool_]:
    """Bins whose lobe-wide sum stands ``sigmas`` noise sigmas above the floor."""
    psd = spectrum.psd
    n = psd.size
    m = 2 * h + 1
    k = spectrum_dof(spectrum)
    nfft = int(getattr(spectrum, "nfft", 0) or n)
    sig = floor * math.sqrt(sum_variance_factor(spectrum.window, nfft, m) / k)
    c = np.concatenate(([0.0], np.cumsum(psd - floor)))
    i = np.arange(n)
    a = np.clip(i - h, 0, n)
    b = np.clip(i + h + 1, 0, n)
    lobe = c[b] - c[a]
    return np.asarray(lobe > sigmas * sig, dtype=bool)


def _run_around(mask: npt.NDArray[np.bool_], i: int) -> npt.NDArray[np.bool_]:
    """The contiguous run of True in ``mask`` that contains bin ``i`` (all False if ``mask[i]`` is)."""
    out = np.zeros(mask.size, bool)
    if not 0 <= i < mask.size or not mask[i]:
        return out
    lo = i
    while lo > 0 and mask[lo - 1]:
        lo -= 1
    hi = i
    while hi < mask.size - 1 and mask[hi + 1]:
        hi += 1
    out[lo : hi + 1] = True
    return out


def _dc_line(spectrum: Spectrum, floor: NoiseFloor, h: int) -> LinePower | None:
    if spectrum.psd.size < 4 * h + 8:
        return None
    lp = line_power(spectrum, 0.0, floor.psd, search_bins=1, floor_sigma_rel=floor.sigma_rel)
    return lp if lp.detected else None


def locate_signal(
    spectrum: Spectrum,
    floor: NoiseFloor,
    mode: str,
    *,
    carrier_hz: float | None = None,
    tone_hz: float | None = None,
    center_hz: float | None = None,
    keyed_fraction: float = 0.0,
) -> SignalInfo:
    """Resolve the mode and place the carrier (DESIGN.md section 3).

    Parameters
    ----------
    spectrum : Spectrum
        The averaged spectrum of the recording.
    floor : NoiseFloor
        Its noise floor.
    mode : str
        One of :data:`MODES`.
    carrier_hz : float, optional
        ``--carrier`` (offset within +/- fs/2, else absolute RF); always wins.
    tone_hz : float, optional
        ``--tone``: the test tone's audio frequency (SSB), Hz.
    center_hz : float, optional
        Capture centre frequency, Hz.
    keyed_fraction : float
        Fraction of envelope blocks near zero (keying), from the stream statistics.

    Returns
    -------
    SignalInfo
        Mode ``"none"`` with no carrier when nothing stands above the noise in auto mode.

    Raises
    ------
    UsageError
        SSB without ``--carrier`` or ``--tone``; an unknown mode; an unusable ``--carrier``.
    """
    mode = (mode or "auto").lower()
    if mode not in MODES:
        raise UsageError(f"unknown --mode {mode!r}; use one of {', '.join(MODES)}")
    fs = spectrum.sample_rate_hz
    given = None if carrier_hz is None else carrier_offset_from_arg(carrier_hz, fs, center_hz)
    prep = _prepare(spectrum, floor, given, mode)
    sig = _classify(spectrum, floor, mode, prep, given=given, tone_hz=tone_hz, center_hz=center_hz,
                    keyed_fraction=keyed_fraction)
    return _check_carrier(spectrum, floor, sig, prep, given=given, tone_hz=tone_hz)


@dataclass(frozen=True)
class _Prep:
    """Lines and masks shared by the classification and the carrier check."""

    usable: bool
    peaks: list[Peak]
    """Lines above the noise, strongest first, without a receiver DC line."""
    h: int
    dc_lobe: npt.NDArray[np.bool_]
    """Bins of a receiver DC line left out of the classification."""
    carrier_at_dc: bool = False
    """The line at the capture centre is the carrier (far stronger than a DC line)."""


def _prepare(spectrum: Spectrum, floor: NoiseFloor, given: float | None, mode: str) -> _Prep:
    usable = spectrum.n_averages > 0 and math.isfinite(floor.psd) and spectrum.psd.size >= 8
    peaks = find_peaks(spectrum, floor.psd, max_peaks=16) if usable else []
    h = lobe_half_width_bins(spectrum) if usable else 5
    carrier_at_dc = False
    # A line at the capture centre is the receiver's DC offset unless --carrier points
    # there or nothing else stands above the noise (same rule as drift.plan_lines); it
    # is left out of the classification and its lobe out of the spectrum used for
    # symmetry and power shares. It is still reported as an artefact (compute_layout).
    dc_lobe = np.zeros(spectrum.psd.size, bool)
    if peaks:
        lobe_hz = (h + 0.5) * spectrum.bin_hz
        in_lobe = np.abs(spectrum.freqs_hz) <= lobe_hz
        above = _above_noise(spectrum, floor.psd, h)
        # The DC line's own skirt (window sidelobes) is the run of above-noise bins around 0 Hz.
        elsewhere = bool(np.any(above & ~(in_lobe | _run_around(above, bin_index(spectrum, 0.0)))))
        split = split_dc_lines(
            peaks, spectrum.bin_hz, hints=(given,), hint_tol_hz=2 * lobe_hz, signal_elsewhere=elsewhere
        )
        if split.dropped:
            if given is None and mode in ("auto", "am", "cw") and _dc_is_carrier(spectrum, floor, peaks, split.dropped, h):
                carrier_at_dc = True
            else:
                peaks = list(split.kept)
                dc_lobe = in_lobe

    return _Prep(usable, peaks, h, dc_lobe, carrier_at_dc)


def _classify(
    spectrum: Spectrum,
    floor: NoiseFloor,
    mode: str,
    prep: _Prep,
    *,
    given: float | None,
    tone_hz: float | None,
    center_hz: float | None,
    keyed_fraction: float,
) -> SignalInfo:
    """The mode and the carrier (see :func:`locate_signal`), before the carrier check."""

    def info(m: str, f0: float | None, how: str, detected: bool, confidence: str = "high") -> SignalInfo:
        rf = None if (f0 is None or center_hz is None) else float(center_hz) + f0
        return SignalInfo(
            mode=m, carrier_offset_hz=f0, carrier_frequency_hz=rf, how=how, mode_detected=detected,
            mode_confidence=confidence if detected else "given",
        )

    usable, peaks, h, dc_lobe = prep.usable, prep.peaks, prep.h, prep.dc_lobe
    # -- explicit modes ---------------------------------------------------------------
    if mode in ("usb", "lsb"):
        if given is not None:
            return info(mode, given, "given with --carrier", False)
        if tone_hz is None:
            raise UsageError(
                f"--mode {mode} needs the carrier: add --carrier HZ (offset from the capture centre, "
                "or absolute RF) or --tone HZ (the test tone's audio frequency)"
            )
        if not peaks:
            return info(mode, None, "no test-tone line above the noise", False)
        f_line = peaks[0].frequency_hz
        f0 = f_line - tone_hz if mode == "usb" else f_line + tone_hz
        return info(mode, f0, f"test-tone line at {f_line:.2f} Hz minus --tone", False)
    if mode == "two-tone":
        if given is not None:
            return info(mode, given, "given with --carrier", False)
        return info(mode, None, "two-tone test: give --carrier to place the suppressed carrier", False)

    if given is not None and mode != "auto":
        return info(mode, given, "given with --carrier", False)

    if not usable or not peaks and not np.any(_above_noise(spectrum, floor.psd, h)):
        if mode == "auto":
            return info("none" if given is None else "cw", given, "no signal above the noise floor", True)
        return info(mode, given, "no signal above the noise floor", False)

    s = np.where(dc_lobe, 0.0, _excess(spectrum, floor.psd))
    total = float(s.sum()) * spectrum.bin_hz
    strongest = peaks[0] if peaks else None

    if mode in ("cw", "am"):
        if given is not None:
            return info(mode, given, "given with --carrier", False)
        if strongest is None:
            return info(mode, None, "no carrier line above the noise", False)
        return info(mode, strongest.frequency_hz, "strongest line (the carrier)", False)

    if mode == "dsb":
        if given is not None:
            return info(mode, given, "given with --carrier", False)
        return info(mode, *_dsb_centre(spectrum, s, peaks, h), False)

    # -- auto -------------------------------------------------------------------------
    if tone_hz is not None and given is None:
        # A test tone implies SSB; the side is where a residual carrier or the opposite
        # sideband line stands out.
        if strongest is None:
            return info("none", None, "no test-tone line above the noise", True)
        f_line = strongest.frequency_hz
        # A DSB signal with this tone has its two sideband lines 2 * tone apart, about
        # equal (a test tone is not SSB when its mirror line is as strong as itself).
        for other in (f_line + 2 * tone_hz, f_line - 2 * tone_hz):
            q = line_power(spectrum, other, floor.psd, search_bins=2)
            if q.detected and q.power >= 0.1 * strongest.power:
                fm = 0.5 * (f_line + q.frequency_hz)
                return info("dsb", fm, f"mean of the two sideband lines {2 * tone_hz:g} Hz apart (DSB with --tone)", True)
        cands: list[tuple[float, str, float]] = []
        for side, f0 in (("usb", f_line - tone_hz), ("lsb", f_line + tone_hz)):
            c = line_power(spectrum, f0, floor.psd, search_bins=2)
            mirror = line_power(spectrum, 2 * f0 - f_line, floor.psd, search_bins=2)
            # Lines 5 noise sigmas up (false alarm ~3e-7 each), scored in sigmas.
            score = max(
                c.power / c.noise_sigma if c.noise_sigma > 0 and c.power > 5 * c.noise_sigma else 0.0,
                mirror.power / mirror.noise_sigma if mirror.noise_sigma > 0 and mirror.power > 5 * mirror.noise_sigma else 0.0,
            )
            cands.append((f0, side, score))
        cands.sort(key=lambda c: c[2], reverse=True)
        best = cands[0]
        # The winner must stand 10 dB above the other side (leakage of the tone itself
        # reaches both candidates equally).
        if best[2] <= 0 or best[2] < 10.0 * cands[1][2]:
            raise UsageError(
                "--tone alone cannot tell upper from lower sideband here (no residual carrier or "
                "opposite sideband above the noise): add --mode usb or --mode lsb"
            )
        return info(best[1], best[0], f"test-tone line at {f_line:.2f} Hz and --tone; side from the residual carrier", True)

    if given is not None:
        # Classify with the carrier known: carrier line dominant -> CW/AM, else DSB/SSB.
        c = line_power(spectrum, given, floor.psd, search_bins=2)
        if c.detected and c.power >= _CARRIER_FRACTION * total:
            m = _am_or_cw(spectrum, s, given, c.power, h, keyed_fraction)
            return info(m, given, "given with --carrier", True)
        mirror_score = _symmetry_about(s, spectrum, given)
        return info("dsb" if mirror_score >= _SYMMETRY_DSB else _ssb_side(s, spectrum, given), given, "given with --carrier", True)

    if strongest is None:
        # Power above the noise but no discrete line: a continuum (speech, noise).
        fc0, how0 = _dsb_centre(spectrum, s, peaks, h)
        if fc0 is not None and _symmetry_about(s, spectrum, fc0) >= _SYMMETRY_DSB and _centre_gap(s, spectrum, fc0, h):
            return info("dsb", fc0, how0, True)
        raise UsageError(
            "the signal looks like single sideband (not symmetric about any carrier): add --carrier HZ "
            "(offset from the capture centre, or absolute RF) or --tone HZ with --mode usb or --mode lsb"
        )
    frac = strongest.power / total if total > 0 else 1.0
    pair = _equal_pair(spectrum, floor, peaks, h, prep.dc_lobe)
    if pair is not None and not pair.carrier_line:
        if pair.products:
            return info(
                "two-tone", None,
                f"two-tone test: two equal lines at {pair.f1:.2f} and {pair.f2:.2f} Hz with odd-order products at "
                f"{', '.join(f'{f:.0f}' for f in pair.products)} Hz; the suppressed carrier cannot be placed from "
                "them: give --carrier to grade the carrier figures",
                True,
            )
    if frac >= _CARRIER_FRACTION:
        m = _am_or_cw(spectrum, s, strongest.frequency_hz, strongest.power, h, keyed_fraction)
        if m == "am":  # a carrier with symmetric sidebands about itself
            return info(m, strongest.frequency_hz, "strongest line (the carrier)", True)
    if frac < _CW_FRACTION:
        # An unbalanced DSB can hold most of its power in one sideband: test symmetry
        # about a centre away from the strongest line first.
        fd, how_d = _dsb_centre(spectrum, s, peaks, h)
        if fd is not None and abs(fd - strongest.frequency_hz) > (h + 0.5) * spectrum.bin_hz:
            score_d = _symmetry_about(s, spectrum, fd)
            if score_d >= (_SYMMETRY_DSB if frac < _CARRIER_FRACTION else _SYMMETRY_UNBALANCED) and _centre_gap(
                s, spectrum, fd, h
            ):
                return info("dsb", fd, how_d, True, _dsb_confidence(pair))
    if frac >= _CARRIER_FRACTION:
        m = _am_or_cw(spectrum, s, strongest.frequency_hz, strongest.power, h, keyed_fraction)
        return info(m, strongest.frequency_hz, "strongest line (the carrier)", True)
    fc, how_c = _dsb_centre(spectrum, s, peaks, h)
    score = _symmetry_about(s, spectrum, fc) if fc is not None else 0.0
    if fc is not None and score >= _SYMMETRY_DSB and _centre_gap(s, spectrum, fc, h):
        return info("dsb", fc, how_c, True, _dsb_confidence(pair))
    raise UsageError(
        "the signal looks like single sideband (not symmetric about any carrier): add --carrier HZ "
        "(offset from the capture centre, or absolute RF) or --tone HZ with --mode usb or --mode lsb"
    )


def _symmetry_about(s: npt.NDArray[np.float64], spectrum: Spectrum, f0: float) -> float:
    """Symmetry score of ``s`` about ``f0`` (sum s(f0+k) s(f0-k) / sum s^2)."""
    n = s.size
    c = (f0 - float(spectrum.freqs_hz[0])) / spectrum.bin_hz
    i = np.arange(n)
    j = np.rint(2 * c - i).astype(np.int64)
    ok = (j >= 0) & (j < n)
    e = float(np.dot(s, s))
    return float(np.dot(s[ok], s[j[ok]]) / e) if e > 0 else 0.0


def _centre_gap(s: npt.NDArray[np.float64], spectrum: Spectrum, f0: float, h: int) -> bool:
    """True when the spectrum is nearly empty just beside ``f0`` (outside the carrier lobe).

    A DSB signal's audio has no energy below ~100 Hz, so its two sidebands leave a gap
    about the carrier; a flat single-sideband band is symmetric about its own middle
    but has no gap there.
    """
    f = spectrum.freqs_hz
    d = np.abs(f - f0)
    gap = (h + 0.5) * spectrum.bin_hz
    inner = (d > gap) & (d <= gap + _CENTRE_GAP_HZ)
    near = (d <= 5000.0) & (s > 0)
    if not inner.any() or not near.any():
        return True
    sn = s[near]
    ref = float(np.dot(sn, sn) / sn.sum())  # power-weighted level of the emission
    return float(s[inner].mean()) <= 0.1 * ref


def _ssb_side(s: npt.NDArray[np.float64], spectrum: Spectrum, f0: float) -> str:
    f = spectrum.freqs_hz
    return "usb" if float(s[f > f0].sum()) >= float(s[f < f0].sum()) else "lsb"


def _am_or_cw(
    spectrum: Spectrum, s: npt.NDArray[np.float64], fc: float, pc: float, h: int, keyed_fraction: float
) -> str:
    if keyed_fraction >= _KEYED_FRACTION:
        return "cw"
    f = spectrum.freqs_hz
    gap = (h + 0.5) * spectrum.bin_hz
    up = float(s[f > fc + gap].sum()) * spectrum.bin_hz
    dn = float(s[f < fc - gap].sum()) * spectrum.bin_hz
    if pc <= 0 or min(up, dn) <= 0:
        return "cw"
    sb_dbc = 10 * math.log10((up + dn) / pc)
    sym = _symmetry_about(np.where(np.abs(f - fc) > gap, s, 0.0), spectrum, fc)
    return "am" if sb_dbc > _AM_SIDEBAND_DBC and sym >= _SYMMETRY_DSB else "cw"


def _dsb_centre(
    spectrum: Spectrum, s: npt.NDArray[np.float64], peaks: list[Peak], h: int
) -> tuple[float | None, str]:
    """DSB carrier: centre of symmetry; with a pair of sideband lines, their mean."""
    f0, score = symmetry_centre(s, spectrum.freqs_hz, spectrum.bin_hz, near=h)
    if not math.isfinite(f0):
        return None, "no signal above the noise floor"
    # Refine with the strongest line and its mirror about the centre (a test tone).
    tol = (h + 1) * spectrum.bin_hz
    gap = (h + 0.5) * spectrum.bin_hz
    for p in peaks[:4]:
        if abs(p.frequency_hz - f0) <= gap:
            continue  # the residual carrier itself
        target = 2 * f0 - p.frequency_hz
        for q in peaks:
            if q is p or abs(q.frequency_hz - target) > tol:
                continue
            if q.power < 0.1 * p.power:
                break
            fm = 0.5 * (p.frequency_hz + q.frequency_hz)
            return fm, "mean of the two sideband lines (DSB with a tone)"
        break
    return f0, "centre of symmetry of the sidebands"


def db_ratio(num: float, num_sigma: float, den: float, den_sigma: float) -> tuple[float, float]:
    """``10 log10(num / den)`` and its 1-sigma by first-order propagation (dB).

    ``sigma = (10 / ln 10) sqrt((s_num / num)^2 + (s_den / den)^2)``.
    """
    if num <= 0 or den <= 0:
        return float("nan"), float("nan")
    v = 10.0 * math.log10(num / den)
    s = 10.0 / math.log(10.0) * math.hypot(num_sigma / num, den_sigma / den)
    return v, s


_CACHE: dict[int, tuple[AnalysisContext, Layout]] = {}


def layout_of(ctx: AnalysisContext) -> Layout:
    """The emission's layout for a context (computed once per context and cached)."""
    hit = _CACHE.get(id(ctx))
    if hit is not None and hit[0] is ctx:
        return hit[1]
    lay = compute_layout(ctx.spectrum, floor_of(ctx), ctx.signal, tone_hz=ctx.request.tone_hz)
    if len(_CACHE) > 8:
        _CACHE.clear()
    _CACHE[id(ctx)] = (ctx, lay)
    return lay


def compute_layout(
    spectrum: Spectrum, floor: NoiseFloor, signal: SignalInfo, *, tone_hz: float | None = None
) -> Layout:
    """Find the emission band, the carrier line, the artefact bins and the test-tone lines."""
    n = spectrum.psd.size
    usable = spectrum.n_averages > 0 and math.isfinite(floor.psd) and n >= 8
    h = lobe_half_width_bins(spectrum) if usable else 5
    gap = (h + 0.5) * spectrum.bin_hz
    empty = np.zeros(n, bool)
    f0 = signal.carrier_offset_hz
    if not usable:
        return Layout(signal.mode, f0, floor, h, gap, False, 0.0, 0.0, empty, None, (), None, False)
    peaks = tuple(find_peaks(spectrum, floor.psd, max_peaks=32))
    above = _above_noise(spectrum, floor.psd, h)
    # A line at the capture centre is a receiver artefact unless the carrier sits there.
    dc = _dc_line(spectrum, floor, h)
    mask = empty.copy()
    if dc is not None and (f0 is None or abs(f0) > 2 * gap):
        mask |= np.abs(spectrum.freqs_hz) <= gap
        above = above & ~mask
    if not above.any():
        carrier = None
        if f0 is not None:
            carrier = line_power(spectrum, f0, floor.psd, search_bins=2, floor_sigma_rel=floor.sigma_rel)
        return Layout(signal.mode, f0, floor, h, gap, False, 0.0, 0.0, mask, carrier, peaks, dc, False)
    seeds: list[int] = []
    strongest = next((p for p in peaks if not mask[p.index]), None)
    if strongest is not None:
        seeds.append(strongest.index)
    if f0 is not None:
        seeds.append(bin_index(spectrum, f0))
        if strongest is not None and signal.mode in ("dsb", "am"):
            seeds.append(bin_index(spectrum, 2 * f0 - strongest.frequency_hz))
    if not seeds:
        seeds.append(int(np.argmax(np.where(mask, -np.inf, spectrum.psd))))
    # Lines near the carrier and not far below the strongest: tones and their products.
    if strongest is not None:
        ref_f = f0 if f0 is not None else strongest.frequency_hz
        for p in peaks:
            if mask[p.index] or abs(p.frequency_hz - ref_f) > _LINE_SEED_HZ:
                continue
            if p.power >= strongest.power * 10 ** (_LINE_SEED_DB / 10):
                seeds.append(p.index)
    lo_i, hi_i = min(seeds), max(seeds)
    gap_bins = max(4 * (2 * h + 1), int(math.ceil(150.0 / spectrum.bin_hz)))
    lo_i, hi_i = _grow(above, lo_i, hi_i, gap_bins)
    lo_hz = float(spectrum.freqs_hz[lo_i]) - h * spectrum.bin_hz
    hi_hz = float(spectrum.freqs_hz[hi_i]) + h * spectrum.bin_hz
    carrier = None
    if f0 is not None:
        carrier = line_power(spectrum, f0, floor.psd, search_bins=2, floor_sigma_rel=floor.sigma_rel)
    # Lines' share of the emission power decides whether band powers are deterministic.
    inband = [p for p in peaks if lo_hz <= p.frequency_hz <= hi_hz and not mask[p.index]]
    sel = (spectrum.freqs_hz >= lo_hz) & (spectrum.freqs_hz <= hi_hz) & ~mask
    band_total = float(np.maximum(spectrum.psd[sel] - floor.psd, 0).sum()) * spectrum.bin_hz
    line_total = sum(max(p.power, 0.0) for p in inband[:12])
    lines_dominate = band_total > 0 and line_total >= 0.9 * band_total
    # Test-tone lines.
    tones: list[LinePower] = []
    if f0 is not None and tone_hz is not None and signal.mode in ("usb", "lsb"):
        sgn = 1.0 if signal.mode == "usb" else -1.0
        tones.append(line_power(spectrum, f0 + sgn * tone_hz, floor.psd, search_bins=2, floor_sigma_rel=floor.sigma_rel))
    elif f0 is not None and signal.mode in ("dsb", "am") and lines_dominate:
        side = [p for p in inband if abs(p.frequency_hz - f0) > gap]
        if side:
            p = side[0]
            mirror = 2 * f0 - p.frequency_hz
            a = line_power(spectrum, p.frequency_hz, floor.psd, search_bins=1, floor_sigma_rel=floor.sigma_rel)
            b = line_power(spectrum, mirror, floor.psd, search_bins=2, floor_sigma_rel=floor.sigma_rel)
            tones = sorted((a, b), key=lambda lp: lp.frequency_hz)
    return Layout(
        mode=signal.mode,
        f0=f0,
        floor=floor,
        h=h,
        gap_hz=gap,
        has_signal=True,
        lo_hz=lo_hz,
        hi_hz=hi_hz,
        artefact_mask=mask,
        carrier=carrier,
        peaks=peaks,
        dc_line=dc,
        lines_dominate=bool(lines_dominate),
        tone_lines=tuple(tones),
    )


def _dc_is_carrier(
    spectrum: Spectrum, floor: NoiseFloor, peaks: list[Peak], dropped: tuple[Peak, ...], h: int
) -> bool:
    """True when the line at the capture centre is an AM carrier, not the receiver's DC line.

    An AM carrier holds at least 2/3 of the emission power (m <= 1: both sidebands
    together carry m^2/2 of the carrier power, AM theory) and has symmetric sidebands
    about itself; a receiver's DC offset is a bare line, normally tens of dB below the
    signal. So the centre line is kept as the carrier when it holds at least
    ``_CARRIER_FRACTION`` of the emission power, stands 3 dB above every other line and
    has sidebands symmetric about it above ``_AM_SIDEBAND_DBC``.
    """
    dc = max(dropped, key=lambda p: p.power)
    s = _excess(spectrum, floor.psd)
    total = float(s.sum()) * spectrum.bin_hz
    if total <= 0 or dc.power < _CARRIER_FRACTION * total:
        return False
    others = [p for p in peaks if p not in dropped]
    if not others or max(p.power for p in others) * 2.0 > dc.power:
        return False
    return _am_or_cw(spectrum, s, dc.frequency_hz, dc.power, h, 0.0) == "am"


def carrier_tolerance_hz(spectrum: Spectrum) -> float:
    """How far the user's carrier may sit from the signal's own before it is an error, Hz.

    Two bins: the carrier figures search the line within +/- 2 bins of the carrier
    (``line_power(search_bins=2)``); beyond that they measure the noise beside the
    line, not the line.
    """
    return 2.0 * spectrum.bin_hz


def _check_carrier(
    spectrum: Spectrum,
    floor: NoiseFloor,
    sig: SignalInfo,
    prep: _Prep,
    *,
    given: float | None,
    tone_hz: float | None,
) -> SignalInfo:
    """Compare the carrier the user placed with where the signal's own structure puts it.

    The user's carrier always wins (figures are measured there), but when the signal
    places its carrier elsewhere by more than :func:`carrier_tolerance_hz` the result
    carries ``carrier_error_hz = found - given`` and grading marks the carrier-dependent
    verdicts inconclusive. What places the carrier: AM/CW the carrier line (the strongest
    line); DSB the centre of symmetry of the sidebands (with a tone, the mean of the two
    sideband lines); SSB with ``--tone`` and ``--carrier`` the test-tone line minus the tone.
    """
    if sig.carrier_offset_hz is None or not prep.usable or not prep.peaks:
        return sig
    if given is None and not (sig.mode in ("usb", "lsb") and tone_hz is not None and not sig.mode_detected):
        return sig
    f_user = float(sig.carrier_offset_hz)
    mode = sig.mode
    h = prep.h
    found: float | None = None
    how = ""
    strongest = prep.peaks[0]
    if mode in ("am", "cw"):
        at_user = line_power(spectrum, f_user, floor.psd, search_bins=2)
        # A line at --carrier within 3 dB of the strongest line within 5 kHz of it is a
        # carrier (an AM carrier stands >= 6 dB above each sideband line, m <= 1): a
        # stronger neighbour further away does not make the user's carrier wrong.
        near = [p for p in prep.peaks if abs(p.frequency_hz - f_user) <= 5000.0] or [strongest]
        top = max(near, key=lambda p: p.power)
        if not (at_user.detected and at_user.power >= 0.5 * top.power):
            found, how = top.frequency_hz, f"carrier line at {top.frequency_hz:.2f} Hz (the strongest line near --carrier)"
    elif mode == "dsb":
        s = np.where(prep.dc_lobe, 0.0, _excess(spectrum, floor.psd))
        fd, how_d = _dsb_centre(spectrum, s, prep.peaks, h)
        if fd is not None and _symmetry_about(s, spectrum, fd) >= _SYMMETRY_DSB:
            found, how = fd, how_d
    elif mode in ("usb", "lsb") and tone_hz is not None and given is None:
        found, how = _residual_carrier_elsewhere(spectrum, floor, prep, f_user, mode, tone_hz)
    elif mode in ("usb", "lsb") and tone_hz is not None:
        sgn = 1.0 if mode == "usb" else -1.0
        f_line = strongest.frequency_hz
        # A tone line on the other side of --carrier is a reversed sideband (sidebands.py), not this.
        if sgn * (f_line - f_user) > 0:
            found = f_line - sgn * tone_hz
            how = f"test-tone line at {f_line:.2f} Hz minus --tone {tone_hz:g} Hz"
    if found is None and sig.mode_detected and mode in ("usb", "lsb") and tone_hz is None:
        # Auto mode called it single sideband about --carrier: a spectrum symmetric about
        # another centre (with the gap a DSB leaves there) is a DSB whose carrier is that centre.
        s = np.where(prep.dc_lobe, 0.0, _excess(spectrum, floor.psd))
        fd, how_d = _dsb_centre(spectrum, s, prep.peaks, h)
        if fd is not None and _symmetry_about(s, spectrum, fd) >= _SYMMETRY_DSB and _centre_gap(s, spectrum, fd, h):
            found, how = fd, f"{how_d}: the signal is symmetric about it (DSB)"
    if found is None or abs(found - f_user) <= carrier_tolerance_hz(spectrum):
        return sig
    return replace(sig, carrier_error_hz=float(found - f_user), carrier_found_offset_hz=float(found),
                   carrier_found_how=how, mode_confidence="low" if sig.mode_detected else sig.mode_confidence)


def signal_warnings(sig: SignalInfo) -> tuple[str, ...]:
    """Warnings about where the signal was placed (carrier error, a low-confidence mode)."""
    out: list[str] = []
    if sig.carrier_error_hz is not None and sig.carrier_offset_hz is not None:
        out.append(
            f"the carrier was placed at {sig.carrier_offset_hz:.2f} Hz ({sig.how}), but the signal puts it at "
            f"{sig.carrier_found_offset_hz:.2f} Hz ({sig.carrier_found_how}), {sig.carrier_error_hz:+.2f} Hz away: "
            "figures measured at the carrier are not graded as a pass; check --carrier / --tone"
        )
    if sig.mode_detected and sig.mode_confidence == "low":
        out.append(
            f"the mode was guessed ({sig.mode}: {sig.how}); figures that depend on the mode are not graded as a "
            "pass: give --mode (and --carrier) to grade them"
        )
    return tuple(out)


@dataclass(frozen=True)
class _Pair:
    """Two about equal lines: a DSB signal with a tone or a two-tone test."""

    f1: float
    f2: float
    carrier_line: bool
    """A line stands at their midpoint (a DSB carrier, residual or not)."""
    products: tuple[float, ...]
    """Odd-order products detected at f1 - k d and f2 + k d (d = f2 - f1, k = 1, 2)."""
    other_pairs: bool = False
    """Another pair of lines symmetric about the midpoint at a distance that is no odd
    multiple of d / 2 (DSB of several tones; a two-tone test has none)."""


#: Two lines within this ratio (3 dB) are "equal" test tones (two-tone tests set the
#: tones equal; ITU-R SM.326 two-tone method, from memory) ...
_EQUAL_TONES: Final = 10 ** (-3.0 / 10)
#: ... and within 6 dB when odd-order products stand on both sides (a two-tone test
#: through an audio chain with a tilted response; the products are the pattern's proof).
_EQUAL_TONES_WITH_PRODUCTS: Final = 10 ** (-6.0 / 10)


def _equal_pair(
    spectrum: Spectrum, floor: NoiseFloor, peaks: list[Peak], h: int, dc_lobe: npt.NDArray[np.bool_]
) -> _Pair | None:
    """The two strongest lines when they are about equal, with what stands about them.

    Two equal lines f1 < f2 are either DSB with one tone (its carrier at the midpoint) or
    a two-tone SSB test (its carrier off to one side, 300 Hz or more below the lower tone
    on USB). A two-tone test through a real amplifier shows odd-order products at
    ``2 f1 - f2``, ``2 f2 - f1`` (third order) and ``3 f1 - 2 f2``, ``3 f2 - 2 f1`` (fifth);
    a line at the midpoint is a DSB carrier. A midpoint inside a receiver DC line's lobe
    is counted as no carrier line (the DC line may be all of it).
    """
    if len(peaks) < 2:
        return None
    p, q = peaks[0], peaks[1]
    if q.power < _EQUAL_TONES_WITH_PRODUCTS * p.power:
        return None
    f1, f2 = sorted((p.frequency_hz, q.frequency_hz))
    d = f2 - f1
    gap = (h + 0.5) * spectrum.bin_hz
    if d <= 4 * gap:
        return None
    mid = 0.5 * (f1 + f2)
    c = line_power(spectrum, mid, floor.psd, search_bins=2)
    carrier_line = bool(c.detected) and not bool(dc_lobe[bin_index(spectrum, mid)])
    tol = (h + 1) * spectrum.bin_hz
    found: list[float] = []
    for k in (1, 2):
        for f in (f1 - k * d, f2 + k * d):
            if any(abs(r.frequency_hz - f) <= tol for r in peaks[2:]):
                found.append(f)
    # Third-order products on both sides: a lone line on one side is not the pattern.
    third = [f for f in found if abs(f - (f1 - d)) <= tol or abs(f - (f2 + d)) <= tol]
    products = tuple(sorted(found)) if len(third) == 2 else ()
    if q.power < _EQUAL_TONES * p.power and not products:
        return None
    other = False
    for r in peaks[2:]:
        u = abs(r.frequency_hz - mid)
        kk = u / (0.5 * d)
        if u <= gap or abs(kk - 2 * round((kk - 1) / 2) - 1) * 0.5 * d <= tol:
            continue  # the carrier, or where odd-order products fall
        mirror = 2 * mid - r.frequency_hz
        if any(abs(t.frequency_hz - mirror) <= tol and t.power >= 0.25 * r.power for t in peaks if t is not r):
            other = True
            break
    return _Pair(f1, f2, carrier_line, products, other)


def _dsb_confidence(pair: _Pair | None) -> str:
    """Two bare equal lines with no carrier line between them and no products are as
    likely a distortion-free two-tone test as DSB with a tone: a guess."""
    if pair is not None and not pair.carrier_line and not pair.products and not pair.other_pairs:
        return "low"
    return "high"


def _residual_carrier_elsewhere(
    spectrum: Spectrum, floor: NoiseFloor, prep: _Prep, f0: float, mode: str, tone_hz: float
) -> tuple[float | None, str]:
    """SSB placed from ``--tone`` alone: a residual carrier line at another place.

    The carrier sits ``--tone`` below (USB) or above (LSB) the tone line. When neither
    a residual carrier nor the mirror line stands at that place, but another line does
    on the carrier's side of the tone line within 5 kHz (not the receiver's DC line nor
    the receiver image of the tone line), the tone given is not the tone sent: that line
    is the residual carrier the signal shows.
    """
    sgn = 1.0 if mode == "usb" else -1.0
    f_line = f0 + sgn * tone_hz
    tol = (prep.h + 1) * spectrum.bin_hz
    gap = (prep.h + 0.5) * spectrum.bin_hz
    for f in (f0, 2 * f0 - f_line):
        if line_power(spectrum, f, floor.psd, search_bins=2).detected:
            return None, ""
    for p in prep.peaks[1:]:
        d = sgn * (f_line - p.frequency_hz)
        if not gap < d <= 5000.0:
            continue
        if abs(p.frequency_hz + f_line) <= tol or abs(p.frequency_hz) <= tol:
            continue  # the receiver's image of the tone line, or its DC line
        return p.frequency_hz, (
            f"a residual carrier line at {p.frequency_hz:.2f} Hz, {d:.0f} Hz {'below' if sgn > 0 else 'above'} the "
            f"test-tone line at {f_line:.2f} Hz (--tone {tone_hz:g} Hz puts nothing there)"
        )
    return None, ""
