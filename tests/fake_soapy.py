"""A simulated SoapySDR module: the part of its Python Device API that iqscope uses.

``make_fake_soapy(...)`` returns a fresh module object that behaves like SoapySDR's
``SoapySDR`` module towards iqscope's capture code: ``Device(args)``,
``Device.enumerate(args)``, ``Device.unmake(dev)``, the device's settings calls, and
streaming with ``setupStream`` / ``activateStream`` / ``readStream`` (returning a
``StreamResult`` with ``ret``, ``flags``, ``timeNs``) / ``deactivateStream`` /
``closeStream``, in CF32 (complex64 buffer) or CS16 (interleaved int16 buffer) format.
Constants and error codes have the values of SoapySDR 0.8's ``Constants.h``,
``Formats.h`` and ``Errors.h``.

The simulated receiver "hears" a few steady lines at fixed RF frequencies (a synth-like
test signal), plus optional seeded Gaussian noise; tuning moves them in baseband. Scripted
read outcomes inject overflows (samples lost), timeouts and other error codes; a hook runs
on every read (e.g. to send SIGINT). Every sample handed to the caller is also kept in
``device.delivered`` so a test can compare the written file with what the device produced.
"""

from __future__ import annotations

import types
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

# SoapySDR/Constants.h, Formats.h, Errors.h (SoapySDR 0.8)
SOAPY_SDR_TX = 0
SOAPY_SDR_RX = 1
SOAPY_SDR_END_BURST = 1 << 1
SOAPY_SDR_HAS_TIME = 1 << 2
SOAPY_SDR_END_ABRUPT = 1 << 3
SOAPY_SDR_ONE_PACKET = 1 << 4
SOAPY_SDR_MORE_FRAGMENTS = 1 << 5
SOAPY_SDR_CF32 = "CF32"
SOAPY_SDR_CS16 = "CS16"
SOAPY_SDR_TIMEOUT = -1
SOAPY_SDR_STREAM_ERROR = -2
SOAPY_SDR_CORRUPTION = -3
SOAPY_SDR_OVERFLOW = -4
SOAPY_SDR_NOT_SUPPORTED = -5
SOAPY_SDR_TIME_ERROR = -6
SOAPY_SDR_UNDERFLOW = -7

_ERR_NAMES = {
    -1: "TIMEOUT",
    -2: "STREAM_ERROR",
    -3: "CORRUPTION",
    -4: "OVERFLOW",
    -5: "NOT_SUPPORTED",
    -6: "TIME_ERROR",
    -7: "UNDERFLOW",
}


def parse_args(args: Any) -> dict[str, str]:
    """SoapySDR's ``key=value,key=value`` string (or a mapping) as a dict."""
    if isinstance(args, Mapping):
        return {str(k): str(v) for k, v in args.items()}
    out: dict[str, str] = {}
    for part in str(args or "").split(","):
        if "=" in part:
            k, v = part.split("=", 1)
            out[k.strip()] = v.strip()
    return out


class StreamResult:
    """Like SoapySDR's ``StreamResult``: ``ret`` (samples or error code), ``flags``, ``timeNs``."""

    def __init__(self, ret: int, flags: int = 0, time_ns: int = 0) -> None:
        self.ret = ret
        self.flags = flags
        self.timeNs = time_ns
        self.chanMask = 0

    def __str__(self) -> str:
        return f"ret={self.ret}, flags={self.flags}, timeNs={self.timeNs}"


class _Stream:
    def __init__(self, fmt: str, channels: list[int]) -> None:
        self.format = fmt
        self.channels = channels
        self.active = False
        self.closed = False


