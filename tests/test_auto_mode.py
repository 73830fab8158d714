"""Auto mode on signals as a receiver records them: two-tone tests, AM on the capture
centre, DSB with --tone, and how sure the classification is.

Every signal carries what a direct-conversion receiver adds: white noise and a DC line
(LO leakage) at the capture centre. Truths by construction:

- a two-tone SSB test is two equal lines f1, f2 with third-order products at 2 f1 - f2 and
  2 f2 - f1 from the amplifier's cubic term (ITU-R SM.326 two-tone method; IMD theory of
  a memoryless cubic, from memory);
- AM is A (1 + m cos w_m t): a carrier with two lines m A / 2 (Haykin, AM chapter);
- DSB with a tone is two equal lines at f0 +/- f_m, its carrier at their mean.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from iqscope.grading import grade
from iqscope.io import ArrayRecording
from iqscope.measure import AnalysisRequest, analyse

FS = 48_000.0
N = 1 << 17
T = np.arange(N) / FS
ROOT = Path(__file__).resolve().parents[1]


def _rx(rng: np.random.Generator, x: np.ndarray, dc_dbfs: float = -50.0) -> np.ndarray:
    p = 10 ** (-120 / 10) * FS
    noise = np.sqrt(p / 2) * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    return x + noise + 10 ** (dc_dbfs / 20) * np.exp(0.7j)


def _tone(f: float, a: float) -> np.ndarray:
    return a * np.exp(2j * np.pi * f * T)


def _grade(x: np.ndarray, **kw: object) -> dict:
    return grade(analyse(ArrayRecording(x, FS, 14.2e6), AnalysisRequest(**kw))).to_json()  # type: ignore[arg-type]


@pytest.mark.parametrize("f0,imd_dbc", [(3000.0, -30.0), (-5000.0, -40.0), (0.0, -35.0)])
def test_two_tone_is_recognised(rng: np.random.Generator, f0: float, imd_dbc: float) -> None:
    """USB two-tone 700/1900 Hz on a carrier at f0 (even on the capture centre), no --mode."""
    a = 0.2
    b = a * 10 ** (imd_dbc / 20)
    x = _tone(f0 + 700, a) + _tone(f0 + 1900, a) + _tone(f0 - 500, b) + _tone(f0 + 3100, b)
    j = _grade(_rx(rng, x))
    assert j["signal"]["mode"] == "two-tone"
    assert j["signal"]["mode_detected"] and j["signal"]["mode_confidence"] == "high"
    assert "--carrier" in j["signal"]["how"]
    # IMD is measured: third-order products re one tone, exactly imd_dbc by construction;
    # the figure's 1-sigma at > 50 dB SNR per line is below 0.01 dB: 3 sigma + 0.05 dB of
    # window scalloping allowance (a line between bins, Blackman-Harris, Heinzel 2002).
    assert j["measurements"]["imd3_dbc"]["value"] == pytest.approx(imd_dbc, abs=0.1)
    # Not placed, so the carrier figures are not a pass, and the advice is the option.
    for v in j["verdicts"]:
        if v["measurement"] in ("carrier_suppression_db", "carrier_below_pep_db"):
            assert v["status"] == "warn" and v["inconclusive"]
            assert "--carrier" in v["advice"]
    assert j["overall"] != "pass"


def test_two_tone_demo_without_mode() -> None:
    """The shipped two-tone demo graded with no --mode measures IMD, never 'DSB ... PASS'."""
    out = subprocess.run(
        [sys.executable, "-m", "iqscope", "grade", str(ROOT / "recordings" / "ssb20m_twotone.sigmf-meta"), "--json"],
        capture_output=True, text=True, cwd=ROOT,
    )
    j = json.loads(out.stdout)
    assert j["signal"]["mode"] == "two-tone"
    assert j["measurements"]["imd3_dbc"]["value"] is not None
    assert j["overall"] != "pass"


@pytest.mark.parametrize("m", [0.3, 0.8])
def test_am_on_the_capture_centre_is_am(rng: np.random.Generator, m: float) -> None:
    """AM at the capture centre, carrier -10 dBFS, receiver DC -50 dBFS: AM, not DSB."""
    ac = 10 ** (-10 / 20)
    x = ac * (1 + m * np.cos(2 * np.pi * 1000 * T))
    j = _grade(_rx(rng, x.astype(complex)))
    assert j["signal"]["mode"] == "am"
    assert abs(j["signal"]["carrier_offset_hz"]) < 1.0
    assert "carrier_suppression_db" not in j["measurements"]
    assert not any("modulator balance" in a for a in j["advice"])


def test_am_elsewhere_with_strong_dc_still_am(rng: np.random.Generator) -> None:
    """The DC line is left out when the carrier is elsewhere (the existing rule)."""
    x = 0.3 * (1 + 0.5 * np.cos(2 * np.pi * 1000 * T)) * np.exp(2j * np.pi * 4000 * T)
    j = _grade(_rx(rng, x, dc_dbfs=-20.0))
    assert j["signal"]["mode"] == "am"
    assert j["signal"]["carrier_offset_hz"] == pytest.approx(4000.0, abs=0.05)


def test_dsb_with_tone_option_stays_dsb(rng: np.random.Generator) -> None:
    """DSB, 1 kHz tone, carrier 40 dB below each line, graded with --tone 1000 (no --mode)."""
    f0 = 2500.0
    x = _tone(f0 + 1000, 0.2) + _tone(f0 - 1000, 0.2) + _tone(f0, 0.002)
    j = _grade(_rx(rng, x), tone_hz=1000.0)
    assert j["signal"]["mode"] == "dsb"
    assert j["signal"]["carrier_offset_hz"] == pytest.approx(f0, abs=0.05)
    # Each line is 20 log10(0.2 / 0.002) = 40 dB above the carrier, both together 43.01 dB
    # (definition in docs/measurements.md); 1-sigma < 0.01 dB at these SNRs, 0.1 dB = 3 sigma
    # plus the scalloping allowance.
    assert j["measurements"]["carrier_suppression_db"]["value"] == pytest.approx(43.01, abs=0.1)
    assert "opposite_sideband_suppression_db" not in j["measurements"]


def test_two_bare_lines_are_a_low_confidence_guess(rng: np.random.Generator) -> None:
    """Two equal lines, no carrier, no products: DSB with a tone or a clean two-tone test;
    the mode is a guess, so no mode-dependent figure passes."""
    x = _tone(1200.0, 0.2) + _tone(3200.0, 0.2)
    j = _grade(_rx(rng, x))
    assert j["signal"]["mode_confidence"] == "low"
    assert any("guessed" in w for w in j["warnings"])
    for v in j["verdicts"]:
        if v["measurement"] in ("carrier_suppression_db", "carrier_below_pep_db", "sideband_balance_db"):
            assert v["status"] != "pass" and v["inconclusive"]
    # With --mode the same recording is graded.
    g = _grade(_rx(rng, x), mode="dsb")
    assert g["signal"]["mode_confidence"] == "given"


def test_two_tone_with_tilt_and_receiver_image(rng: np.random.Generator) -> None:
    """Tones 5 dB apart (audio tilt) and a receiver I/Q image 40 dB down: still two-tone."""
    f0, a = 4000.0, 0.2
    x = _tone(f0 + 700, a) + _tone(f0 + 1900, a * 10 ** (-5 / 20)) + _tone(f0 - 500, 0.006) + _tone(f0 + 3100, 0.006)
    x = x + 0.01 * np.conj(x)  # image-rejection ratio 40 dB (gain/phase imbalance, common practice)
    j = _grade(_rx(rng, x))
    assert j["signal"]["mode"] == "two-tone"
    assert j["measurements"]["imd3_dbc"]["value"] is not None
    assert j["overall"] != "pass"


def test_dsb_of_two_tones_is_sure(rng: np.random.Generator) -> None:
    """DSB of a 700 + 1900 Hz audio pair: four lines in two mirror pairs about f0; the outer
    pair (at 1900 Hz, no odd multiple of 700 Hz) is what no two-tone SSB test has."""
    f0 = 3000.0
    x = _tone(f0 + 700, 0.2) + _tone(f0 - 700, 0.2) + _tone(f0 + 1900, 0.15) + _tone(f0 - 1900, 0.15)
    j = _grade(_rx(rng, x))
    assert j["signal"]["mode"] == "dsb" and j["signal"]["mode_confidence"] == "high"
    assert j["signal"]["carrier_offset_hz"] == pytest.approx(f0, abs=0.05)
