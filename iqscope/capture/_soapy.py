"""Finding SoapySDR's Python module, opening a device, and describing it.

SoapySDR is optional: it is imported here, lazily, inside functions, and nowhere else in
iqscope. Every function that talks to a device takes the module as an argument
(``soapy``), so tests pass a simulated module implementing the same calls.

The parts of the SoapySDR Python API used (SoapySDR 0.8, ``SoapySDR.py`` generated from
``swig/python/SoapySDR.in.i`` and ``include/SoapySDR/Device.hpp``, ``Errors.h``):
``Device(args)``, ``Device.enumerate(args)``, ``Device.unmake(device)``,
``getDriverKey``, ``getHardwareKey``, ``getHardwareInfo``, ``setSampleRate``,
``getSampleRate``, ``setFrequency``, ``getFrequency``, ``hasGainMode``, ``setGainMode``,
``setGain``, ``getGain``, ``listAntennas``, ``setAntenna``, ``getAntenna``,
``setupStream``, ``getStreamMTU``, ``activateStream``, ``readStream`` (returning a
``StreamResult`` with ``ret`` and ``flags``), ``deactivateStream``, ``closeStream``,
``errToStr`` and the ``SOAPY_SDR_*`` constants.
"""

from __future__ import annotations

import importlib
from collections.abc import Mapping
from types import ModuleType
from typing import Any, Final

from ..errors import CaptureError

__all__ = [
    "INSTALL_HINT",
    "load_soapy",
    "soapy_available",
    "list_devices",
    "open_device",
    "close_device",
    "describe_device",
    "error_name",
    "format_kwargs",
]

#: One line telling a user how to get SoapySDR (it is not on the Python package index).
INSTALL_HINT: Final = (
    "SoapySDR's Python module is not installed: install it with your system package manager "
    "(your distribution's python3-soapysdr or python3-SoapySDR package) together with the "
    "SoapySDR driver module for your receiver (package names like soapysdr-module-<driver>), "
    "then run iqscope from a Python that can see system packages (a virtual environment made "
    "with --system-site-packages)"
)

#: Stream error codes of ``SoapySDR/Errors.h``, used when the module lacks a constant.
_ERROR_CODES: Final = {
    -1: "TIMEOUT",
    -2: "STREAM_ERROR",
    -3: "CORRUPTION",
    -4: "OVERFLOW",
    -5: "NOT_SUPPORTED",
    -6: "TIME_ERROR",
    -7: "UNDERFLOW",
}


def load_soapy() -> ModuleType:
    """Import and return SoapySDR's Python module.

    Raises
    ------
    CaptureError
        The module is missing (with installation advice) or fails to load (e.g. its
        library's ABI does not match).
    """
    try:
        return importlib.import_module("SoapySDR")
    except ModuleNotFoundError as exc:
        if exc.name not in ("SoapySDR", "_SoapySDR"):
            raise CaptureError(f"SoapySDR could not be loaded: {exc}") from exc
        raise CaptureError(INSTALL_HINT) from exc
    except Exception as exc:  # the SWIG module raises plain Exception on an ABI mismatch
        raise CaptureError(f"SoapySDR is installed but could not be loaded: {exc}") from exc


def soapy_available() -> bool:
    """True when SoapySDR's Python module can be imported."""
    try:
        load_soapy()
    except CaptureError:
        return False
    return True


def const(soapy: Any, name: str, default: Any) -> Any:
    """A ``SOAPY_SDR_*`` constant from the module, or its documented value."""
    return getattr(soapy, name, default)


def error_name(soapy: Any, code: int) -> str:
    """Name of a negative stream return code (``errToStr`` when the module has it)."""
    to_str = getattr(soapy, "errToStr", None)
    if callable(to_str):
        try:
            return str(to_str(int(code)))
        except Exception:  # pragma: no cover - defensive: never fail while reporting
            pass
    return _ERROR_CODES.get(int(code), f"error {code}")


def _kwargs_dict(kw: Any) -> dict[str, str]:
    """A SoapySDR Kwargs (SWIG map) or plain mapping as a ``dict[str, str]``."""
    if isinstance(kw, Mapping):
        return {str(k): str(v) for k, v in kw.items()}
    items = getattr(kw, "items", None)
    if callable(items):
        return {str(k): str(v) for k, v in items()}
    return {"device": str(kw)}


def format_kwargs(kw: Mapping[str, str]) -> str:
    """``driver=x, label=y`` for a device's arguments, in a stable order."""
    first = [k for k in ("driver", "label", "serial") if k in kw]
    rest = sorted(k for k in kw if k not in first)
    return ", ".join(f"{k}={kw[k]}" for k in first + rest)


def list_devices(soapy: Any | None = None, args: str = "") -> list[dict[str, str]]:
    """The devices SoapySDR finds, each as its argument dictionary.

    Parameters
    ----------
    soapy : module, optional
        SoapySDR's module (default: import it).
    args : str
        Filter, in SoapySDR's ``key=value,key=value`` form (e.g. ``driver=NAME``).
    """
    soapy = load_soapy() if soapy is None else soapy
    try:
        found = soapy.Device.enumerate(args) if args else soapy.Device.enumerate()
    except Exception as exc:
        raise CaptureError(f"SoapySDR could not look for devices: {exc}") from exc
    return [_kwargs_dict(kw) for kw in found]


def open_device(soapy: Any, args: str) -> Any:
    """Open the device named by ``args`` (SoapySDR's ``key=value,...`` string)."""
    try:
        return soapy.Device(args)
    except Exception as exc:
        hint = "" if args else " (no --device given: SoapySDR took the first device it found)"
        raise CaptureError(f"cannot open receiver {args!r}{hint}: {exc}") from exc


def close_device(soapy: Any, device: Any) -> None:
    """Release a device (``Device.unmake``), never raising."""
    try:
        close = getattr(device, "close", None)
        if callable(close):
            close()
        else:
            soapy.Device.unmake(device)
    except Exception:  # pragma: no cover - closing must not hide the real outcome
        pass


def describe_device(device: Any) -> str:
    """A one-line description: driver, hardware key and the hardware information."""
    parts: list[str] = []
    for name, getter in (("driver", "getDriverKey"), ("hardware", "getHardwareKey")):
        fn = getattr(device, getter, None)
        if callable(fn):
            try:
                value = str(fn())
            except Exception:
                continue
            if value:
                parts.append(f"{name}={value}")
    fn = getattr(device, "getHardwareInfo", None)
    if callable(fn):
        try:
            info = _kwargs_dict(fn())
        except Exception:
            info = {}
        parts.extend(f"{k}={v}" for k, v in sorted(info.items()))
    return ", ".join(parts) or "unknown receiver"
