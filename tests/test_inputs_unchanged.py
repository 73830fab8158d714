"""No command modifies an input (issue 6 item 4, "a test hashes every input before and
after each command and finds them unchanged").

Every file in the input folder (recordings in each format, sidecars, a limits profile, a
calibration file) is fingerprinted by SHA-256 (FIPS 180-4), size, modification time,
inode and permission bits before and after each command that takes files; every
fingerprint must be identical (a rewrite with the same bytes would still change the inode
or mtime). While the command runs, every open of a file in the input folder is recorded
and must be read-only (``os.open`` flags, ``open`` modes, ``h5py.File`` mode).
"""

from __future__ import annotations

import builtins
import hashlib
import io
import json
import os
import shutil
import tarfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pytest

from iqscope.cli import main
from iqscope.io import write_sigmf, write_wav

FS = 8000.0
F1 = 7.1e6
N = 8000
_WRITE_FLAGS = os.O_WRONLY | os.O_RDWR | os.O_APPEND | os.O_CREAT | os.O_TRUNC


def _tone(amp: float = 0.3, f_hz: float = 1000.0) -> np.ndarray:
    rng = np.random.default_rng(66)
    t = np.arange(N) / FS
    return (amp * np.exp(2j * np.pi * f_hz * t) + 1e-3 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))).astype(
        np.complex64
    )


def _fingerprint(folder: Path) -> dict[str, tuple[str, int, int, int, int]]:
    out = {}
    for p in sorted(folder.rglob("*")):
        st = p.lstat()
        digest = hashlib.sha256(p.read_bytes()).hexdigest() if p.is_file() and not p.is_symlink() else ""
        out[str(p.relative_to(folder))] = (digest, st.st_size, st.st_mtime_ns, st.st_ino, st.st_mode)
    return out


@pytest.fixture
def inputs(tmp_path: Path) -> dict[str, Path]:
    """One input folder holding every kind of file a command reads."""
    d = tmp_path / "in"
    d.mkdir()
    p: dict[str, Path] = {"dir": d}
    p["sigmf"] = write_sigmf(d / "fund", _tone(), FS, center_frequency_hz=F1, extra_global={"iqscope:drive_db": 0.0})
    p["h2"] = write_sigmf(d / "h2", _tone(0.001), FS, center_frequency_hz=2 * F1, extra_global={"iqscope:drive_db": 3.0})
    arc = d / "packed.sigmf"
    with tarfile.open(arc, "w") as tar:
        tar.add(p["sigmf"], arcname="packed/packed.sigmf-meta")
        tar.add(d / "fund.sigmf-data", arcname="packed/packed.sigmf-data")
    p["archive"] = arc
    p["wav"] = write_wav(d / "bench.wav", _tone(), FS, center_frequency_hz=F1)  # with its sidecar
    raw = d / "raw.cs16"
    x = _tone()
    pcm = np.empty(2 * N, "<i2")
    pcm[0::2], pcm[1::2] = np.round(x.real * 32767), np.round(x.imag * 32767)
    raw.write_bytes(pcm.tobytes())
    (d / "raw.cs16.iqscope.json").write_text(json.dumps({"sample_rate_hz": FS, "center_frequency_hz": F1}))
    p["raw"] = raw
    h5 = d / "store.h5"
    with h5py.File(h5, "w") as f:
        ds = f.create_dataset("iq", data=_tone())
        ds.attrs["sample_rate_hz"] = FS
        ds.attrs["center_frequency_hz"] = F1
    p["hdf5"] = h5
    from iqscope.cli._limits import init_text

    p["limits"] = d / "mine.toml"
    p["limits"].write_text(init_text("home-built"))
    p["cal"] = d / "cal.json"
    assert main(["calibrate", str(p["sigmf"]), "--level-dbm", "-10", "-o", str(p["cal"])]) == 0
    (d / "link.sigmf-meta").symlink_to("fund.sigmf-meta")  # links are inputs too
    (d / "link.sigmf-data").symlink_to("fund.sigmf-data")
    return p


def _spy_opens(monkeypatch: pytest.MonkeyPatch, folder: Path) -> list[tuple[str, str]]:
    """Record (path, how) of every open inside ``folder`` that could write (a new output
    beside an input, such as ``--annotate``'s, is sorted out by the caller)."""
    root = os.path.realpath(folder) + os.sep
    writes: list[tuple[str, str]] = []
    real_open, real_io_open, real_os_open, real_h5 = builtins.open, io.open, os.open, h5py.File

    def inside(file: Any) -> bool:
        return isinstance(file, (str, bytes, os.PathLike)) and os.path.realpath(os.fsdecode(file)).startswith(root)

    def check_mode(file: Any, mode: str) -> None:
        if inside(file) and any(c in mode for c in "wax+"):
            writes.append((os.fsdecode(file), mode))

    def spy_open(file: Any, mode: str = "r", *a: Any, **k: Any) -> Any:
        check_mode(file, mode)
        return real_open(file, mode, *a, **k)

    def spy_io_open(file: Any, mode: str = "r", *a: Any, **k: Any) -> Any:
        check_mode(file, mode)
        return real_io_open(file, mode, *a, **k)

    def spy_os_open(path: Any, flags: int, *a: Any, **k: Any) -> int:
        if inside(path) and flags & _WRITE_FLAGS:
            writes.append((os.fsdecode(path), f"flags={flags:#o}"))
        return real_os_open(path, flags, *a, **k)

    def spy_h5(name: Any, mode: str = "r", *a: Any, **k: Any) -> Any:
        if inside(name) and mode != "r":
            writes.append((os.fsdecode(name), f"h5py mode {mode}"))
        return real_h5(name, mode, *a, **k)

    monkeypatch.setattr(builtins, "open", spy_open)
    monkeypatch.setattr(io, "open", spy_io_open)
    monkeypatch.setattr(os, "open", spy_os_open)
    monkeypatch.setattr(h5py, "File", spy_h5)
    return writes


