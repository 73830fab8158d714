"""HDF5 I/Q datasets (h5py): a 1-D complex dataset or an N x 2 real one (I, Q columns).

Name the dataset as ``file.h5:/group/dataset``; without it the file's single usable
dataset is taken, or the error lists the candidates. The sample rate and centre
frequency come from attributes of the dataset, else of its parent groups up to the
file root (first found wins): ``sample_rate_hz`` (also ``sample_rate``, ``samp_rate``,
``fs``, ``rate``, ``core:sample_rate``) and ``center_frequency_hz`` (also
``centre_frequency_hz``, ``center_frequency``, ``center_freq``, ``frequency``, ``fc``,
``core:frequency``). Integer N x 2 datasets are scaled to full scale 1 like the SigMF
integer datatypes. Slices are read on demand.
"""

from __future__ import annotations

import weakref
from typing import Any, Final

import numpy as np
import numpy.typing as npt

from ..errors import FormatError, InputMissingError
from ._common import check_center, resolve_rate
from ._filerec import file_size
from ._formats import SampleFormat, parse_datatype
from ._recording import Recording, Segment
from ._registry import OpenRequest, ReaderSpec, register_reader

__all__ = ["open_hdf5", "RATE_ATTRS", "CENTER_ATTRS"]

HDF5_SIGNATURE: Final = b"\x89HDF\r\n\x1a\n"
#: Attribute names read as the sample rate, Hz (first found wins).
RATE_ATTRS: Final = ("sample_rate_hz", "sample_rate", "samp_rate", "fs", "rate", "core:sample_rate")
#: Attribute names read as the centre frequency, Hz.
CENTER_ATTRS: Final = (
    "center_frequency_hz",
    "centre_frequency_hz",
    "center_frequency",
    "centre_frequency",
    "center_freq",
    "frequency",
    "fc",
    "core:frequency",
)


def _sniff(head: bytes) -> bool:
    return head.startswith(HDF5_SIGNATURE)


def _dataset_format(ds: Any) -> SampleFormat | None:
    """The sample format of a usable dataset, else None."""
    dt = ds.dtype
    order = "be" if dt.byteorder == ">" else "le"
    if dt.kind == "c" and len(ds.shape) == 1:
        return parse_datatype(f"cf{dt.itemsize * 4}_{order}")
    if len(ds.shape) == 2 and ds.shape[1] == 2 and dt.kind in "fiu":
        bits = dt.itemsize * 8
        if dt.kind == "f" and bits not in (32, 64):
            return None
        try:
            return parse_datatype(f"c{dt.kind}{bits}_{order}")
        except ValueError:
            return None
    return None


def _attr(obj: Any, names: tuple[str, ...]) -> Any:
    node = obj
    while True:
        for n in names:
            if n in node.attrs:
                value = node.attrs[n]
                if isinstance(value, np.ndarray) and value.size == 1:
                    value = value.reshape(()).item()
                elif isinstance(value, np.generic):
                    value = value.item()
                if isinstance(value, bytes):
                    value = value.decode("utf-8", "replace")
                return value
        if node.name == "/":
            return None
        node = node.parent


class HDF5Recording(Recording):
    """Samples of one HDF5 dataset, read slice by slice."""

    def __init__(self, file: Any, ds: Any, fmt: SampleFormat, **kwargs: Any) -> None:
        super().__init__(datatype=fmt.name, **kwargs)
        self._file = file
        self._ds = ds
        self.sample_format = fmt
        self._finalizer = weakref.finalize(self, file.close)

    def _read(self, start: int, count: int) -> npt.NDArray[np.complex64]:
        try:
            block = self._ds[start : start + count]
        except (OSError, ValueError, RuntimeError, KeyError) as exc:
            raise FormatError(f"cannot read dataset {self._ds.name}: {exc}", self.path) from exc
        if block.ndim == 1:
            return np.asarray(block, dtype=np.complex64)
        fmt = self.sample_format
        out = np.empty(block.shape[0], np.complex64)
        if fmt.kind == "f":
            out.real, out.imag = block[:, 0], block[:, 1]
            return out
        comp = block.astype(np.float64)
        if fmt.kind == "u":
            comp -= fmt.full_scale
        comp /= fmt.full_scale
        out.real, out.imag = comp[:, 0], comp[:, 1]
        return out

    def close(self) -> None:
        self._finalizer()


def open_hdf5(req: OpenRequest) -> Recording:
    """Open an I/Q dataset of an HDF5 file."""
    import h5py

    path = req.path
    if file_size(path) == 0:
        raise FormatError("empty file", path)
    try:
        f = h5py.File(path, "r")
    except (OSError, ValueError) as exc:
        raise FormatError(f"not a readable HDF5 file: {exc}", path) from exc
    try:
        if req.subpath is not None:
            try:
                ds = f[req.subpath]
            except (KeyError, ValueError) as exc:
                raise InputMissingError(f"no dataset {req.subpath!r} in the file", path) from exc
            if not isinstance(ds, h5py.Dataset):
                raise InputMissingError(f"{req.subpath!r} is a group, not a dataset", path)
            fmt = _dataset_format(ds)
            if fmt is None:
                raise FormatError(
                    f"dataset {ds.name} of shape {ds.shape} and type {ds.dtype} is not I/Q "
                    "(need a 1-D complex or an N x 2 real dataset)",
                    path,
                )
        else:
            found: list[Any] = []
            seen: list[str] = []

            def visit(name: str, obj: Any) -> None:
                if isinstance(obj, h5py.Dataset):
                    seen.append("/" + name)
                    if _dataset_format(obj) is not None:
                        found.append(obj)

            try:
                f.visititems(visit)
            except (OSError, RuntimeError, ValueError) as exc:
                raise FormatError(f"damaged HDF5 file: {exc}", path) from exc
            if not found:
                listed = ", ".join(seen[:10]) or "none"
                raise FormatError(
                    f"no usable I/Q dataset (need 1-D complex or N x 2 real); datasets: {listed}", path
                )
            if len(found) > 1:
                names = ", ".join(f"{path.name}:{d.name}" for d in found[:10])
                raise FormatError(f"several I/Q datasets; name one of: {names}", path)
            ds = found[0]
            fmt = _dataset_format(ds)
            assert fmt is not None
        n = int(ds.shape[0])
        if n == 0:
            raise FormatError(f"dataset {ds.name} is empty", path)
        rate = resolve_rate(req.rate, _attr(ds, RATE_ATTRS), path)
        center = req.center if req.center is not None else check_center(_attr(ds, CENTER_ATTRS), path)
        meta = {"hdf5": {"dataset": ds.name, "shape": tuple(int(s) for s in ds.shape), "dtype": str(ds.dtype)}}
        return HDF5Recording(
            f,
            ds,
            fmt,
            path=path,
            format="hdf5",
            sample_rate_hz=rate,
            n_samples=n,
            center_frequency_hz=center,
            metadata=meta,
            segments=(Segment(0, center),),
        )
    except BaseException:
        f.close()
        raise


HDF5_READER = register_reader(
    ReaderSpec(
        name="hdf5",
        aliases=("h5", "hdf"),
        extensions=(".h5", ".hdf5", ".hdf", ".he5"),
        sniff=_sniff,
        open=open_hdf5,
        description="HDF5 dataset (1-D complex or N x 2 real), file.h5:/path/to/dataset",
        takes_subpath=True,
    )
)
