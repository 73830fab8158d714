"""Reader registry integrity, raw and HDF5 readers, atomic output.

Oracles: numpy's own decoding of the bytes we wrote (raw), h5py's reading of the
dataset we stored (HDF5), the file system (atomic output).
"""

from __future__ import annotations

import os
from pathlib import Path

import h5py
import numpy as np
import pytest

from iqscope.errors import FormatError, InputMissingError, MetadataError, OutputError, UsageError
from iqscope.io import (
    READERS,
    SAMPLE_FORMATS,
    atomic_write,
    atomic_write_text,
    find_reader,
    open_recording,
    parse_datatype,
    write_sigmf,
    write_wav,
)
from iqscope.io._registry import SNIFF_BYTES


def _signal(rng: np.random.Generator, n: int, amp: float = 0.6) -> np.ndarray:
    return ((rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)) * amp).astype(np.complex64)


# -- registry ----------------------------------------------------------------------------
def test_registry_integrity() -> None:
    """Names, aliases and extensions are unique and lower case; every reader can be opened
    by name; extension datatypes are valid datatypes of the table."""
    assert set(READERS) == {"sigmf", "wav", "hdf5", "raw"}
    names = [n for s in READERS.values() for n in (s.name, *s.aliases)]
    assert len(names) == len(set(names)) and all(n == n.lower() for n in names)
    exts = [e for s in READERS.values() for e in s.extensions]
    assert len(exts) == len(set(exts)) and all(e.startswith(".") and e == e.lower() for e in exts)
    for spec in READERS.values():
        assert callable(spec.open) and spec.description
        assert find_reader(Path("x.unknown-ext"), spec.name)[0] is spec
        for alias in spec.aliases:
            assert find_reader(Path("x"), alias)[0] is spec
        for ext, dt in spec.extension_datatypes:
            assert ext in spec.extensions and dt in SAMPLE_FORMATS
    # every datatype name selects the raw reader with that datatype
    for name in SAMPLE_FORMATS:
        assert find_reader(Path("x"), name) == (READERS["raw"], name)
    with pytest.raises(UsageError):
        find_reader(Path("x"), "nosuchformat")


def test_every_extension_is_a_format_name() -> None:
    """``--format`` takes each reader's extension without its dot and reads the file as one
    with that extension would be read (``.cs16`` files were accepted but ``--format cs16``
    refused); a leading dot is accepted too."""
    from iqscope.io._registry import _by_extension

    for spec in READERS.values():
        for ext in spec.extensions:
            want = _by_extension(Path("x" + ext))
            assert want[0] is spec
            assert find_reader(Path("x.unknown-ext"), ext[1:]) == want, ext
            assert find_reader(Path("x.unknown-ext"), ext.upper()) == want, ext
    with pytest.raises(UsageError, match="extension"):
        find_reader(Path("x"), "cs17")


def test_format_cs16_reads_like_the_extension(tmp_path: Path, rng: np.random.Generator) -> None:
    """The same 16-bit interleaved bytes read as ``x.cs16`` and as ``x.bin --format cs16``
    give identical samples (ci16_le: full scale 32768, SigMF datatype convention)."""
    x = _signal(rng, 1000)
    codes = np.empty(2000, "<i2")
    codes[0::2], codes[1::2] = np.rint(x.real * 32768), np.rint(x.imag * 32768)  # |components| <= 0.6
    (tmp_path / "a.cs16").write_bytes(codes.tobytes())
    (tmp_path / "a.bin").write_bytes(codes.tobytes())
    with open_recording(tmp_path / "a.cs16", rate=8000) as by_ext, \
            open_recording(tmp_path / "a.bin", format="cs16", rate=8000) as by_name:
        assert by_name.datatype == by_ext.datatype == "ci16_le"
        assert np.array_equal(by_name.read(), by_ext.read())
        # each component rounded to half a code: |error| <= sqrt(2)/2 code < 1 code
        np.testing.assert_allclose(by_ext.read(), x, rtol=0, atol=1.0 / 32768)


