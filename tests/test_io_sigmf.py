"""SigMF reading and writing, checked against the ``sigmf`` reference package (1.14) and
the SigMF 1.2.6 specification text (schema descriptions shipped with that package)."""

from __future__ import annotations

import hashlib
import json
import tarfile
from pathlib import Path

import numpy as np
import pytest
import sigmf
from sigmf import SigMFFile

from iqscope.errors import FormatError, MetadataError, OutputError
from iqscope.io import SIGMF_DATATYPES, Annotation, open_recording, parse_datatype, write_sigmf


def _signal(rng: np.random.Generator, n: int, amp: float = 0.5) -> np.ndarray:
    return ((rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)) * amp).astype(np.complex64)


@pytest.mark.parametrize("datatype", SIGMF_DATATYPES)
def test_round_trip_every_datatype(tmp_path: Path, rng: np.random.Generator, datatype: str) -> None:
    """write -> read: float bit-exact; integers within one quantisation step (rounding to the
    nearest code gives at most half a step; 32-bit codes are limited by complex64's 24-bit
    mantissa, 2**-24)."""
    x = _signal(rng, 1001)
    meta = write_sigmf(tmp_path / "r", x, 48000.0, center_frequency_hz=7.05e6, datatype=datatype)
    with open_recording(meta) as rec:
        assert (rec.format, rec.datatype, rec.n_samples) == ("sigmf", datatype, 1001)
        assert rec.sample_rate_hz == 48000.0 and rec.center_frequency_hz == 7.05e6
        y = rec.read()
    fmt = parse_datatype(datatype)
    if fmt.kind == "f":
        np.testing.assert_array_equal(y, x)
    else:
        step = max(fmt.quantisation_step, 2.0**-24)
        assert np.max(np.abs(y.real - x.real)) <= step
        assert np.max(np.abs(y.imag - x.imag)) <= step


@pytest.mark.parametrize("size,overlap", [(1, 0), (7, 3), (100, 0), (333, 32), (4096, 1)])
def test_chunks_concatenate_to_whole_read(
    tmp_path: Path, rng: np.random.Generator, size: int, overlap: int
) -> None:
    x = _signal(rng, 1009)
    meta = write_sigmf(tmp_path / "c", x, 1e6, datatype="ci16_le")
    with open_recording(meta) as rec:
        whole = rec.read()
        parts = list(rec.chunks(size, overlap))
    joined = np.concatenate([parts[0]] + [p[overlap:] for p in parts[1:]])
    np.testing.assert_array_equal(joined, whole)


@pytest.mark.parametrize("datatype", ["cf32_le", "ci16_le", "ci8", "cu8", "cf64_be", "cu16_be"])
def test_our_files_pass_sigmf_validation(tmp_path: Path, rng: np.random.Generator, datatype: str) -> None:
    """External reference: sigmf.fromfile(...).validate() (jsonschema of SigMF 1.2.6) and its
    checksum check (skip_checksum=False recomputes core:sha512)."""
    ann = (Annotation(10, 20, 7.0e6, 7.1e6, label="tone", comment="test"),)
    meta = write_sigmf(
        tmp_path / "v",
        _signal(rng, 500),
        96000,
        center_frequency_hz=7.05e6,
        datatype=datatype,
        description="validation",
        datetime="2026-12-01T20:00:00.000000Z",
        annotations=ann,
    )
    handle = sigmf.fromfile(str(meta), skip_checksum=False)
    handle.validate()
    assert handle.get_global_field(sigmf.DATATYPE_KEY) == datatype
    assert handle.get_captures()[0][sigmf.FREQUENCY_KEY] == 7.05e6
    assert handle.get_annotations()[0][sigmf.LABEL_KEY] == "tone"


def test_streamed_write_matches_array_write(tmp_path: Path, rng: np.random.Generator) -> None:
    """An iterable of blocks gives the same dataset and the sha512 of the data file
    (hashlib over the file as the oracle)."""
    x = _signal(rng, 10_007)
    a = write_sigmf(tmp_path / "a", x, 48000, datatype="ci16_le")
    b = write_sigmf(tmp_path / "b", (x[i : i + 999] for i in range(0, x.size, 999)), 48000, datatype="ci16_le")
    da, db = (tmp_path / "a.sigmf-data").read_bytes(), (tmp_path / "b.sigmf-data").read_bytes()
    assert da == db
    meta = json.loads(b.read_text())
    assert meta["global"]["core:sha512"] == hashlib.sha512(db).hexdigest()


