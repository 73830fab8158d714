"""Bad input through every command that reads a recording (issue 6, items 1-4 at the CLI).

``tests/test_bad_input.py`` takes each damaged-input case through ``inspect`` and checks
what the readers decide; here the same kinds of damage go through *every* command that
reads a recording (grade, inspect, drift, harmonics, sweep, calibrate) and each must
behave the way ``iqscope/errors.py`` documents (the exit-status table there, copied in
the README and ``docs/robustness.md``):

* unusable input: exit status 3, nothing on stdout, exactly one line on stderr that
  starts ``iqscope: error:`` and names the file, never a traceback;
* usable input with a soft problem (NaN samples): the command runs (grade 0/1/2,
  harmonics 0/1/2, the others 0) and says what it met (the warning text appears on
  stdout or stderr);
* truncated input (a trailing partial sample, a WAV data chunk that claims more bytes
  than the file holds): unusable (exit 3) unless ``--accept-truncated``, with which it
  is usable with a warning.

The files are tiny (4096 samples) so the ~120 cases stay fast. Also here: a figure
provider that raises (item 3 of the issue), no output over an existing file without
``--force`` (exit 5, the file untouched), and no temporary file left by a failed write.
"""

from __future__ import annotations

import builtins
import errno
import io
import json
import os
import struct
from collections.abc import Callable
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pytest

from iqscope.cli import main
from iqscope.errors import EXIT_ERROR, EXIT_INPUT, OutputError
from iqscope.io import atomic_write, atomic_write_text, write_sigmf, write_wav

FS = 8000.0
F_FUND = 7.1e6
N = 4096


def _tone(n: int = N, f_hz: float = 1000.0, amp: float = 0.3) -> np.ndarray:
    """A clean line 1 kHz from the capture centre with a little noise (seeded)."""
    rng = np.random.default_rng(6)
    t = np.arange(n) / FS
    noise = 1e-3 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return (amp * np.exp(2j * np.pi * f_hz * t) + noise).astype(np.complex64)


def _edit(meta: Path, fn: Callable[[dict[str, Any]], None]) -> None:
    doc = json.loads(meta.read_text())
    fn(doc)
    meta.write_text(json.dumps(doc))


def _wav_bytes(pcm: bytes, *, data_size: int | None = None, extra: bytes = b"") -> bytes:
    """A 16-bit stereo PCM WAV built by hand (RIFF layout: Microsoft 'Multimedia
    Programming Interface and Data Specifications 1.0', 1991, chapter 3), so that chunk
    sizes can lie."""
    fmt = struct.pack("<HHIIHH", 1, 2, int(FS), int(FS) * 4, 4, 16)
    body = b"WAVE" + extra + b"fmt " + struct.pack("<I", 16) + fmt
    body += b"data" + struct.pack("<I", len(pcm) if data_size is None else data_size) + pcm
    return b"RIFF" + struct.pack("<I", len(body)) + body


def _pcm16(x: np.ndarray) -> bytes:
    out = np.empty(2 * x.size, "<i2")
    out[0::2] = np.round(x.real * 32767)
    out[1::2] = np.round(x.imag * 32767)
    return out.tobytes()


# --------------------------------------------------------------------------------------
# The cases: each builder makes the damaged file in ``d`` and returns the path to give.
# --------------------------------------------------------------------------------------
def _good_meta(d: Path, name: str, **kw: Any) -> Path:
    return write_sigmf(d / name, _tone(), FS, center_frequency_hz=F_FUND, **kw)


def _missing(d: Path) -> Path:
    return d / "absent.sigmf-meta"


def _empty(d: Path) -> Path:
    (d / "empty.wav").write_bytes(b"")
    return d / "empty.wav"


def _truncated_wav(d: Path) -> Path:
    p = write_wav(d / "cut.wav", _tone(), FS)
    p.write_bytes(p.read_bytes()[:30])  # inside the 'fmt ' chunk
    return p


def _truncated_hdf5(d: Path) -> Path:
    p = d / "cut.h5"
    with h5py.File(p, "w") as f:
        f.create_dataset("iq", data=_tone()).attrs["sample_rate_hz"] = FS
    p.write_bytes(p.read_bytes()[:1500])
    return p


def _partial_sample(d: Path) -> Path:
    meta = _good_meta(d, "partial", datatype="ci16_le")
    with open(d / "partial.sigmf-data", "ab") as fh:
        fh.write(b"\x01\x02\x03")  # 3 bytes of a 4-byte sample
    return meta


def _malformed_json(d: Path) -> Path:
    meta = _good_meta(d, "badjson")
    meta.write_text(meta.read_text()[:-25])
    return meta


def _unknown_datatype(d: Path) -> Path:
    meta = _good_meta(d, "dtype")
    _edit(meta, lambda doc: doc["global"].__setitem__("core:datatype", "cf33_le"))
    return meta


def _absurd_rate(d: Path) -> Path:
    meta = _good_meta(d, "rate")
    _edit(meta, lambda doc: doc["global"].__setitem__("core:sample_rate", -48000))
    return meta