@pytest.mark.parametrize(
    "make",
    ["sigmf", "wav", "hdf5"],
)
def test_sniffing_without_extension(tmp_path: Path, rng: np.random.Generator, make: str) -> None:
    """Every reader with a sniffer recognises its own file renamed to a neutral name."""
    x = _signal(rng, 50)
    if make == "sigmf":
        src = write_sigmf(tmp_path / "s", x, 48000)
    elif make == "wav":
        src = write_wav(tmp_path / "s.wav", x, 48000)
    else:
        src = tmp_path / "s.h5"
        with h5py.File(src, "w") as f:
            f.create_dataset("iq", data=x).attrs["sample_rate_hz"] = 48000.0
    head = src.read_bytes()[:SNIFF_BYTES]
    assert READERS[make].sniff is not None and READERS[make].sniff(head)
    for other in READERS.values():
        if other.name != make and other.sniff is not None:
            assert not other.sniff(head)
    if make != "sigmf":  # a renamed SigMF meta would lose its dataset name
        neutral = tmp_path / "neutral.dat"
        os.link(src, neutral)
        with open_recording(neutral) as rec:
            assert rec.format == make and rec.n_samples == 50


@pytest.mark.parametrize("kind", ["sigmf", "wav", "raw", "hdf5"])
def test_every_reader_round_trips_and_chunks(tmp_path: Path, rng: np.random.Generator, kind: str) -> None:
    """Invariant over every registered reader: float32 samples come back bit-exact and
    concatenated chunks (odd sizes) equal the whole read."""
    x = _signal(rng, 1001)
    if kind == "sigmf":
        path = write_sigmf(tmp_path / "a", x, 48000)
    elif kind == "wav":
        path = write_wav(tmp_path / "a.wav", x, 48000, bits="float")
    elif kind == "raw":
        path = tmp_path / "a.cf32"
        path.write_bytes(parse_datatype("cf32").encode(x))
    else:
        path = tmp_path / "a.h5"
        with h5py.File(path, "w") as f:
            f.create_dataset("g/iq", data=x).attrs["sample_rate_hz"] = 48000.0
    with open_recording(path, rate=48000 if kind == "raw" else None) as rec:
        assert rec.format == kind
        np.testing.assert_array_equal(rec.read(), x)
        for size in (1, 13, 1000, 1001, 4096):
            np.testing.assert_array_equal(np.concatenate(list(rec.chunks(size))), x)


# -- raw ----------------------------------------------------------------------------------
@pytest.mark.parametrize("name", sorted(SAMPLE_FORMATS))
def test_raw_every_datatype(tmp_path: Path, rng: np.random.Generator, name: str) -> None:
    fmt = parse_datatype(name)
    x = _signal(rng, 257)
    path = tmp_path / "x.iq"
    path.write_bytes(fmt.encode(x))
    with open_recording(path, format=name, rate=2.4e6, center=7.1e6) as rec:
        assert (rec.datatype, rec.n_samples, rec.sample_rate_hz, rec.center_frequency_hz) == (name, 257, 2.4e6, 7.1e6)
        np.testing.assert_array_equal(rec.read(), fmt.decode(path.read_bytes()))


def test_raw_needs_datatype_and_rate(tmp_path: Path) -> None:
    path = tmp_path / "x.raw"
    path.write_bytes(bytes(16))
    with pytest.raises(UsageError):
        open_recording(path, rate=1000)
    with pytest.raises(MetadataError, match="--rate"):
        open_recording(path, format="ci16")
    cu8 = tmp_path / "y.cu8"
    cu8.write_bytes(bytes([128, 128, 255, 0]))
    with open_recording(cu8, rate=1000) as rec:  # datatype from the extension
        assert rec.datatype == "cu8"
        np.testing.assert_array_equal(rec.read(), [0, 127 / 128 - 1j])


def test_raw_sidecar_supplies_rate_centre_datatype(tmp_path: Path) -> None:
    path = tmp_path / "z.iq"
    path.write_bytes(np.zeros(8, "<i2").tobytes())
    (tmp_path / "z.iq.iqscope.json").write_text(
        '{"datatype": "ci16_le", "sample_rate_hz": 96000, "center_frequency_hz": 3.5e6}'
    )
    with open_recording(path) as rec:
        assert (rec.n_samples, rec.sample_rate_hz, rec.center_frequency_hz) == (4, 96000.0, 3.5e6)