@pytest.mark.parametrize("datatype", ["ci16_le", "cf32_le", "cu8", "ci8", "ci32_be", "cf64_le"])
def test_files_written_by_sigmf_package_read_identically(
    tmp_path: Path, rng: np.random.Generator, datatype: str
) -> None:
    """External reference: the sigmf package writes the recording (SigMFFile + tofile) and
    reads it with autoscale=True; our samples must equal its samples exactly (complex64)."""
    fmt = parse_datatype(datatype)
    n = 777
    if fmt.kind == "f":
        comp = rng.standard_normal(2 * n).astype(fmt.component_dtype())
    else:
        info = np.iinfo(fmt.component_dtype())
        comp = rng.integers(info.min, info.max, 2 * n, endpoint=True).astype(fmt.component_dtype())
    data = tmp_path / "p.sigmf-data"
    comp.tofile(data)
    handle = SigMFFile(
        data_file=str(data),
        global_info={
            sigmf.DATATYPE_KEY: datatype,
            sigmf.SAMPLE_RATE_KEY: 250000,
            sigmf.VERSION_KEY: sigmf.__specification__,
        },
    )
    handle.add_capture(0, metadata={sigmf.FREQUENCY_KEY: 3.6e6, sigmf.DATETIME_KEY: "2026-12-01T20:00:00Z"})
    handle.add_capture(300, metadata={sigmf.FREQUENCY_KEY: 3.7e6})
    handle.add_annotation(5, 10, metadata={sigmf.LABEL_KEY: "a"})
    handle.tofile(str(tmp_path / "p"))
    ref = sigmf.fromfile(str(tmp_path / "p.sigmf-meta")).read_samples()
    with open_recording(tmp_path / "p.sigmf-meta") as rec:
        ours = rec.read()
        assert [s.start for s in rec.segments] == [0, 300]
        assert [s.center_frequency_hz for s in rec.segments] == [3.6e6, 3.7e6]
        assert rec.segments[0].datetime == "2026-12-01T20:00:00Z"
        assert rec.center_frequency_hz == 3.6e6
        assert rec.annotations[0].start == 5 and rec.annotations[0].count == 10
    np.testing.assert_array_equal(ours, ref.astype(np.complex64))


def test_archive_written_by_sigmf_package(tmp_path: Path, rng: np.random.Generator) -> None:
    """A .sigmf archive made by the sigmf package is read in place (no extraction)."""
    comp = rng.integers(-32768, 32767, 2 * 1234).astype("<i2")
    comp.tofile(tmp_path / "arc.sigmf-data")
    handle = SigMFFile(
        data_file=str(tmp_path / "arc.sigmf-data"),
        global_info={sigmf.DATATYPE_KEY: "ci16_le", sigmf.SAMPLE_RATE_KEY: 48000, sigmf.VERSION_KEY: sigmf.__specification__},
    )
    handle.add_capture(0, metadata={sigmf.FREQUENCY_KEY: 10.1e6})
    handle.tofile(str(tmp_path / "arc"), toarchive=True)
    archive = tmp_path / "arc.sigmf"
    ref = sigmf.fromfile(str(archive)).read_samples()
    (tmp_path / "arc.sigmf-data").unlink()
    (tmp_path / "arc.sigmf-meta").unlink(missing_ok=True)
    before = sorted(p.name for p in tmp_path.iterdir())
    with open_recording(archive) as rec:
        assert rec.format == "sigmf" and rec.n_samples == 1234 and rec.center_frequency_hz == 10.1e6
        np.testing.assert_array_equal(rec.read(), ref)
        np.testing.assert_array_equal(np.concatenate(list(rec.chunks(100))), ref)
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # nothing extracted


def test_compressed_archive_is_refused(tmp_path: Path, rng: np.random.Generator) -> None:
    meta = write_sigmf(tmp_path / "z", _signal(rng, 100), 48000)
    arc = tmp_path / "z.sigmf"
    with tarfile.open(arc, "w:gz") as tar:
        tar.add(meta, arcname="z/z.sigmf-meta")
        tar.add(tmp_path / "z.sigmf-data", arcname="z/z.sigmf-data")
    with pytest.raises(FormatError, match="compressed"):
        open_recording(arc)


def test_header_bytes_example_from_the_spec(tmp_path: Path) -> None:
    """SigMF 1.2.6 schema, core:header_bytes description: two segments of 8-bit complex
    samples (2 bytes each) with 4-byte headers; map 500 samples (1000 bytes) from byte 4,
    then the rest of the file from byte 1008 (the schema's own worked example)."""
    first = np.arange(1000) % 200 - 100
    second = (np.arange(600) % 100 - 50)
    blob = b"HDR1" + first.astype(np.int8).tobytes() + b"HDR2" + second.astype(np.int8).tobytes() + b"TAIL"
    (tmp_path / "n.bin").write_bytes(blob)
    doc = {
        "global": {"core:datatype": "ci8", "core:sample_rate": 1000, "core:version": "1.2.6",
                   "core:dataset": "n.bin", "core:trailing_bytes": 4},
        "captures": [{"core:sample_start": 0, "core:header_bytes": 4},
                     {"core:sample_start": 500, "core:header_bytes": 4}],
        "annotations": [],
    }
    (tmp_path / "n.sigmf-meta").write_text(json.dumps(doc))
    with open_recording(tmp_path / "n.sigmf-meta") as rec:
        assert rec.n_samples == 800
        got = rec.read()
    comp = np.concatenate([first, second]) / 128.0
    np.testing.assert_array_equal(got, (comp[0::2] + 1j * comp[1::2]).astype(np.complex64))


