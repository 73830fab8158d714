"""The analysis pipeline: invariants, provider isolation, streaming, traces and markers.

Invariant (scipy's ``test_windowfunc_basics`` habit, STYLE.md item 5): every measurement
is finite or null-with-a-note on pure noise, empty input, length-1 input and an all-zero
recording; the JSON form is strict JSON (no NaN). The closed-form truth for the
end-to-end case is a DSB signal built here (carrier 37.6 dB below the sidebands, as in
the design's JSON example).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from iqscope.io import ArrayRecording, Recording
from iqscope.measure import PROVIDERS, AnalysisRequest, FigureSet, Measurement, analyse, plan_pass
from iqscope.measure.pipeline import MAX_CHUNK, MEASUREMENT_ORDER

FS = 48_000.0


def _noise(rng: np.random.Generator, n: int, var: float) -> np.ndarray:
    return np.sqrt(var / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def dsb(rng: np.random.Generator, n: int) -> np.ndarray:
    t = np.arange(n) / FS
    a = 0.25
    c = math.sqrt(2 * a * a / 10 ** (37.6 / 10))
    x = a * np.exp(2j * np.pi * 4213.3 * t) + a * np.exp(2j * np.pi * 2208.1 * t + 1j) + c * np.exp(2j * np.pi * 3210.7 * t)
    return x + _noise(rng, n, 1e-9)


def _check_invariants(an) -> None:  # type: ignore[no-untyped-def]
    for name, m in an.measurements.items():
        assert isinstance(m, Measurement)
        if m.value is None:
            assert m.note, f"{name} is null without a note"
        else:
            assert math.isfinite(m.value), name
        if m.uncertainty is not None:
            assert math.isfinite(m.uncertainty) and m.uncertainty >= 0, name
    json.dumps(an.to_json(), allow_nan=False)


@pytest.mark.parametrize("kind", ["noise", "empty", "one", "fifteen", "zeros"])
def test_invariants_on_degenerate_input(rng: np.random.Generator, kind: str) -> None:
    data = {
        "noise": _noise(rng, 1 << 16, 1e-6),
        "empty": np.zeros(0, np.complex64),
        "one": np.array([0.5 + 0.5j]),
        "fifteen": np.full(15, 0.1 + 0j),
        "zeros": np.zeros(1 << 14, np.complex64),
    }[kind]
    an = analyse(ArrayRecording(data, FS))
    _check_invariants(an)
    for key in ("noise_floor_dbfs_per_hz", "peak_dbfs", "clipped_fraction"):
        assert key in an.measurements
    if kind == "noise":
        assert an.signal.mode == "none"
        assert an.measurements["noise_floor_dbfs_per_hz"].value == pytest.approx(10 * math.log10(1e-6 / FS), abs=0.1)
    if kind in ("empty", "one", "fifteen"):
        assert an.measurements["noise_floor_dbfs_per_hz"].value is None


def test_end_to_end_dsb(rng: np.random.Generator) -> None:
    progress: list[tuple[int, int]] = []
    n = 1 << 18
    an = analyse(ArrayRecording(dsb(rng, n), FS, 7.1e6), AnalysisRequest(progress=lambda d, t: progress.append((d, t))))
    _check_invariants(an)
    assert an.signal.mode == "dsb"
    assert an.measurements["carrier_suppression_db"].value == pytest.approx(37.6, abs=0.2)
    # report order of the stable keys
    keys = [k for k in an.measurements if k in MEASUREMENT_ORDER]
    assert keys == sorted(keys, key=MEASUREMENT_ORDER.index)
    # The single pass reports up to (n, n); providers that stream again may report after it.
    first = progress[: progress.index((n, n)) + 1]
    assert all(t == n for _, t in first)
    assert all(b >= a for (a, _), (b, _) in zip(first, first[1:]))
    for key in ("carrier", "obw_lower", "obw_upper", "bw26_lower", "bw26_upper", "sideband_lower", "sideband_upper"):
        assert key in an.markers
    env = an.traces["envelope"]
    assert env.x.size == env.y.size and 100 <= env.x.size <= 4096
    sg = an.traces["spectrogram"]
    assert sg.y.ndim == 2 and sg.y.shape[1] == sg.x.size and sg.y.shape[0] == len(sg.extra["rows"])
    assert sg.y.shape[0] <= 128 and sg.y.shape[1] <= 513
    assert an.spectrum is not None and an.spectrum.bin_hz <= 6.25
    j = an.to_json()
    assert j["signal"]["carrier_frequency_hz"] == pytest.approx(7.1e6 + 3210.7, abs=0.05)


def test_resolution_option(rng: np.random.Generator) -> None:
    x = dsb(rng, 1 << 17)
    an = analyse(ArrayRecording(x, FS), AnalysisRequest(resolution_hz=2.0))
    assert an.spectrum is not None and an.spectrum.bin_hz <= 2.0
    assert an.measurements["carrier_suppression_db"].value == pytest.approx(37.6, abs=0.3)


def test_short_recording_warns() -> None:
    p = plan_pass(FS, 20_000)
    assert p.warnings and FS / p.nfft > 6.25
    assert plan_pass(FS, 10 * FS).nfft >= FS / 6.25


def test_failing_provider_does_not_sink_the_others(rng: np.random.Generator) -> None:
    def broken(ctx):  # type: ignore[no-untyped-def]
        raise RuntimeError("boom")

    broken.provides = {"imd3_dbc": "dBc"}  # type: ignore[attr-defined]

    def extra(ctx):  # type: ignore[no-untyped-def]
        return FigureSet(measurements={"answer": Measurement(42.0, "1", note="fixed")})

    an = analyse(ArrayRecording(dsb(rng, 1 << 16), FS), providers=[broken, *PROVIDERS[:6], extra])
    assert an.measurements["imd3_dbc"].value is None
    assert "boom" in an.measurements["imd3_dbc"].note
    assert any("broken failed" in w for w in an.warnings)
    assert an.measurements["answer"].value == 42.0
    assert an.measurements["carrier_suppression_db"].value is not None


def _provider_cases() -> list[tuple[str, np.ndarray, AnalysisRequest, float | None]]:
    from iqscope.measure.power import Calibration

    rng = np.random.default_rng(11)
    n = 1 << 16
    t = np.arange(n) / FS
    hiss = _noise(rng, n, 1e-9)
    cw = 0.3 * np.exp(2j * np.pi * 1500.3 * t) + hiss
    am = 0.3 * np.exp(2j * np.pi * 1500.3 * t) * (1 + 0.5 * np.cos(2 * np.pi * 700 * t)) + hiss
    ssb = 0.3 * np.exp(2j * np.pi * 2500 * t) + 1e-3 * np.exp(2j * np.pi * 1000 * t) + hiss
    tt = (0.2 * np.exp(2j * np.pi * 2700 * t) + 0.2 * np.exp(2j * np.pi * 3900 * t)
          + 1e-3 * np.exp(2j * np.pi * 1500 * t) + 1e-4 * np.exp(2j * np.pi * 5100 * t) + hiss)
    cal = Calibration(offset_db=10.0, uncertainty_db=0.5, reference_level_dbm=-20.0)
    return [
        ("dsb", dsb(rng, n), AnalysisRequest(), 7.1e6),
        ("cw", cw, AnalysisRequest(mode="cw"), None),
        ("am+calibration", am, AnalysisRequest(mode="am", options={"calibration": cal}), 7.0e6),
        ("usb", ssb, AnalysisRequest(mode="usb", carrier_hz=1000.0, tone_hz=1500.0), None),
        ("lsb", ssb, AnalysisRequest(mode="lsb", carrier_hz=4000.0, tone_hz=1500.0), None),
        ("two-tone", tt, AnalysisRequest(mode="two-tone", carrier_hz=1500.0), None),
        ("two-tone, no carrier", tt, AnalysisRequest(mode="two-tone"), None),
        ("noise", _noise(rng, n, 1e-6), AnalysisRequest(), None),
        ("empty", np.zeros(0, np.complex64), AnalysisRequest(), None),
        ("10 samples", hiss[:10] + 0.1, AnalysisRequest(mode="dsb"), None),
    ]


@pytest.mark.parametrize("case", _provider_cases(), ids=lambda c: c[0])
def test_every_provider_declares_what_it_reports(case) -> None:  # type: ignore[no-untyped-def]
    """Integrity of the ``provides`` declarations (STYLE.md item 14: a registry with its own
    test): in each mode each provider of PROVIDERS reports exactly the figures (and units)
    it declares, so a failing provider leaves exactly those null and none that does not
    apply (DESIGN.md section 4). The one allowed gap: the drift provider skips (no
    figures, one warning) when it finds no line to follow."""
    from iqscope.measure.pipeline import declared_figures

    _label, x, request, centre = case
    seen: dict[str, tuple[dict[str, str], dict[str, str]]] = {}

    def spy(p):  # type: ignore[no-untyped-def]
        def run(ctx):  # type: ignore[no-untyped-def]
            out = p(ctx)
            seen[p.__name__] = ({k: m.unit for k, m in out.measurements.items()}, declared_figures(p, ctx))
            return out

        run.__name__ = p.__name__
        return run

    an = analyse(ArrayRecording(np.asarray(x, np.complex64), FS, center_frequency_hz=centre), request,
                 providers=[spy(p) for p in PROVIDERS])
    assert set(seen) == {p.__name__ for p in PROVIDERS}  # none failed
    for name, (got, declared) in seen.items():
        if name == "drift_figures" and not got:
            assert any(w.startswith("drift not measured") for w in an.warnings)
            continue
        assert got == declared, name


def test_pass_guards_samples_like_the_readers(rng: np.random.Generator) -> None:
    """A Recording that overrides ``read`` (bypassing the readers' guard) and hands out
    components beyond MAX_FLOAT_COMPONENT or NaN: the pass replaces those samples by 0 and
    counts them exactly as ``Recording.read`` does, so the spectrum and levels equal those
    of the same data read through the guard (the io layer is the reference here)."""
    from iqscope.io._recording import MAX_FLOAT_COMPONENT

    n = 1 << 15
    t = np.arange(n) / FS
    x = (0.3 * np.exp(2j * np.pi * 1500.3 * t) + _noise(rng, n, 1e-8)).astype(np.complex64)
    x[100:400] = 1e19
    x[5000] = complex(0.1, float(np.nextafter(np.float32(MAX_FLOAT_COMPONENT), np.float32(np.inf))))
    x[7000] = complex(np.nan, 0.0)

    class Raw(Recording):
        def __init__(self) -> None:
            super().__init__(path=None, format="test", datatype="cf32_le", sample_rate_hz=FS, n_samples=n)

        def read(self, start: int = 0, count: int | None = None) -> np.ndarray:  # no io guard
            return x[start : n if count is None else start + count]

    req = AnalysisRequest(mode="cw")
    providers = PROVIDERS[:6]  # the pass and the core figures (the drift survey reads raw)
    with np.errstate(all="ignore"):
        raw = analyse(Raw(), req, providers=providers)
    ref = analyse(ArrayRecording(x, FS), req, providers=providers)
    assert np.array_equal(raw.spectrum.psd, ref.spectrum.psd)
    for key in ("peak_dbfs", "noise_floor_dbfs_per_hz", "carrier_suppression_db", "occupied_bandwidth_hz"):
        if key in ref.measurements:
            assert raw.measurements[key].value == ref.measurements[key].value, key
    assert any("302 non-finite sample(s)" in w for w in raw.warnings), raw.warnings


class _Spy(Recording):
    """Counts the largest read, to show the pipeline streams."""

    def __init__(self, data: np.ndarray) -> None:
        self._d = data.astype(np.complex64)
        self.largest = 0
        super().__init__(path=None, format="spy", datatype="cf32_le", sample_rate_hz=FS, n_samples=data.size)

    def _read(self, start: int, count: int) -> np.ndarray:
        self.largest = max(self.largest, count)
        return self._d[start : start + count]


def test_reads_in_bounded_chunks(rng: np.random.Generator) -> None:
    n = 1 << 20
    rec = _Spy(dsb(rng, n))
    analyse(rec, providers=PROVIDERS[:6])
    assert rec.largest <= MAX_CHUNK
    assert rec.largest < n


def test_block_spectra_follow_a_drifting_line(rng: np.random.Generator) -> None:
    """A carrier drifting 1 Hz/min (phase 2 pi (f0 t + D t^2 / 2), closed form) is followed
    through the pass's block spectra without reading the file again; the stated sigma
    covers the truth in roughly 68 % of blocks."""
    from iqscope.dsp import noise_floor, track_line
    from iqscope.measure import pipeline as P

    n = int(FS * 40)
    t = np.arange(n) / FS
    x = 0.3 * np.exp(2j * np.pi * (1500.0 * t + 0.5 * (1 / 60) * t * t)) + _noise(rng, n, 2e-3)
    rec = ArrayRecording(x, FS)
    spec, stats, _, _ = P._stream(rec, P.plan_pass(FS, n), None)
    assert stats.block_psd.shape == (stats.block_psd_times_s.size, spec.psd.size)
    tr = track_line(stats.block_psd, spec, 1500.0, noise_floor(spec).psd, stats.block_psd_counts)
    truth = 1500.0 + stats.block_psd_times_s / 60.0
    assert tr.detected.all()
    np.testing.assert_allclose(tr.frequency_hz, truth, atol=0.05)
    cover = float(np.mean(np.abs(tr.frequency_hz - truth) <= tr.sigma_hz))
    assert 0.45 <= cover <= 0.9  # ~30 blocks: binomial sigma ~9 %


def test_invariants_property() -> None:
    """Any short complex input (length 0-400, any finite values up to 4 FS): finite or null."""
    from hypothesis import given, settings
    from hypothesis import strategies as st
    from hypothesis.extra.numpy import arrays

    finite = st.floats(-4.0, 4.0, allow_nan=False, width=32)

    @settings(max_examples=25, deadline=None)
    @given(arrays(np.float32, st.integers(0, 800).map(lambda k: 2 * (k // 2)), elements=finite))
    def check(v: np.ndarray) -> None:
        from iqscope.errors import UsageError

        x = v[0::2] + 1j * v[1::2]
        try:
            an = analyse(ArrayRecording(x, FS), providers=PROVIDERS[:6])
        except UsageError as exc:  # auto mode may say it cannot place an SSB-like signal
            assert "--carrier" in str(exc)
            return
        _check_invariants(an)

    check()


@pytest.mark.parametrize("mode", ["cw", "am", "dsb", "usb", "lsb", "two-tone"])
@pytest.mark.parametrize("n", [0, 1, 15, 200])
def test_explicit_modes_on_degenerate_input(mode: str, n: int) -> None:
    """Every mode with --carrier and --tone on empty/short input: no provider crashes."""
    an = analyse(ArrayRecording(np.full(n, 0.1 + 0j), FS), AnalysisRequest(mode=mode, carrier_hz=100.0, tone_hz=1000.0))
    _check_invariants(an)
    assert not [w for w in an.warnings if " failed: " in w]


def test_resolution_bounds() -> None:
    """A resolution coarser than fs/16 or finer than fs/2^22 is clamped with a warning."""
    coarse = plan_pass(FS, 100_000, resolution_hz=1e6)
    assert coarse.nfft == 16 and coarse.warnings
    fine = plan_pass(FS, 1 << 24, resolution_hz=1e-6)
    assert fine.nfft <= 1 << 22 and fine.warnings


DEMOS = __import__("pathlib").Path(__file__).resolve().parent.parent / "recordings"


def test_demo_recordings_against_their_truth() -> None:
    """The demo recordings' figures against the generator's analytic truth (recordings/demos.json)."""
    from iqscope.io import open_recording

    truth = json.loads((DEMOS / "demos.json").read_text())["recordings"]
    cases = {
        "dsb40m_bench": (AnalysisRequest(), {"carrier_suppression_db": 0.1, "sideband_balance_db": 0.05}),
        "am80m_bench": (AnalysisRequest(), {"modulation_index": 0.01}),
        "ssb20m_kit": (
            AnalysisRequest(mode="usb", carrier_hz=1000.0),
            {"carrier_suppression_db": 0.2, "opposite_sideband_suppression_db": 0.2, "occupied_bandwidth_hz": 5.0},
        ),
    }
    for name, (req, figs) in cases.items():
        meta = DEMOS / truth[name]["open"]
        assert meta.exists(), f"demo recording {meta} is missing (python recordings/make_demos.py)"
        with open_recording(meta) as rec:
            an = analyse(rec, req, providers=PROVIDERS[:6])
        for key, tol in figs.items():
            assert an.measurements[key].value == pytest.approx(truth[name]["truth"][key], abs=tol), (name, key)