def _capture_past_end(d: Path) -> Path:
    meta = _good_meta(d, "past")
    _edit(meta, lambda doc: doc["captures"].append({"core:sample_start": 10 * N}))
    return meta


def _mono_wav(d: Path) -> Path:
    import scipy.io.wavfile

    scipy.io.wavfile.write(d / "mono.wav", int(FS), np.zeros(N, np.int16))
    return d / "mono.wav"


def _lying_chunk_before_data(d: Path) -> Path:
    blob = _wav_bytes(_pcm16(_tone()), extra=b"LIST" + struct.pack("<I", 10**9) + b"INFO")
    (d / "liar.wav").write_bytes(blob)
    return d / "liar.wav"


def _lying_data_size(d: Path) -> Path:
    (d / "short.wav").write_bytes(_wav_bytes(_pcm16(_tone()), data_size=40_000_000))
    (d / "short.wav.iqscope.json").write_text(json.dumps({"center_frequency_hz": F_FUND}))
    return d / "short.wav"


def _hdf5_unusable(d: Path) -> Path:
    p = d / "nodata.h5"
    with h5py.File(p, "w") as f:
        f.create_dataset("table", data=np.zeros((10, 3)))
        f.create_dataset("real", data=np.zeros(10))
        f.create_group("empty")
    return p


def _nan_samples(d: Path) -> Path:
    x = _tone()
    x[::97] = np.nan
    x[5] = complex(np.inf, 0)
    return write_sigmf(d / "nans", x, FS, center_frequency_hz=F_FUND)


def _absurd_float_values(d: Path) -> Path:
    """Float components of 1e19 (a damaged or mis-typed cf32 file): treated like NaN."""
    x = _tone()
    x[::89] = 1e19 + 0j
    return write_sigmf(d / "loud", x, FS, center_frequency_hz=F_FUND)


def _hostile_dataset_path(d: Path) -> Path:
    (d / "secret.bin").write_bytes(bytes(8 * N))
    sub = d / "rec"
    sub.mkdir()
    meta = write_sigmf(sub / "hostile", _tone(), FS, center_frequency_hz=F_FUND)
    _edit(meta, lambda doc: doc["global"].__setitem__("core:dataset", "../secret.bin"))
    return meta


def _symlink_outside(d: Path) -> Path:
    outside = d / "elsewhere.bin"
    outside.write_bytes(bytes(8 * N))
    sub = d / "rec"
    sub.mkdir()
    meta = write_sigmf(sub / "linked", _tone(), FS, center_frequency_hz=F_FUND)
    (sub / "linked.sigmf-data").unlink()
    (sub / "linked.sigmf-data").symlink_to(outside)
    return meta


def _directory(d: Path) -> Path:
    (d / "folder.sigmf-meta").mkdir()
    return d / "folder.sigmf-meta"


def _fifo(d: Path) -> Path:
    """A named pipe where a recording should be: refused without opening (which would block)."""
    if not hasattr(os, "mkfifo"):
        pytest.skip("no named pipes on this platform")
    os.mkfifo(d / "pipe.cs16")
    return d / "pipe.cs16"


def _unreadable(d: Path) -> Path:
    p = write_wav(d / "locked.wav", _tone(), FS)
    p.chmod(0)
    if os.access(p, os.R_OK):  # root (or a capable user) reads it anyway
        p.chmod(0o600)
        pytest.skip("running with privileges that read a file without read permission")
    return p


#: name -> (builder, usable, text the soft problem is reported with)
CASES: dict[str, tuple[Callable[[Path], Path], bool, str]] = {
    "missing": (_missing, False, "not found"),
    "empty": (_empty, False, "empty"),
    "truncated-wav": (_truncated_wav, False, "truncated"),
    "truncated-hdf5": (_truncated_hdf5, False, ""),
    "trailing-partial-sample": (_partial_sample, False, "truncated"),
    "malformed-json": (_malformed_json, False, "malformed JSON"),
    "unknown-datatype": (_unknown_datatype, False, "datatype"),
    "absurd-rate": (_absurd_rate, False, "sample rate"),
    "capture-past-end": (_capture_past_end, False, "past the end"),
    "mono-wav": (_mono_wav, False, "mono"),
    "lying-chunk-before-data": (_lying_chunk_before_data, False, "past the end"),
    "lying-data-chunk-size": (_lying_data_size, False, "truncated"),
    "hdf5-without-dataset": (_hdf5_unusable, False, "no usable"),
    "nan-samples": (_nan_samples, True, "non-finite"),
    "absurd-float-values": (_absurd_float_values, True, "non-finite"),
    "hostile-dataset-path": (_hostile_dataset_path, False, "refusing"),
    "symlink-outside": (_symlink_outside, False, "outside"),
    "directory": (_directory, False, ""),
    "named-pipe": (_fifo, False, "regular file"),
    "unreadable": (_unreadable, False, "permission"),
}

