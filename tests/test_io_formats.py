"""Sample formats: names, scaling to full scale 1, clip levels, encode/decode round trips.

External reference: the ``sigmf`` package's autoscale (REFERENCES.md item 10: signed
x / 2**(b-1), unsigned (x - 2**(b-1)) / 2**(b-1); ci16 1000 -> 0.0305176, 32767 -> 0.99997,
-32768 -> -1.0), and numpy's own dtype decoding as an independent oracle.
"""

from __future__ import annotations

import numpy as np
import pytest

from iqscope.io import SAMPLE_FORMATS, SIGMF_DATATYPES, parse_datatype
from iqscope.io._formats import _DATATYPE_RE


def test_table_covers_the_sigmf_complex_datatypes() -> None:
    """Every complex datatype the SigMF 1.2.6 regex allows (minus r*) is in the table."""
    expected = set()
    for t in ("f32", "f64", "i32", "i16", "u32", "u16"):
        expected |= {f"c{t}_le", f"c{t}_be"}
    expected |= {"ci8", "cu8"}
    assert set(SIGMF_DATATYPES) == expected
    assert set(SAMPLE_FORMATS) == expected | {"ci24_le", "ci24_be"}


@pytest.mark.parametrize("name", sorted(SAMPLE_FORMATS))
def test_names_round_trip_and_match_regex(name: str) -> None:
    fmt = parse_datatype(name)
    assert fmt.name == name
    assert _DATATYPE_RE.match(name)
    assert fmt.sample_bytes == 2 * fmt.bits // 8


def test_aliases_and_errors() -> None:
    assert parse_datatype("CF32").name == "cf32_le"
    assert parse_datatype("ci16").name == "ci16_le"
    assert parse_datatype("ci8_le").name == "ci8"
    for bad in ("cf33_le", "ci64_le", "cf16", "rf16_le", "ri64_le", "x", "", "ci16_me"):
        with pytest.raises(ValueError):
            parse_datatype(bad)


def test_sigmf_autoscale_reference_values() -> None:
    """REFERENCES.md item 10 (sigmf 1.14 autoscale, verified there by running)."""
    ci16 = parse_datatype("ci16_le")
    raw = np.array([1000, 32767, -32768, 0], "<i2").tobytes()
    got = ci16.decode(raw)
    assert got[0] == pytest.approx(1000 / 32768 + 32767j / 32768, abs=0)
    assert got[0].real == pytest.approx(0.0305176, abs=1e-7)
    assert got[1] == -1.0 + 0j
    cu8 = parse_datatype("cu8")
    got = cu8.decode(bytes([0, 128, 255, 1]))
    np.testing.assert_array_equal(got, np.array([(0 - 128) / 128 + 0j, (255 - 128) / 128 + (1 - 128) / 128 * 1j], np.complex64))


@pytest.mark.parametrize("name", sorted(n for n in SAMPLE_FORMATS if "24" not in n))
def test_decode_matches_numpy_oracle(name: str, rng: np.random.Generator) -> None:
    """Decoding equals numpy's view of the same bytes, scaled per the sigmf rule."""
    fmt = parse_datatype(name)
    dt = np.dtype(f"{fmt.byteorder}{fmt.kind}{fmt.bits // 8}")
    if fmt.kind == "f":
        comp = rng.standard_normal(202).astype(dt)
        want = comp.astype(np.float64)
    else:
        info = np.iinfo(dt)
        comp = rng.integers(info.min, info.max, 202, endpoint=True).astype(dt)
        off = 2.0 ** (fmt.bits - 1) if fmt.kind == "u" else 0.0
        want = (comp.astype(np.float64) - off) / 2.0 ** (fmt.bits - 1)
    got = fmt.decode(comp.tobytes())
    np.testing.assert_array_equal(got, (want[0::2] + 1j * want[1::2]).astype(np.complex64))


def test_24_bit_decoding_by_hand() -> None:
    """Little-endian 24-bit two's complement (RIFF WAVE PCM rule): 0x7FFFFF max, 0x800000 min."""
    fmt = parse_datatype("ci24_le")
    raw = bytes([0xFF, 0xFF, 0x7F, 0x00, 0x00, 0x80, 0x01, 0x00, 0x00, 0xFF, 0xFF, 0xFF])
    got = fmt.decode(raw)
    np.testing.assert_array_equal(
        got, np.array([(2**23 - 1) / 2**23 - 1j, 2**-23 - 1j * 2**-23], np.complex64)
    )


@pytest.mark.parametrize("name", sorted(SAMPLE_FORMATS))
def test_encode_decode_round_trip(name: str, rng: np.random.Generator) -> None:
    """Float: bit-exact. Integers: within half a quantisation step (rounding), and for 32-bit
    codes within float32 resolution of the value (complex64 carries 24 bits of mantissa)."""
    fmt = parse_datatype(name)
    x = ((rng.uniform(-1, 1, 333) + 1j * rng.uniform(-1, 1, 333)) * 0.99).astype(np.complex64)
    y = fmt.decode(fmt.encode(x))
    if fmt.kind == "f":
        np.testing.assert_array_equal(y, x)
    else:
        tol = max(fmt.quantisation_step / 2, 2.0**-24) * (1 + 1e-6)
        assert np.max(np.abs(y.real - x.real)) <= tol
        assert np.max(np.abs(y.imag - x.imag)) <= tol


@pytest.mark.parametrize("name", sorted(SAMPLE_FORMATS))
def test_clip_level_is_max_code(name: str) -> None:
    """clip_level = largest positive code scaled (32767/32768 for 16 bits); encoding 1.0
    saturates to exactly that code; floats clip at 1.0."""
    fmt = parse_datatype(name)
    top = fmt.decode(fmt.encode(np.array([1.0 + 1.0j, -1.0 - 1.0j])))
    if fmt.kind == "f":
        assert fmt.clip_level == 1.0
    else:
        assert fmt.clip_level == (2.0 ** (fmt.bits - 1) - 1) / 2.0 ** (fmt.bits - 1)
        assert top[0].real == np.float32(fmt.clip_level)
        assert top[1].real == -1.0
    if name == "ci16_le":
        assert fmt.clip_level == 32767 / 32768


def test_integer_encode_refuses_nan() -> None:
    with pytest.raises(ValueError):
        parse_datatype("ci16").encode(np.array([np.nan + 0j]))
    # floats carry NaN through
    assert np.isnan(parse_datatype("cf32").decode(parse_datatype("cf32").encode(np.array([np.nan + 0j])))[0].real)
