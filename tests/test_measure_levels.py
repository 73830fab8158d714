"""Level figures: peak_dbfs, noise_floor_dbfs_per_hz, clipped_fraction.

Closed forms: a complex tone of amplitude A has |x|^2 = A^2, peak 20 log10(A) dBFS
(full scale |x| = 1 is 0 dBFS, DESIGN.md section 3; A = 0.5 -> -6.0206 dBFS); complex
white noise of variance s^2 has a two-sided PSD s^2 / fs (FS^2/Hz). Tolerances: 3 of the
stated sigmas plus 0.02 dB.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from iqscope.io import ArrayRecording
from iqscope.measure import AnalysisRequest, analyse
from iqscope.measure.levels import clipping_artefact

FS = 48_000.0


def test_peak_and_floor(rng: np.random.Generator) -> None:
    n = 1 << 17
    t = np.arange(n) / FS
    var = 1e-8
    x = 0.5 * np.exp(2j * np.pi * 2222.2 * t) + np.sqrt(var / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    an = analyse(ArrayRecording(x, FS))
    peak = an.measurements["peak_dbfs"]
    assert peak.value == pytest.approx(20 * math.log10(0.5), abs=3 * peak.uncertainty + 0.02)
    fl = an.measurements["noise_floor_dbfs_per_hz"]
    assert fl.unit == "dBFS/Hz"
    assert fl.value == pytest.approx(10 * math.log10(var / FS), abs=3 * fl.uncertainty + 0.02)
    cf = an.measurements["clipped_fraction"]
    assert cf.value == 0.0
    assert not [a for a in an.artefacts if a.kind == "clipping"]


def test_clip_level_of_integer_recordings() -> None:
    """A recording whose datatype is ci16 counts |I| >= 32767/32768 as clipped."""
    from iqscope.io import Recording

    class Ci16(Recording):
        def __init__(self, data: np.ndarray) -> None:
            self._d = data.astype(np.complex64)
            super().__init__(path=None, format="test", datatype="ci16_le", sample_rate_hz=FS, n_samples=data.size)

        def _read(self, start: int, count: int) -> np.ndarray:
            return self._d[start : start + count]

    top = 32767 / 32768
    data = np.full(1000, 0.1 + 0.1j)
    data[::10] = top + 0j
    rec = Ci16(data)
    assert rec.clip_level == pytest.approx(top)
    an = analyse(rec, AnalysisRequest(mode="cw"))
    assert an.measurements["clipped_fraction"].value == pytest.approx(0.1)


def test_clipping_artefact_none_without_clipping() -> None:
    assert clipping_artefact(0, 100, 1.0) is None
    a = clipping_artefact(5, 100, 1.0)
    assert a is not None and a.kind == "clipping" and "5 sample" in a.note


def test_stream_levels_match_level_accumulator(rng: np.random.Generator) -> None:
    """The pipeline's fast level statistics agree with iqscope.dsp.LevelAccumulator (reference)."""
    from iqscope.dsp import LevelAccumulator
    from iqscope.measure import pipeline as P

    n = 100_000
    x = (0.7 * (rng.standard_normal(n) + 1j * rng.standard_normal(n)) + 0.01).astype(np.complex64)
    x.real = np.clip(x.real, -1, 1)
    ref = LevelAccumulator(1.0)
    ref.update(x)
    r = ref.result()
    _, stats, _, _ = P._stream(ArrayRecording(x, FS), P.plan_pass(FS, n), None)
    got = stats.levels()
    assert got.n_clipped == r.n_clipped
    assert got.peak_power == pytest.approx(r.peak_power, rel=1e-6)
    assert got.mean_power == pytest.approx(r.mean_power, rel=1e-6)
    assert got.dc_power == pytest.approx(r.dc_power, rel=1e-4)
