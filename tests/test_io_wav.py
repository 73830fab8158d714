"""Two-channel WAV I/Q: our writer and reader checked against scipy.io.wavfile and the
standard library's ``wave`` (external references), plus hand-built RIFF variants
(WAVE_FORMAT_EXTENSIBLE, RF64) per the RIFF WAVE layout (Microsoft/IBM Multimedia
Programming Interface and Data Specifications 1.0, 1991; EBU Tech 3306 for RF64)."""

from __future__ import annotations

import json
import struct
import wave
from pathlib import Path

import numpy as np
import pytest
import scipy.io.wavfile

from iqscope.errors import FormatError, OutputError
from iqscope.io import open_recording, write_wav


def _signal(rng: np.random.Generator, n: int, amp: float = 0.7) -> np.ndarray:
    return ((rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)) * amp).astype(np.complex64)


# scipy returns each PCM width in its own integer type; full-scale divisor and offset
_SCIPY_SCALE = {8: (128.0, 128.0), 16: (32768.0, 0.0), 24: (2.0**31, 0.0), 32: (2.0**31, 0.0)}


@pytest.mark.parametrize("bits", [8, 16, 24, 32, "float"])
def test_round_trip_and_scipy_agrees(tmp_path: Path, rng: np.random.Generator, bits: int | str) -> None:
    """Our reader vs scipy.io.wavfile.read on the file we wrote: identical samples (scipy
    left-justifies 24-bit data in int32, hence 2**31). Round trip: float bit-exact, PCM
    within one quantisation step (half a step from rounding; 32-bit limited by complex64)."""
    x = _signal(rng, 1003)
    path = write_wav(tmp_path / f"w{bits}.wav", x, 48000, bits=bits)
    rate, data = scipy.io.wavfile.read(path)
    assert rate == 48000 and data.shape == (1003, 2)
    with open_recording(path) as rec:
        y = rec.read()
        assert rec.format == "wav" and rec.sample_rate_hz == 48000.0 and rec.n_samples == 1003
        assert rec.center_frequency_hz is None
    if bits == "float":
        ref = data[:, 0] + 1j * data[:, 1]
        np.testing.assert_array_equal(y, ref.astype(np.complex64))
        np.testing.assert_array_equal(y, x)
        return
    div, off = _SCIPY_SCALE[bits]
    comp = (data.astype(np.float64) - off) / div
    np.testing.assert_array_equal(y, (comp[:, 0] + 1j * comp[:, 1]).astype(np.complex64))
    step = max(2.0 ** -(bits - 1), 2.0**-24)
    assert np.max(np.abs(y - x)) <= step * np.sqrt(2)


