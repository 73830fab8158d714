"""Sample formats in SigMF notation: parsing, decoding to complex64 and encoding.

A complex sample is two components (I then Q) of one *component format*: a float
(``f32``, ``f64``), a signed integer (``i8``, ``i16``, ``i24``, ``i32``) or an unsigned
integer (``u8``, ``u16``, ``u32``), little (``_le``) or big (``_be``) endian. The names
follow the SigMF ``core:datatype`` field (``cf32_le``, ``ci16_le``, ``cu8`` ...); ``ci24_le``
is our own name for 24-bit PCM WAV files and is not a SigMF datatype.

Integers are scaled to full scale 1 exactly as the reference ``sigmf`` package's
``autoscale`` does: signed ``x / 2**(bits-1)``, unsigned ``(x - 2**(bits-1)) / 2**(bits-1)``,
so the most negative code reads -1.0 and the most positive ``1 - 2**-(bits-1)``.

References
----------
.. [1] SigMF specification 1.2.6, ``core:datatype`` (regex
   ``^(c|r)(f32|f64|i32|i16|u32|u16|i8|u8)(_le|_be)?``); autoscale behaviour of the
   ``sigmf`` Python package 1.14 (``SigMFFile(..., autoscale=True)``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Final, Literal

import numpy as np
import numpy.typing as npt

__all__ = [
    "SampleFormat",
    "parse_datatype",
    "SAMPLE_FORMATS",
    "SIGMF_DATATYPES",
    "REAL_FORMATS",
]

#: Kind of a component: float, signed integer or unsigned integer.
Kind = Literal["f", "i", "u"]

_DATATYPE_RE: Final = re.compile(r"^(?P<cr>[cr])(?P<kind>[fiu])(?P<bits>8|16|24|32|64)(?:_(?P<end>le|be))?$")


@dataclass(frozen=True)
class SampleFormat:
    """One complex sample format (two interleaved components, I then Q)."""

    kind: Kind
    """``"f"`` float, ``"i"`` signed integer, ``"u"`` unsigned integer."""
    bits: int
    """Bits per component: 8, 16, 24, 32 or 64."""
    byteorder: Literal["<", ">"]
    """Byte order of each component (``"<"`` little endian for 8-bit formats too)."""
    real: bool = False
    """True for a real datatype (``r...``): one component per sample, decoded as I with
    Q = 0 (see :mod:`iqscope.io._real` for how such recordings are analysed)."""

    @property
    def name(self) -> str:
        """The SigMF-style name, e.g. ``"ci16_le"``; 8-bit names carry no byte order."""
        base = f"{'r' if self.real else 'c'}{self.kind}{self.bits}"
        if self.bits == 8:
            return base
        return f"{base}_{'le' if self.byteorder == '<' else 'be'}"

    @property
    def component_bytes(self) -> int:
        """Bytes per component."""
        return self.bits // 8

    @property
    def sample_bytes(self) -> int:
        """Bytes per sample (I and Q; one component for a real datatype)."""
        return self.component_bytes if self.real else 2 * self.component_bytes

    @property
    def is_sigmf(self) -> bool:
        """True when SigMF defines this datatype (24-bit and 64-bit integers are ours only)."""
        return self.bits != 24 and not (self.kind != "f" and self.bits == 64)

    @property
    def full_scale(self) -> float:
        """The integer code that maps to 1.0 (``2**(bits-1)``); 1.0 for floats."""
        return 1.0 if self.kind == "f" else float(2 ** (self.bits - 1))

    @property
    def clip_level(self) -> float:
        """Component magnitude (full scale 1) at or above which a sample counts as clipped.

        For integers the largest positive code scaled, ``(2**(bits-1) - 1) / 2**(bits-1)``
        (32767/32768 for 16 bits); the most negative code (-1.0) also reaches it. For
        floats 1.0 (full scale; a float file can exceed it).
        """
        if self.kind == "f":
            return 1.0
        fs = self.full_scale
        return (fs - 1.0) / fs

    @property
    def quantisation_step(self) -> float:
        """Spacing of the representable values near zero, full scale 1 (0 for floats)."""
        return 0.0 if self.kind == "f" else 1.0 / self.full_scale

    def component_dtype(self) -> np.dtype[np.generic]:
        """numpy dtype of one component as stored (24-bit components are read as bytes)."""
        if self.bits == 24:
            return np.dtype(np.uint8)
        return np.dtype(f"{self.byteorder}{self.kind}{self.component_bytes}")

    # -- decoding --------------------------------------------------------------------
    def decode(self, raw: bytes | bytearray | memoryview | npt.NDArray[np.uint8]) -> npt.NDArray[np.complex64]:
        """Decode whole samples from ``raw`` bytes to complex64 scaled to full scale 1.

        ``len(raw)`` must be a multiple of :attr:`sample_bytes`.
        """
        buf = np.frombuffer(raw, dtype=np.uint8) if not isinstance(raw, np.ndarray) else raw
        if buf.size % self.sample_bytes:
            raise ValueError(f"{buf.size} bytes is not a whole number of {self.name} samples")
        n = buf.size // self.sample_bytes
        out = np.empty(n, np.complex64)
        if n == 0:
            return out
        if self.bits == 24:
            trip = buf.reshape(-1, 3).astype(np.int32)
            if self.byteorder == "<":
                val = trip[:, 0] | (trip[:, 1] << 8) | (trip[:, 2] << 16)
            else:
                val = trip[:, 2] | (trip[:, 1] << 8) | (trip[:, 0] << 16)
            val = np.where(val >= 1 << 23, val - (1 << 24), val)
            comp: npt.NDArray[np.floating] = val.astype(np.float64) / self.full_scale
        else:
            values = buf.view(self.component_dtype())
            if self.kind == "f":
                comp = values
            else:
                work = np.float32 if self.bits <= 16 else np.float64
                comp = values.astype(work)
                if self.kind == "u":
                    comp -= work(self.full_scale)
                comp *= work(1.0 / self.full_scale)
        if self.real:
            out.real = comp
            out.imag = 0.0
            return out
        out.real = comp[0::2]
        out.imag = comp[1::2]
        return out

    # -- encoding --------------------------------------------------------------------
    def encode(self, samples: npt.ArrayLike) -> bytes:
        """Encode complex samples (full scale 1) to bytes in this format.

        Integers are rounded to the nearest code and saturate at the end codes (a value of
        +1.0 becomes the largest positive code). Raises ``ValueError`` on NaN/Inf when the
        format is an integer one (there is no code for them).
        """
        x = np.asarray(samples)
        if not np.iscomplexobj(x):
            x = x.astype(np.complex128)
        x = x.ravel()
        if self.real:
            x = x.real
        if self.kind == "f" and self.real:
            return np.ascontiguousarray(x, dtype=np.dtype(f"{self.byteorder}f{self.component_bytes}")).tobytes()
        if self.kind == "f":
            ftype = np.dtype(f"{self.byteorder}f{self.component_bytes}")
            inter = np.empty(2 * x.size, ftype)
            inter[0::2] = x.real
            inter[1::2] = x.imag
            return inter.tobytes()
        if self.real:
            comp = np.asarray(x, dtype=np.float64).copy()
        else:
            comp = np.empty(2 * x.size, np.float64)
            comp[0::2] = x.real
            comp[1::2] = x.imag
        if not np.all(np.isfinite(comp)):
            raise ValueError(f"cannot encode NaN or Inf samples as {self.name}")
        fs = self.full_scale
        codes = np.rint(comp * fs)
        codes = np.clip(codes, -fs, fs - 1)
        if self.kind == "u":
            codes += fs
        if self.bits == 24:
            ival = codes.astype(np.int64) & 0xFFFFFF
            trip = np.empty((ival.size, 3), np.uint8)
            if self.byteorder == "<":
                trip[:, 0], trip[:, 1], trip[:, 2] = ival & 0xFF, (ival >> 8) & 0xFF, ival >> 16
            else:
                trip[:, 2], trip[:, 1], trip[:, 0] = ival & 0xFF, (ival >> 8) & 0xFF, ival >> 16
            return trip.tobytes()
        return codes.astype(self.component_dtype()).tobytes()


def _all_formats() -> dict[str, SampleFormat]:
    table: dict[str, SampleFormat] = {}
    for kind, bits_list in (("f", (32, 64)), ("i", (8, 16, 24, 32)), ("u", (8, 16, 32))):
        for bits in bits_list:
            orders: tuple[Literal["<", ">"], ...] = ("<",) if bits == 8 else ("<", ">")
            for order in orders:
                fmt = SampleFormat(kind, bits, order)  # type: ignore[arg-type]
                table[fmt.name] = fmt
    return table


#: Every complex sample format iqscope reads, by name (SigMF names plus ``ci24_le/_be``).
SAMPLE_FORMATS: Final[dict[str, SampleFormat]] = _all_formats()

#: The SigMF complex datatypes (what :func:`~iqscope.io.write_sigmf` can write).
SIGMF_DATATYPES: Final[tuple[str, ...]] = tuple(n for n, f in SAMPLE_FORMATS.items() if f.is_sigmf)

#: Every real sample format (SigMF ``r...`` names: rf32, rf64, ri8, ri16, ri32, ru8,
#: ru16, ru32 with their byte orders, and our ri24 for WAV), by name.
REAL_FORMATS: Final[dict[str, SampleFormat]] = {
    f"r{k[1:]}": SampleFormat(f.kind, f.bits, f.byteorder, real=True) for k, f in SAMPLE_FORMATS.items()
}


def parse_datatype(name: str) -> SampleFormat:
    """Return the :class:`SampleFormat` for a datatype name such as ``"ci16_le"`` or ``"cf32"``.

    A missing byte order means little endian (``"ci16"`` is ``"ci16_le"``); ``"ci8_le"``
    is accepted for ``"ci8"``. Case is ignored.

    A real datatype (``"rf32_le"``, ``"ri16_le"``, ``"ru8"`` ...) gives a format with
    ``real=True``.

    Raises:
        ValueError: unknown name.
    """
    if not isinstance(name, str):
        raise ValueError(f"datatype {name!r} is not a string")
    text = name.strip().lower()
    m = _DATATYPE_RE.match(text)
    if m is None:
        raise ValueError(f"unknown sample datatype {name!r}")
    bits = int(m["bits"])
    order: Literal["<", ">"] = ">" if m["end"] == "be" else "<"
    if bits == 8:
        order = "<"
    key = f"{m['cr']}{m['kind']}{bits}" + ("" if bits == 8 else "_" + ("be" if order == ">" else "le"))
    fmt = (REAL_FORMATS if m["cr"] == "r" else SAMPLE_FORMATS).get(key)
    if fmt is None:
        raise ValueError(f"unknown sample datatype {name!r}")
    return fmt
