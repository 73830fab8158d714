"""Text report: golden text at 80 columns, verdict words and symbols, semantic styles.

Golden strings are the exact rendered text (the habit of rich's own tests,
``tests/test_table.py``), compared line by line with trailing spaces removed.
"""

from __future__ import annotations

import io

from grading_helpers import dsb_analysis
from rich.theme import Theme

from iqscope.grading import grade
from iqscope.measure._result import Artefact, Measurement
from iqscope.report._text import print_grade, render_verdict_table
from iqscope.report._theme import STYLES, make_console, verdict_label, verdict_style

DC = Artefact("dc_line", 0.0, -52.0, "line at the capture centre, -52 dBc: may be the receiver's DC offset")

GOLDEN_FAIL = """\
──────────────────── iqscope grade: bench/dsb40m.sigmf-meta ────────────────────
recording  bench/dsb40m.sigmf-meta (sigmf, ci16_le)
           48 kS/s, 480 000 samples, 10 s, centre 7.100000 MHz
signal     DSB, carrier 7.103210 MHz (offset +3.210 kHz), centre of symmetry
limits     home-built (default for dsb)


 measurement                            value   limit            verdict
 ───────────────────────────────────────────────────────────────────────
 carrier suppression             8.0 ± 0.2 dB   ≥ 40 dB          ✘ FAIL
                                                warn ≥ 30 dB
 sideband balance              0.12 ± 0.05 dB   ±1 dB            ✔ PASS
                                                warn ±3 dB
 99 % bandwidth             2.100 ± 0.015 kHz   ≤ 6 kHz          ✔ PASS
                                                warn ≤ 7 kHz
 -26 dB bandwidth           2.050 ± 0.012 kHz   ≤ 7 kHz          ✔ PASS
                                                warn ≤ 8 kHz
 noise floor           -120.00 ± 0.10 dBFS/Hz                    -
 peak level                         -6.0 dBFS                    -
 clipped samples                          0 %   ≤ 0 %            ✔ PASS
                                                warn ≤ 0.1 %
 worst spur                   -61.3 ± 0.4 dBc   ≤ -43 dBc        ✔ PASS
                                                warn ≤ -40 dBc

spurs
lines outside the necessary band, levels re the mean power; spurious domain
beyond ±15.00 kHz of the emission centre (250 % of the 6.00 kHz necessary
bandwidth, SM.1539), 14.58 kHz of it recorded

line            re carrier     re mean power   domain        what
────────────────────────────────────────────────────────────────────────
7.100000 MHz    -3.210 kHz         -52.0 dBc   out-of-band   receiver DC
7.119210 MHz   +16.000 kHz   -61.3 ± 0.4 dBc   spurious

overall  ✘ FAIL

why
  • carrier suppression: outside the warn limit (>= 30 dB)

receiver and recording
  • line at the capture centre, -52 dBc: may be the receiver's DC offset

advice
  • carrier leak: trim the modulator balance (balance potentiometer and
    trimmer), check the diode matching and the carrier-oscillator drive level
  • a line at the capture centre is often the receiver's own DC offset: retune
    the receiver so the signal sits well away from the centre and record again

Caution: figures include the receiver chain. Transmit only into a dummy load or
an antenna you are licensed to use, with enough attenuation before the receiver
(5 W is +37 dBm). RF burns happen even at a few watts, and RF exposure limits
apply. Presets are a convenience, not legal advice: local regulations decide.
"""


def render(result, width: int = 80, **kw) -> str:
    buf = io.StringIO()
    console = make_console(file=buf, width=width, color_system=None, **kw)
    print_grade(result, console)
    return "\n".join(line.rstrip() for line in buf.getvalue().splitlines())


def test_golden_fail_report() -> None:
    result = grade(dsb_analysis(8.0, spectrum=False, with_traces=False, artefacts=(DC,)))
    assert render(result) == GOLDEN_FAIL.rstrip("\n")


def test_noise_limited_bound_and_pass() -> None:
    text = render(grade(dsb_analysis(62.9, noise_limited=True, spectrum=False, with_traces=False)))
    line = next(l for l in text.splitlines() if l.lstrip().startswith("carrier suppression"))
    assert "≥ 62 dB" in line and "✔ PASS" in line
    assert "(noise-limited)" in text
    assert "overall  ✔ PASS" in text
    assert "\nadvice" not in text


def test_inconclusive_is_marked_and_advised() -> None:
    text = render(grade(dsb_analysis(35.0, noise_limited=True, spectrum=False, with_traces=False)))
    assert "! WARN?" in text
    assert "carrier suppression: inconclusive: noise floor too high" in text
    assert "record for longer" in text


