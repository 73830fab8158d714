"""Live capture through SoapySDR: the loop against a simulated device, the safety check,
the commands, and the real SoapySDR library when it is importable.

Outside references used:
- SoapySDR 0.8 ``include/SoapySDR/Errors.h`` (TIMEOUT -1, STREAM_ERROR -2, CORRUPTION -3,
  OVERFLOW -4, NOT_SUPPORTED -5), ``Constants.h`` (SOAPY_SDR_RX 1), ``Formats.h`` ("CF32",
  "CS16"); the Python binding's ``readStream(stream, buffs, numElems, flags=0,
  timeoutUs=100000)`` returning ``StreamResult`` (``swig/python/SoapySDR.in.i``).
- The ``sigmf`` package (1.14) as the reference reader and validator of the written files
  (JSON schema of the SigMF specification; ci16 autoscale x / 32768).
- dBm = 10 log10(P / 1 mW) (definition); receiver input levels of REFERENCES.md item 11
  (common practice: <= -20 dBm linear, about +10 dBm absolute maximum; computed there:
  1 W needs 50 dB, 5 W 57 dB, 100 W 70 dB to reach -20 dBm).
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path
from typing import Any

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from fake_soapy import make_fake_soapy  # noqa: E402

from iqscope.capture import (  # noqa: E402
    INSTALL_HINT,
    CaptureSettings,
    assess_input_level,
    capture_to_sigmf,
    check_input_level,
    list_devices,
    load_soapy,
)
from iqscope.capture._soapy import close_device, describe_device  # noqa: E402
from iqscope.cli import main  # noqa: E402
from iqscope.errors import EXIT_ERROR, EXIT_INTERRUPTED, CaptureError, OutputError  # noqa: E402

import sigmf  # noqa: E402  (a test dependency, pyproject.toml [test])

FS = 48_000.0
FC = 7_100_000.0
#: A synth-like test signal the simulated receiver hears: two equal lines 1 kHz apart
#: (a two-tone test), 1.5 kHz and 2.5 kHz above the tuned centre.
TWO_TONE = ((FC + 1_500.0, 0.1), (FC + 2_500.0, 0.1))


def _settings(**kw: Any) -> CaptureSettings:
    base: dict[str, Any] = dict(frequency_hz=FC, sample_rate_hz=FS, seconds=0.5, gain_db=12.0)
    base.update(kw)
    return CaptureSettings(**base)


def _read_sigmf(meta: Path) -> tuple[Any, np.ndarray]:
    handle = sigmf.fromfile(str(meta))
    handle.validate()  # raises on a schema violation
    return handle, handle.read_samples()


# ----------------------------------------------------------------------------------------
# the capture loop against the simulated device
# ----------------------------------------------------------------------------------------
class TestCaptureLoop:
    def test_cf32_capture_validates_and_holds_what_the_device_produced(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy(lines=TWO_TONE, noise_rms=1e-3)
        result = capture_to_sigmf(_settings(), tmp_path / "cap", soapy=soapy)
        dev = soapy.opened[0]
        assert result.n_samples == result.requested_samples == int(0.5 * FS)
        assert result.complete and not result.interrupted and not result.stalled
        handle, samples = _read_sigmf(result.path)
        delivered = np.concatenate(dev.delivered)
        # cf32 is stored bit for bit
        np.testing.assert_array_equal(samples.astype(np.complex64), delivered)
        glob = handle.get_global_info()
        assert glob["core:datatype"] == "cf32_le"
        assert glob["core:sample_rate"] == FS
        assert glob["iqscope:gain_db"] == 12.0
        assert glob["iqscope:overflows"] == 0 and glob["iqscope:timeouts"] == 0
        assert {"name": "iqscope", "version": "1.0.0", "optional": True} in glob["core:extensions"]
        assert "simulated-receiver" in glob["core:hw"]
        cap = handle.get_capture_info(0)
        assert cap["core:frequency"] == FC
        assert cap["core:datetime"].endswith("Z")

    def test_device_is_configured_with_agc_off_and_released(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy()
        capture_to_sigmf(_settings(antenna="LOOP", channel=0), tmp_path / "cap", soapy=soapy)
        dev = soapy.opened[0]
        rx = 1  # SOAPY_SDR_RX, SoapySDR/Constants.h
        assert ("setSampleRate", rx, 0, FS) in dev.calls
        assert ("setFrequency", rx, 0, FC) in dev.calls
        assert ("setGainMode", rx, 0, False) in dev.calls  # automatic gain control off
        assert ("setGain", rx, 0, 12.0) in dev.calls
        assert ("setAntenna", rx, 0, "LOOP") in dev.calls
        assert ("setupStream", rx, "CF32", [0]) in dev.calls
        names = [c[0] for c in dev.calls]
        # gain mode off before the gain is set, stream torn down in order, device closed
        assert names.index("setGainMode") < names.index("setGain")
        assert names[-3:] == ["activateStream", "deactivateStream", "closeStream"]
        assert dev.closed

    def test_cs16_stream_is_converted_and_stored_losslessly(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy(lines=TWO_TONE, noise_rms=2e-3)
        result = capture_to_sigmf(_settings(stream_format="CS16"), tmp_path / "cap", soapy=soapy)
        handle, samples = _read_sigmf(result.path)
        assert handle.get_global_info()["core:datatype"] == "ci16_le"
        # the device produced int16 codes c; sigmf's autoscale reads c / 32768 (REFERENCES 10)
        delivered = np.concatenate(soapy.opened[0].delivered)
        np.testing.assert_array_equal(samples.astype(np.complex64), delivered)
        # and the two lines are where the receiver put them: FFT peaks at +1.5 / +2.5 kHz
        n = 4800
        spec = np.abs(np.fft.fft(samples[:n]))
        freqs = np.fft.fftfreq(n, 1 / FS)
        top = sorted(freqs[np.argsort(spec)[-2:]])
        assert top == pytest.approx([1500.0, 2500.0])

    def test_iqscope_reader_reads_the_capture(self, tmp_path: Path) -> None:
        from iqscope.io import open_recording

        soapy = make_fake_soapy(lines=TWO_TONE)
        result = capture_to_sigmf(_settings(stream_format="CS16"), tmp_path / "cap", soapy=soapy)
        with open_recording(result.path) as rec:
            assert rec.sample_rate_hz == FS and rec.center_frequency_hz == FC
            np.testing.assert_array_equal(rec.read(), np.concatenate(soapy.opened[0].delivered))

    def test_overflow_timeout_and_stream_errors_are_counted_and_marked(self, tmp_path: Path) -> None:
        # read 2 overflows (samples lost), read 3 times out, read 5 reports corruption
        soapy = make_fake_soapy(mtu=4096, script={2: -4, 3: -1, 5: -3})
        result = capture_to_sigmf(_settings(), tmp_path / "cap", soapy=soapy)
        assert (result.overflows, result.timeouts, result.stream_errors) == (1, 1, 1)
        assert result.n_samples == result.requested_samples
        assert not result.complete
        handle, samples = _read_sigmf(result.path)
        glob = handle.get_global_info()
        assert (glob["iqscope:overflows"], glob["iqscope:timeouts"],
                glob["iqscope:stream_errors"]) == (1, 1, 1)
        ann = handle.get_annotations()
        # two good reads of 4096 came before the overflow; two more before the corruption
        assert [(a["core:sample_start"], a["core:label"]) for a in ann] == [
            (8192, "overflow"), (12288, "stream error")]
        np.testing.assert_array_equal(samples.astype(np.complex64),
                                      np.concatenate(soapy.opened[0].delivered))

    def test_sigint_stops_cleanly_with_a_valid_file(self, tmp_path: Path) -> None:
        def ctrl_c(index: int) -> None:
            if index == 3:
                os.kill(os.getpid(), signal.SIGINT)

        soapy = make_fake_soapy(mtu=1000, on_read=ctrl_c)
        before = signal.getsignal(signal.SIGINT)
        result = capture_to_sigmf(_settings(seconds=10.0), tmp_path / "cap", soapy=soapy)
        assert signal.getsignal(signal.SIGINT) is before  # handler restored
        assert result.interrupted
        assert result.n_samples == 4000  # reads 0..3, each 1000 samples
        handle, samples = _read_sigmf(result.path)
        assert samples.size == 4000
        assert handle.get_global_info()["iqscope:interrupted"] is True
        assert soapy.opened[0].closed

    def test_second_sigint_aborts_without_leaving_files(self, tmp_path: Path) -> None:
        def ctrl_c_twice(index: int) -> None:
            if index == 2:
                os.kill(os.getpid(), signal.SIGINT)
                os.kill(os.getpid(), signal.SIGINT)

        soapy = make_fake_soapy(mtu=1000, on_read=ctrl_c_twice)
        with pytest.raises(KeyboardInterrupt):
            capture_to_sigmf(_settings(seconds=10.0), tmp_path / "cap", soapy=soapy)
        assert list(tmp_path.iterdir()) == []
        assert soapy.opened[0].closed

    def test_should_stop_callback_ends_capture(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy(mtu=1000)
        calls = {"n": 0}

        def stop() -> bool:
            calls["n"] += 1
            return calls["n"] > 2

        result = capture_to_sigmf(_settings(seconds=10.0), tmp_path / "cap", soapy=soapy,
                                  should_stop=stop)
        assert result.interrupted and result.n_samples == 2000

    def test_stall_keeps_samples_so_far(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy(mtu=1000, stall_after_reads=3)
        settings = _settings(seconds=10.0, read_timeout_s=0.1, stall_timeout_s=0.5)
        result = capture_to_sigmf(settings, tmp_path / "cap", soapy=soapy)
        assert result.stalled and result.n_samples == 3000
        assert result.timeouts == 5  # 0.5 s of 0.1 s timeouts
        assert any("stopped delivering" in w for w in result.warnings)
        _read_sigmf(result.path)

    def test_driver_failure_mid_stream_keeps_samples_so_far(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy(mtu=1000, fail_read=2)
        result = capture_to_sigmf(_settings(seconds=10.0), tmp_path / "cap", soapy=soapy)
        assert result.stalled and result.n_samples == 2000
        assert any("device unplugged" in w for w in result.warnings)
        _read_sigmf(result.path)
        with pytest.raises(CaptureError, match="device unplugged"):
            capture_to_sigmf(_settings(), tmp_path / "cap2",
                             soapy=make_fake_soapy(fail_read=0))
        assert not (tmp_path / "cap2.sigmf-meta").exists()

    def test_no_samples_at_all_is_an_error_and_writes_nothing(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy(stall_after_reads=0)
        settings = _settings(read_timeout_s=0.1, stall_timeout_s=0.3)
        with pytest.raises(CaptureError, match="no samples"):
            capture_to_sigmf(settings, tmp_path / "cap", soapy=soapy)
        assert list(tmp_path.iterdir()) == []
        assert soapy.opened[0].closed

    def test_driver_without_streaming(self, tmp_path: Path) -> None:
        soapy = make_fake_soapy(supports_streaming=False)
        with pytest.raises(CaptureError, match="no receive stream"):
            capture_to_sigmf(_settings(), tmp_path / "cap", soapy=soapy)
        assert list(tmp_path.iterdir()) == []

    def test_existing_output_refused_before_opening_the_device(self, tmp_path: Path) -> None:
        (tmp_path / "cap.sigmf-data").write_bytes(b"keep me")
        soapy = make_fake_soapy()
        with pytest.raises(OutputError):
            capture_to_sigmf(_settings(), tmp_path / "cap", soapy=soapy)
        assert soapy.opened == []
        assert (tmp_path / "cap.sigmf-data").read_bytes() == b"keep me"
        result = capture_to_sigmf(_settings(), tmp_path / "cap", soapy=soapy, force=True)
        assert result.n_samples > 0

    def test_unknown_antenna_and_unopenable_device(self, tmp_path: Path) -> None:
        with pytest.raises(CaptureError, match="no antenna 'SKY'"):
            capture_to_sigmf(_settings(antenna="SKY"), tmp_path / "a", soapy=make_fake_soapy())
        with pytest.raises(CaptureError, match="cannot open receiver"):
            capture_to_sigmf(_settings(), tmp_path / "b",
                             soapy=make_fake_soapy(raise_on_open="no such device"))
        assert list(tmp_path.iterdir()) == []

    def test_rate_read_back_from_the_device(self, tmp_path: Path) -> None:
        # the device can only make multiples of 1 kHz: 48.4 kHz becomes 48 kHz
        soapy = make_fake_soapy(rate_quantum_hz=1000.0)
        result = capture_to_sigmf(_settings(sample_rate_hz=48_400.0), tmp_path / "c", soapy=soapy)
        assert result.sample_rate_hz == 48_000.0
        assert any("48000" in w for w in result.warnings)
        handle, _ = _read_sigmf(result.path)
        assert handle.get_global_info()["core:sample_rate"] == 48_000.0
        assert handle.get_global_info()["iqscope:requested_sample_rate_hz"] == 48_400.0

    def test_progress_callback(self, tmp_path: Path) -> None:
        seen: list[tuple[int, int, int]] = []
        capture_to_sigmf(_settings(seconds=0.25), tmp_path / "c", soapy=make_fake_soapy(mtu=3000),
                         progress=lambda d, w, o: seen.append((d, w, o)))
        assert seen[-1] == (12000, 12000, 0)
        assert [s[0] for s in seen] == sorted(s[0] for s in seen)

    def test_settings_validation(self) -> None:
        for bad in ({"seconds": 0}, {"sample_rate_hz": -1}, {"frequency_hz": math.nan},
                    {"stream_format": "CU8"}, {"channel": -1}):
            with pytest.raises(ValueError):
                _settings(**bad)


# ----------------------------------------------------------------------------------------
# device discovery and SoapySDR being absent
# ----------------------------------------------------------------------------------------
def test_list_devices_with_filter() -> None:
    soapy = make_fake_soapy(devices=({"driver": "fake", "serial": "1"},
                                     {"driver": "other", "serial": "2"}))
    assert [d["serial"] for d in list_devices(soapy)] == ["1", "2"]
    assert list_devices(soapy, "driver=other") == [{"driver": "other", "serial": "2"}]


def test_describe_device() -> None:
    dev = make_fake_soapy().Device("")
    assert describe_device(dev) == (
        "driver=fake, hardware=simulated-receiver, origin=iqscope test suite, serial=0001")


def test_load_soapy_absent_says_how_to_install(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "SoapySDR", None)  # makes the import fail
    with pytest.raises(CaptureError) as info:
        load_soapy()
    assert str(info.value) == INSTALL_HINT
    assert "package manager" in INSTALL_HINT and "python3-soapysdr" in INSTALL_HINT


@pytest.mark.parametrize("argv", [
    ["devices"],
    ["capture", "--freq", "7.1M", "--rate", "48k", "--seconds", "1", "-o", "OUT"],
])
def test_commands_without_soapysdr_exit_5(argv: list[str], tmp_path: Path,
                                          monkeypatch: pytest.MonkeyPatch,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setitem(sys.modules, "SoapySDR", None)
    argv = [str(tmp_path / "x") if a == "OUT" else a for a in argv]
    assert main(argv) == EXIT_ERROR == 5
    err = capsys.readouterr().err
    assert "install it with your system package manager" in err
    assert "Traceback" not in err
    assert list(tmp_path.iterdir()) == []


def test_core_never_imports_soapysdr() -> None:
    """``import iqscope`` and the CLI parser work, and never import SoapySDR (fresh process)."""
    code = textwrap.dedent("""
        import sys
        class Block:
            def find_spec(self, name, path=None, target=None):
                if name.split('.')[0] in ('SoapySDR', '_SoapySDR'):
                    raise AssertionError('SoapySDR imported by ' + name)
                return None
        sys.meta_path.insert(0, Block())
        import iqscope, iqscope.capture, iqscope.measure.power, iqscope.io
        from iqscope.cli import build_parser
        build_parser().parse_args(['capture', '--freq', '1M', '--rate', '1M', '--seconds', '1',
                                   '-o', 'x'])
        print('ok')
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "ok"


