"""Property tests (issue 6 item 5, reader part): arbitrary bytes and arbitrary metadata
never make a reader raise anything but iqscope's own errors, and whatever opens reads
finite samples. Bounded (derandomized, a few dozen examples each) so CI stays fast; run
longer locally with ``IQSCOPE_FUZZ_EXAMPLES=5000 pytest tests/test_io_fuzz.py``."""

from __future__ import annotations

import io
import json
import os
import struct
import tarfile
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from iqscope.errors import IqscopeError
from iqscope.io import open_recording, write_sigmf, write_wav

N = int(os.environ.get("IQSCOPE_FUZZ_EXAMPLES", "40"))
FUZZ = settings(max_examples=N, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])


def _exercise(path: Path, **kw: Any) -> None:
    """Open and read everything; only IqscopeError may escape; samples must be finite."""
    try:
        with open_recording(path, **kw) as rec:
            for block in rec.chunks(4096):
                assert np.all(np.isfinite(block))
            assert rec.n_samples >= 1 and np.isfinite(rec.sample_rate_hz)
    except IqscopeError:
        pass


@FUZZ
@given(blob=st.binary(max_size=600), ext=st.sampled_from([".wav", ".sigmf", ".h5", ".sigmf-meta", ".cs16", ".xyz"]))
def test_arbitrary_bytes(blob: bytes, ext: str) -> None:
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / f"f{ext}"
        path.write_bytes(blob)
        (Path(d) / "f.sigmf-data").write_bytes(blob)
        _exercise(path, rate=48000 if ext == ".cs16" else None)


def _valid_wav() -> bytes:
    with tempfile.TemporaryDirectory() as d:
        p = write_wav(Path(d) / "v.wav", np.full(16, 0.5 + 0.25j, np.complex64), 8000)
        return p.read_bytes()


_WAV = _valid_wav()


@FUZZ
@given(edits=st.lists(st.tuples(st.integers(0, len(_WAV) - 1), st.integers(0, 255)), min_size=1, max_size=6),
       cut=st.integers(0, len(_WAV)))
def test_mutated_wav_header(edits: list[tuple[int, int]], cut: int) -> None:
    blob = bytearray(_WAV)
    for pos, val in edits:
        blob[pos % 48] = val  # the header and the first samples
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "m.wav"
        path.write_bytes(bytes(blob[: max(cut, 12)]))
        _exercise(path)


_json_scalar = st.one_of(
    st.none(), st.booleans(), st.integers(-(2**70), 2**70),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12),
)
_json_value = st.recursive(_json_scalar, lambda c: st.lists(c, max_size=3) | st.dictionaries(st.text(max_size=6), c, max_size=3), max_leaves=6)
_core = st.sampled_from(["core:datatype", "core:sample_rate", "core:num_channels", "core:offset",
                         "core:trailing_bytes", "core:dataset", "core:version", "core:metadata_only"])
_cap_key = st.sampled_from(["core:sample_start", "core:frequency", "core:datetime", "core:header_bytes"])
_datatype = st.sampled_from(["cf32_le", "ci16_le", "ci8", "cu8", "cf64_be", "ci24_le", "rf32_le", "x"])


@FUZZ
@given(
    glob=st.dictionaries(_core, st.one_of(_json_value, _datatype), max_size=6),
    caps=st.one_of(_json_value, st.lists(st.dictionaries(_cap_key, st.one_of(_json_value, st.integers(0, 300))), max_size=3)),
    anns=st.one_of(_json_value, st.lists(st.dictionaries(st.sampled_from(["core:sample_start", "core:sample_count", "core:label", "core:freq_lower_edge"]), _json_value), max_size=3)),
    data=st.binary(max_size=256),
)
def test_arbitrary_sigmf_metadata(glob: dict[str, Any], caps: Any, anns: Any, data: bytes) -> None:
    doc = {"global": {"core:datatype": "ci16_le", "core:sample_rate": 1000, **glob}, "captures": caps, "annotations": anns}
    with tempfile.TemporaryDirectory() as d:
        meta = Path(d) / "r.sigmf-meta"
        meta.write_text(json.dumps(doc))
        (Path(d) / "r.sigmf-data").write_bytes(data)
        _exercise(meta)


@FUZZ
@given(cut=st.integers(0, 6000), flip=st.integers(0, 5999))
def test_cut_or_flipped_archive(cut: int, flip: int) -> None:
    with tempfile.TemporaryDirectory() as d:
        meta = write_sigmf(Path(d) / "a", np.full(300, 0.1 + 0.1j, np.complex64), 1000, datatype="ci16_le")
        buf = io.BytesIO()
        with tarfile.open(fileobj=buf, mode="w") as tar:
            tar.add(meta, arcname="a/a.sigmf-meta")
            tar.add(Path(d) / "a.sigmf-data", arcname="a/a.sigmf-data")
        blob = bytearray(buf.getvalue()[:cut])
        if blob:
            blob[flip % len(blob)] ^= 0xFF
        path = Path(d) / "x.sigmf"
        path.write_bytes(bytes(blob))
        _exercise(path)


def test_nan_wav_float_is_finite_after_reading() -> None:
    """A float WAV full of NaN/Inf: every sample comes back 0 and is counted."""
    with tempfile.TemporaryDirectory() as d:
        comp = np.array([np.nan, np.inf, -np.inf, 0.5] * 4, "<f4")
        fmt = struct.pack("<HHIIHHH", 3, 2, 8000, 64000, 8, 32, 0)
        body = b"WAVE" + b"fmt " + struct.pack("<I", len(fmt)) + fmt + b"data" + struct.pack("<I", comp.nbytes) + comp.tobytes()
        path = Path(d) / "n.wav"
        path.write_bytes(b"RIFF" + struct.pack("<I", len(body)) + body)
        with open_recording(path) as rec:
            x = np.concatenate(list(rec.chunks(3)))
            assert np.all(np.isfinite(x)) and rec.nonfinite_count == 8