def test_verdicts_never_rely_on_colour() -> None:
    for status in ("pass", "warn", "fail"):
        word = verdict_label(status)
        assert status.upper() in word and word[0] in "✔!✘"
        assert verdict_style(status) == f"iqscope.{status}" and f"iqscope.{status}" in STYLES
    assert verdict_label("fail", ascii_only=True) == "x FAIL"


def test_styles_are_semantic_names() -> None:
    """Swapping the theme's definition of iqscope.fail changes the output's colour codes."""
    result = grade(dsb_analysis(8.0, spectrum=False, with_traces=False))
    outputs = []
    for colour in ("red", "blue"):
        buf = io.StringIO()
        console = make_console(file=buf, width=80, color_system="standard")
        console.push_theme(Theme({"iqscope.fail": colour}))
        console.print(render_verdict_table(result))
        outputs.append(buf.getvalue())
    assert "\x1b[31m" in outputs[0] and "\x1b[34m" in outputs[1]


class _AsciiFile(io.StringIO):
    encoding = "ascii"


def test_ascii_console_gets_ascii_symbols() -> None:
    buf = _AsciiFile()
    console = make_console(file=buf, width=80, color_system=None)
    print_grade(grade(dsb_analysis(65.0, spectrum=False, with_traces=False)), console)
    text = buf.getvalue()
    text.encode("ascii")  # nothing outside ASCII
    assert "+ PASS" in text and "+/-" in text


# -- every measurement key has a label and reads well ---------------------------------

PIPELINE_KEYS = (
    # every key a provider in iqscope/measure/ writes (grep "Measurement(" there)
    "carrier_suppression_db", "carrier_below_pep_db", "opposite_sideband_suppression_db",
    "sideband_balance_db", "modulation_index", "occupied_bandwidth_hz", "bandwidth_26db_hz",
    "necessary_bandwidth_hz", "imd3_dbc", "imd5_dbc", "imd7_dbc", "imd3_db_pep", "imd5_db_pep",
    "imd7_db_pep", "tone_balance_db", "worst_spur_dbc", "mean_power_dbm", "pep_dbm",
    "mean_power_w", "pep_w", "frequency_offset_hz", "frequency_error_hz", "drift_hz_per_min",
    "drift_peak_to_peak_hz", "drift_worst_window_hz", "warmup_settling_s", "allan_deviation",
    "noise_floor_dbfs_per_hz", "peak_dbfs", "clipped_fraction",
)


def test_every_pipeline_key_has_a_label() -> None:
    from iqscope.report._text import LABELS, label

    for key in PIPELINE_KEYS:
        assert key in LABELS, key
        assert "_" not in label(key) and not label(key).endswith((" hz", " db", " w", " dbc"))


def _table_text(measurements: dict, mode: str = "usb", width: int = 100) -> str:
    from grading_helpers import analysis_with

    buf = io.StringIO()
    console = make_console(file=buf, width=width, color_system=None)
    console.print(render_verdict_table(grade(analysis_with(mode, measurements))))
    return buf.getvalue()


def test_details_shown_beside_values() -> None:
    """The emission designator (47 CFR 2.202 code: 2.4 kHz -> 2K40) beside the necessary
    bandwidth; the averaging time beside an Allan deviation; watts with a prefix
    (0.5 mW is 27 dB below +30 dBm = 1 W: computed, not "0.001 W")."""
    text = _table_text(
        {
            "necessary_bandwidth_hz": Measurement(2400.0, "Hz", 2.6, details={"designator": "2K40J3E"}),
            "allan_deviation": Measurement(1.9e-9, "1", 0.9e-9, details={"tau_quoted_s": 10.0}),
            "mean_power_dbm": Measurement(-3.01, "dBm", 0.5),
            "mean_power_w": Measurement(5.0e-4, "W", 6e-5),
            "pep_w": Measurement(0.012, "W", 0.0014),
            "drift_worst_window_hz": Measurement(0.8, "Hz", 0.05, details={"window_s": 120.0}),
            "warmup_settling_s": Measurement(None, "s", details={"lower_bound_s": 80.0}),
        }
    )
    assert "necessary bandwidth" in text and "2.400 ± 0.003 kHz (2K40J3E)" in text
    assert "Allan deviation" in text and "(1.9 ± 0.9)e-09 at τ = 10 s" in text
    assert "-3.0 ± 0.5 dBm" in text and "500 ± 60 µW" in text and "12.0 ± 1.4 mW" in text
    assert "0.001 W" not in text
    assert "worst 2-min drift" in text
    assert "> 1 min 20 s (not settled)" in text