#: Exit statuses a command may give for a usable file (errors.py; harmonics' epilog).
USABLE_STATUS = {
    "grade": {0, 1, 2},
    "inspect": {0},
    "drift": {0},
    "harmonics": {0, 1, 2},
    "sweep": {0},
    "calibrate": {0},
}


def _second_harmonic(d: Path) -> Path:
    """A clean recording at 2f for harmonics and sweep (they need two files)."""
    other = d / "second"
    other.mkdir(exist_ok=True)
    return write_sigmf(other / "h2", _tone(amp=0.001), FS, center_frequency_hz=2 * F_FUND)


def _argv(cmd: str, target: Path, d: Path) -> list[str]:
    if cmd in ("grade", "inspect", "drift"):
        return [cmd, str(target)]
    if cmd == "harmonics":
        return [cmd, str(target), str(_second_harmonic(d))]
    if cmd == "sweep":
        return [cmd, str(target), str(_second_harmonic(d)), "--drive", "0,3", "--mode", "cw"]
    return [cmd, str(target), "--level-dbm", "-10", "-o", str(d / "out-cal.json")]


def _run(capsys: pytest.CaptureFixture[str], argv: list[str]) -> tuple[int, str, str]:
    status = main(argv)
    out, err = capsys.readouterr()
    return status, out, err


def _stem(path: Path) -> str:
    name = path.name
    for suffix in (".sigmf-meta", ".sigmf-data", ".wav", ".h5"):
        name = name.removesuffix(suffix)
    return name


@pytest.mark.parametrize("cmd", list(USABLE_STATUS))
@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_every_command(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], case: str, cmd: str
) -> None:
    build, usable, text = CASES[case]
    target = build(tmp_path)
    status, out, err = _run(capsys, _argv(cmd, target, tmp_path))
    assert "Traceback" not in err and "Traceback" not in out
    if usable:
        assert status in USABLE_STATUS[cmd], (status, err)
        assert text.lower() in (out + err).lower(), f"{cmd} did not report {text!r}:\n{out}\n{err}"
        return
    assert status == EXIT_INPUT, (status, err)
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("iqscope: error: "), err
    assert _stem(target) in lines[0], lines[0]
    assert text.lower() in lines[0].lower(), lines[0]


#: Truncated files: refused above, read with --accept-truncated (text of the warning).
TRUNCATED: dict[str, tuple[Callable[[Path], Path], str]] = {
    "trailing-partial-sample": (_partial_sample, "partial sample"),
    "lying-data-chunk-size": (_lying_data_size, "claims"),
}


@pytest.mark.parametrize("cmd", list(USABLE_STATUS))
@pytest.mark.parametrize("case", list(TRUNCATED))
def test_accept_truncated_every_command(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], case: str, cmd: str
) -> None:
    build, text = TRUNCATED[case]
    target = build(tmp_path)
    status, out, err = _run(capsys, _argv(cmd, target, tmp_path) + ["--accept-truncated"])
    assert "Traceback" not in err and "Traceback" not in out
    assert status in USABLE_STATUS[cmd], (status, err)
    assert text.lower() in (out + err).lower(), f"{cmd} did not report {text!r}:\n{out}\n{err}"


def _deny(monkeypatch: pytest.MonkeyPatch, victim: Path) -> None:
    """Make every way of opening ``victim`` fail as a file without read permission does
    (EACCES), also when the tests run as root."""
    real_open, real_os_open, real_io_open = builtins.open, os.open, io.open
    bad = os.path.realpath(victim)

    def hit(file: Any) -> bool:
        return isinstance(file, (str, bytes, os.PathLike)) and os.path.realpath(os.fsdecode(file)) == bad

    def fake_open(file: Any, *a: Any, **k: Any) -> Any:
        if hit(file):
            raise PermissionError(errno.EACCES, "Permission denied", os.fsdecode(file))
        return real_open(file, *a, **k)

    def fake_io_open(file: Any, *a: Any, **k: Any) -> Any:
        if hit(file):
            raise PermissionError(errno.EACCES, "Permission denied", os.fsdecode(file))
        return real_io_open(file, *a, **k)

    def fake_os_open(path: Any, *a: Any, **k: Any) -> int:
        if hit(path):
            raise PermissionError(errno.EACCES, "Permission denied", os.fsdecode(path))
        return real_os_open(path, *a, **k)

    monkeypatch.setattr(builtins, "open", fake_open)
    monkeypatch.setattr(io, "open", fake_io_open)
    monkeypatch.setattr(os, "open", fake_os_open)


