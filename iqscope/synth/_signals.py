"""Pure array functions the synthesizer is built from (no state, no I/O).

Everything here works on float64 / complex128 arrays and on absolute sample indices, so
a block computed on its own equals the same samples computed as part of a longer run.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import numpy.typing as npt

__all__ = [
    "MORSE_CODE",
    "RC_RISE_FRACTION",
    "rc_edge_duration_s",
    "morse_intervals",
    "key_envelope",
    "frac_cycles",
    "tone_sum",
    "band_noise_lines",
    "band_noise_table",
    "cubic",
    "soft_clip",
    "quadrature_coefficients",
    "image_rejection_db",
    "image_dbc",
    "apply_image",
    "quantize",
    "clip_full_scale",
    "cubic_k_for_imd3",
]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]

#: International Morse code for letters, digits and a few signs (ITU-R M.1677-1).
MORSE_CODE: dict[str, str] = {
    "A": ".-", "B": "-...", "C": "-.-.", "D": "-..", "E": ".", "F": "..-.", "G": "--.",
    "H": "....", "I": "..", "J": ".---", "K": "-.-", "L": ".-..", "M": "--", "N": "-.",
    "O": "---", "P": ".--.", "Q": "--.-", "R": ".-.", "S": "...", "T": "-", "U": "..-",
    "V": "...-", "W": ".--", "X": "-..-", "Y": "-.--", "Z": "--..",
    "0": "-----", "1": ".----", "2": "..---", "3": "...--", "4": "....-", "5": ".....",
    "6": "-....", "7": "--...", "8": "---..", "9": "----.",
    "/": "-..-.", "=": "-...-", "?": "..--..", ".": ".-.-.-", ",": "--..--",
}  # fmt: skip

#: Fraction of a raised-cosine edge's length spent between 10 % and 90 % of amplitude:
#: 1 - 2·acos(0.8)/π = 0.59033 (from 0.5·(1 - cos(π u)) = 0.1 and 0.9).
RC_RISE_FRACTION: float = 1.0 - 2.0 * math.acos(0.8) / math.pi


def rc_edge_duration_s(rise_time_s: float) -> float:
    """Full length (s) of a raised-cosine edge whose 10-90 % amplitude rise time is given.

    Notes
    -----
    The edge is ``0.5·(1 - cos(π τ / T))`` for ``0 <= τ <= T``; it crosses 10 % at
    ``τ = T·acos(0.8)/π`` and 90 % at ``τ = T·(1 - acos(0.8)/π)``, so the 10-90 % rise
    time is ``T·(1 - 2·acos(0.8)/π) = 0.5903·T``. The 10-90 % definition of the rise
    time is the one of Rec. ITU-R SM.328 and 47 CFR 2.202 (``tr``).
    """
    if not (rise_time_s >= 0.0 and math.isfinite(rise_time_s)):
        raise ValueError(f"{rise_time_s=} must be finite and >= 0")
    return rise_time_s / RC_RISE_FRACTION


def morse_intervals(
    message: str, words_per_minute: float
) -> tuple[FloatArray, FloatArray, float]:
    """Key-down intervals of a Morse message with standard ("PARIS") timing.

    Parameters
    ----------
    message : str
        Letters, digits, spaces and the signs of :data:`MORSE_CODE` (case ignored).
    words_per_minute : float
        Speed; one dot lasts ``1.2 / words_per_minute`` s (common practice: the word
        "PARIS" is 50 dot units long).

    Returns
    -------
    on_s, off_s : ndarray
        Start and end (s) of each key-down element, measured at half amplitude.
    length_s : float
        Time from the first key-down to the end of the message's last element plus a
        word space (7 units), i.e. the natural repeat period of the message.
    """
    if not (words_per_minute > 0 and math.isfinite(words_per_minute)):
        raise ValueError(f"{words_per_minute=} must be > 0")
    unit = 1.2 / words_per_minute
    words = message.upper().split()
    if not words:
        raise ValueError(f"{message=} has no characters to send")
    on: list[float] = []
    off: list[float] = []
    t = 0.0  # end of the last element sent
    for wi, word in enumerate(words):
        for ci, char in enumerate(word):
            if char not in MORSE_CODE:
                raise ValueError(f"character {char!r} of {message=} has no Morse code")
            for ei, element in enumerate(MORSE_CODE[char]):
                if on:
                    # gaps: 1 unit inside a letter, 3 between letters, 7 between words
                    t += unit if ei else (3 * unit if ci else 7 * unit)
                on.append(t)
                t += unit if element == "." else 3 * unit
                off.append(t)
    t += 7 * unit  # a word space after the message, so it can repeat
    return np.asarray(on, np.float64), np.asarray(off, np.float64), t


def _rc_step(tau_s: FloatArray, edge_s: float) -> FloatArray:
    """Raised-cosine step: 0 before 0, rising over ``edge_s`` seconds, 1 after."""
    if edge_s <= 0.0:
        return (tau_s >= 0.0).astype(np.float64)
    u = np.clip(tau_s / edge_s, 0.0, 1.0)
    return 0.5 - 0.5 * np.cos(np.pi * u)


def key_envelope(
    t_s: FloatArray,
    on_s: FloatArray,
    off_s: FloatArray,
    rise_time_s: float,
    period_s: float | None = None,
) -> FloatArray:
    """Amplitude (0..1) of a keyed carrier with raised-cosine edges at times ``t_s``.

    Each element starts rising at ``on_s`` and starts falling at ``off_s``; both edges
    have the given 10-90 % rise time, so an element lasts ``off_s - on_s`` at half
    amplitude. With ``period_s`` the pattern repeats. Exact per sample (closed form).
    """
    edge = rc_edge_duration_s(rise_time_s)
    t = np.asarray(t_s, np.float64)
    if period_s is not None:
        t = np.mod(t, period_s)
    if on_s.size == 0:
        return np.zeros_like(t)
    idx = np.searchsorted(on_s, t, side="right") - 1
    env = np.zeros_like(t)
    for back in (0, 1):  # the current element and the previous one (its fall may linger)
        k = idx - back
        ok = k >= 0
        kk = np.where(ok, k, 0)
        part = _rc_step(t - on_s[kk], edge) - _rc_step(t - off_s[kk], edge)
        env += np.where(ok, part, 0.0)
    return env


def frac_cycles(cycles: FloatArray) -> FloatArray:
    """Fractional part of a phase in cycles (keeps ``exp(2πj·x)`` accurate for huge x)."""
    return cycles - np.floor(cycles)


def tone_sum(
    n: npt.NDArray[np.int64] | FloatArray,
    sample_rate_hz: float,
    freqs_hz: Sequence[float] | FloatArray,
    amplitudes: Sequence[complex] | ComplexArray,
) -> ComplexArray:
    """Sum of complex exponentials ``Σ a_i·exp(2πj f_i n / fs)`` at sample indices ``n``."""
    nn = np.asarray(n, np.float64)
    out = np.zeros(nn.shape, np.complex128)
    for f, a in zip(freqs_hz, amplitudes):
        cyc = frac_cycles(float(f) * nn / sample_rate_hz)
        out += complex(a) * np.exp(2j * np.pi * cyc)
    return out


def band_noise_lines(
    low_hz: float, high_hz: float, sample_rate_hz: float, period_samples: int
) -> npt.NDArray[np.int64]:
    """FFT bins (of a ``period_samples`` table) carrying lines of flat band-limited noise.

    The lines sit on the centres of cells two bins wide that tile ``[low_hz, high_hz]``
    (edges snapped to the bin grid ``fs / period_samples``), so a spectrum estimate
    coarser than the line spacing sees a flat density exactly from ``low_hz`` to
    ``high_hz``.
    """
    bin_hz = sample_rate_hz / period_samples
    lo = int(round(low_hz / bin_hz))
    hi = int(round(high_hz / bin_hz))
    if hi - lo < 2:
        raise ValueError(f"band {low_hz=}..{high_hz=} is narrower than two bins of {bin_hz} Hz")
    return np.arange(lo + 1, hi, 2, dtype=np.int64)


def band_noise_table(
    low_hz: float,
    high_hz: float,
    sample_rate_hz: float,
    period_samples: int,
    rng: np.random.Generator,
) -> ComplexArray:
    """One period of flat band-limited noise as an analytic (one-sided) complex signal.

    Equal-amplitude lines with independent uniformly random phases (a random-phase
    multitone) on the bins of :func:`band_noise_lines`; mean ``|u|²`` is 1. Repeating
    the table gives a continuous signal with continuous phase; its real part is the
    audio, its imaginary part the audio's Hilbert transform, exactly.
    """
    bins = band_noise_lines(low_hz, high_hz, sample_rate_hz, period_samples)
    phases = rng.uniform(0.0, 2.0 * np.pi, bins.size)
    spec = np.zeros(period_samples, np.complex128)
    spec[bins % period_samples] = np.exp(1j * phases) / math.sqrt(bins.size)
    return np.fft.ifft(spec) * period_samples


def cubic(x: npt.ArrayLike, k: float) -> ComplexArray:
    """Memoryless cubic nonlinearity on a complex envelope: ``y = x + k·|x|²·x``.

    Parameters
    ----------
    x : array_like
        Complex envelope, full scale 1.
    k : float
        Cubic coefficient per full-scale amplitude squared; ``k < 0`` compresses.

    Notes
    -----
    Two equal complex tones ``a·e^{jω1 t} + a·e^{jω2 t}`` give
    ``|x|²x = 3a³(e^{jω1 t} + e^{jω2 t}) + a³(e^{j(2ω1-ω2)t} + e^{j(2ω2-ω1)t})``,
    so each output tone has amplitude ``a(1 + 3k a²)`` and each third-order product
    ``k·a³``. For the real pass-band form ``y = x + c3·x³`` on ``a·cos ω1 t + a·cos ω2 t``
    the products near the carrier are ``(3/4)·c3·a³`` (standard Taylor-series result);
    the two agree with ``k = (3/4)·c3``, the first-zone part of ``c3·x³`` being
    ``(3/4)·c3·|x̃|²x̃`` for a complex envelope ``x̃``.

    References
    ----------
    .. [1] H. L. Krauss, C. W. Bostian, F. H. Raab, *Solid State Radio Engineering*,
       Wiley, 1980, ch. 14 (two-tone intermodulation of a cubic characteristic).
    """
    xa = np.asarray(x, np.complex128)
    return xa + k * (xa.real**2 + xa.imag**2) * xa


def cubic_k_for_imd3(imd3_dbc: float, tone_amplitude: float, compressive: bool = True) -> float:
    """Cubic coefficient ``k`` giving a wanted IMD3 level on two equal complex tones.

    Inverts ``imd3_dbc = 20·log10(|k|a³ / |a + 3k a³|)`` (see :func:`cubic`) for tones of
    amplitude ``a`` (full scale 1). ``compressive=True`` returns ``k < 0``.
    """
    if not imd3_dbc < 0:
        raise ValueError(f"{imd3_dbc=} must be negative")
    if not tone_amplitude > 0:
        raise ValueError(f"{tone_amplitude=} must be > 0")
    r = float(10.0 ** (imd3_dbc / 20.0))
    a2 = float(tone_amplitude) ** 2
    if compressive:
        # |k|a²/(1 - 3|k|a²) = r  ->  |k|a² = r / (1 + 3r)
        return -(r / (1.0 + 3.0 * r)) / a2
    if 3.0 * r >= 1.0:
        raise ValueError(f"{imd3_dbc=} cannot be reached by an expanding cubic")
    return (r / (1.0 - 3.0 * r)) / a2


def soft_clip(x: npt.ArrayLike, limit: float) -> ComplexArray:
    """Envelope soft limiter ``y = limit·tanh(|x|/limit)·x/|x|`` (phase kept).

    Small signals pass with unit gain; the envelope never exceeds ``limit``.
    """
    if not limit > 0:
        raise ValueError(f"{limit=} must be > 0")
    xa = np.asarray(x, np.complex128)
    mag = np.abs(xa)
    with np.errstate(invalid="ignore", divide="ignore"):
        gain = np.where(mag > 0, limit * np.tanh(mag / limit) / np.where(mag > 0, mag, 1.0), 1.0)
    return xa * gain


def quadrature_coefficients(gain_error_db: float, phase_error_deg: float) -> tuple[complex, complex]:
    """Direct and image coefficients ``(K1, K2)`` of a quadrature path with gain/phase error.

    A modulator or receiver whose Q branch has amplitude ratio ``g = 10^(gain_error_db/20)``
    and phase error ``φ`` turns ``x = I + jQ`` into ``I + j·g·(Q cos φ + I sin φ)``
    ``= K1·x + K2·x*`` with ``K1 = (1 + g·e^{jφ})/2`` and ``K2 = (1 - g·e^{-jφ})/2``.
    """
    g = 10.0 ** (gain_error_db / 20.0)
    phi = math.radians(phase_error_deg)
    k1 = (1.0 + g * complex(math.cos(phi), math.sin(phi))) / 2.0
    k2 = (1.0 - g * complex(math.cos(phi), -math.sin(phi))) / 2.0
    return k1, k2


def image_rejection_db(gain_ratio: float, phase_error_deg: float) -> float:
    """Image (opposite-sideband) rejection ratio of a quadrature path, dB.

    Notes
    -----
    ``IRR = (1 + 2g·cos φ + g²) / (1 - 2g·cos φ + g²)`` for amplitude ratio ``g`` and
    phase error ``φ`` (standard phasing-method result, e.g. B. Razavi, *RF
    Microelectronics*). ``g = 1, φ = 1°`` gives 41.18 dB.

    References
    ----------
    .. [1] B. Razavi, *RF Microelectronics*, Prentice Hall (image-reject receivers).
    """
    phi = math.radians(phase_error_deg)
    g = float(gain_ratio)
    num = 1.0 + 2.0 * g * math.cos(phi) + g * g
    den = 1.0 - 2.0 * g * math.cos(phi) + g * g
    if den <= 0.0:
        return math.inf
    return 10.0 * math.log10(num / den)


def image_dbc(gain_error_db: float, phase_error_deg: float) -> float:
    """Image level relative to the wanted signal (dBc, negative) for a gain/phase error."""
    return -image_rejection_db(10.0 ** (gain_error_db / 20.0), phase_error_deg)


def apply_image(x: npt.ArrayLike, k1: complex, k2: complex) -> ComplexArray:
    """``y = K1·x + K2·x*``: the widely-linear model of an imbalanced quadrature path."""
    xa = np.asarray(x, np.complex128)
    return k1 * xa + k2 * np.conj(xa)


def clip_full_scale(x: npt.ArrayLike) -> ComplexArray:
    """Clip I and Q separately to ``[-1, 1]`` (an ADC's full scale)."""
    xa = np.asarray(x, np.complex128)
    return np.clip(xa.real, -1.0, 1.0) + 1j * np.clip(xa.imag, -1.0, 1.0)


def quantize(x: npt.ArrayLike, bits: int) -> ComplexArray:
    """Two's-complement ADC of ``bits`` bits per component, full scale ±1.

    Each component is rounded to the nearest multiple of ``q = 2^-(bits-1)`` (ties to
    even) and clipped to ``[-1, 1 - q]``, the code range ``-2^(bits-1) .. 2^(bits-1)-1``
    scaled by ``q`` (the scaling SigMF readers use for ``ci16``: x / 32768).
    """
    if not 2 <= int(bits) <= 32:
        raise ValueError(f"{bits=} must be in 2..32")
    xa = np.asarray(x, np.complex128)
    scale = float(2 ** (int(bits) - 1))
    lo, hi = -scale, scale - 1.0
    re = np.clip(np.rint(xa.real * scale), lo, hi) / scale
    im = np.clip(np.rint(xa.imag * scale), lo, hi) / scale
    return re + 1j * im
