"""iqscope: transmit-quality measurements from I/Q recordings of a software-defined receiver.

Public API (also the index of the library)::

    open_recording(path, *, format=None, rate=None, center=None) -> Recording
    write_sigmf(path, samples, sample_rate_hz, ...) / write_wav(...)
    analyse(recording, AnalysisRequest(mode=..., carrier_hz=..., tone_hz=...)) -> Analysis
    load_limits(name_or_file) -> LimitsProfile
    grade(analysis, limits=None) -> GradeResult          # .to_json(), .exit_status

    from iqscope import synth                              # signals with known answers

Example (a DSB signal whose carrier leaks 30 dB below its sidebands)::

    >>> import iqscope
    >>> from iqscope import synth
    >>> spec = synth.SignalSpec(
    ...     synth.Dsb(synth.Tone(1000.0), carrier_leak_dbc=-30.0),
    ...     frequency=synth.FrequencyPlan(carrier_offset_hz=3000.0),
    ...     noise_dbfs_per_hz=-120.0, sample_rate_hz=24000.0, duration_s=2.0, seed=1)
    >>> rec = iqscope.ArrayRecording(synth.synthesize(spec), 24000.0)
    >>> a = iqscope.analyse(rec, iqscope.AnalysisRequest(mode="dsb"))
    >>> round(a.measurements["carrier_suppression_db"].value, 1)
    30.0

Names are imported on first use so that ``iqscope --help`` starts quickly.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

from .errors import IqscopeError

_WHERE = {
    "open_recording": "iqscope.io",
    "write_sigmf": "iqscope.io",
    "write_wav": "iqscope.io",
    "Recording": "iqscope.io",
    "ArrayRecording": "iqscope.io",
    "analyse": "iqscope.measure",
    "AnalysisRequest": "iqscope.measure",
    "Analysis": "iqscope.measure",
    "Measurement": "iqscope.measure",
    "load_limits": "iqscope.grading",
    "grade": "iqscope.grading",
    "GradeResult": "iqscope.grading",
    "LimitsProfile": "iqscope.grading",
    "synth": None,
}

__all__ = ["__version__", "IqscopeError", *sorted(_WHERE)]


def __getattr__(name: str) -> Any:
    if name not in _WHERE:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    where = _WHERE[name]
    value = importlib.import_module(f"{__name__}.{name}") if where is None else getattr(
        importlib.import_module(where), name
    )
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)
