"""Bad input (issue 6 item 2): every case through ``iqscope.cli.main(["inspect", ...])``.

Unusable input exits with status 3 (errors.py, README) and one line on stderr, no
traceback. Soft cases that the design analyses with a warning (trailing partial sample,
a WAV data chunk longer than the file, NaN samples) exit 0 and say so in ``warnings``.
"""

from __future__ import annotations

import builtins
import json
import os
import struct
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pytest

from iqscope.cli import main
from iqscope.errors import EXIT_INPUT
from iqscope.io import write_sigmf, write_wav


def _run(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    status = main(["inspect", *args])
    out, err = capsys.readouterr()
    return status, out, err


def _assert_refused(capsys: pytest.CaptureFixture[str], *args: str, match: str = "") -> str:
    status, out, err = _run(capsys, *args)
    assert status == EXIT_INPUT, (status, err)
    assert out == ""
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("iqscope: error: "), err
    assert match.lower() in lines[0].lower(), lines[0]
    return lines[0]


def _json_ok(capsys: pytest.CaptureFixture[str], *args: str) -> dict[str, Any]:
    status, out, err = _run(capsys, *args, "--json")
    assert status == 0, err
    assert "Traceback" not in err
    return json.loads(out)


def _sigmf(tmp_path: Path, n: int = 100, **kw: Any) -> Path:
    x = np.full(n, 0.25 + 0.25j, np.complex64)
    return write_sigmf(tmp_path / "r", x, 48000, **kw)


def _edit_meta(meta: Path, fn: Any) -> None:
    doc = json.loads(meta.read_text())
    fn(doc)
    meta.write_text(json.dumps(doc))


def test_missing_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _assert_refused(capsys, str(tmp_path / "nothing.sigmf-meta"), match="not found")
    _assert_refused(capsys, str(tmp_path / "nothing.wav"), match="not found")


def test_missing_dataset(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path)
    (tmp_path / "r.sigmf-data").unlink()
    _assert_refused(capsys, str(meta), match="not found")


def test_folder_given(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "d.wav").mkdir()
    _assert_refused(capsys, str(tmp_path / "d.wav"), match="folder")


def _within(seconds: float, fn: Any) -> Any:
    """Run ``fn()`` in a daemon thread; fail (instead of hanging) when it blocks, as
    opening a named pipe for reading does until a writer comes."""
    import threading

    box: dict[str, Any] = {}

    def run() -> None:
        box["value"] = fn()

    th = threading.Thread(target=run, daemon=True)
    th.start()
    th.join(seconds)
    assert not th.is_alive(), "blocked: a named pipe was opened"
    return box.get("value")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes on this platform")
@pytest.mark.parametrize(
    ("where", "args", "named"),
    [
        ("sigmf dataset", ["r.sigmf-meta"], "r.sigmf-meta"),  # the metadata is fine, its dataset a pipe
        ("hdf5 with a dataset path", ["p.h5:/iq"], "p.h5"),
        ("no extension (sniffed)", ["pipe"], "pipe"),
        ("no extension, --format sigmf", ["pipe", "--format", "sigmf"], "pipe"),
        ("--format cs16", ["pipe", "--format", "cs16", "--rate", "8000"], "pipe"),
    ],
)
def test_named_pipe_is_not_a_regular_file(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], where: str, args: list[str], named: str
) -> None:
    """A named pipe anywhere a file is read is refused as "not a regular file", naming the
    file, without being opened (it was reported "not found" as a SigMF dataset or behind
    an HDF5 ':dataset' suffix, and sniffing a pipe without an extension blocked)."""
    meta = _sigmf(tmp_path)
    (tmp_path / "r.sigmf-data").unlink()
    for name in ("r.sigmf-data", "p.h5", "pipe"):
        os.mkfifo(tmp_path / name)
    argv = [str(tmp_path / args[0]) if i == 0 else a for i, a in enumerate(args)]
    line = _within(10.0, lambda: _assert_refused(capsys, *argv, match="not a regular file (a named pipe)"))
    assert str(tmp_path / named) in line and "not found" not in line, line
    assert meta.exists()