@pytest.mark.parametrize("bits", [8, 16, 24, 32])
def test_stdlib_wave_reads_our_pcm(tmp_path: Path, rng: np.random.Generator, bits: int) -> None:
    """The standard library's wave module (WAVE_FORMAT_PCM only) reads the same header
    fields and the same frames."""
    x = _signal(rng, 501)
    path = write_wav(tmp_path / "s.wav", x, 22050, bits=bits)
    with wave.open(str(path), "rb") as w:
        assert (w.getnchannels(), w.getsampwidth(), w.getframerate(), w.getnframes()) == (2, bits // 8, 22050, 501)
        frames = w.readframes(501)
    assert frames == path.read_bytes()[-len(frames):]


def test_reads_files_written_by_scipy(tmp_path: Path, rng: np.random.Generator) -> None:
    """scipy.io.wavfile.write as the external writer (int16 and float32 stereo)."""
    pcm = rng.integers(-32768, 32767, (400, 2), endpoint=True).astype(np.int16)
    scipy.io.wavfile.write(tmp_path / "a.wav", 8000, pcm)
    with open_recording(tmp_path / "a.wav") as rec:
        np.testing.assert_array_equal(rec.read(), ((pcm[:, 0] + 1j * pcm[:, 1]) / 32768).astype(np.complex64))
    flt = rng.standard_normal((300, 2)).astype(np.float32)
    scipy.io.wavfile.write(tmp_path / "f.wav", 8000, flt)
    with open_recording(tmp_path / "f.wav") as rec:
        assert rec.datatype == "cf32_le"
        np.testing.assert_array_equal(rec.read(), flt[:, 0] + 1j * flt[:, 1])


def _riff(fmt_body: bytes, data: bytes, *, tag: bytes = b"RIFF", extra: bytes = b"", data_size: int | None = None) -> bytes:
    chunks = extra + b"fmt " + struct.pack("<I", len(fmt_body)) + fmt_body
    chunks += b"data" + struct.pack("<I", len(data) if data_size is None else data_size) + data
    return tag + struct.pack("<I", 4 + len(chunks)) + b"WAVE" + chunks


_GUID_TAIL = b"\x00\x00\x00\x00\x10\x00\x80\x00\x00\xaa\x00\x38\x9b\x71"


@pytest.mark.parametrize("sub,bits,dtype", [(1, 24, None), (1, 16, "<i2"), (3, 32, "<f4")])
def test_wave_format_extensible(tmp_path: Path, rng: np.random.Generator, sub: int, bits: int, dtype: str | None) -> None:
    """WAVEFORMATEXTENSIBLE: 40-byte fmt with cbSize 22, valid bits, channel mask and the
    KSDATAFORMAT_SUBTYPE GUID {format tag}-0000-0010-8000-00AA00389B71."""
    n = 64
    if dtype is None:  # 24-bit: build from int32 codes, little-endian 3-byte
        codes = rng.integers(-(2**23), 2**23 - 1, 2 * n).astype(np.int64)
        data = b"".join(int(c & 0xFFFFFF).to_bytes(3, "little") for c in codes)
        want = codes / 2.0**23
    elif dtype == "<i2":
        codes = rng.integers(-32768, 32767, 2 * n).astype("<i2")
        data, want = codes.tobytes(), codes / 32768.0
    else:
        codes = rng.standard_normal(2 * n).astype("<f4")
        data, want = codes.tobytes(), codes.astype(np.float64)
    align = 2 * bits // 8
    body = struct.pack("<HHIIHHHHI", 0xFFFE, 2, 48000, 48000 * align, align, bits, 22, bits, 3)
    body += struct.pack("<H", sub) + _GUID_TAIL
    (tmp_path / "e.wav").write_bytes(_riff(body, data, extra=b"LIST" + struct.pack("<I", 4) + b"INFO"))
    with open_recording(tmp_path / "e.wav") as rec:
        np.testing.assert_array_equal(rec.read(), (want[0::2] + 1j * want[1::2]).astype(np.complex64))


def test_rf64_with_ds64(tmp_path: Path) -> None:
    """EBU Tech 3306: RF64 header, ds64 chunk (riff size, data size, sample count, table
    length), data chunk size 0xFFFFFFFF meaning 'see ds64'."""
    codes = np.arange(-8, 8, dtype="<i2")
    body = struct.pack("<HHIIHH", 1, 2, 1000, 4000, 4, 16)
    ds64 = b"ds64" + struct.pack("<IQQQI", 28, 0, codes.nbytes, 8, 0)
    blob = _riff(body, codes.tobytes(), tag=b"RF64", extra=ds64, data_size=0xFFFFFFFF)
    (tmp_path / "big.wav").write_bytes(blob)
    with open_recording(tmp_path / "big.wav") as rec:
        assert rec.n_samples == 8
        np.testing.assert_array_equal(rec.read() * 32768, codes[0::2] + 1j * codes[1::2])


def test_centre_from_sidecar_and_override(tmp_path: Path, rng: np.random.Generator) -> None:
    path = write_wav(tmp_path / "c.wav", _signal(rng, 10), 48000, center_frequency_hz=14.2e6)
    side = tmp_path / "c.wav.iqscope.json"
    assert json.loads(side.read_text()) == {"center_frequency_hz": 14.2e6}
    with open_recording(path) as rec:
        assert rec.center_frequency_hz == 14.2e6
    with open_recording(path, center=7e6) as rec:
        assert rec.center_frequency_hz == 7e6


def test_writer_no_overwrite_and_stale_sidecar(tmp_path: Path, rng: np.random.Generator) -> None:
    x = _signal(rng, 10)
    path = write_wav(tmp_path / "o.wav", x, 48000, center_frequency_hz=1e6)
    with pytest.raises(OutputError):
        write_wav(path, x, 48000)
    write_wav(path, x, 48000, force=True)  # no centre: the old sidecar must not survive
    assert not (tmp_path / "o.wav.iqscope.json").exists()
    with pytest.raises(ValueError):
        write_wav(tmp_path / "r.wav", x, 48000.5)
    with pytest.raises(ValueError):
        write_wav(tmp_path / "r.wav", x, 48000, bits=12)


def test_lying_data_size_reads_what_is_there(tmp_path: Path) -> None:
    codes = np.arange(40, dtype="<i2")
    body = struct.pack("<HHIIHH", 1, 2, 1000, 4000, 4, 16)
    (tmp_path / "l.wav").write_bytes(_riff(body, codes.tobytes(), data_size=10_000))
    with pytest.raises(FormatError, match="truncated"):
        open_recording(tmp_path / "l.wav")
    with open_recording(tmp_path / "l.wav", accept_truncated=True) as rec:
        assert rec.n_samples == 20
        assert any("claims" in w for w in rec.warnings)


def test_mono_is_refused(tmp_path: Path) -> None:
    scipy.io.wavfile.write(tmp_path / "m.wav", 8000, np.zeros(100, np.int16))
    with pytest.raises(FormatError, match="mono"):
        open_recording(tmp_path / "m.wav")
