"""One figure, one value, one label, one reference across the outputs of ``grade``.

A two-tone signal made the way the synthesizer's closed form gives it: two equal tones
through a cubic amplifier y = x + k|x|^2 x. Each IMD3 product is then |k| a^3 beside a
tone of amplitude a (1 + 3 k a^2 for the compressed tone) (two-tone IMD of a cubic, e.g.
the closed form behind ``iqscope.synth.cubic_k_for_imd3``). The same product appears in
the verdict table (``imd3_dbc``, re one tone), as ``imd3_db_pep`` (re PEP) and in the
spur table (re the mean power of the emission, which for two equal tones is 2 tones:
3.01 dB above one). Each output must say which reference it uses, and the numbers must
differ by exactly the reference ratio.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from iqscope.cli import main
from iqscope.io import write_sigmf

FS = 48_000.0
K = -0.74
A = 10 ** (-18 / 20)


@pytest.fixture(scope="module")
def two_tone(tmp_path_factory: pytest.TempPathFactory) -> str:
    rng = np.random.default_rng(11)
    n = 96_000
    t = np.arange(n) / FS
    x = A * np.exp(2j * np.pi * 1700.37 * t) + A * np.exp(2j * np.pi * 2900.81 * t)
    y = x + K * np.abs(x) ** 2 * x
    y = y + (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * math.sqrt(1e-12 * FS / 2)
    folder = tmp_path_factory.mktemp("story")
    return str(write_sigmf(folder / "tt", y.astype(np.complex64), FS, center_frequency_hz=14.2e6))


def _json(capsys: pytest.CaptureFixture[str], *argv: str) -> dict:
    main(list(argv))
    return json.loads(capsys.readouterr().out)


def test_imd_references_are_stated_and_consistent(two_tone: str, capsys: pytest.CaptureFixture[str]) -> None:
    doc = _json(capsys, "grade", two_tone, "--mode", "two-tone", "--carrier", "1000", "--json")
    m = doc["measurements"]
    dbc, pep = m["imd3_dbc"], m["imd3_db_pep"]
    assert dbc["details"]["reference"] == "mean power of one tone"
    assert pep["details"]["reference"] == "peak envelope power"
    # closed form of the cubic: product / compressed tone amplitude ratio
    want = 20 * math.log10(abs(K) * A * A / (1 + 3 * K * A * A))
    assert dbc["value"] == pytest.approx(want, abs=3 * dbc["uncertainty"] + 0.05)  # 3 sigma + window bias
    products = dbc["details"]["products"]
    worst = max(products.values(), key=lambda p: p["level_dbc"])
    # the worst product's level re PEP is the imd3_db_pep figure itself (same reference)
    assert worst["level_db_pep"] == pytest.approx(pep["value"], abs=1e-9)
    # the spur table lists the same products re the mean power: the difference is the
    # reference ratio (one tone / mean power, about -3.01 dB for two equal tones)
    spurs = m["worst_spur_dbc"]["details"]
    ratio = dbc["details"]["reference_tone_dbfs"] - spurs["reference_dbfs"]
    assert ratio == pytest.approx(-10 * math.log10(2), abs=0.05)  # products add ~0.003 dB
    for side, p in products.items():
        line = min(spurs["spurs"], key=lambda s: abs(s["offset_hz"] - p["freq_hz"]))
        assert abs(line["offset_hz"] - p["freq_hz"]) < 2.0, side
        assert line["level_dbc"] == pytest.approx(p["level_dbc"] + ratio, abs=3 * line["uncertainty_db"] + 0.01)


def test_text_report_names_the_reference_of_each_level(two_tone: str, capsys: pytest.CaptureFixture[str]) -> None:
    main(["grade", two_tone, "--mode", "two-tone", "--carrier", "1000"])
    text = capsys.readouterr().out
    doc = _json(capsys, "grade", two_tone, "--mode", "two-tone", "--carrier", "1000", "--json")
    dbc = doc["measurements"]["imd3_dbc"]["details"]["products"]
    assert "IMD3 (re one tone)" in text and "IMD3 (re PEP)" in text
    assert "re mean power" in text  # the spur table's level column
    for side, p in dbc.items():
        # the spur row of the product also shows the figure's own value, re one tone
        assert f"IMD3 {side} ({p['level_dbc']:.1f} dBc" in " ".join(text.split())


def test_html_spur_table_names_its_reference(two_tone: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    report = tmp_path / "r.html"
    main(["grade", two_tone, "--mode", "two-tone", "--carrier", "1000", "--report", str(report), "-q"])
    capsys.readouterr()
    html = report.read_text(encoding="utf-8")
    assert "level re mean power" in html and "dBc re one tone" in html