#: name -> argv builder (inputs, output folder). Outputs go to the output folder, except
#: --annotate which writes a new STEM.graded.sigmf-meta beside its input (by design).
COMMANDS: dict[str, Callable[[dict[str, Path], Path], list[str]]] = {
    "grade --report --plot --annotate --json --limits --calibration": lambda i, o: [
        "grade", str(i["sigmf"]), "--report", str(o / "r.html"), "--plot", str(o / "plots"), "--annotate",
        "--json", "--limits", str(i["limits"]), "--calibration", str(i["cal"]),
    ],
    "grade several formats": lambda i, o: [
        "grade", str(i["archive"]), str(i["wav"]), str(i["raw"]), str(i["hdf5"]), str(i["h2"]), "--json", "-q",
    ],
    "grade text via a symlink": lambda i, o: ["grade", str(i["dir"] / "link.sigmf-meta")],
    "inspect sigmf": lambda i, o: ["inspect", str(i["sigmf"]), "--json"],
    "inspect archive": lambda i, o: ["inspect", str(i["archive"])],
    "inspect wav": lambda i, o: ["inspect", str(i["wav"]), "--json"],
    "inspect raw": lambda i, o: ["inspect", str(i["raw"]), "--json"],
    "inspect hdf5": lambda i, o: ["inspect", str(i["hdf5"]) + ":/iq", "--json"],
    "drift --plot": lambda i, o: ["drift", str(i["sigmf"]), "--plot", str(o), "--json"],
    "drift wav": lambda i, o: ["drift", str(i["wav"])],
    "harmonics --plot --calibration": lambda i, o: [
        "harmonics", str(i["sigmf"]), str(i["h2"]), "--plot", str(o), "--calibration", str(i["cal"]), "--json",
    ],
    "sweep --plot (drive from metadata)": lambda i, o: [
        "sweep", str(i["sigmf"]), str(i["h2"]), "--mode", "cw", "--plot", str(o), "--calibration", str(i["cal"]),
    ],
    "calibrate -o": lambda i, o: ["calibrate", str(i["wav"]), "--level-dbm", "-10", "-o", str(o / "cal.json")],
    "limits show FILE": lambda i, o: ["limits", "show", str(i["limits"])],
}


@pytest.mark.parametrize("name", list(COMMANDS))
def test_inputs_unchanged(
    tmp_path: Path,
    inputs: dict[str, Path],
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
    name: str,
) -> None:
    out = tmp_path / "out"
    out.mkdir()
    argv = COMMANDS[name](inputs, out)
    before = _fingerprint(inputs["dir"])
    writes = _spy_opens(monkeypatch, inputs["dir"])
    status = main(argv)
    monkeypatch.undo()
    _stdout, err = capsys.readouterr()
    assert status in (0, 1, 2), err
    assert "Traceback" not in err
    existing = {str(inputs["dir"] / k) for k in before}
    assert [w for w in writes if w[0] in existing] == [], f"an input was opened for writing: {writes}"
    after = _fingerprint(inputs["dir"])
    new = set(after) - set(before)
    if "--annotate" in argv:
        assert new == {"fund.graded.sigmf-meta"}
    else:
        assert new == set()
    assert {k: after[k] for k in before} == before
    assert any(out.iterdir()) or not any(a in argv for a in ("--plot", "--report", "-o"))


def test_failed_commands_leave_inputs_unchanged(
    tmp_path: Path, inputs: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    """Commands refused half way (an output that exists, a bad option after reading)
    leave the inputs as they were too."""
    before = _fingerprint(inputs["dir"])
    shutil.copy(inputs["cal"], tmp_path / "exists.json")
    runs = [
        ["calibrate", str(inputs["sigmf"]), "--level-dbm", "-10", "-o", str(tmp_path / "exists.json")],
        ["grade", str(inputs["sigmf"]), "--mode", "usb"],  # SSB without --carrier/--tone
        ["grade", str(inputs["wav"]), "--annotate"],  # --annotate needs SigMF
        ["sweep", str(inputs["sigmf"]), str(inputs["h2"]), "--drive", "1,2,3"],
    ]
    for argv in runs:
        status = main(argv)
        _out, err = capsys.readouterr()
        assert status in (4, 5) and "Traceback" not in err, (argv, status, err)
    assert _fingerprint(inputs["dir"]) == before


def test_the_checks_would_see_a_change(inputs: dict[str, Path], monkeypatch: pytest.MonkeyPatch) -> None:
    """Control: the spy and the fingerprint notice a write, a same-bytes rewrite and a chmod."""
    before = _fingerprint(inputs["dir"])
    writes = _spy_opens(monkeypatch, inputs["dir"])
    with open(inputs["limits"], "a") as fh:
        fh.write("")
    fd = os.open(inputs["wav"], os.O_RDWR)
    os.close(fd)
    with h5py.File(inputs["hdf5"], "r+"):
        pass
    monkeypatch.undo()
    assert len(writes) == 3
    data = inputs["raw"].read_bytes()
    inputs["raw"].unlink()
    inputs["raw"].write_bytes(data)  # same bytes, new file
    inputs["cal"].chmod(0o600)
    after = _fingerprint(inputs["dir"])
    changed = {k for k in before if after.get(k) != before[k]}
    assert {"raw.cs16", "cal.json"} <= changed
