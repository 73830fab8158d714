"""Property tests over the measurement pipeline and ``iqscope grade`` (issue 6 item 5).

The reader-level properties (arbitrary bytes, mutated headers, arbitrary metadata into
``open_recording``) are in ``tests/test_io_fuzz.py``; here:

* arbitrary short complex arrays (empty, 1 or 2 samples, zeros, constants, lines, noise,
  impulses, raw float32 bit patterns, magnitudes from subnormal to the float32 maximum,
  NaN/Inf sprinkled in; the io layer replaces non-finite and absurd components by 0 as
  ``Recording.read`` does for every reader) with arbitrary mode, ``--carrier``,
  ``--tone``, ``--resolution``, ``--reference``, rate and centre, through ``analyse()`` and
  ``grade()``: only :class:`~iqscope.errors.IqscopeError` may be raised, every value and
  uncertainty is finite or None, a None value has a note saying why, and the JSON is
  strict (no NaN);
* arbitrary SigMF metadata (hypothesis-built dicts around a valid skeleton) and arbitrary
  option strings through ``iqscope grade``: exit status 0-4, never a traceback.

Bounded by the hypothesis profile of ``tests/conftest.py`` ("ci" by default, a few
seconds); the long run is ``pytest tests/test_fuzz_pipeline.py --hypothesis-profile=long``
(docs/robustness.md). Faults it found are kept at the end as regression tests, with their
exact reproduction (they were xfail until fixed).
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from iqscope.cli import main
from iqscope.errors import IqscopeError
from iqscope.grading import grade, load_limits, preset_names
from iqscope.io import ArrayRecording, write_sigmf
from iqscope.measure import AnalysisRequest, analyse

#: The count of examples and the randomness come from the profile (tests/conftest.py).
QUIET = settings(suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

MODES = ("auto", "cw", "am", "dsb", "usb", "lsb", "two-tone")
#: Magnitudes: subnormal float32, tiny, full scale, far over full scale, and beyond the
#: io layer's 1e10 limit up to the float32 maximum.
SCALES = (1e-42, 1e-30, 1e-6, 0.5, 1.0, 1e6, 1e10, 1e15, 1e19, 3e38)


@st.composite
def signals(draw: st.DrawFn) -> np.ndarray:
    n = draw(st.sampled_from([0, 1, 2, 3, 15, 16, 17, 64, 200, 600, 2048]))
    kind = draw(st.sampled_from(["zeros", "const", "noise", "line", "two-lines", "impulses", "bits"]))
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    t = np.arange(n)
    if kind == "bits":  # arbitrary float32 bit patterns (NaN, Inf, subnormals included)
        raw = draw(st.binary(min_size=8 * n, max_size=8 * n))
        return np.frombuffer(raw, "<c8").copy() if n else np.zeros(0, np.complex64)
    if kind == "zeros":
        x = np.zeros(n, complex)
    elif kind == "const":
        x = np.full(n, complex(draw(st.floats(-1, 1)), draw(st.floats(-1, 1))))
    elif kind == "noise":
        x = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    elif kind == "line":
        x = np.exp(2j * np.pi * draw(st.floats(-0.5, 0.5)) * t) + 1e-3 * rng.standard_normal(n)
    elif kind == "two-lines":
        f = draw(st.floats(-0.45, 0.45))
        x = np.exp(2j * np.pi * f * t) + np.exp(2j * np.pi * (f + draw(st.floats(0.001, 0.05))) * t)
    else:
        x = np.zeros(n, complex)
        x[:: draw(st.integers(1, 50))] = 1.0
    with np.errstate(over="ignore", invalid="ignore"):
        x = (x * draw(st.sampled_from(SCALES))).astype(np.complex64)
    if n and draw(st.booleans()):
        idx = draw(st.lists(st.integers(0, n - 1), max_size=5))
        x[idx] = draw(st.sampled_from([complex(np.nan, 0), complex(0, np.inf), complex(-np.inf, np.nan)]))
    return x


_opt_hz = st.one_of(st.none(), st.floats(-1e7, 1e7), st.sampled_from([0.0, 1e-9, 1000.0, 24000.0, 7.1e6]))


def _check_measurements(an: Any) -> None:
    for name, m in an.measurements.items():
        if m.value is None:
            assert m.note.strip(), f"{name} is null without a note"
        else:
            assert math.isfinite(m.value), name
        if m.uncertainty is not None:
            assert math.isfinite(m.uncertainty) and m.uncertainty >= 0, name


@QUIET
@given(
    x=signals(),
    fs=st.sampled_from([1e-3, 1.0, 8000.0, 48000.0, 2.4e6]),
    center=st.one_of(st.none(), st.sampled_from([0.0, -5.0, 7.1e6, 1e12])),
    mode=st.sampled_from(MODES),
    carrier=_opt_hz,
    tone=st.one_of(st.none(), st.floats(1e-3, 1e6)),
    resolution=st.one_of(st.none(), st.floats(1e-3, 1e5)),
    reference=_opt_hz,
    window=st.floats(1e-3, 1e4),
    limits=st.sampled_from([None, *preset_names()]),
)
def test_pipeline_and_grade_never_crash(
    x: np.ndarray, fs: float, center: float | None, mode: str, carrier: float | None, tone: float | None,
    resolution: float | None, reference: float | None, window: float, limits: str | None,
) -> None:
    request = AnalysisRequest(mode=mode, carrier_hz=carrier, tone_hz=tone, resolution_hz=resolution,
                              reference_hz=reference, drift_window_s=window)
    try:
        an = analyse(ArrayRecording(x, fs, center), request)
        result = grade(an, load_limits(limits) if limits else None)
    except IqscopeError:
        return
    _check_measurements(an)
    doc = result.to_json()
    json.dumps(doc, allow_nan=False)  # strict JSON: a NaN anywhere would raise
    assert doc["overall"] in ("pass", "warn", "fail")
    for v in result.verdicts:
        assert v.value is None or math.isfinite(v.value)


# --------------------------------------------------------------------------------------
# Arbitrary SigMF metadata through ``iqscope grade``
# --------------------------------------------------------------------------------------
def _skeleton() -> tuple[dict[str, Any], bytes]:
    n = 2048
    t = np.arange(n)
    x = 0.3 * np.exp(2j * np.pi * 0.1 * t) + 0.01 * np.exp(2j * np.pi * 0.2 * t)
    with tempfile.TemporaryDirectory() as d:
        meta = write_sigmf(Path(d) / "base", x.astype(np.complex64), 8000.0, center_frequency_hz=7.1e6,
                           datatype="ci16_le")
        return json.loads(meta.read_text()), (Path(d) / "base.sigmf-data").read_bytes()


SKELETON, DATA = _skeleton()

_scalar = st.one_of(
    st.none(), st.booleans(), st.integers(-(2**70), 2**70), st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=10),
)
_value = st.recursive(_scalar, lambda c: st.lists(c, max_size=3) | st.dictionaries(st.text(max_size=5), c, max_size=3),
                      max_leaves=5)
_special = st.sampled_from([
    "cf32_le", "ci16_le", "ci8", "cu8", "ci16_be", "cf64_le", "ri16_le", "ci32_le", "", "../x", "/etc/passwd",
    "base.sigmf-data", "r.sigmf-data", 8000, 0, -1, 1e308, 2**63, "nan", 0.5,
])
_global_keys = st.sampled_from([
    "core:datatype", "core:sample_rate", "core:num_channels", "core:offset", "core:trailing_bytes", "core:dataset",
    "core:version", "core:metadata_only", "core:extensions", "core:description", "core:sha512", "core:geolocation",
    "iqscope:drive_db", "iqscope:gain_db", "x:unknown",
])
_capture_keys = st.sampled_from(["core:sample_start", "core:frequency", "core:datetime", "core:header_bytes",
                                 "core:global_index"])
_annotation_keys = st.sampled_from(["core:sample_start", "core:sample_count", "core:freq_lower_edge",
                                    "core:freq_upper_edge", "core:label", "core:comment"])


def _grade_cli(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main(argv)
    return status, out.getvalue(), err.getvalue()


@QUIET
@given(
    glob=st.dictionaries(_global_keys, st.one_of(_value, _special), max_size=5),
    captures=st.one_of(st.none(), _value, st.lists(
        st.dictionaries(_capture_keys, st.one_of(_value, _special, st.integers(0, 3000))), max_size=3)),
    annotations=st.one_of(st.none(), _value, st.lists(
        st.dictionaries(_annotation_keys, st.one_of(_value, _special, st.integers(0, 3000))), max_size=3)),
    top=st.dictionaries(st.text(max_size=4), _value, max_size=2),
    as_json=st.booleans(),
)
def test_arbitrary_metadata_through_grade(
    glob: dict[str, Any], captures: Any, annotations: Any, top: dict[str, Any], as_json: bool
) -> None:
    doc = json.loads(json.dumps(SKELETON))
    doc["global"].update(glob)
    if captures is not None:
        doc["captures"] = captures
    if annotations is not None:
        doc["annotations"] = annotations
    doc.update(top)
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d) / "rec"
        folder.mkdir()
        (Path(d) / "x").write_bytes(DATA)  # a target for "../x"
        (folder / "r.sigmf-data").write_bytes(DATA)
        (folder / "r.sigmf-meta").write_text(json.dumps(doc))  # json writes NaN/Infinity as JSON5 does
        status, out, err = _grade_cli(["grade", str(folder / "r.sigmf-meta"), *(["--json"] if as_json else [])])
    assert status in (0, 1, 2, 3, 4), err
    assert "Traceback" not in err
    if status >= 3:
        assert len(err.strip().splitlines()) == 1 and err.startswith("iqscope: error: "), err
    elif as_json:
        json.loads(out)


_option_text = st.one_of(
    st.sampled_from(["0", "-0", "1", "1000", "-3000", "3999.9", "4000", "48k", "7.1M", "7.101 MHz", "1e400", "nan",
                     "inf", "-inf", "", " ", "abc", "1e-300", "2e9"]),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.text(max_size=6),
)


@QUIET
@given(
    mode=st.sampled_from([*MODES, "fm", ""]),
    options=st.dictionaries(st.sampled_from(["--carrier", "--tone", "--resolution", "--reference", "--drift-window",
                                             "--rate", "--center"]), _option_text, max_size=4),
)
def test_arbitrary_options_through_grade(mode: str, options: dict[str, str]) -> None:
    """Whatever the option values, grade exits 0-4 (4: argparse or our usage errors)."""
    with tempfile.TemporaryDirectory() as d:
        (Path(d) / "r.sigmf-meta").write_text(json.dumps(SKELETON))
        (Path(d) / "r.sigmf-data").write_bytes(DATA)
        argv = ["grade", str(Path(d) / "r.sigmf-meta"), f"--mode={mode}", "--json"]
        argv += [f"{k}={v}" for k, v in options.items()]
        try:
            status, _out, err = _grade_cli(argv)
        except SystemExit as exc:  # argparse refuses a value: usage error
            status, err = int(exc.code or 0), ""
    assert status in (0, 1, 2, 3, 4), err
    assert "Traceback" not in err


# --------------------------------------------------------------------------------------
# Faults found by fuzzing, fixed: regression tests with the exact reproductions
# --------------------------------------------------------------------------------------
def test_bandwidth_provider_on_a_gapped_constant() -> None:
    """analyse(ArrayRecording(y, 48000.0), AnalysisRequest(mode="dsb", resolution_hz=0.001))
    with y = ones(200), y[[70, 153]] = 0: bandwidth_figures once raised (x_db_bandwidth took
    the min of an empty array when the spectrum's peak was under 3 bin-sigmas), so
    occupied_bandwidth_hz and bandwidth_26db_hz were missing (found by
    test_pipeline_and_grade_never_crash)."""
    y = np.ones(200, np.complex64)
    y[[70, 153]] = 0
    an = analyse(ArrayRecording(y, 48000.0), AnalysisRequest(mode="dsb", resolution_hz=0.001))
    assert not [w for w in an.warnings if " failed: " in w], an.warnings


def test_huge_samples_from_a_recording_that_bypasses_read() -> None:
    """A Recording whose read() hands out 1e19-scale samples directly (the pipeline's own
    guard, not the io layer's): only IqscopeError may escape. Once a ValueError: float32
    |X|^2 overflowed to Inf and dsp/_lines.py met NaN."""
    from iqscope.io import Recording

    class Loud(Recording):
        def __init__(self) -> None:
            super().__init__(path=None, format="test", datatype="cf32_le", sample_rate_hz=8000.0, n_samples=64)

        def read(self, start: int = 0, count: int | None = None) -> Any:  # no io guard
            x = (1e19 * np.exp(2j * np.pi * 0.125 * np.arange(64))).astype(np.complex64)
            return x[start : None if count is None else start + count]

    with np.errstate(all="ignore"):
        try:
            an = analyse(Loud(), AnalysisRequest(mode="cw"))
        except IqscopeError:
            return
    # the pass replaced them by 0 like the readers do (they once overflowed float32
    # spectra and ended in "cannot convert float NaN to integer" in dsp/_lines.py)
    assert any("64 non-finite sample(s)" in w for w in an.warnings), an.warnings


def test_grade_refuses_an_absurdly_fine_resolution() -> None:
    """``--resolution 1e-300`` once ended in an OverflowError traceback; now a usage error."""
    with tempfile.TemporaryDirectory() as d:
        (Path(d) / "r.sigmf-meta").write_text(json.dumps(SKELETON))
        (Path(d) / "r.sigmf-data").write_bytes(DATA)
        with pytest.raises(SystemExit) as exc:
            _grade_cli(["grade", str(Path(d) / "r.sigmf-meta"), "--resolution", "1e-300"])
    assert exc.value.code == 4


@pytest.mark.parametrize("resolution", [1e-300, 5e-324])
def test_plan_pass_tiny_resolution(resolution: float) -> None:
    """plan_pass(8000.0, 2048, 1e-300) once ended in OverflowError (Python int too large to
    convert to C ssize_t; 5e-324: cannot convert float infinity to integer): the bin count
    is now clamped to 2^22 before it becomes an integer."""
    from iqscope.measure import plan_pass

    plan = plan_pass(8000.0, 2048, resolution)
    assert plan.nfft <= 1 << 22
