"""Optional live capture from a software-defined receiver through SoapySDR.

SoapySDR's Python module comes from the system package manager, not the Python package
index; it is imported lazily, inside functions of this package only, so the rest of
iqscope works without it. Every device function takes the module (or a simulated one)
as an argument.

Public API:

* :func:`capture_to_sigmf` with :class:`CaptureSettings` -> :class:`CaptureResult`
* :func:`list_devices`, :func:`load_soapy`, :func:`soapy_available`, :data:`INSTALL_HINT`
* :func:`assess_input_level` -> :class:`InputLevel`, :func:`check_input_level`
"""

from __future__ import annotations

from ._loop import CaptureResult, CaptureSettings, StreamFormat, capture_to_sigmf
from ._safety import (
    COMFORT_DBM,
    DAMAGE_DBM,
    LINEAR_MAX_DBM,
    InputLevel,
    assess_input_level,
    check_input_level,
)
from ._soapy import INSTALL_HINT, format_kwargs, list_devices, load_soapy, soapy_available

__all__ = [
    "CaptureResult",
    "CaptureSettings",
    "StreamFormat",
    "capture_to_sigmf",
    "INSTALL_HINT",
    "format_kwargs",
    "list_devices",
    "load_soapy",
    "soapy_available",
    "COMFORT_DBM",
    "DAMAGE_DBM",
    "LINEAR_MAX_DBM",
    "InputLevel",
    "assess_input_level",
    "check_input_level",
]
