"""Allan deviation (plain and overlapping) and modified Allan deviation.

Pure array functions on phase (time-error, seconds) or fractional-frequency data
sampled every ``tau0`` seconds, following NIST SP 1065 [1]_. Phase data ``x`` of N
points; fractional frequency ``y`` converts to phase by ``x = tau0 * cumsum([0, y...])``.

- ADEV (SP 1065 eq. 7, stride m):
  ``sigma^2(m tau0) = sum (x[i+2m] - 2x[i+m] + x[i])^2 / (2 n (m tau0)^2)``,
  i = 0, m, 2m, ... (n terms).
- Overlapping ADEV (eq. 11): the same sum over every i = 0 .. N-2m-1 (n = N - 2m).
- Hadamard deviation (SP 1065 section 5.2.8, eq. 17/18): third differences of phase,
  ``H sigma^2(m tau0) = sum (x[i+3m] - 3x[i+2m] + 3x[i+m] - x[i])^2 / (6 n (m tau0)^2)``;
  non-overlapping (i = 0, m, 2m, ...) and overlapping (every i = 0 .. N-3m-1). A linear
  frequency drift cancels exactly in the third difference.
- MDEV (eq. 14): ``sigma^2 = sum_j [sum_{i=j}^{j+m-1} (x[i+2m] - 2x[i+m] + x[i])]^2
  / (2 m^2 (m tau0)^2 (N - 3m + 1))``.

Error bars are the simple ``sigma / sqrt(n)`` (n terms in the sum), the same as the
reference library allantools uses by default; they understate the confidence interval
for strongly correlated noise (SP 1065 section 5.3 gives the chi-squared intervals).

References
----------
.. [1] W. J. Riley, *Handbook of Frequency Stability Analysis*, NIST Special
   Publication 1065, July 2008, sections 5.2.2-5.2.5.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import numpy.typing as npt

__all__ = [
    "DataType",
    "AllanResult",
    "frequency_to_phase",
    "octave_factors",
    "adev",
    "oadev",
    "mdev",
    "hdev",
    "ohdev",
]

#: What the input array holds: ``"phase"`` (time error x, s) or ``"frequency"``
#: (fractional frequency y, dimensionless).
DataType = Literal["phase", "frequency"]

_Kind = Literal["adev", "oadev", "mdev", "hdev", "ohdev"]


@dataclass(frozen=True)
class AllanResult:
    """Deviations at a set of averaging times."""

    kind: str
    """"adev", "oadev", "mdev", "hdev" or "ohdev"."""
    taus_s: npt.NDArray[np.float64]
    """Averaging times tau = m tau0, s."""
    deviation: npt.NDArray[np.float64]
    """The deviation at each tau (dimensionless, fractional frequency)."""
    error: npt.NDArray[np.float64]
    """Simple 1-sigma error bar, ``deviation / sqrt(n_terms)``."""
    n_terms: npt.NDArray[np.int64]
    """Number of terms averaged at each tau."""

    def at(self, tau_s: float) -> tuple[float, float, float]:
        """(tau, deviation, error) at the computed tau nearest ``tau_s`` (log scale)."""
        if self.taus_s.size == 0:
            raise ValueError("no averaging times computed")
        i = int(np.argmin(np.abs(np.log(self.taus_s / tau_s))))
        return float(self.taus_s[i]), float(self.deviation[i]), float(self.error[i])


def frequency_to_phase(y: npt.ArrayLike, tau0_s: float) -> npt.NDArray[np.float64]:
    """Integrate fractional frequency to phase (time error): ``x = tau0 cumsum([0, y])``.

    Parameters
    ----------
    y : array_like
        Fractional-frequency samples, each the average over ``tau0_s``.
    tau0_s : float
        Sampling interval, s.

    Returns
    -------
    ndarray
        Phase in seconds, one point longer than ``y``.

    References
    ----------
    .. [1] NIST SP 1065 (2008), section 4: x_{i+1} = x_i + y_i tau0.
    """
    if not tau0_s > 0:
        raise ValueError(f"{tau0_s=} must be > 0")
    arr = np.asarray(y, dtype=np.float64).ravel()
    out = np.empty(arr.size + 1)
    out[0] = 0.0
    np.cumsum(arr, out=out[1:])
    return out * tau0_s


def octave_factors(n_phase: int, kind: _Kind = "oadev") -> npt.NDArray[np.int64]:
    """Averaging factors m = 1, 2, 4, ... that leave at least one term for ``kind``.

    Parameters
    ----------
    n_phase : int
        Number of phase points N.
    kind : {"adev", "oadev", "mdev", "hdev", "ohdev"}
        ADEV/OADEV need N - 2m >= 1; MDEV needs N - 3m + 1 >= 1; HDEV/OHDEV N - 3m >= 1.
    """
    out: list[int] = []
    m = 1
    while True:
        if kind == "mdev":
            ok = n_phase - 3 * m + 1 >= 1
        elif kind in ("hdev", "ohdev"):
            ok = n_phase - 3 * m >= 1
        else:
            ok = n_phase - 2 * m >= 1
        if not ok:
            break
        out.append(m)
        m *= 2
    return np.asarray(out, dtype=np.int64)


def _phase(data: npt.ArrayLike, tau0_s: float, data_type: DataType) -> npt.NDArray[np.float64]:
    if not (tau0_s > 0 and math.isfinite(tau0_s)):
        raise ValueError(f"{tau0_s=} must be positive and finite")
    arr = np.asarray(data, dtype=np.float64).ravel()
    if not np.all(np.isfinite(arr)):
        raise ValueError("data contains NaN or infinite values")
    if data_type == "phase":
        return arr
    if data_type == "frequency":
        return frequency_to_phase(arr, tau0_s)
    raise ValueError(f"{data_type=} must be 'phase' or 'frequency'")


def _factors(
    n_phase: int, kind: _Kind, factors: Sequence[int] | npt.ArrayLike | None
) -> npt.NDArray[np.int64]:
    if factors is None:
        return octave_factors(n_phase, kind)
    ms = np.unique(np.asarray(factors, dtype=np.int64))
    if ms.size and ms[0] < 1:
        raise ValueError("averaging factors must be >= 1")
    if kind == "mdev":
        limit = (n_phase + 1) // 3
    elif kind in ("hdev", "ohdev"):
        limit = (n_phase - 1) // 3
    else:
        limit = (n_phase - 1) // 2
    return ms[ms <= limit]


def _deviation(
    kind: _Kind,
    data: npt.ArrayLike,
    tau0_s: float,
    data_type: DataType,
    factors: Sequence[int] | npt.ArrayLike | None,
) -> AllanResult:
    x = _phase(data, tau0_s, data_type)
    ms = _factors(x.size, kind, factors)
    devs: list[float] = []
    ns: list[int] = []
    for m in ms:
        m = int(m)
        tau = m * tau0_s
        if kind in ("hdev", "ohdev"):
            h = x[3 * m :] - 3.0 * x[2 * m : x.size - m] + 3.0 * x[m : x.size - 2 * m] - x[: x.size - 3 * m]
            if kind == "hdev":
                h = h[::m]
            n = h.size
            devs.append(math.sqrt(float(np.sum(h * h)) / (6.0 * n * tau * tau)))
            ns.append(n)
            continue
        d = x[2 * m :] - 2.0 * x[m:-m] + x[: -2 * m]  # N - 2m second differences
        if kind == "adev":
            d = d[::m]
            n = d.size
            var = float(np.sum(d * d)) / (2.0 * n * tau * tau)
        elif kind == "oadev":
            n = d.size
            var = float(np.sum(d * d)) / (2.0 * n * tau * tau)
        else:  # mdev: moving sums of m consecutive second differences
            c = np.concatenate(([0.0], np.cumsum(d)))
            s = c[m:] - c[:-m]
            n = s.size  # N - 3m + 1
            var = float(np.sum(s * s)) / (2.0 * m * m * tau * tau * n)
        devs.append(math.sqrt(var))
        ns.append(n)
    dev = np.asarray(devs, dtype=np.float64)
    n_arr = np.asarray(ns, dtype=np.int64)
    err = dev / np.sqrt(np.maximum(n_arr, 1)) if dev.size else dev
    return AllanResult(kind, ms.astype(np.float64) * tau0_s, dev, err, n_arr)


def adev(
    data: npt.ArrayLike,
    tau0_s: float,
    *,
    data_type: DataType = "phase",
    factors: Sequence[int] | npt.ArrayLike | None = None,
) -> AllanResult:
    """Allan deviation (non-overlapping), NIST SP 1065 eq. 7.

    Parameters
    ----------
    data : array_like
        Phase (s) or fractional frequency (dimensionless), evenly spaced by ``tau0_s``.
    tau0_s : float
        Sampling interval, s.
    data_type : {"phase", "frequency"}
        What ``data`` holds.
    factors : sequence of int, optional
        Averaging factors m (tau = m tau0). Default: octaves 1, 2, 4, ...

    Returns
    -------
    AllanResult

    References
    ----------
    .. [1] W. J. Riley, NIST SP 1065 (2008), eq. (7), p. 15.

    Examples
    --------
    The NBS-14 9-point data set (SP 1065 p. 107; REFERENCES.md item 9):

    >>> y = [892, 809, 823, 798, 671, 644, 883, 903, 677]
    >>> [round(float(v), 5) for v in adev(y, 1.0, data_type="frequency").deviation[:2]]
    [91.22945, 115.80821]
    """
    return _deviation("adev", data, tau0_s, data_type, factors)


def oadev(
    data: npt.ArrayLike,
    tau0_s: float,
    *,
    data_type: DataType = "phase",
    factors: Sequence[int] | npt.ArrayLike | None = None,
) -> AllanResult:
    """Overlapping Allan deviation, NIST SP 1065 eq. 11.

    Parameters are those of :func:`adev`.

    Notes
    -----
    ``sigma^2(m tau0) = sum_{i=0}^{N-2m-1} (x[i+2m] - 2x[i+m] + x[i])^2 / (2 (m tau0)^2 (N-2m))``.
    A linear frequency drift y(t) = D t gives ``sigma = D tau / sqrt(2)`` at every tau.

    References
    ----------
    .. [1] W. J. Riley, NIST SP 1065 (2008), eq. (11), p. 16.

    Examples
    --------
    >>> y = [892, 809, 823, 798, 671, 644, 883, 903, 677]
    >>> round(float(oadev(y, 1.0, data_type="frequency").deviation[1]), 5)
    85.95287
    """
    return _deviation("oadev", data, tau0_s, data_type, factors)


def mdev(
    data: npt.ArrayLike,
    tau0_s: float,
    *,
    data_type: DataType = "phase",
    factors: Sequence[int] | npt.ArrayLike | None = None,
) -> AllanResult:
    """Modified Allan deviation, NIST SP 1065 eq. 14.

    Parameters are those of :func:`adev`.

    References
    ----------
    .. [1] W. J. Riley, NIST SP 1065 (2008), eq. (14), p. 17.

    Examples
    --------
    >>> y = [892, 809, 823, 798, 671, 644, 883, 903, 677]
    >>> round(float(mdev(y, 1.0, data_type="frequency").deviation[1]), 5)
    74.78849
    """
    return _deviation("mdev", data, tau0_s, data_type, factors)


def hdev(
    data: npt.ArrayLike,
    tau0_s: float,
    *,
    data_type: DataType = "phase",
    factors: Sequence[int] | npt.ArrayLike | None = None,
) -> AllanResult:
    """Hadamard deviation (non-overlapping), NIST SP 1065 section 5.2.8 eq. 17.

    Parameters are those of :func:`adev`. Third differences of phase: insensitive to a
    linear frequency drift (which the Allan deviation reads as ``D tau / sqrt(2)``).

    References
    ----------
    .. [1] W. J. Riley, NIST SP 1065 (2008), section 5.2.8, eq. (17).
    """
    return _deviation("hdev", data, tau0_s, data_type, factors)


def ohdev(
    data: npt.ArrayLike,
    tau0_s: float,
    *,
    data_type: DataType = "phase",
    factors: Sequence[int] | npt.ArrayLike | None = None,
) -> AllanResult:
    """Overlapping Hadamard deviation, NIST SP 1065 section 5.2.9 eq. 18.

    Parameters are those of :func:`adev`.

    Notes
    -----
    ``H sigma^2(m tau0) = sum_{i=0}^{N-3m-1} (x[i+3m] - 3x[i+2m] + 3x[i+m] - x[i])^2
    / (6 (m tau0)^2 (N-3m))``.

    References
    ----------
    .. [1] W. J. Riley, NIST SP 1065 (2008), section 5.2.9, eq. (18).
    """
    return _deviation("ohdev", data, tau0_s, data_type, factors)