@pytest.mark.parametrize("cmd", list(USABLE_STATUS))
@pytest.mark.parametrize("which", ["wav", "sigmf-meta", "sigmf-data"])
def test_permission_denied_simulated(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, which: str, cmd: str
) -> None:
    """No read permission, simulated by refusing the open (the chmod case above is
    skipped when the tests run as root): exit 3, one line naming the file."""
    if which == "wav":
        target = victim = write_wav(tmp_path / "locked.wav", _tone(), FS, center_frequency_hz=F_FUND)
    elif which == "hdf5":
        target = victim = tmp_path / "locked.h5"
        with h5py.File(victim, "w") as f:
            ds = f.create_dataset("iq", data=_tone())
            ds.attrs["sample_rate_hz"] = FS
            ds.attrs["center_frequency_hz"] = F_FUND
    else:
        target = _good_meta(tmp_path, "locked")
        victim = target if which == "sigmf-meta" else tmp_path / "locked.sigmf-data"
    argv = _argv(cmd, target, tmp_path)  # builds the second file before opens are refused
    _deny(monkeypatch, victim)
    status, out, err = _run(capsys, argv)
    assert status == EXIT_INPUT, (status, err)
    assert "Traceback" not in err and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("iqscope: error: ") and "locked" in lines[0], err