@pytest.mark.parametrize("name", ["e.sigmf-meta", "e.wav", "e.h5", "e.cf32", "e.sigmf"])
def test_empty_file(tmp_path: Path, capsys: pytest.CaptureFixture[str], name: str) -> None:
    (tmp_path / name).write_bytes(b"")
    _assert_refused(capsys, str(tmp_path / name), "--rate", "1000")


def test_empty_dataset(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path)
    (tmp_path / "r.sigmf-data").write_bytes(b"")
    _assert_refused(capsys, str(meta), match="no complete sample")


def test_truncated_wav_header(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = write_wav(tmp_path / "t.wav", np.zeros(100, np.complex64), 8000)
    path.write_bytes(path.read_bytes()[:30])
    _assert_refused(capsys, str(path))


def test_truncated_archive(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import tarfile

    meta = _sigmf(tmp_path, n=5000)
    arc = tmp_path / "a.sigmf"
    with tarfile.open(arc, "w") as tar:
        tar.add(meta, arcname="a/a.sigmf-meta")
        tar.add(tmp_path / "r.sigmf-data", arcname="a/a.sigmf-data")
    arc.write_bytes(arc.read_bytes()[:700])  # cut inside the metadata member
    _assert_refused(capsys, str(arc))


def test_truncated_hdf5(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "t.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("iq", data=np.zeros(1000, np.complex64)).attrs["sample_rate_hz"] = 1000.0
    path.write_bytes(path.read_bytes()[:1500])
    _assert_refused(capsys, str(path))


@pytest.mark.parametrize("kind", ["sigmf", "raw"])
def test_trailing_partial_sample_is_truncation(tmp_path: Path, capsys: pytest.CaptureFixture[str], kind: str) -> None:
    """Consistent rule: a file that ends inside a sample was cut short: refused (exit 3, one
    line naming it as truncated) unless --accept-truncated; then the whole samples are
    analysed and the warnings say so (exit 0)."""
    if kind == "sigmf":
        meta = _sigmf(tmp_path, n=10, datatype="ci16_le")
        with open(tmp_path / "r.sigmf-data", "ab") as fh:
            fh.write(b"\x01\x02\x03")
        target = [str(meta)]
    else:
        (tmp_path / "p.cs16").write_bytes(bytes(4 * 10 + 3))
        target = [str(tmp_path / "p.cs16"), "--rate", "1000"]
    line = _assert_refused(capsys, *target, match="truncated")
    assert "partial sample" in line and "--accept-truncated" in line
    data = _json_ok(capsys, *target, "--accept-truncated")
    assert data["n_samples"] == 10
    assert any("partial sample" in w for w in data["warnings"])


def test_malformed_json(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path)
    meta.write_text(meta.read_text()[:-20])
    _assert_refused(capsys, str(meta), match="malformed JSON")


def test_metadata_not_an_object(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path)
    meta.write_text("[1, 2, 3]")
    _assert_refused(capsys, str(meta))


def test_malformed_sidecar(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = write_wav(tmp_path / "s.wav", np.zeros(10, np.complex64), 8000)
    (tmp_path / "s.wav.iqscope.json").write_text("{center: 7e6")
    _assert_refused(capsys, str(path), match="malformed JSON")


@pytest.mark.parametrize("datatype", ["cf33_le", "rf16_le", "ci12_le", 5])
def test_unknown_datatype(tmp_path: Path, capsys: pytest.CaptureFixture[str], datatype: Any) -> None:
    meta = _sigmf(tmp_path)
    _edit_meta(meta, lambda d: d["global"].__setitem__("core:datatype", datatype))
    _assert_refused(capsys, str(meta))


def test_missing_rate(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path)
    _edit_meta(meta, lambda d: d["global"].pop("core:sample_rate"))
    _assert_refused(capsys, str(meta), match="--rate")
    assert _json_ok(capsys, str(meta), "--rate", "24k")["sample_rate_hz"] == 24000.0


@pytest.mark.parametrize("rate", [0, -48000, float("nan"), float("inf"), 1e300, "fast", True])
def test_absurd_rate(tmp_path: Path, capsys: pytest.CaptureFixture[str], rate: Any) -> None:
    meta = _sigmf(tmp_path)
    _edit_meta(meta, lambda d: d["global"].__setitem__("core:sample_rate", rate))
    _assert_refused(capsys, str(meta), match="sample rate")


@pytest.mark.parametrize("rate", ["0", "-1", "nan", "1e300"])
def test_absurd_rate_on_command_line(tmp_path: Path, capsys: pytest.CaptureFixture[str], rate: str) -> None:
    (tmp_path / "x.cs8").write_bytes(bytes(8))
    _assert_refused(capsys, str(tmp_path / "x.cs8"), f"--rate={rate}", match="sample rate")


def test_absurd_centre(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path)
    _edit_meta(meta, lambda d: d["captures"][0].__setitem__("core:frequency", "14 MHz"))
    _assert_refused(capsys, str(meta), match="not a number")


def test_capture_past_end(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path, n=100)
    _edit_meta(meta, lambda d: d["captures"].append({"core:sample_start": 5000, "core:frequency": 1e6}))
    _assert_refused(capsys, str(meta), match="past the end")


def test_captures_out_of_order(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = _sigmf(tmp_path, n=100)
    _edit_meta(meta, lambda d: d.__setitem__("captures", [{"core:sample_start": 50}, {"core:sample_start": 10}]))
    _assert_refused(capsys, str(meta), match="order")


def test_mono_wav(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import scipy.io.wavfile

    scipy.io.wavfile.write(tmp_path / "m.wav", 8000, np.zeros(64, np.int16))
    _assert_refused(capsys, str(tmp_path / "m.wav"), match="mono")


def _wav_bytes(data: bytes, *, data_size: int | None = None, extra: bytes = b"") -> bytes:
    fmt = struct.pack("<HHIIHH", 1, 2, 8000, 32000, 4, 16)
    body = b"WAVE" + extra + b"fmt " + struct.pack("<I", 16) + fmt
    body += b"data" + struct.pack("<I", len(data) if data_size is None else data_size) + data
    return b"RIFF" + struct.pack("<I", len(body)) + body


def test_lying_chunk_size_before_data(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A chunk that claims to run past the end of the file hides the data chunk: refused."""
    blob = _wav_bytes(bytes(400), extra=b"LIST" + struct.pack("<I", 10**9) + b"INFO")
    (tmp_path / "l.wav").write_bytes(blob)
    _assert_refused(capsys, str(tmp_path / "l.wav"), match="past the end")


def test_lying_data_chunk_size(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A data chunk longer than the file (recording cut short): refused as truncated (exit 3),
    or with --accept-truncated read what is there, with a warning."""
    (tmp_path / "d.wav").write_bytes(_wav_bytes(bytes(400), data_size=4_000_000))
    line = _assert_refused(capsys, str(tmp_path / "d.wav"), match="truncated")
    assert "d.wav" in line and "claims 4000000 bytes" in line
    data = _json_ok(capsys, str(tmp_path / "d.wav"), "--accept-truncated")
    assert data["n_samples"] == 100
    assert any("claims" in w for w in data["warnings"])


def test_wav_inconsistent_block_align(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    blob = bytearray(_wav_bytes(bytes(400)))
    blob[32:34] = struct.pack("<H", 3)  # block align field of the fmt chunk
    (tmp_path / "b.wav").write_bytes(bytes(blob))
    _assert_refused(capsys, str(tmp_path / "b.wav"), match="block align")


def test_hdf5_without_usable_dataset(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "n.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("a", data=np.zeros((10, 3)))
        f.create_dataset("b", data=np.zeros(10))
        f.create_group("empty")
    _assert_refused(capsys, str(path), match="no usable")


def test_nan_samples_are_counted_not_propagated(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Decision (docs/formats.md): NaN/Inf samples are replaced by 0, counted and warned;
    every level stays finite. Closed form: 10 of 100 samples zeroed, the rest |x|^2 = 0.125,
    so mean power = 0.9 * 0.125."""
    x = np.full(100, 0.25 + 0.25j, np.complex64)
    x[::10] = np.nan
    x[5] = complex(np.inf, 0)
    meta = write_sigmf(tmp_path / "nan", x, 48000)
    data = _json_ok(capsys, str(meta))
    assert data["nonfinite_samples"] == 11
    assert any("non-finite" in w for w in data["warnings"])
    assert data["mean_dbfs"] == pytest.approx(10 * np.log10(0.89 * 0.125), abs=1e-9)
    assert all(v is None or np.isfinite(v) for v in (data["peak_dbfs"], data["dc_offset_dbfs"]))


def _record_opens(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    opened: list[str] = []
    real_open, real_os_open = builtins.open, os.open

    def spy_open(file: Any, *a: Any, **k: Any) -> Any:
        if isinstance(file, (str, bytes, os.PathLike)):
            opened.append(os.path.realpath(os.fsdecode(file)))
        return real_open(file, *a, **k)

    def spy_os_open(path: Any, *a: Any, **k: Any) -> int:
        opened.append(os.path.realpath(os.fsdecode(path)))
        return real_os_open(path, *a, **k)

    monkeypatch.setattr(builtins, "open", spy_open)
    monkeypatch.setattr(os, "open", spy_os_open)
    return opened


@pytest.mark.parametrize("name", ["../secret.bin", "/etc/passwd", "sub/../../secret.bin", "..", "C:\\x.bin"])
def test_hostile_dataset_path_refused_without_opening(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, name: str
) -> None:
    folder = tmp_path / "rec"
    folder.mkdir()
    secret = tmp_path / "secret.bin"
    secret.write_bytes(bytes(4000))
    meta = write_sigmf(folder / "r", np.zeros(10, np.complex64), 48000)
    _edit_meta(meta, lambda d: d["global"].__setitem__("core:dataset", name))
    opened = _record_opens(monkeypatch)
    _assert_refused(capsys, str(meta), match="refusing")
    assert str(secret.resolve()) not in opened
    assert "/etc/passwd" not in opened


@pytest.mark.parametrize("via", ["default", "core:dataset"])
def test_symlink_outside_refused_without_opening(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, via: str
) -> None:
    folder = tmp_path / "rec"
    folder.mkdir()
    outside = tmp_path / "outside.sigmf-data"
    outside.write_bytes(bytes(800))
    meta = write_sigmf(folder / "r", np.zeros(10, np.complex64), 48000)
    (folder / "r.sigmf-data").unlink()
    if via == "default":
        (folder / "r.sigmf-data").symlink_to(outside)
    else:
        (folder / "link.bin").symlink_to(outside)
        _edit_meta(meta, lambda d: d["global"].__setitem__("core:dataset", "link.bin"))
    opened = _record_opens(monkeypatch)
    _assert_refused(capsys, str(meta), match="outside")
    assert str(outside.resolve()) not in opened


def test_symlink_inside_folder_is_allowed(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    meta = write_sigmf(tmp_path / "r", np.zeros(10, np.complex64), 48000)
    (tmp_path / "r.sigmf-data").rename(tmp_path / "store.bin")
    (tmp_path / "r.sigmf-data").symlink_to("store.bin")
    assert _json_ok(capsys, str(meta))["n_samples"] == 10


def test_unknown_file_type(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "mystery.xyz").write_bytes(b"hello world")
    _assert_refused(capsys, str(tmp_path / "mystery.xyz"), match="--format")


def test_unknown_format_option_is_usage_error(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "x.bin").write_bytes(bytes(8))
    status, out, err = _run(capsys, str(tmp_path / "x.bin"), "--format", "cf33")
    assert status == 4 and out == "" and "Traceback" not in err and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("key", ["core:offset", "core:num_channels", "core:trailing_bytes"])
@pytest.mark.parametrize("value", [float("inf"), float("nan"), -1, 2.5, "3"])
def test_absurd_integer_fields(tmp_path: Path, capsys: pytest.CaptureFixture[str], key: str, value: Any) -> None:
    meta = _sigmf(tmp_path)
    _edit_meta(meta, lambda d: d["global"].__setitem__(key, value))
    _assert_refused(capsys, str(meta), match=key)


@pytest.mark.parametrize("value", [float("inf"), -5, 1.5])
def test_absurd_sample_start(tmp_path: Path, capsys: pytest.CaptureFixture[str], value: Any) -> None:
    meta = _sigmf(tmp_path)
    _edit_meta(meta, lambda d: d["captures"][0].__setitem__("core:sample_start", value))
    _assert_refused(capsys, str(meta), match="core:sample_start")
