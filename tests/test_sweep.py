"""Drive sweep: 1 dB compression, IMD3 limit crossing, OIP3 and IM3 slope.

Check values and their source: the memoryless complex-envelope cubic y = x + k |x|^2 x
driven by two tones of amplitude a (expansion in tests/test_imd.py): each tone comes
out with amplitude a (1 + 3 k a^2), each IM3 product with |k| a^3, and the envelope
peak is 2a (1 + 4 k a^2). Hence, with drive d = 20 log10(a / a_ref):

- compression (re the small-signal line) = -20 log10(1 + 3 k a^2); 1 dB at
  a^2 = (1 - 10^(-1/20)) / (3 |k|) (standard 1 dB compression definition);
- IMD3 re PEP = 20 log10(|k| a^3 / (2a (1 + 4 k a^2)));
- OIP3 = P_tone + (P_tone - P_IM3)/2 = -10 log10|k| + 30 log10(1 + 3 k a^2)
  (REFERENCES.md item 6 formula applied to the expansion); the IM3 slope is exactly
  3 dB/dB (IM3 amplitude |k| a^3).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from iqscope.measure.sweep import Crossing, SweepPoint, analyse_sweep, crossing

K = -2.0
A_REF = 0.1


def cubic_point(d: float, k: float = K) -> SweepPoint:
    a = A_REF * 10 ** (d / 20)
    tone = 20 * math.log10(a * (1 + 3 * k * a * a))
    im3 = 20 * math.log10(abs(k) * a**3)
    pep = 20 * math.log10(2 * a * (1 + 4 * k * a * a))
    return SweepPoint(d, tone_dbfs=tone, imd3_dbc=im3 - tone, imd3_db_pep=im3 - pep)


class TestCrossing:
    def test_interpolates(self) -> None:
        c = crossing([0.0, 1.0, 2.0], [0.0, 0.5, 1.5], 1.0, other=[10.0, 11.0, 12.0])
        assert c.drive_db == pytest.approx(1.5) and c.value == pytest.approx(11.5)

    def test_not_reached_and_already_past(self) -> None:
        assert crossing([0.0, 1.0], [0.0, 0.2], 1.0).bound == "above"
        assert crossing([0.0, 1.0], [2.0, 3.0], 1.0).bound == "below"
        assert crossing([0.0, 1.0], [None, None], 1.0) == Crossing(None, None, None, "no values")


class TestCubicSweep:
    drives = np.arange(-20.0, 8.01, 0.5)

    def result(self, limit: float = -30.0):  # type: ignore[no-untyped-def]
        return analyse_sweep([cubic_point(float(d)) for d in self.drives], limit)

    def test_p1db(self) -> None:
        """1 dB compression at a^2 = (1 - 10^-0.05)/(3|k|); tolerance 0.05 dB (0.5 dB steps,
        linear interpolation of a smooth curve; the small-signal gain from the two lowest
        points is 0.004 dB off the true one)."""
        r = self.result()
        a2 = (1 - 10 ** (-1 / 20)) / (3 * abs(K))
        want = 20 * math.log10(math.sqrt(a2) / A_REF)
        assert r.output_kind == "tone"
        assert r.p1db.drive_db == pytest.approx(want, abs=0.05)
        assert r.p1db.value == pytest.approx(want - 20.0 - 1.0, abs=0.05)  # gain -20 dB, 1 dB down

    def test_imd3_crossing(self) -> None:
        """Drive at which IMD3 re PEP reaches -40 dB, by root finding on the closed form."""

        def f(d: float) -> float:
            a = A_REF * 10 ** (d / 20)
            return 20 * math.log10(abs(K) * a**3 / (2 * a * (1 + 4 * K * a * a))) + 40.0

        want = brentq(f, -20.0, 8.0)
        r = self.result(limit=-40.0)
        assert r.imd3_crossing.drive_db == pytest.approx(want, abs=0.05)

    def test_oip3_and_slope(self) -> None:
        """OIP3 median over points with < 0.5 dB compression equals the closed form there;
        IM3 slope exactly 3 dB/dB."""
        r = self.result()
        weak = []
        for d, c in zip(self.drives, r.compression_db):
            if c is not None and c < 0.5:
                a2 = (A_REF * 10 ** (d / 20)) ** 2
                weak.append(-10 * math.log10(abs(K)) + 30 * math.log10(1 + 3 * K * a2))
        assert r.oip3_dbfs == pytest.approx(float(np.median(weak)), abs=1e-6)
        assert r.oip3_dbfs == pytest.approx(-10 * math.log10(2.0), abs=0.3)
        assert r.im3_slope == pytest.approx(3.0, abs=1e-6)
        assert not r.notes

    def test_json_and_bounds(self) -> None:
        r = analyse_sweep([cubic_point(d) for d in (-20.0, -18.0, -16.0)])
        js = r.to_json()
        json.dumps(js, allow_nan=False)
        assert js["p1db"]["bound"] == "above" and js["p1db"]["drive_db"] is None
        assert js["imd3_crossing"]["bound"] == "above"

    def test_needs_two_distinct_points(self) -> None:
        with pytest.raises(ValueError):
            analyse_sweep([cubic_point(0.0)])
        with pytest.raises(ValueError):
            analyse_sweep([cubic_point(0.0), cubic_point(0.0)])

    def test_mean_output_without_tones(self) -> None:
        """Without two-tone figures, compression comes from the mean output power."""
        pts = [SweepPoint(d, output_dbfs=d - 10.0 - (0.0 if d < 0 else 0.5 * d)) for d in (-6.0, -3.0, 0.0, 2.0, 4.0)]
        r = analyse_sweep(pts)
        assert r.output_kind == "mean"
        assert r.p1db.drive_db == pytest.approx(2.0)
        assert r.imd3_crossing.note.startswith("no IMD3")


class TestSweepCommand:
    def test_two_tone_sweep_from_metadata(self, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
        """Five two-tone recordings through the cubic, drive stored in the SigMF metadata:
        the per-point IMD3 (dBc) matches the closed form within 0.2 dB, the IM3 slope is 3."""
        from iqscope.cli import main
        from iqscope.io import write_sigmf

        fs, n = 48_000.0, 96_000
        rng = np.random.default_rng(5)
        t = np.arange(n) / fs
        files = []
        drives = [-12.0, -9.0, -6.0, -3.0, 0.0]
        for d in drives:
            a = A_REF * 10 ** (d / 20)
            x = a * np.exp(2j * np.pi * 1700.37 * t) + a * np.exp(2j * np.pi * 2900.81 * t)
            y = x + K * np.abs(x) ** 2 * x
            y = y + (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * math.sqrt(1e-12 * fs / 2)
            files.append(
                str(write_sigmf(tmp_path / f"d{d:+.0f}", y, fs, center_frequency_hz=14.2e6, extra_global={"iqscope:drive_db": d}))
            )
        assert main(["sweep", *files, "--carrier", "1000", "--json"]) == 0
        out = json.loads(capsys.readouterr().out)
        for p, d in zip(out["points"], drives):
            a = A_REF * 10 ** (d / 20)
            want = 20 * math.log10(abs(K) * a * a / (1 + 3 * K * a * a))
            assert p["imd3_dbc"] == pytest.approx(want, abs=0.2)
        assert out["im3_slope_db_per_db"] == pytest.approx(3.0, abs=0.1)
        plots = tmp_path / "plots"
        assert main(["sweep", *files, "--carrier", "1000", "--drive=" + ",".join(str(d) for d in drives), "--plot", str(plots)]) == 0
        assert (plots / "sweep.png").read_bytes()[:4] == b"\x89PNG"
        text = capsys.readouterr().out
        assert "Drive sweep" in text
        assert "dummy load" in text and "attenuation" in text and "RF burns" in text

    def test_drive_count_mismatch(self, tmp_path: Path) -> None:
        from iqscope.cli import main
        from iqscope.io import write_sigmf

        x = np.zeros(4096, complex)
        f1 = str(write_sigmf(tmp_path / "a", x, 48_000.0))
        f2 = str(write_sigmf(tmp_path / "b", x, 48_000.0))
        assert main(["sweep", f1, f2, "--drive", "1,2,3"]) == 4


class TestRendering:
    def test_text_and_png(self) -> None:
        """The report renders the sweep (rich, injected console) and a PNG (Agg)."""
        import io

        from iqscope.report._sweep import render_sweep_png, sweep_renderable
        from iqscope.report._theme import make_console

        pts = [cubic_point(float(d)) for d in np.arange(-12.0, 8.01, 2.0)]
        pts[0] = SweepPoint(**{**pts[0].__dict__, "opposite_sideband_db": 70.0, "opposite_sideband_limited": True})
        data = analyse_sweep(pts, -40.0).to_json()
        buf = io.StringIO()
        console = make_console(buf, width=120, color_system=None)
        console.print(sweep_renderable(data, ascii_only=True))
        text = buf.getvalue()
        assert "1 dB compression (per-tone output) at drive" in text
        assert "IMD3 reaches -40 dB PEP at drive" in text
        assert ">= 70.0" in text
        assert render_sweep_png(data)["sweep"][:4] == b"\x89PNG"
