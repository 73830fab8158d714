"""Text report: golden text at 80 columns, verdict words and symbols, semantic styles.

Golden strings are the exact rendered text (the habit of rich's own tests,
``tests/test_table.py``), compared line by line with trailing spaces removed.
"""

from __future__ import annotations

import io

from grading_helpers import dsb_analysis
from rich.theme import Theme

from iqscope.grading import grade
from iqscope.measure._result import Artefact
from iqscope.report._text import print_grade, render_verdict_table
from iqscope.report._theme import STYLES, make_console, verdict_label, verdict_style

DC = Artefact("dc_line", 0.0, -52.0, "line at the capture centre, -52 dBc: may be the receiver's DC offset")

GOLDEN_FAIL = """\
──────────────────── iqscope grade: bench/dsb40m.sigmf-meta ────────────────────
recording  bench/dsb40m.sigmf-meta (sigmf, ci16_le)
           48 kS/s, 480 000 samples, 10 s, centre 7.100000 MHz
signal     DSB, carrier 7.103210 MHz (offset +3.210 kHz), centre of symmetry
limits     home-built (default for dsb)


 measurement                            value   limit             verdict
 ────────────────────────────────────────────────────────────────────────
 carrier suppression             8.0 ± 0.2 dB   ≥ 40 dB           ✘ FAIL
                                                warn ≥ 30 dB
 sideband balance              0.12 ± 0.05 dB   -1 .. 1 dB        ✔ PASS
                                                warn -3 .. 3 dB
 99 % bandwidth             2.100 ± 0.015 kHz   ≤ 6 kHz           ✔ PASS
                                                warn ≤ 7 kHz
 -26 dB bandwidth           2.050 ± 0.012 kHz   ≤ 7 kHz           ✔ PASS
                                                warn ≤ 8 kHz
 noise floor           -120.00 ± 0.10 dBFS/Hz                     -
 peak level                         -6.0 dBFS                     -
 clipped samples                          0 %   ≤ 0 %             ✔ PASS
                                                warn ≤ 0.1 %

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
(5 W is +37 dBm). Presets are a convenience, not legal advice: local regulations
decide.
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