def test_core_offset_makes_annotation_indices_absolute(tmp_path: Path, rng: np.random.Generator) -> None:
    """SigMF 1.2.6, core:offset: 'All sample indices in SigMF are absolute'; captures index
    the dataset file (core:sample_start description)."""
    meta = write_sigmf(tmp_path / "o", _signal(rng, 100), 48000, extra_global={"core:offset": 1000},
                       annotations=(Annotation(1010, 5, label="x"),))
    with open_recording(meta) as rec:
        assert rec.annotations[0].start == 10
        assert rec.segments[0].start == 0


def test_two_channels_gives_first_with_warning(tmp_path: Path) -> None:
    comp = np.array([1, 2, 100, 200, 3, 4, 101, 201], "<i2")  # ch0 (1+2j), ch1 (100+200j) ...
    comp.tofile(tmp_path / "m.sigmf-data")
    doc = {"global": {"core:datatype": "ci16_le", "core:sample_rate": 8000, "core:version": "1.2.6",
                      "core:num_channels": 2}, "captures": [{"core:sample_start": 0}], "annotations": []}
    (tmp_path / "m.sigmf-meta").write_text(json.dumps(doc))
    with open_recording(tmp_path / "m.sigmf-meta") as rec:
        assert rec.n_samples == 2
        np.testing.assert_array_equal(rec.read() * 32768, [1 + 2j, 3 + 4j])
        assert any("channels" in w for w in rec.warnings)


def test_rate_override_and_missing_rate(tmp_path: Path, rng: np.random.Generator) -> None:
    meta = write_sigmf(tmp_path / "q", _signal(rng, 10), 48000)
    doc = json.loads(meta.read_text())
    del doc["global"]["core:sample_rate"]
    meta.write_text(json.dumps(doc))
    with pytest.raises(MetadataError, match="--rate"):
        open_recording(meta)
    with open_recording(meta, rate=12000, center=5e6) as rec:
        assert rec.sample_rate_hz == 12000 and rec.center_frequency_hz == 5e6


def test_base_name_and_data_name_open_the_pair(tmp_path: Path, rng: np.random.Generator) -> None:
    write_sigmf(tmp_path / "b", _signal(rng, 10), 48000)
    for p in (tmp_path / "b", tmp_path / "b.sigmf-data", tmp_path / "b.sigmf-meta"):
        with open_recording(p) as rec:
            assert rec.n_samples == 10


def test_writer_refuses_to_overwrite(tmp_path: Path, rng: np.random.Generator) -> None:
    x = _signal(rng, 10)
    write_sigmf(tmp_path / "w", x, 48000)
    with pytest.raises(OutputError):
        write_sigmf(tmp_path / "w", x, 48000)
    write_sigmf(tmp_path / "w", x[:5], 48000, force=True)
    with open_recording(tmp_path / "w.sigmf-meta") as rec:
        assert rec.n_samples == 5
    with pytest.raises(ValueError):
        write_sigmf(tmp_path / "w2", x, 48000, datatype="ci24_le")
    with pytest.raises(ValueError):
        write_sigmf(tmp_path / "w3", x, -1)


def test_writer_fails_cleanly(tmp_path: Path) -> None:
    """Unencodable metadata or no samples: ValueError and no file left behind."""
    with pytest.raises(ValueError, match="JSON"):
        write_sigmf(tmp_path / "j", np.zeros(4, np.complex64), 1000, extra_global={"x:y": object()})
    with pytest.raises(ValueError, match="no samples"):
        write_sigmf(tmp_path / "e", iter(()), 1000)
    assert list(tmp_path.iterdir()) == []


def test_streaming_producer_may_fill_metadata_while_yielding(tmp_path: Path) -> None:
    """extra_global and annotations are read after the last block (capture relies on it)."""
    extra: dict[str, object] = {"iqscope:count": 0}
    notes: list[Annotation] = []

    def blocks():
        for i in range(3):
            extra["iqscope:count"] = i + 1
            notes.append(Annotation(i * 10, 1, label=f"b{i}"))
            yield np.zeros(10, np.complex64)

    meta = write_sigmf(tmp_path / "s", blocks(), 1000, extra_global=extra, annotations=notes)
    doc = json.loads(meta.read_text())
    assert doc["global"]["iqscope:count"] == 3
    assert [a["core:label"] for a in doc["annotations"]] == ["b0", "b1", "b2"]