# ----------------------------------------------------------------------------------------
# safety before capture
# ----------------------------------------------------------------------------------------
class TestInputLevel:
    def test_levels_from_published_relation(self) -> None:
        """dBm = 10 log10(P / 1 mW): 1 W = +30 dBm, 5 W = +36.99 dBm, 100 W = +50 dBm; needed
        attenuation to -20 dBm 50 / 57 / 70 dB (REFERENCES.md item 11, computed)."""
        for watts, tx_dbm, needed in ((1.0, 30.0, 50.0), (5.0, 36.9897, 56.9897),
                                      (100.0, 50.0, 70.0)):
            lvl = assess_input_level(watts, 0.0)
            assert lvl.tx_dbm == pytest.approx(tx_dbm, abs=1e-4)
            assert lvl.needed_db == pytest.approx(needed, abs=1e-4)
            assert lvl.comfort_db == pytest.approx(needed + 10.0, abs=1e-4)  # to -30 dBm

    def test_verdicts(self) -> None:
        assert assess_input_level(5.0, 57.0).verdict == "ok"  # -20.01 dBm
        assert assess_input_level(5.0, 40.0).verdict == "overdrive"  # -3 dBm
        assert assess_input_level(5.0, 20.0).verdict == "damage"  # +17 dBm
        assert assess_input_level(5.0, 40.0, limit_dbm=0.0).verdict == "ok"
        assert assess_input_level(5.0, 50.0).input_dbm == pytest.approx(-13.0103, abs=1e-4)

    def test_refusal_without_yes(self) -> None:
        lvl = assess_input_level(5.0, 20.0)
        with pytest.raises(CaptureError, match="not starting") as info:
            check_input_level(lvl, confirmed=False)
        assert info.value.exit_status == 5
        assert "57 dB" in str(info.value)
        check_input_level(lvl, confirmed=True)  # --yes: no error
        check_input_level(assess_input_level(5.0, 60.0), confirmed=False)

    @pytest.mark.parametrize("bad", [(0.0, 10.0), (-1.0, 10.0), (1.0, -3.0), (math.inf, 1.0)])
    def test_bad_values(self, bad: tuple[float, float]) -> None:
        with pytest.raises(ValueError):
            assess_input_level(*bad)


