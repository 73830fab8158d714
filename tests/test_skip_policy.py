"""The skip policy of tests/conftest.py: under CI a skip is a failure unless its reason is
a missing optional system component (ALLOWED_SKIP_REASONS)."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent

PROBE = '''
import pytest

def test_broken_import_skip():
    pytest.importorskip("iqscope_no_such_module", reason="not built yet")

def test_soapy_skip():
    pytest.skip("SoapySDR's Python module is not importable here (x)")

@pytest.mark.slow
def test_long():
    pass
'''


def _run(tmp_path: Path, ci: str | None) -> subprocess.CompletedProcess[str]:
    shutil.copy(HERE / "conftest.py", tmp_path / "conftest.py")
    (tmp_path / "test_probe.py").write_text(PROBE)
    env = {k: v for k, v in os.environ.items() if k not in ("CI", "IQSCOPE_STRICT_SKIPS")}
    if ci is not None:
        env["CI"] = ci
    return subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "-rA",
         "-o", "markers=slow", str(tmp_path)],
        capture_output=True, text=True, env=env, cwd=tmp_path, check=False)


def test_unexpected_skip_fails_under_ci(tmp_path: Path) -> None:
    done = _run(tmp_path, "true")
    assert done.returncode == 1, done.stdout
    assert "1 failed, 2 skipped" in done.stdout, done.stdout
    assert "FAILED test_probe.py::test_broken_import_skip" in done.stdout


def test_skips_are_skips_outside_ci(tmp_path: Path) -> None:
    done = _run(tmp_path, None)
    assert done.returncode == 0, done.stdout
    assert "3 skipped" in done.stdout, done.stdout