# -- HDF5 ---------------------------------------------------------------------------------
def test_hdf5_complex_and_n_by_2(tmp_path: Path, rng: np.random.Generator) -> None:
    x = _signal(rng, 300)
    path = tmp_path / "h.h5"
    codes = rng.integers(-32768, 32767, (300, 2)).astype(np.int16)
    with h5py.File(path, "w") as f:
        f.attrs["center_frequency_hz"] = 14.1e6
        g = f.create_group("caps")
        g.attrs["samp_rate"] = 192000
        g.create_dataset("c64", data=x)
        g.create_dataset("f2", data=np.stack([x.real, x.imag], axis=1).astype(np.float64))
        d = g.create_dataset("i2", data=codes)
        d.attrs["fc"] = 7e6
        f.create_dataset("label", data=np.arange(5))
    with open_recording(f"{path}:/caps/c64") as rec:
        assert (rec.format, rec.datatype, rec.sample_rate_hz, rec.center_frequency_hz) == ("hdf5", "cf32_le", 192000.0, 14.1e6)
        np.testing.assert_array_equal(rec.read(), x)
    with open_recording(f"{path}:caps/f2") as rec:
        assert rec.datatype == "cf64_le"
        np.testing.assert_array_equal(rec.read(), x)
    with open_recording(f"{path}:/caps/i2", center=1e6) as rec:
        assert rec.datatype == "ci16_le" and rec.center_frequency_hz == 1e6
        np.testing.assert_array_equal(rec.read(), ((codes[:, 0] + 1j * codes[:, 1]) / 32768).astype(np.complex64))
        np.testing.assert_array_equal(np.concatenate(list(rec.chunks(77, 5)))[:77], rec.read(0, 77))
    with pytest.raises(FormatError, match="several"):
        open_recording(path)
    with pytest.raises(InputMissingError):
        open_recording(f"{path}:/nope")
    with pytest.raises(FormatError, match="not I/Q"):
        open_recording(f"{path}:/label")


# -- atomic output ------------------------------------------------------------------------
def test_atomic_write_commits_or_leaves_nothing(tmp_path: Path) -> None:
    target = tmp_path / "out.bin"
    with atomic_write(target) as fh:
        fh.write(b"abc")
        assert not target.exists()  # nothing visible before the commit
    assert target.read_bytes() == b"abc"
    with pytest.raises(OutputError, match="exists"):
        with atomic_write(target) as fh:
            fh.write(b"never")
    with pytest.raises(RuntimeError):
        with atomic_write(target, force=True) as fh:
            fh.write(b"partial")
            raise RuntimeError("interrupted")
    assert target.read_bytes() == b"abc"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.bin"]  # no temp left
    atomic_write_text(target, "new\n", force=True)
    assert target.read_text() == "new\n"
    with pytest.raises(OutputError, match="folder"):
        atomic_write_text(tmp_path / "missing" / "x.txt", "x")
    with pytest.raises(OutputError, match="folder"):
        atomic_write_text(tmp_path, "x", force=True)


def test_atomic_write_does_not_replace_a_file_created_meanwhile(tmp_path: Path) -> None:
    target = tmp_path / "race.txt"
    with pytest.raises(OutputError):
        with atomic_write(target) as fh:
            fh.write(b"mine")
            target.write_bytes(b"theirs")
    assert target.read_bytes() == b"theirs"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["race.txt"]


def test_atomic_write_keeps_mode_on_force(tmp_path: Path) -> None:
    target = tmp_path / "m.txt"
    target.write_text("old")
    os.chmod(target, 0o640)
    atomic_write_text(target, "new", force=True)
    assert (os.stat(target).st_mode & 0o777) == 0o640


@pytest.mark.parametrize("size,overlap", [(5, 0), (7, 3), (64, 63), (1000, 0)])
def test_nonfinite_counted_once_with_overlapping_chunks(tmp_path: Path, size: int, overlap: int) -> None:
    """NaN/Inf samples come back as 0; a front-to-back pass counts each exactly once,
    whatever the overlap; re-reading does not count them again."""
    x = np.full(200, 0.5 + 0.5j, np.complex64)
    bad = [0, 13, 14, 99, 199]
    x[bad] = np.nan
    path = tmp_path / "n.cf32"
    path.write_bytes(x.tobytes())
    with open_recording(path, rate=1000) as rec:
        for block in rec.chunks(size, overlap):
            assert np.all(np.isfinite(block))
        assert rec.nonfinite_count == len(bad)
        rec.read(0, 50)
        assert rec.nonfinite_count == len(bad)
        assert rec.read()[bad].tolist() == [0j] * len(bad)
        assert any("non-finite" in w for w in rec.warnings)