def test_debug_shows_the_traceback(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``--debug`` re-raises the error (issue 6 item 1) instead of the one line."""
    from iqscope.errors import InputMissingError

    with pytest.raises(InputMissingError):
        main(["--debug", "grade", str(tmp_path / "absent.wav")])


def test_grade_several_files_one_bad(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A batch with one unusable file grades the others and exits 3 (``_grade.py``)."""
    good = _good_meta(tmp_path, "fine")
    bad = _malformed_json(tmp_path)
    status, out, err = _run(capsys, ["grade", str(good), str(bad), "--json"])
    assert status == EXIT_INPUT and "Traceback" not in err
    doc = json.loads(out)
    assert len(doc["results"]) == 1 and len(doc["errors"]) == 1
    assert "badjson" in doc["errors"][0]["path"] and doc["errors"][0]["exit_status"] == EXIT_INPUT


# --------------------------------------------------------------------------------------
# Item 3 of the issue: one figure provider failing does not sink the others.
# --------------------------------------------------------------------------------------
def _two_tone_recording(d: Path) -> Path:
    """SSB two-tone test (tones 700 and 1900 Hz above a carrier 1 kHz from the centre,
    carrier leak -40 dBc, IM3 products at -35 dBc): every provider has work to do."""
    n = 1 << 15
    t = np.arange(n) / FS
    fc = 1000.0
    x = 0.2 * np.exp(2j * np.pi * (fc + 700) * t) + 0.2 * np.exp(2j * np.pi * (fc + 1900) * t)
    x += 0.2 * 10 ** (-40 / 20) * np.exp(2j * np.pi * fc * t)
    for f in (fc + 700 - 1200, fc + 1900 + 1200):  # 2 f1 - f2, 2 f2 - f1
        x += 0.2 * 10 ** (-35 / 20) * np.exp(2j * np.pi * f * t)
    rng = np.random.default_rng(7)
    x += 1e-5 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return write_sigmf(d / "twotone", x.astype(np.complex64), FS, center_frequency_hz=F_FUND)


def _provider_keys(rec_path: Path, request: Any) -> list[tuple[str, dict[str, str]]]:
    """Which measurements each provider adds on this recording (name -> unit)."""
    from iqscope.io import open_recording
    from iqscope.measure.pipeline import PROVIDERS, analyse

    out = []
    with open_recording(rec_path) as rec:
        base = set(analyse(rec, request, providers=[]).measurements)
        for p in PROVIDERS:
            an = analyse(rec, request, providers=[p])
            out.append((getattr(p, "__name__", ""), {k: m.unit for k, m in an.measurements.items() if k not in base}))
    return out


_GRADE_TWO_TONE = ["--mode", "two-tone", "--carrier", "1000", "--json"]


@pytest.fixture(scope="module")
def two_tone(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[tuple[str, dict[str, str]]], dict[str, Any]]:
    from iqscope.measure import AnalysisRequest

    d = tmp_path_factory.mktemp("twotone")
    path = _two_tone_recording(d)
    keys = _provider_keys(path, AnalysisRequest(mode="two-tone", carrier_hz=1000.0))
    buf_out, buf_err = io.StringIO(), io.StringIO()
    import contextlib

    with contextlib.redirect_stdout(buf_out), contextlib.redirect_stderr(buf_err):
        status = main(["grade", str(path), *_GRADE_TWO_TONE])
    assert status in (0, 1, 2), buf_err.getvalue()
    return path, keys, json.loads(buf_out.getvalue())


def _provider_index(name: str) -> int:
    from iqscope.measure.pipeline import PROVIDERS

    return [getattr(p, "__name__", "") for p in PROVIDERS].index(name)


def _replace_provider(monkeypatch: pytest.MonkeyPatch, name: str, stand_in: Any) -> None:
    """Swap one entry of ``pipeline.PROVIDERS`` (a copy of the list, restored after)."""
    from iqscope.measure import pipeline

    providers = list(pipeline.PROVIDERS)
    providers[_provider_index(name)] = stand_in
    monkeypatch.setattr(pipeline, "PROVIDERS", providers)


def _provider_names() -> list[str]:
    from iqscope.measure.pipeline import PROVIDERS

    return [getattr(p, "__name__", "") for p in PROVIDERS]


@pytest.mark.parametrize("name", _provider_names())
def test_failing_provider_degrades_through_grade(
    two_tone: tuple[Path, list[tuple[str, dict[str, str]]], dict[str, Any]],
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
    name: str,
) -> None:
    """Replace one provider of ``PROVIDERS`` with one that raises and declares (in its
    ``provides`` attribute, pipeline.py) the figures the real one makes here: those
    figures are null with a note naming the failure, every other figure is unchanged,
    and grade still prints one JSON verdict and exits with a verdict status."""
    from iqscope.measure import pipeline

    path, keys, baseline = two_tone
    elsewhere = {k for other, ks in keys if other != name for k in ks}
    mine = {k: u for k, u in dict(keys)[name].items() if k not in elsewhere}  # sole source

    def broken(ctx: Any) -> Any:
        raise RuntimeError("simulated fault")

    broken.__name__ = name
    broken.provides = mine  # type: ignore[attr-defined]
    _replace_provider(monkeypatch, name, broken)
    status, out, err = _run(capsys, ["grade", str(path), *_GRADE_TWO_TONE])
    assert "Traceback" not in err
    assert status in (1, 2), err  # a figure that applies but failed is at least a warn
    doc = json.loads(out)
    assert doc["overall"] in ("warn", "fail")
    meas = doc["measurements"]
    for key in mine:
        assert meas[key]["value"] is None
        assert "simulated fault" in meas[key]["note"] and name in meas[key]["note"]
    assert any(f"{name} failed" in w for w in doc["warnings"])
    shared = {k for _n, ks in keys for k in ks if sum(k in ks2 for _m, ks2 in keys) > 1}
    others = {k: v for k, v in baseline["measurements"].items() if k not in mine and k not in shared}
    assert others, "the other providers must still report"
    for key, m in others.items():
        assert meas[key]["value"] == m["value"], key
    for v in doc["verdicts"]:
        if v["measurement"] in mine and v["measurement"] in {x["measurement"] for x in baseline["verdicts"]}:
            assert v["status"] == "warn"


def test_real_provider_failure_leaves_null_figures(
    two_tone: tuple[Path, list[tuple[str, dict[str, str]]], dict[str, Any]],
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """A fault inside the real carrier_figures (a helper it calls raises), so what counts
    is the real provider's own ``provides`` declaration: its figures are null with a
    note, not gone (DESIGN.md section 4: 'one that applies but failed has value null and
    a note'). The core providers once declared nothing and the figures vanished."""
    from iqscope.measure import carrier

    path, _keys, _baseline = two_tone

    def boom(*args: Any, **kwargs: Any) -> Any:
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr(carrier, "sideband_power", boom)
    status, out, err = _run(capsys, ["grade", str(path), *_GRADE_TWO_TONE])
    assert status in (1, 2) and "Traceback" not in err
    meas = json.loads(out)["measurements"]
    assert meas["carrier_suppression_db"]["value"] is None
    assert "division" in meas["carrier_suppression_db"]["note"]


# --------------------------------------------------------------------------------------
# Item 4: outputs. Never over an existing file without --force; no temporary file left.
# --------------------------------------------------------------------------------------
SENTINEL = b"precious, do not replace\n"


def _listing(d: Path) -> set[str]:
    return {str(p.relative_to(d)) for p in d.rglob("*")}


@pytest.fixture(scope="module")
def inputs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Small recordings for the output tests: a 1 s carrier at f and its harmonic at 2f."""
    d = tmp_path_factory.mktemp("in")
    n = int(FS)
    fund = write_sigmf(d / "fund", _tone(n), FS, center_frequency_hz=F_FUND)
    h2 = write_sigmf(d / "h2", _tone(n, amp=0.001), FS, center_frequency_hz=2 * F_FUND)
    return {"fund": fund, "h2": h2}


#: (name, argv builder given inputs and the output folder, the output that must be refused)
OUTPUT_CASES: list[tuple[str, Callable[[dict[str, Path], Path], list[str]], str]] = [
    ("grade --report", lambda i, o: ["grade", str(i["fund"]), "--report", str(o / "r.html")], "r.html"),
    ("grade --plot", lambda i, o: ["grade", str(i["fund"]), "--plot", str(o)], "fund-spectrum.png"),
    ("grade --annotate", lambda i, o: ["grade", str(i["fund"]), "--annotate"], "fund.graded.sigmf-meta"),
    ("drift --plot", lambda i, o: ["drift", str(i["fund"]), "--plot", str(o)], "fund-drift-frequency.png"),
    ("harmonics --plot", lambda i, o: ["harmonics", str(i["fund"]), str(i["h2"]), "--plot", str(o)], "harmonics.png"),
    ("sweep --plot", lambda i, o: ["sweep", str(i["fund"]), str(i["h2"]), "--drive", "0,3", "--mode", "cw",
                                   "--plot", str(o)], "sweep.png"),
    ("calibrate -o", lambda i, o: ["calibrate", str(i["fund"]), "--level-dbm", "-10", "-o", str(o / "c.json")], "c.json"),
    ("synth sigmf (meta exists)", lambda i, o: ["synth", "cw", "--duration", "0.1", "-o", str(o / "s")], "s.sigmf-meta"),
    ("synth sigmf (data exists)", lambda i, o: ["synth", "cw", "--duration", "0.1", "-o", str(o / "s")], "s.sigmf-data"),
    ("synth wav", lambda i, o: ["synth", "cw", "--duration", "0.1", "-o", str(o / "s.wav")], "s.wav"),
    ("synth audio", lambda i, o: ["synth", "audio", "--duration", "0.1", "-o", str(o / "a.wav")], "a.wav"),
    ("limits init", lambda i, o: ["limits", "init", "home-built", "-o", str(o / "l.toml")], "l.toml"),
]


@pytest.mark.parametrize("name", [c[0] for c in OUTPUT_CASES])
def test_no_overwrite_without_force(
    tmp_path: Path, inputs: dict[str, Path], capsys: pytest.CaptureFixture[str], name: str
) -> None:
    _, make_argv, victim_name = next(c for c in OUTPUT_CASES if c[0] == name)
    if name == "grade --annotate":  # writes beside its input: use a private copy
        import shutil

        for suffix in (".sigmf-meta", ".sigmf-data"):
            shutil.copy(inputs["fund"].with_suffix(suffix), tmp_path / f"fund{suffix}")
        ins = {**inputs, "fund": tmp_path / "fund.sigmf-meta"}
    else:
        ins = inputs
    out = tmp_path / "out"
    out.mkdir()
    victim = (tmp_path if name == "grade --annotate" else out) / victim_name
    victim.write_bytes(SENTINEL)
    before = _listing(tmp_path)
    status, stdout, err = _run(capsys, make_argv(ins, out))
    assert status == EXIT_ERROR, (status, err)
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "--force" in lines[0] and victim_name in lines[0], err
    assert victim.read_bytes() == SENTINEL
    assert _listing(tmp_path) == before, "a refused command must not create any file"


@pytest.mark.parametrize("name", ["grade --report", "calibrate -o", "synth wav", "harmonics --plot"])
def test_force_overwrites(tmp_path: Path, inputs: dict[str, Path], capsys: pytest.CaptureFixture[str], name: str) -> None:
    _, make_argv, victim_name = next(c for c in OUTPUT_CASES if c[0] == name)
    victim = tmp_path / victim_name
    victim.write_bytes(SENTINEL)
    status, _out, err = _run(capsys, [*make_argv(inputs, tmp_path), "--force"])
    assert status in (0, 1, 2), err
    assert victim.read_bytes() != SENTINEL
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".part")]


def _no_temp_files(d: Path) -> None:
    left = [p.name for p in d.rglob("*") if p.name.endswith(".part") or p.name.startswith(".")]
    assert not left, f"temporary files left behind: {left}"


@pytest.mark.parametrize("failure", ["inside", "enospc", "fsync", "rename"])
@pytest.mark.parametrize("existing", [False, True])
def test_atomic_write_failure_leaves_nothing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, failure: str, existing: bool
) -> None:
    """Whatever fails (the caller, a full disk, the sync, the rename), the temporary file
    is removed and the target is as before (absent, or its old content with force)."""
    target = tmp_path / "out.bin"
    if existing:
        target.write_bytes(SENTINEL)
    if failure == "fsync":
        monkeypatch.setattr(os, "fsync", lambda fd: (_ for _ in ()).throw(OSError(errno.EIO, "I/O error")))
    if failure == "rename":
        monkeypatch.setattr(os, "replace", lambda a, b: (_ for _ in ()).throw(OSError(errno.EXDEV, "cross-device")))
        monkeypatch.setattr(os, "link", lambda a, b: (_ for _ in ()).throw(OSError(errno.EPERM, "no links")))
    expected: type[BaseException] = RuntimeError if failure == "inside" else OutputError
    with pytest.raises(expected):
        with atomic_write(target, force=True) as fh:
            fh.write(b"new content " * 1000)
            if failure == "inside":
                raise RuntimeError("the renderer failed half way")
            if failure == "enospc":
                raise OSError(errno.ENOSPC, "No space left on device")
    _no_temp_files(tmp_path)
    if existing:
        assert target.read_bytes() == SENTINEL
    else:
        assert not target.exists()


def test_atomic_write_text_interrupted(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Ctrl-C (KeyboardInterrupt) in the middle of a write leaves no temporary file."""
    real_fdopen = os.fdopen

    class Boom:
        def __init__(self, fh: Any) -> None:
            self.fh = fh

        def write(self, data: bytes) -> int:
            raise KeyboardInterrupt

        def __getattr__(self, name: str) -> Any:
            return getattr(self.fh, name)

        def __enter__(self) -> Any:
            return self

        def __exit__(self, *exc: object) -> None:
            self.fh.close()

    monkeypatch.setattr(os, "fdopen", lambda fd, mode: Boom(real_fdopen(fd, mode)))
    with pytest.raises(KeyboardInterrupt):
        atomic_write_text(tmp_path / "t.txt", "text")
    _no_temp_files(tmp_path)
    assert not (tmp_path / "t.txt").exists()


@pytest.mark.parametrize("cmd", ["grade --report", "calibrate -o", "synth sigmf (meta exists)", "limits init"])
def test_command_write_failure_leaves_nothing(
    tmp_path: Path, inputs: dict[str, Path], capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch,
    cmd: str,
) -> None:
    """A disk that fails at the sync (EIO) while a command writes its output: exit 5, one
    line, no output file and no temporary file."""
    _, make_argv, victim_name = next(c for c in OUTPUT_CASES if c[0] == cmd)
    monkeypatch.setattr(os, "fsync", lambda fd: (_ for _ in ()).throw(OSError(errno.EIO, "Input/output error")))
    status, _out, err = _run(capsys, make_argv(inputs, tmp_path))
    assert status == EXIT_ERROR, (status, err)
    assert "Traceback" not in err
    lines = [ln for ln in err.strip().splitlines() if ln.startswith("iqscope: error:")]
    assert len(lines) == 1 and "Input/output error" in lines[0], err
    assert list(tmp_path.iterdir()) == [], [p.name for p in tmp_path.iterdir()]


def test_synth_refuses_what_the_disk_cannot_hold(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """``synth --duration 1e15`` once started writing 384 EB; the size is now checked
    against the free space first (exit 5, nothing written)."""
    status, _out, err = _run(capsys, ["synth", "cw", "--duration", "1e15", "-o", str(tmp_path / "big")])
    assert status == EXIT_ERROR and "Traceback" not in err
    assert "free" in err and len(err.strip().splitlines()) == 1, err
    assert list(tmp_path.iterdir()) == []


def test_capture_refuses_what_the_disk_cannot_hold(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A capture of 1e9 s at 2.4 MS/s (19 PB of cf32) is refused before any device is
    opened (no SoapySDR needed to reach the check)."""
    status, _out, err = _run(capsys, ["capture", "--freq", "7.1M", "--rate", "2.4M", "--seconds", "1e9",
                                      "-o", str(tmp_path / "cap")])
    assert status == EXIT_ERROR and "Traceback" not in err
    assert "free" in err.strip().splitlines()[-1], err
    assert list(tmp_path.iterdir()) == []


def test_check_free_space(tmp_path: Path) -> None:
    from iqscope.io import check_free_space

    check_free_space(tmp_path / "small.bin", 1000)  # passes, creates nothing
    with pytest.raises(OutputError, match="free"):
        check_free_space(tmp_path / "huge.bin", 1e30)
    assert list(tmp_path.iterdir()) == []


def test_harmonics_unknown_centre_names_a_way_that_exists(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """harmonics has no --center option: the error must not suggest one."""
    wav = write_wav(tmp_path / "nocentre.wav", _tone(), FS)
    status, out, err = _run(capsys, ["harmonics", str(wav), str(_second_harmonic(tmp_path))])
    line = err.strip()
    assert status == EXIT_INPUT and out == "" and "nocentre.wav" in line
    assert "--center" not in line and "sidecar" in line


@pytest.mark.parametrize(
    "kind",
    [
        "silent",  # all zeros: "no discrete line stands 10 dB above the noise ..."
        "steady",  # a constant (a line at DC) 0.5 s long: "the recording (0.5 s) is too short ..."
    ],
)
def test_drift_error_names_the_file(tmp_path: Path, capsys: pytest.CaptureFixture[str], kind: str) -> None:
    """measure/drift.py once raised these without the recording's path, so the one error
    line did not name the file; nothing to follow stays exit 5 (docs/robustness.md: a
    measurement impossible)."""
    x = np.zeros(N, np.complex64) if kind == "silent" else np.full(N, 0.3 + 0.1j, np.complex64)
    meta = write_sigmf(tmp_path / f"{kind}-rec", x, FS, center_frequency_hz=F_FUND)
    status, out, err = _run(capsys, ["drift", str(meta)])
    lines = err.strip().splitlines()
    assert status == EXIT_ERROR and out == "" and len(lines) == 1 and "Traceback" not in err
    assert f"{kind}-rec" in lines[0], lines[0]


@pytest.mark.parametrize("cmd", ["grade", "inspect"])
def test_all_absurd_float_file(tmp_path: Path, capsys: pytest.CaptureFixture[str], cmd: str) -> None:
    """512 bytes of cf32 holding a 1e19 tone once made ``grade`` end in a ValueError
    traceback (float32 spectrum overflow in dsp). The io layer now treats components
    beyond 1e10 x full scale like NaN: replaced by 0, counted, warned."""
    x = (1e19 * np.exp(2j * np.pi * 0.125 * np.arange(64))).astype("<c8")
    (tmp_path / "loud.cf32").write_bytes(x.tobytes())
    status, out, err = _run(capsys, [cmd, str(tmp_path / "loud.cf32"), "--rate", "8000", "--json"]
                            + (["--mode", "cw"] if cmd == "grade" else []))
    assert status in (0, 1, 2) and "Traceback" not in err, err
    assert any("non-finite" in w for w in json.loads(out)["warnings"])


def test_float_component_limit() -> None:
    """The limit is inclusive: 1e10 is kept, the next float32 above it is replaced."""
    from iqscope.io import ArrayRecording
    from iqscope.io._recording import MAX_FLOAT_COMPONENT

    above = float(np.nextafter(np.float32(MAX_FLOAT_COMPONENT), np.float32(np.inf)))
    rec = ArrayRecording(np.array([MAX_FLOAT_COMPONENT, 1j * above, -above, 0.5, np.nan], np.complex64), FS)
    got = rec.read()
    assert got[0] == np.complex64(MAX_FLOAT_COMPONENT) and got[3] == 0.5
    assert list(got[[1, 2, 4]]) == [0, 0, 0] and rec.nonfinite_count == 3


@pytest.mark.parametrize("cmd", ["grade", "inspect", "sweep", "calibrate"])
@pytest.mark.parametrize("rate", ["1e-300", "5e-324", "0.0009"])
def test_tiny_rate_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str], cmd: str, rate: str) -> None:
    """--rate 1e-300 once ended in OverflowError tracebacks (grade, sweep) or invalid JSON
    (inspect); rates below 1 mHz are now unusable metadata like a negative one."""
    meta = _good_meta(tmp_path, "slow")
    argv = _argv(cmd, meta, tmp_path) + [f"--rate={rate}"]
    status, out, err = _run(capsys, argv)
    assert status == EXIT_INPUT and out == "" and "Traceback" not in err, err
    assert "sample rate" in err and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("flag", ["--level-dbm", "--attenuation-db", "--level-uncertainty-db"])
def test_calibrate_refuses_absurd_levels(tmp_path: Path, capsys: pytest.CaptureFixture[str], flag: str) -> None:
    """``--level-dbm 1e308 --attenuation-db 1e308`` made the offset Inf and ended in a
    ValueError traceback from strict JSON; such values are usage errors now."""
    meta = _good_meta(tmp_path, "ref")
    argv = ["calibrate", str(meta), "--level-dbm", "-10", "-o", str(tmp_path / "c.json"), "--json", f"{flag}=1e308"]
    status, out, err = _run(capsys, argv)
    assert status == 4 and "Traceback" not in err and flag in err, err
    assert not (tmp_path / "c.json").exists()


def test_drift_tiny_window(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """iqscope drift fund.sigmf-meta --window=5e-324 (1 s carrier at 1 kHz, 8 kS/s) once
    ended in an IndexError traceback; a window shorter than two blocks is now a usage error."""
    meta = write_sigmf(tmp_path / "fund", _tone(8000), FS, center_frequency_hz=F_FUND)
    status, _out, err = _run(capsys, ["drift", str(meta), "--json", "--window=5e-324"])
    assert status in (0, 4, 5) and "Traceback" not in err
    assert status == 4 and "--window" in err and "fund" in err and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("block", ["1e308", "1e-9"])
def test_drift_huge_block(tmp_path: Path, capsys: pytest.CaptureFixture[str], block: str) -> None:
    """iqscope drift fund.sigmf-meta --block=1e308 once ended in an OverflowError
    traceback; a block longer than the recording or under 64 samples is a usage error."""
    meta = write_sigmf(tmp_path / "fund", _tone(8000), FS, center_frequency_hz=F_FUND)
    status, _out, err = _run(capsys, ["drift", str(meta), "--json", f"--block={block}"])
    assert status in (0, 4, 5) and "Traceback" not in err
    assert status == 4 and "--block" in err and "fund" in err and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("cmd", list(USABLE_STATUS))
@pytest.mark.parametrize("case", ["hostile-dataset-path", "symlink-outside"])
def test_outside_files_never_opened(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, case: str, cmd: str
) -> None:
    """Issue 6 acceptance: the file a hostile ``core:dataset`` (or an outside symlink)
    points at is refused by every command without being opened."""
    target = CASES[case][0](tmp_path)
    argv = _argv(cmd, target, tmp_path)
    outside = {os.path.realpath(tmp_path / "secret.bin"), os.path.realpath(tmp_path / "elsewhere.bin")}
    opened: list[str] = []
    real_open, real_io_open, real_os_open = builtins.open, io.open, os.open

    def note(file: Any) -> None:
        if isinstance(file, (str, bytes, os.PathLike)):
            opened.append(os.path.realpath(os.fsdecode(file)))

    monkeypatch.setattr(builtins, "open", lambda f, *a, **k: (note(f), real_open(f, *a, **k))[1])
    monkeypatch.setattr(io, "open", lambda f, *a, **k: (note(f), real_io_open(f, *a, **k))[1])
    monkeypatch.setattr(os, "open", lambda f, *a, **k: (note(f), real_os_open(f, *a, **k))[1])
    status, _out, err = _run(capsys, argv)
    monkeypatch.undo()
    assert status == EXIT_INPUT, err
    assert not outside & set(opened)