def make_fake_soapy(
    *,
    lines: Sequence[tuple[float, float]] = ((7_101_500.0, 0.1),),
    noise_rms: float = 0.0,
    seed: int = 20261201,
    mtu: int = 4096,
    script: Mapping[int, int] | None = None,
    on_read: Callable[[int], None] | None = None,
    stall_after_reads: int | None = None,
    devices: Sequence[Mapping[str, str]] = ({"driver": "fake", "label": "simulated receiver",
                                             "serial": "0001"},),
    supports_streaming: bool = True,
    gain_range: tuple[float, float] = (0.0, 50.0),
    rate_quantum_hz: float | None = None,
    raise_on_open: str | None = None,
    fail_read: int | None = None,
) -> types.ModuleType:
    """Build a fresh simulated SoapySDR module.

    Parameters
    ----------
    lines : sequence of (rf_frequency_hz, amplitude)
        Steady lines the receiver hears (amplitude in full-scale units at the ADC).
    noise_rms : float
        RMS of complex Gaussian noise added (seeded), full-scale units.
    mtu : int
        Largest number of samples one read returns.
    script : mapping read index -> error code
        Reads (0-based, counting every readStream call) that return this code instead of
        samples; an OVERFLOW also skips ``mtu`` samples of the signal (samples lost).
    on_read : callable(read index), optional
        Called at the start of every read (e.g. to send SIGINT).
    stall_after_reads : int, optional
        From this read on, every read times out.
    supports_streaming : bool
        False: setupStream returns None and reads return NOT_SUPPORTED (like a device
        without streaming).
    rate_quantum_hz : float, optional
        The device rounds the sample rate to a multiple of this (to test read-back).
    raise_on_open : str, optional
        Device(args) raises RuntimeError with this text.
    fail_read : int, optional
        This read (0-based) raises RuntimeError, like a driver losing its device.
    """
    mod = types.ModuleType("SoapySDR")
    for name, value in globals().items():
        if name.startswith("SOAPY_SDR_"):
            setattr(mod, name, value)
    mod.StreamResult = StreamResult  # type: ignore[attr-defined]
    mod.errToStr = lambda code: _ERR_NAMES.get(int(code), "UNKNOWN")  # type: ignore[attr-defined]
    mod.opened = []  # type: ignore[attr-defined]
    mod.enumerate_calls = []  # type: ignore[attr-defined]
    script = dict(script or {})

    class Device:
        """The simulated receiver."""

        def __init__(self, args: Any = "") -> None:
            if raise_on_open:
                raise RuntimeError(raise_on_open)
            self.args = parse_args(args)
            self.calls: list[tuple[Any, ...]] = []
            self.rate = 2.048e6
            self.freq = 100e6
            self.gain = 20.0
            self.agc = True
            self.antenna = "RX"
            self.rng = np.random.default_rng(seed)
            self.sample_index = 0  # position in the simulated signal
            self.reads = 0
            self.delivered: list[np.ndarray] = []
            self.closed = False
            self.streams: list[_Stream] = []
            mod.opened.append(self)  # type: ignore[attr-defined]

        # -- discovery -----------------------------------------------------------------
        @staticmethod
        def enumerate(args: Any = "") -> list[dict[str, str]]:
            mod.enumerate_calls.append(args)  # type: ignore[attr-defined]
            want = parse_args(args)
            return [dict(d) for d in devices if all(d.get(k) == v for k, v in want.items())]

        @staticmethod
        def unmake(dev: Device) -> None:
            dev.closed = True

        def getDriverKey(self) -> str:
            return "fake"

        def getHardwareKey(self) -> str:
            return "simulated-receiver"

        def getHardwareInfo(self) -> dict[str, str]:
            return {"origin": "iqscope test suite", "serial": "0001"}

        # -- settings ------------------------------------------------------------------
        def setSampleRate(self, direction: int, ch: int, rate: float) -> None:
            self.calls.append(("setSampleRate", direction, ch, rate))
            if rate_quantum_hz:
                rate = round(rate / rate_quantum_hz) * rate_quantum_hz
            self.rate = float(rate)

        def getSampleRate(self, direction: int, ch: int) -> float:
            return self.rate

        def setFrequency(self, direction: int, ch: int, freq: float) -> None:
            self.calls.append(("setFrequency", direction, ch, freq))
            self.freq = float(freq)

        def getFrequency(self, direction: int, ch: int) -> float:
            return self.freq

        def hasGainMode(self, direction: int, ch: int) -> bool:
            return True

        def setGainMode(self, direction: int, ch: int, automatic: bool) -> None:
            self.calls.append(("setGainMode", direction, ch, automatic))
            self.agc = bool(automatic)

        def getGainMode(self, direction: int, ch: int) -> bool:
            return self.agc

        def setGain(self, direction: int, ch: int, value: float) -> None:
            self.calls.append(("setGain", direction, ch, value))
            lo, hi = gain_range
            self.gain = float(min(max(value, lo), hi))

        def getGain(self, direction: int, ch: int) -> float:
            return self.gain

        def listAntennas(self, direction: int, ch: int) -> tuple[str, ...]:
            return ("RX", "LOOP")

        def setAntenna(self, direction: int, ch: int, name: str) -> None:
            self.calls.append(("setAntenna", direction, ch, name))
            if name not in self.listAntennas(direction, ch):
                raise RuntimeError(f"unknown antenna {name}")
            self.antenna = name

        def getAntenna(self, direction: int, ch: int) -> str:
            return self.antenna

        # -- streaming -----------------------------------------------------------------
        def setupStream(self, direction: int, fmt: str, channels: list[int] | None = None,
                        args: Any = None) -> _Stream | None:
            self.calls.append(("setupStream", direction, fmt, list(channels or [0])))
            if not supports_streaming:
                return None
            if fmt not in (SOAPY_SDR_CF32, SOAPY_SDR_CS16):
                raise RuntimeError(f"format {fmt} not supported")
            stream = _Stream(fmt, list(channels or [0]))
            self.streams.append(stream)
            return stream

        def getStreamMTU(self, stream: _Stream) -> int:
            return mtu

        def activateStream(self, stream: _Stream, flags: int = 0, timeNs: int = 0,
                           numElems: int = 0) -> int:
            self.calls.append(("activateStream",))
            stream.active = True
            return 0

        def deactivateStream(self, stream: _Stream, flags: int = 0, timeNs: int = 0) -> int:
            self.calls.append(("deactivateStream",))
            stream.active = False
            return 0

        def closeStream(self, stream: _Stream) -> None:
            self.calls.append(("closeStream",))
            stream.closed = True

        def _signal(self, n: int) -> np.ndarray:
            t = (self.sample_index + np.arange(n)) / self.rate
            x = np.zeros(n, np.complex128)
            for rf, amp in lines:
                x += amp * np.exp(2j * np.pi * (rf - self.freq) * t)
            if noise_rms > 0:
                x += noise_rms / np.sqrt(2) * (self.rng.standard_normal(n)
                                               + 1j * self.rng.standard_normal(n))
            self.sample_index += n
            return x

        def readStream(self, stream: Any, buffs: list[np.ndarray], numElems: int,
                       flags: int = 0, timeoutUs: int = 100000) -> StreamResult:
            index = self.reads
            self.reads += 1
            if on_read is not None:
                on_read(index)
            if stream is None or not supports_streaming:
                return StreamResult(SOAPY_SDR_NOT_SUPPORTED)
            if not stream.active:
                return StreamResult(SOAPY_SDR_STREAM_ERROR)
            if fail_read is not None and index == fail_read:
                raise RuntimeError("device unplugged")
            if stall_after_reads is not None and index >= stall_after_reads:
                return StreamResult(SOAPY_SDR_TIMEOUT)
            if index in script:
                code = script[index]
                if code == SOAPY_SDR_OVERFLOW:
                    self._signal(mtu)  # these samples never reach the caller
                    return StreamResult(code, SOAPY_SDR_END_ABRUPT)
                return StreamResult(code)
            n = int(min(numElems, mtu))
            x = self._signal(n)
            buff = buffs[0]
            if stream.format == SOAPY_SDR_CS16:
                codes = np.clip(np.rint(np.stack([x.real, x.imag], 1).ravel() * 32768),
                                -32768, 32767).astype(np.int16)
                buff[: 2 * n] = codes
                delivered = (codes[0::2] + 1j * codes[1::2].astype(np.float64)) / 32768
            else:
                buff[:n] = x.astype(np.complex64)
                delivered = buff[:n].copy()
            self.delivered.append(np.asarray(delivered, np.complex64))
            return StreamResult(n, 0, int(self.sample_index / self.rate * 1e9))

        def close(self) -> None:
            self.closed = True

    mod.Device = Device  # type: ignore[attr-defined]
    return mod
