"""The capture loop: configure a SoapySDR receiver, stream, and write SigMF as it goes.

:func:`capture_to_sigmf` opens the device, sets rate, frequency, antenna and a fixed gain
(automatic gain control off, so levels stay comparable), streams ``seconds`` of samples
through :func:`iqscope.io.write_sigmf` block by block (nothing is held in memory), and
records what happened on the way: overflows (samples lost because the computer did not
keep up), read timeouts and other stream errors. Each overflow or stream error is also
marked by an annotation at the sample where the loss happened.

Ctrl-C (SIGINT) stops the capture cleanly: the samples read so far are written as a
valid recording, marked ``iqscope:interrupted``. A second Ctrl-C aborts at once.

The device is reached through a module-like object (``soapy``): SoapySDR's own module, or
a simulated one in the tests.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import math
import signal
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from types import FrameType
from typing import Any, Final, Literal

import numpy as np
import numpy.typing as npt

from ..errors import CaptureError
from ..io._recording import Annotation
from ._soapy import close_device, const, describe_device, error_name, load_soapy, open_device

__all__ = [
    "StreamFormat",
    "CaptureSettings",
    "CaptureResult",
    "capture_to_sigmf",
    "EXTENSION_NAME",
    "EXTENSION_VERSION",
]

#: Sample format asked of the driver: complex float32 or complex int16 (``SOAPY_SDR_CF32``,
#: ``SOAPY_SDR_CS16``). CS16 is written as SigMF ``ci16_le`` (lossless, half the size).
StreamFormat = Literal["CF32", "CS16"]

#: Our SigMF extension namespace, declared in ``core:extensions`` of every capture.
EXTENSION_NAME: Final = "iqscope"
EXTENSION_VERSION: Final = "1.0.0"

#: Called with (samples done, samples wanted, overflows so far).
CaptureProgress = Callable[[int, int, int], None]

_CS16_SCALE: Final = 1.0 / 32768.0  # SigMF / sigmf-python autoscale of ci16: x / 2**15


@dataclass(frozen=True)
class CaptureSettings:
    """What to capture, and from which receiver."""

    frequency_hz: float
    """Receiver centre frequency, Hz."""
    sample_rate_hz: float
    """Sample rate, Hz."""
    seconds: float
    """Length of the capture, s."""
    device_args: str = ""
    """SoapySDR device arguments, ``key=value,...`` (empty: the first device found)."""
    gain_db: float | None = None
    """Overall receiver gain, dB; None keeps the driver's present gain (AGC is off either way)."""
    antenna: str | None = None
    """Antenna port name; None keeps the driver's default."""
    channel: int = 0
    """Receive channel."""
    stream_format: StreamFormat = "CF32"
    """Sample format asked of the driver."""
    block_samples: int = 65536
    """Largest read, samples (the driver's MTU may make reads smaller)."""
    read_timeout_s: float = 1.0
    """Timeout of one read, s."""
    stall_timeout_s: float = 5.0
    """Stop when the device delivers nothing for this long, s."""
    description: str = ""
    """``core:description`` of the recording."""
    extra_metadata: dict[str, Any] = field(default_factory=dict)
    """More global keys to store (namespaced, e.g. ``iqscope:attenuation_db``)."""

    def __post_init__(self) -> None:
        for name in ("frequency_hz", "sample_rate_hz", "seconds"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise ValueError(f"{name}={value!r} must be a positive number")
        if self.gain_db is not None and not math.isfinite(self.gain_db):
            raise ValueError(f"gain_db={self.gain_db!r} must be finite")
        if self.channel < 0:
            raise ValueError(f"channel={self.channel!r} must be >= 0")
        if self.stream_format not in ("CF32", "CS16"):
            raise ValueError(f"stream_format={self.stream_format!r} must be 'CF32' or 'CS16'")
        if self.block_samples < 1:
            raise ValueError(f"block_samples={self.block_samples!r} must be >= 1")
        if not (self.read_timeout_s > 0 and self.stall_timeout_s > 0):
            raise ValueError("read_timeout_s and stall_timeout_s must be > 0")


@dataclass(frozen=True)
class CaptureResult:
    """What a capture produced."""

    path: Path
    """The ``.sigmf-meta`` file written."""
    n_samples: int
    """Samples written."""
    requested_samples: int
    """Samples asked for (``seconds x rate``)."""
    sample_rate_hz: float
    """Sample rate the device reported after setting it, Hz."""
    center_frequency_hz: float
    """Centre frequency the device reported after tuning, Hz."""
    gain_db: float | None
    """Gain the device reported, dB (None when it could not say)."""
    device: str
    """Receiver description (driver, hardware key, hardware information)."""
    started_utc: str
    """UTC time of the first sample (approximately: when the stream was activated)."""
    overflows: int
    """Reads that reported an overflow (samples lost)."""
    timeouts: int
    """Reads that timed out (no samples within ``read_timeout_s``)."""
    stream_errors: int
    """Reads that reported another stream error (corruption, time error ...)."""
    interrupted: bool
    """True when Ctrl-C (or the stop callback) ended the capture early."""
    stalled: bool
    """True when the device stopped delivering samples and the capture ended early."""
    warnings: tuple[str, ...] = ()
    """Soft problems (rate or frequency set differently from the request ...)."""

    @property
    def duration_s(self) -> float:
        """Length of the recording, s."""
        return self.n_samples / self.sample_rate_hz

    @property
    def complete(self) -> bool:
        """All requested samples were written, with no loss."""
        return (
            self.n_samples >= self.requested_samples
            and self.overflows == 0
            and self.stream_errors == 0
        )


class _StopOnSigint:
    """Turn the first SIGINT into a stop request; a second one raises KeyboardInterrupt."""

    def __init__(self) -> None:
        self.requested = False
        self._previous: Any = None
        self._installed = False

    def _handler(self, signum: int, frame: FrameType | None) -> None:
        if self.requested:
            raise KeyboardInterrupt
        self.requested = True

    def __enter__(self) -> _StopOnSigint:
        if threading.current_thread() is threading.main_thread():
            try:
                self._previous = signal.signal(signal.SIGINT, self._handler)
                self._installed = True
            except ValueError:  # pragma: no cover - not the main interpreter
                self._installed = False
        return self

    def __exit__(self, *exc: object) -> None:
        if self._installed:
            signal.signal(signal.SIGINT, self._previous)


def _call(what: str, fn: Callable[..., Any], *args: Any) -> Any:
    """Call a device method, turning the driver's exception into a CaptureError."""
    try:
        return fn(*args)
    except Exception as exc:
        raise CaptureError(f"the receiver refused to {what}: {exc}") from exc


def _try_get(fn: Callable[..., Any] | None, *args: Any) -> Any:
    if fn is None:
        return None
    try:
        return fn(*args)
    except Exception:
        return None


def _finite(value: Any) -> float | None:
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


def capture_to_sigmf(
    settings: CaptureSettings,
    output: str | Path,
    *,
    soapy: Any | None = None,
    force: bool = False,
    progress: CaptureProgress | None = None,
    should_stop: Callable[[], bool] | None = None,
    now: Callable[[], _dt.datetime] | None = None,
) -> CaptureResult:
    """Capture from a SoapySDR receiver into a SigMF recording.

    Parameters
    ----------
    settings : CaptureSettings
        Frequency, rate, gain, antenna, length and device.
    output : path-like
        SigMF base name or either file name (``.sigmf-meta`` / ``.sigmf-data``).
    soapy : module, optional
        SoapySDR's module or an object with the same calls (default: import SoapySDR).
    force : bool
        Overwrite existing output files.
    progress : callable, optional
        ``progress(done, wanted, overflows)`` after every read.
    should_stop : callable, optional
        Polled after every read; returning True ends the capture like Ctrl-C.
    now : callable, optional
        Clock returning an aware UTC datetime (tests).

    Returns
    -------
    CaptureResult

    Raises
    ------
    CaptureError
        SoapySDR missing, device not found or refusing a setting, stream not set up, or no
        samples at all. A device that stalls after delivering samples ends the capture with
        ``stalled=True`` (the samples before the stall are kept).
    OutputError
        The output exists (without ``force``) or cannot be written.
    """
    from ..io import write_sigmf
    from ..io._atomic import check_can_write
    from ..io._sigmf import sigmf_paths

    meta_path, data_path = sigmf_paths(output)
    check_can_write(meta_path, force=force)  # before touching the device
    check_can_write(data_path, force=force)
    soapy = load_soapy() if soapy is None else soapy
    clock = now or (lambda: _dt.datetime.now(_dt.timezone.utc))

    rx = const(soapy, "SOAPY_SDR_RX", 1)
    timeout_code = const(soapy, "SOAPY_SDR_TIMEOUT", -1)
    overflow_code = const(soapy, "SOAPY_SDR_OVERFLOW", -4)
    not_supported = const(soapy, "SOAPY_SDR_NOT_SUPPORTED", -5)
    fmt_name = const(soapy, f"SOAPY_SDR_{settings.stream_format}", settings.stream_format)
    ch = settings.channel
    warnings: list[str] = []

    device = open_device(soapy, settings.device_args)
    stream: Any = None
    active = False
    try:
        description = describe_device(device)
        # -- configure: rate, frequency, antenna, fixed gain (AGC off) ---------------------
        _call("set the sample rate", device.setSampleRate, rx, ch, float(settings.sample_rate_hz))
        _call("tune", device.setFrequency, rx, ch, float(settings.frequency_hz))
        if settings.antenna is not None:
            antennas = _try_get(getattr(device, "listAntennas", None), rx, ch)
            if antennas is not None and len(antennas) and settings.antenna not in list(antennas):
                raise CaptureError(
                    f"the receiver has no antenna {settings.antenna!r} "
                    f"(it has: {', '.join(map(str, antennas))})"
                )
            _call("select the antenna", device.setAntenna, rx, ch, settings.antenna)
        has_gain_mode = _try_get(getattr(device, "hasGainMode", None), rx, ch)
        if has_gain_mode:
            _call("turn automatic gain control off", device.setGainMode, rx, ch, False)
        if settings.gain_db is not None:
            _call("set the gain", device.setGain, rx, ch, float(settings.gain_db))

        rate = _finite(_try_get(getattr(device, "getSampleRate", None), rx, ch))
        if rate is None or rate <= 0:
            rate = float(settings.sample_rate_hz)
        elif abs(rate - settings.sample_rate_hz) > 1e-6 * settings.sample_rate_hz:
            warnings.append(
                f"the receiver runs at {rate:g} samples/s, not the {settings.sample_rate_hz:g} "
                "asked for; the recording says so"
            )
        freq = _finite(_try_get(getattr(device, "getFrequency", None), rx, ch))
        if freq is None or freq <= 0:
            freq = float(settings.frequency_hz)
        elif abs(freq - settings.frequency_hz) > 1.0:
            warnings.append(
                f"the receiver tuned to {freq:.1f} Hz, not {settings.frequency_hz:.1f} Hz; "
                "the recording says so"
            )
        gain = _finite(_try_get(getattr(device, "getGain", None), rx, ch))
        if settings.gain_db is None and gain is None:
            warnings.append("the receiver did not report its gain: calibrations cannot check it")
        antenna = _try_get(getattr(device, "getAntenna", None), rx, ch)

        # -- stream ---------------------------------------------------------------------
        stream = _call("set up a receive stream", device.setupStream, rx, fmt_name, [ch])
        if stream is None:
            raise CaptureError(
                f"the receiver's driver gave no receive stream for {settings.stream_format} "
                "samples (streaming not supported)"
            )
        mtu = _try_get(getattr(device, "getStreamMTU", None), stream)
        block = int(settings.block_samples)
        if isinstance(mtu, int) and mtu > 0:
            block = min(block, max(mtu, 1))
        requested = max(1, int(round(settings.seconds * rate)))
        if settings.stream_format == "CS16":
            buff: npt.NDArray[Any] = np.zeros(2 * block, np.int16)
            datatype = "ci16_le"
        else:
            buff = np.zeros(block, np.complex64)
            datatype = "cf32_le"
        timeout_us = int(settings.read_timeout_s * 1e6)
        max_idle_reads = max(1, int(math.ceil(settings.stall_timeout_s / settings.read_timeout_s)))

        ret = _call("start streaming", device.activateStream, stream)
        active = True
        if isinstance(ret, int) and ret < 0:
            raise CaptureError(f"the receiver could not start streaming ({error_name(soapy, ret)})")
        started = clock()

        counts = {"overflows": 0, "timeouts": 0, "stream_errors": 0}
        state = {"done": 0, "interrupted": False, "stalled": False}
        annotations: list[Annotation] = []
        failure: list[str] = []
        extra: dict[str, Any] = {
            "core:extensions": [
                {"name": EXTENSION_NAME, "version": EXTENSION_VERSION, "optional": True}
            ],
            "core:hw": description,
            "iqscope:device_args": settings.device_args,
            "iqscope:channel": ch,
            "iqscope:stream_format": settings.stream_format,
            "iqscope:gain_mode": "manual",
            "iqscope:requested_sample_rate_hz": float(settings.sample_rate_hz),
            "iqscope:requested_frequency_hz": float(settings.frequency_hz),
            "iqscope:requested_seconds": float(settings.seconds),
        }
        if gain is not None:
            extra["iqscope:gain_db"] = gain
        elif settings.gain_db is not None:
            extra["iqscope:gain_db"] = float(settings.gain_db)
        if antenna is not None:
            extra["iqscope:antenna"] = str(antenna)
        extra.update(settings.extra_metadata)

        def mark(kind: str, comment: str) -> None:
            annotations.append(Annotation(start=state["done"], label=kind, comment=comment))

        stop = _StopOnSigint()

        def read_one() -> npt.NDArray[np.complex64] | None:
            """One block of new samples, or None when the capture should end."""
            idle = 0
            while True:
                if stop.requested or (should_stop is not None and should_stop()):
                    state["interrupted"] = True
                    return None
                want = min(block, requested - state["done"])
                if want <= 0:
                    return None
                try:
                    sr = device.readStream(stream, [buff], want, timeoutUs=timeout_us)
                    n = int(getattr(sr, "ret", sr))
                except Exception as exc:  # a driver failing mid-stream (e.g. unplugged)
                    failure.append(f"reading from the receiver failed: {exc}")
                    state["stalled"] = True
                    return None
                if n > 0:
                    n = min(n, want)
                    if settings.stream_format == "CS16":
                        raw = buff[: 2 * n].astype(np.float32)
                        out = np.empty(n, np.complex64)
                        out.real = raw[0::2] * _CS16_SCALE
                        out.imag = raw[1::2] * _CS16_SCALE
                    else:
                        out = buff[:n].copy()
                    return out
                if n == timeout_code:
                    counts["timeouts"] += 1
                    idle += 1
                elif n == overflow_code:
                    counts["overflows"] += 1
                    mark("overflow", "receiver overflow: samples were lost here")
                    idle = 0
                elif n == not_supported:
                    raise CaptureError(
                        "the receiver's driver does not support reading this stream "
                        f"({error_name(soapy, n)})"
                    )
                elif n < 0:
                    counts["stream_errors"] += 1
                    mark("stream error", f"stream error {error_name(soapy, n)}: samples may be lost")
                    idle += 1
                else:  # 0 samples without an error code: treat like a timeout
                    idle += 1
                if idle >= max_idle_reads:
                    state["stalled"] = True
                    return None

        def blocks(first: npt.NDArray[np.complex64]) -> Iterator[npt.NDArray[np.complex64]]:
            current: npt.NDArray[np.complex64] | None = first
            while current is not None:
                state["done"] += current.size
                if progress is not None:
                    progress(state["done"], requested, counts["overflows"])
                yield current
                current = read_one()
            # final counts go into the metadata, written after the data
            extra["iqscope:overflows"] = counts["overflows"]
            extra["iqscope:timeouts"] = counts["timeouts"]
            extra["iqscope:stream_errors"] = counts["stream_errors"]
            extra["iqscope:interrupted"] = bool(state["interrupted"])
            extra["iqscope:stalled"] = bool(state["stalled"])

        with stop:
            first = read_one()
            if first is None:
                if state["interrupted"]:
                    raise KeyboardInterrupt
                if failure:
                    raise CaptureError(failure[0])
                raise CaptureError(
                    f"the receiver delivered no samples within {settings.stall_timeout_s:g} s "
                    f"({counts['timeouts']} read timeouts, {counts['overflows']} overflows, "
                    f"{counts['stream_errors']} stream errors)"
                )
            extra["iqscope:overflows"] = 0  # placeholders keep the key order stable
            extra["iqscope:timeouts"] = 0
            extra["iqscope:stream_errors"] = 0
            extra["iqscope:interrupted"] = False
            extra["iqscope:stalled"] = False
            meta = write_sigmf(
                meta_path,
                blocks(first),
                rate,
                center_frequency_hz=freq,
                datatype=datatype,
                description=settings.description,
                datetime=started,
                extra_global=extra,
                annotations=annotations,
                force=force,
            )
    finally:
        if stream is not None:
            if active:
                _try_get(getattr(device, "deactivateStream", None), stream)
            _try_get(getattr(device, "closeStream", None), stream)
        close_device(soapy, device)

    result = CaptureResult(
        path=Path(meta),
        n_samples=int(state["done"]),
        requested_samples=requested,
        sample_rate_hz=rate,
        center_frequency_hz=freq,
        gain_db=gain if gain is not None else settings.gain_db,
        device=description,
        started_utc=started.astimezone(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ"),
        overflows=counts["overflows"],
        timeouts=counts["timeouts"],
        stream_errors=counts["stream_errors"],
        interrupted=bool(state["interrupted"]),
        stalled=bool(state["stalled"]),
        warnings=tuple(warnings),
    )
    if result.stalled:
        why = failure[0] if failure else f"nothing for {settings.stall_timeout_s:g} s"
        warnings.append(
            f"the receiver stopped delivering samples after {result.duration_s:.2f} s "
            f"({why}); the samples read so far are saved"
        )
        result = dataclasses.replace(result, warnings=tuple(warnings))
    return result
