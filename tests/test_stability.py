"""Hadamard deviation and drift-removed Allan deviation (issue: stability over a session).

Checks against the reference library allantools (``hdev``, ``ohdev``, ``oadev``) on the
same series, and against analytic truth: a linear frequency drift cancels exactly in the
third difference of phase (NIST SP 1065, Riley 2008, Hadamard variance, section 5.2.8,
section number from memory), while the Allan deviation reads it as D tau / sqrt(2)
(SP 1065 eq. 11 applied to y = D t).
"""

from __future__ import annotations

import math

import allantools
import numpy as np
import pytest

from iqscope.dsp import hdev, oadev, ohdev
from iqscope.io import ArrayRecording
from iqscope.measure.drift import analyse_drift


def _reference(fn, y: np.ndarray, tau0: float, taus: np.ndarray) -> np.ndarray:
    _t, dev, _e, _n = fn(y, rate=1.0 / tau0, data_type="freq", taus=taus)
    return np.asarray(dev)


@pytest.mark.parametrize("ours, theirs", [(hdev, allantools.hdev), (ohdev, allantools.ohdev)])
def test_hadamard_matches_allantools(ours, theirs) -> None:
    """Same series, same taus: agreement to float rounding (allantools computes the same sums)."""
    rng = np.random.default_rng(11)
    y = 1e-9 * rng.standard_normal(777) + 3e-12 * np.arange(777) + 2e-10 * np.cumsum(rng.standard_normal(777)) / 30
    r = ours(y, 0.25, data_type="frequency")
    ref = _reference(theirs, y, 0.25, r.taus_s)
    k = ref.size  # allantools leaves out a tau with a single term
    assert k >= r.taus_s.size - 1
    np.testing.assert_allclose(r.deviation[:k], ref, rtol=1e-10)


def test_hadamard_ignores_linear_drift() -> None:
    """y = D t: every third difference of phase is zero (exact), the ADEV is D tau / sqrt(2)."""
    tau0, d = 1.0, 1e-11
    y = d * np.arange(200) * tau0
    h = ohdev(y, tau0, data_type="frequency")
    a = oadev(y, tau0, data_type="frequency")
    assert np.all(h.deviation < 1e-9 * d)
    np.testing.assert_allclose(a.deviation, d * a.taus_s / math.sqrt(2), rtol=1e-9)


def _tone(freq_hz: np.ndarray, fs: float, noise_rms: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = 0.3 * np.exp(2j * np.pi * np.cumsum(freq_hz) / fs)
    n = freq_hz.size
    x = x + noise_rms / math.sqrt(2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return x.astype(np.complex64)


def test_drift_figures_hadamard_and_detrended_match_allantools() -> None:
    """A quiet oscillator drifting 6 Hz/min: the Allan deviation is the drift's D tau/sqrt(2);
    the Hadamard and drift-removed figures are far below it, and each equals allantools on
    the tracker's own fractional-frequency series."""
    fs, dur, rf = 2000.0, 120.0, 10.1e6
    t = np.arange(int(fs * dur)) / fs
    d_hz_s = 6.0 / 60.0
    res = analyse_drift(ArrayRecording(_tone(400.0 + d_hz_s * t, fs, 0.003, 5), fs, center_frequency_hz=rf),
                        block_s=1.0)
    m = res.measurements
    adev_m, had, det = m["allan_deviation"], m["hadamard_deviation"], m["allan_deviation_drift_removed"]
    tau = adev_m.details["tau_quoted_s"]
    assert had.details["tau_quoted_s"] == tau and det.details["tau_quoted_s"] == tau
    f_rf = adev_m.details["rf_frequency_hz"]
    # Allan reads the drift: (D / f_RF) tau / sqrt(2) (SP 1065 eq. 11 on y = D t)
    assert adev_m.value == pytest.approx(d_hz_s / f_rf * tau / math.sqrt(2), rel=0.05)
    assert had.value < 0.05 * adev_m.value and det.value < 0.05 * adev_m.value
    # the same series through allantools
    tt, ff, _ = res.track.corrected()
    y = (ff - ff.mean()) / f_rf
    taus = np.asarray(had.details["tau_s"])
    np.testing.assert_allclose(had.details["deviation"], _reference(allantools.ohdev, y, 1.0, taus)[: taus.size],
                               rtol=1e-9)
    slope, icpt = np.polyfit(tt, y, 1)
    y_res = y - (slope * tt + icpt)
    taus_d = np.asarray(det.details["tau_s"])
    np.testing.assert_allclose(det.details["deviation"], _reference(allantools.oadev, y_res, 1.0, taus_d),
                               rtol=1e-6)
    assert det.details["removed_drift_hz_per_min"] == pytest.approx(6.0, abs=0.05)