def test_noise_limited_levels_read_as_upper_bounds() -> None:
    """DESIGN.md section 3: a figure the noise hides is the bound the noise allows."""
    text = _table_text(
        {
            "worst_spur_dbc": Measurement(-88.49, "dBc", limited_by_noise=True, bound="upper"),
            "imd5_dbc": Measurement(-95.2, "dBc", limited_by_noise=True, bound="upper"),
            "opposite_sideband_suppression_db": Measurement(62.7, "dB", limited_by_noise=True, bound="lower"),
        },
        mode="two-tone",
    )
    assert "≤ -88 dBc (noise-limited)" in text  # rounded outwards: -88.49 -> -88
    assert "≤ -95 dBc (noise-limited)" in text
    assert "≥ 62 dB (noise-limited)" in text


def test_spur_table_marks_receiver_artefacts() -> None:
    from iqscope.report._text import spur_rows

    result = grade(dsb_analysis(37.6, spectrum=False, with_traces=False))
    rows, left = spur_rows(result)
    assert left == 0 and len(rows) == 2
    dc, spur = rows
    assert dc[4] == "receiver DC" and dc[3] == "out-of-band" and dc[1] == "-3.210 kHz"
    assert spur[0] == "7.119210 MHz" and spur[1] == "+16.000 kHz" and spur[3] == "spurious"
    assert spur[2] == "-61.3 ± 0.4 dBc" and spur[4] == ""
    text = render(result)
    assert "spurs\n" in text and "receiver DC" in text


def test_no_spur_table_without_lines() -> None:
    from grading_helpers import dsb_measurements

    ms = dsb_measurements(37.6)
    ms["worst_spur_dbc"] = Measurement(-91.0, "dBc", limited_by_noise=True, bound="upper", details={"spurs": []})
    text = render(grade(dsb_analysis(37.6, measurements=ms, spectrum=False, with_traces=False)))
    assert "\nspurs" not in text and "≤ -91 dBc (noise-limited)" in text


def test_labels_and_json_doc_cover_every_key_the_providers_write() -> None:
    """Scan iqscope/measure/ for the keys providers write (``measurements["k"] = ...``,
    ``ms["k"] = ...``, the ``imd{order}`` family), so a new figure cannot ship with a raw
    name in the reports or undocumented in the JSON contract page."""
    import re
    from pathlib import Path

    import iqscope.measure
    from iqscope.report._text import LABELS

    root = Path(iqscope.measure.__file__).parent
    found: set[str] = set()
    for src in root.rglob("*.py"):  # rglob: measure/drift/ is a package
        text = src.read_text(encoding="utf-8")
        found |= set(re.findall(r"""(?:measurements|ms)\[["']([a-z0-9_]+)["']\]\s*=""", text))
        if 'f"imd{order}_dbc"' in text:
            found |= {f"imd{n}_{kind}" for n in (3, 5, 7) for kind in ("dbc", "db_pep")}
    assert "worst_spur_dbc" in found and "allan_deviation" in found  # the scan works
    assert found <= set(PIPELINE_KEYS), found - set(PIPELINE_KEYS)
    assert not found - set(LABELS), found - set(LABELS)
    doc = (root.parent.parent / "docs" / "json.md").read_text(encoding="utf-8")
    missing = [k for k in PIPELINE_KEYS if f"`{k}`" not in doc]
    assert not missing, f"docs/json.md does not list {missing}"


def test_am_index_shows_envelope_index_and_peaks() -> None:
    """DESIGN.md section 3: the modulation index from the lines and from the envelope,
    (Emax - Emin) / (Emax + Emin), plus the positive and negative peaks. Envelope 1.85 /
    0.15 about a mean of 1: m = 1.7 / 2.0 = 0.85, peaks +85 % / 85 % (closed form)."""
    e_max, e_min, e_mean = 1.85, 0.15, 1.0
    m = Measurement(
        0.85,
        "1",
        0.002,
        details={
            "index_envelope": (e_max - e_min) / (e_max + e_min),
            "positive_peak": e_max / e_mean - 1.0,
            "negative_peak": 1.0 - e_min / e_mean,
        },
    )
    text = _table_text({"modulation_index": m}, mode="am")
    assert "from the envelope" in text and "0.850" in text
    assert "85 % / 85 %" in text


def test_not_measured_figures_say_why_once_per_reason() -> None:
    why = "not measured: only 7 of 7 blocks had the line above the noise (need 8)."
    ms = {
        "drift_hz_per_min": Measurement(None, "Hz/min", note=why),
        "allan_deviation": Measurement(None, "1", note=why),
        "necessary_bandwidth_hz": Measurement(None, "Hz", note="the emission is a single line"),
    }
    from grading_helpers import analysis_with

    from iqscope.report._text import unmeasured_notes

    notes = unmeasured_notes(grade(analysis_with("cw", ms)))
    assert notes == [
        "drift rate, Allan deviation: only 7 of 7 blocks had the line above the noise (need 8).",
        "necessary bandwidth: the emission is a single line",
    ]