# ----------------------------------------------------------------------------------------
# the commands with the simulated device
# ----------------------------------------------------------------------------------------
@pytest.fixture
def fake_module(monkeypatch: pytest.MonkeyPatch) -> Any:
    mod = make_fake_soapy(lines=TWO_TONE, noise_rms=1e-4)
    monkeypatch.setitem(sys.modules, "SoapySDR", mod)
    return mod


CAPTURE = ["capture", "--freq", "7.1M", "--rate", "48k", "--seconds", "0.5", "--gain", "10"]


class TestCommands:
    def test_capture_refuses_overload_without_yes(self, fake_module: Any, tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
        out = tmp_path / "cap"
        status = main(CAPTURE + ["-o", str(out), "--tx-power", "5", "--attenuation-db", "30"])
        assert status == 5
        err = capsys.readouterr().err
        assert "not starting" in err and "+7.0 dBm" in err and "57 dB" in err
        assert fake_module.opened == [] and list(tmp_path.iterdir()) == []

    def test_capture_with_yes_goes_ahead(self, fake_module: Any, tmp_path: Path,
                                         capsys: pytest.CaptureFixture[str]) -> None:
        out = tmp_path / "cap"
        status = main(CAPTURE + ["-o", str(out), "--tx-power", "5", "--attenuation-db", "30",
                                 "--yes"])
        assert status == 0
        assert "warning (--yes given)" in capsys.readouterr().err
        glob = json.loads((tmp_path / "cap.sigmf-meta").read_text())["global"]
        assert glob["iqscope:tx_power_w"] == 5.0 and glob["iqscope:attenuation_db"] == 30.0

    def test_capture_within_limits(self, fake_module: Any, tmp_path: Path,
                                   capsys: pytest.CaptureFixture[str]) -> None:
        out = tmp_path / "cap.sigmf-meta"
        status = main(CAPTURE + ["-o", str(out), "--tx-power", "5", "--attenuation-db", "60",
                                 "--stream-format", "cs16"])
        assert status == 0
        err = capsys.readouterr().err
        assert "receiver input -23.0 dBm" in err and "wrote" in err and "overflows 0" in err
        _read_sigmf(out)

    def test_capture_interrupted_exit_130(self, monkeypatch: pytest.MonkeyPatch, tmp_path: Path,
                                          capsys: pytest.CaptureFixture[str]) -> None:
        def ctrl_c(index: int) -> None:
            if index == 1:
                os.kill(os.getpid(), signal.SIGINT)

        monkeypatch.setitem(sys.modules, "SoapySDR", make_fake_soapy(mtu=1000, on_read=ctrl_c))
        status = main(CAPTURE + ["-o", str(tmp_path / "cap")])
        assert status == EXIT_INTERRUPTED
        assert "samples so far are saved" in capsys.readouterr().err
        _, samples = _read_sigmf(tmp_path / "cap.sigmf-meta")
        assert samples.size == 2000

    def test_attenuation_without_power_is_a_usage_error(self, fake_module: Any,
                                                        tmp_path: Path) -> None:
        assert main(CAPTURE + ["-o", str(tmp_path / "c"), "--attenuation-db", "40"]) == 4

    def test_grade_flags_need_grade(self, fake_module: Any, tmp_path: Path) -> None:
        assert main(CAPTURE + ["-o", str(tmp_path / "c"), "--limits", "x"]) == 4

    def test_devices(self, fake_module: Any, capsys: pytest.CaptureFixture[str]) -> None:
        assert main(["devices"]) == 0
        assert capsys.readouterr().out == "0: driver=fake, label=simulated receiver, serial=0001\n"
        assert main(["devices", "--json"]) == 0
        assert json.loads(capsys.readouterr().out) == [
            {"driver": "fake", "label": "simulated receiver", "serial": "0001"}]

    def test_capture_then_grade(self, fake_module: Any, tmp_path: Path,
                                capsys: pytest.CaptureFixture[str]) -> None:
        out = tmp_path / "cap"
        status = main(CAPTURE + ["-o", str(out), "--grade", "--json", "--mode", "two-tone"])
        captured = capsys.readouterr()
        assert status in (0, 1, 2), captured.err
        doc = json.loads(captured.out)
        assert doc["schema"] == "iqscope.grade/1"
        assert doc["recording"]["center_frequency_hz"] == FC
        assert doc["signal"]["mode"] == "two-tone"


# ----------------------------------------------------------------------------------------
# the real SoapySDR library
# ----------------------------------------------------------------------------------------
def _real_soapy() -> Any:
    try:
        return load_soapy()
    except CaptureError as exc:
        pytest.skip(f"SoapySDR's Python module is not importable here ({exc.message[:60]}...)")


class TestRealSoapySDR:
    """Exercise the real library with its built-in ``null`` device (no hardware needed).

    SoapySDR's ``lib/NullDevice.cpp`` registers driver ``null`` (found with ``type=null``):
    it accepts settings but has no stream, so ``setupStream`` gives none.
    """

    ARGS = "driver=null,type=null"

    def test_constants_match_the_values_we_rely_on(self) -> None:
        s = _real_soapy()
        assert (s.SOAPY_SDR_RX, s.SOAPY_SDR_CF32, s.SOAPY_SDR_CS16) == (1, "CF32", "CS16")
        assert (s.SOAPY_SDR_TIMEOUT, s.SOAPY_SDR_STREAM_ERROR, s.SOAPY_SDR_CORRUPTION,
                s.SOAPY_SDR_OVERFLOW, s.SOAPY_SDR_NOT_SUPPORTED) == (-1, -2, -3, -4, -5)
        assert s.errToStr(-4) == "OVERFLOW"

    def test_null_device_found_and_described(self) -> None:
        s = _real_soapy()
        found = list_devices(s, self.ARGS)
        assert {"driver": "null", "type": "null"} in found
        dev = s.Device(self.ARGS)
        try:
            assert describe_device(dev).startswith("driver=null, hardware=null")
        finally:
            close_device(s, dev)  # the binding's close(): unmake once, not again in __del__

    def test_capture_from_a_device_without_stream_fails_cleanly(self, tmp_path: Path) -> None:
        s = _real_soapy()
        settings = _settings(device_args=self.ARGS, gain_db=None)
        with pytest.raises(CaptureError, match="no receive stream"):
            capture_to_sigmf(settings, tmp_path / "cap", soapy=s)
        assert list(tmp_path.iterdir()) == []
