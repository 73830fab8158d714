"""Tests of ADEV / OADEV / MDEV (iqscope.dsp._allan).

External checks:
- NBS-14 9-point and 1000-point data sets with their published deviations, NIST SP 1065
  (W. J. Riley, Handbook of Frequency Stability Analysis, 2008), pp. 107-108, as
  reproduced in the allantools test suite (REFERENCES.md item 9).
- allantools (the reference library, LGPL) on the same data.
- Closed form: a linear frequency drift y = D t has ADEV = D tau / sqrt(2)
  (REFERENCES.md item 9, power-law table).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import allantools  # a test dependency (pyproject.toml [test]): imported, never skipped

from iqscope.dsp._allan import adev, frequency_to_phase, mdev, oadev, octave_factors

#: NBS-14 9-point fractional-frequency data, tau0 = 1 (SP 1065 p. 107).
NBS14_9 = [892, 809, 823, 798, 671, 644, 883, 903, 677]

#: Published deviations at tau = 1, 2 (SP 1065 p. 107; REFERENCES.md item 9).
NBS14_9_EXPECTED = {
    "adev": (91.22945, 115.8082),
    "oadev": (91.22945, 85.95287),
    "mdev": (91.22945, 74.78849),
}

#: Published deviations at tau = 1, 10, 100 for the 1000-point set (SP 1065 p. 108).
NBS14_1000_EXPECTED = {
    "adev": (2.922319e-1, 9.965736e-2, 3.897804e-2),
    "oadev": (2.922319e-1, 9.159953e-2, 3.241343e-2),
    "mdev": (2.922319e-1, 6.172376e-2, 2.170921e-2),
}

FUNCS = {"adev": adev, "oadev": oadev, "mdev": mdev}


def nbs14_1000() -> np.ndarray:
    """The 1000-point set: n0 = 1234567890, n_{i+1} = 16807 n_i mod (2^31 - 1), y = n / (2^31 - 1)."""
    n = [1234567890]
    for _ in range(999):
        n.append(16807 * n[-1] % 2147483647)
    return np.asarray(n, dtype=np.float64) / 2147483647.0


def test_lcg_check_values() -> None:
    """REFERENCES.md item 9: n1 = 395529916, n2 = 1209410747, n3 = 633705974."""
    y = nbs14_1000() * 2147483647.0
    assert [round(v) for v in y[1:4]] == [395529916, 1209410747, 633705974]


@pytest.mark.parametrize("kind", ["adev", "oadev", "mdev"])
def test_nbs14_9_point(kind: str) -> None:
    """Published values are given to 7 significant digits: rel 1e-6."""
    res = FUNCS[kind](NBS14_9, 1.0, data_type="frequency", factors=[1, 2])
    assert res.deviation == pytest.approx(NBS14_9_EXPECTED[kind], rel=1e-6)


@pytest.mark.parametrize("kind", ["adev", "oadev", "mdev"])
def test_nbs14_1000_point(kind: str) -> None:
    res = FUNCS[kind](nbs14_1000(), 1.0, data_type="frequency", factors=[1, 10, 100])
    assert res.deviation == pytest.approx(NBS14_1000_EXPECTED[kind], rel=1e-6)


@pytest.mark.parametrize("kind", ["adev", "oadev", "mdev"])
def test_against_allantools_octaves(kind: str) -> None:
    """Same data, same octave taus: deviations, term counts and error bars agree to 1e-10."""
    y = nbs14_1000()
    ours = FUNCS[kind](y, 0.5, data_type="frequency")
    taus, devs, errs, ns = getattr(allantools, kind)(y, rate=2.0, data_type="freq", taus=ours.taus_s)
    assert ours.taus_s == pytest.approx(taus)
    assert ours.deviation == pytest.approx(devs, rel=1e-10)
    assert ours.error == pytest.approx(errs, rel=1e-10)
    assert list(ours.n_terms) == [int(v) for v in ns]


def test_phase_input_matches_frequency_input(rng: np.random.Generator) -> None:
    y = rng.standard_normal(300)
    x = frequency_to_phase(y, 2.0)
    a = oadev(y, 2.0, data_type="frequency")
    b = oadev(x, 2.0, data_type="phase")
    assert a.deviation == pytest.approx(b.deviation, rel=1e-12)


@pytest.mark.parametrize("kind", ["adev", "oadev"])
def test_linear_drift(kind: str) -> None:
    """y(t) = D t gives ADEV = D tau / sqrt(2) exactly (REFERENCES.md item 9)."""
    d, tau0 = 3.7e-9, 0.25  # per second
    y = d * tau0 * np.arange(2000)
    res = FUNCS[kind](y, tau0, data_type="frequency")
    assert res.deviation == pytest.approx(d * res.taus_s / math.sqrt(2), rel=1e-9)


def test_white_fm_slope(rng: np.random.Generator) -> None:
    """White FM: sigma^2 = h0 / (2 tau) (REFERENCES.md item 9); for unit-variance y and
    tau0 = 1, sigma(tau) = 1/sqrt(tau). 20 % tolerance covers the scatter at tau <= 64."""
    y = rng.standard_normal(20_000)
    res = oadev(y, 1.0, data_type="frequency")
    sel = res.taus_s <= 64
    assert res.deviation[sel] == pytest.approx(1 / np.sqrt(res.taus_s[sel]), rel=0.2)


def test_octave_factors() -> None:
    assert list(octave_factors(10, "oadev")) == [1, 2, 4]
    assert list(octave_factors(10, "mdev")) == [1, 2]
    assert octave_factors(2, "oadev").size == 0


def test_at_picks_nearest_tau() -> None:
    res = oadev(nbs14_1000(), 1.0, data_type="frequency")
    assert res.at(9.0)[0] == 8.0


def test_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="NaN"):
        oadev([1.0, np.nan, 2.0, 3.0], 1.0)
    with pytest.raises(ValueError, match="tau0"):
        oadev([1.0, 2.0, 3.0], 0.0)
    with pytest.raises(ValueError, match="data_type"):
        oadev([1.0, 2.0, 3.0], 1.0, data_type="x")  # type: ignore[arg-type]
