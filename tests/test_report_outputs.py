"""Report outputs: JSON documents, PNG plots, the HTML page and the SigMF annotation file."""

from __future__ import annotations

import base64
import io
import json
import re
import warnings
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from grading_helpers import CENTER, FS, dsb_analysis

from iqscope.grading import grade
from iqscope.measure._analysis import Analysis, RecordingInfo
from iqscope.measure._result import Artefact
from iqscope.report import (
    annotated_meta_path,
    batch_document,
    dumps,
    render_html,
    render_plots,
    write_annotated_meta,
)

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


# -- JSON -------------------------------------------------------------------------------


def test_json_single_and_batch() -> None:
    good, bad = grade(dsb_analysis(65.0, spectrum=False)), grade(dsb_analysis(8.0, spectrum=False))
    one = json.loads(dumps(good.to_json()))
    assert one["schema"] == "iqscope.grade/1" and one["overall"] == "pass"
    both = json.loads(dumps(batch_document([good, bad])))
    assert both["schema"] == "iqscope.grade-batch/1"
    assert [r["overall"] for r in both["results"]] == ["pass", "fail"]
    assert both["overall"] == "fail" and both["errors"] == []
    err = batch_document([good], [{"path": "x.wav", "error": "x.wav: truncated", "exit_status": 3}])
    assert err["overall"] == "error"


def test_json_never_writes_nan() -> None:
    r = grade(dsb_analysis(float("nan"), spectrum=False))
    doc = json.loads(dumps(r.to_json()))  # allow_nan=False would raise on NaN
    assert doc["measurements"]["carrier_suppression_db"]["value"] is None


# -- plots ------------------------------------------------------------------------------


def _png_pixels(png: bytes) -> np.ndarray:
    from matplotlib.image import imread

    return np.asarray(imread(io.BytesIO(png), format="png"))


def test_plots_are_pngs_with_content() -> None:
    pngs = render_plots(grade(dsb_analysis(37.6)))
    assert list(pngs) == ["spectrum", "spectrogram", "envelope"]
    for name, png in pngs.items():
        assert png.startswith(PNG_MAGIC), name
        pix = _png_pixels(png)
        assert pix.shape[0] > 300 and pix.shape[1] > 600
        assert float(pix[..., :3].std()) > 0.05, f"{name} looks blank"


def test_plots_skip_what_is_missing() -> None:
    assert render_plots(grade(dsb_analysis(37.6, spectrum=False, with_traces=False))) == {}


def test_plot_module_does_not_use_pyplot() -> None:
    """Agg canvas only: no global pyplot state in a library (matplotlib's own advice for
    embedding, "Embedding in a web application server" example)."""
    import iqscope.report._plots as plots

    source = Path(plots.__file__).read_text(encoding="utf-8")
    assert "import matplotlib.pyplot" not in source and "from matplotlib import pyplot" not in source
    assert "FigureCanvasAgg" in source


# -- HTML -------------------------------------------------------------------------------


class _Collector(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def test_html_is_self_contained_and_phone_ready() -> None:
    r = grade(dsb_analysis(8.0, artefacts=(Artefact("dc_line", 0.0, -52.0, "line at the capture centre"),)))
    html = render_html([r], [render_plots(r)], generated="2026-12-01 00:00 UTC")
    p = _Collector()
    p.feed(html)
    text = " ".join(p.text)
    metas = [a for t, a in p.tags if t == "meta"]
    assert any(a.get("name") == "viewport" and "width=device-width" in (a.get("content") or "") for a in metas)
    assert "@media (max-width" in html
    imgs = [a for t, a in p.tags if t == "img"]
    assert len(imgs) == 3
    for a in imgs:
        src = a["src"] or ""
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1]).startswith(PNG_MAGIC)
        assert a.get("alt")
    # nothing external: no http(s) URL, no script, no stylesheet link
    assert not re.search(r"""(src|href)=["']?https?:""", html)
    assert not any(t in ("script", "link", "iframe") for t, _ in p.tags)
    assert "✘ FAIL" in text and "carrier suppression" in text
    assert "carrier leak: trim the modulator balance" in text
    assert "dummy load" in text and "+37 dBm" in text and "not legal advice" in text
    assert "line at the capture centre" in text


def test_html_escapes_recording_text() -> None:
    a = dsb_analysis(37.6, spectrum=False, with_traces=False, path="<b>evil</b>&.sigmf-meta")
    html = render_html([grade(a)], generated="x")
    assert "<b>evil</b>" not in html and "&lt;b&gt;evil&lt;/b&gt;&amp;" in html


# -- SigMF annotation -------------------------------------------------------------------


def _write_sigmf(folder: Path, n: int = 4800) -> Path:
    from iqscope.io import write_sigmf

    x = (0.1 * np.exp(2j * np.pi * 0.05 * np.arange(n))).astype(np.complex64)
    return Path(write_sigmf(folder / "bench", x, FS, center_frequency_hz=CENTER))


def _analysis_for(meta: Path, n: int = 4800) -> Analysis:
    a = dsb_analysis(8.0, artefacts=(Artefact("dc_line", 0.0, -52.0, "line at the capture centre"),))
    rec = RecordingInfo(
        path=str(meta), format="sigmf", sample_rate_hz=FS, center_frequency_hz=CENTER, n_samples=n
    )
    return Analysis(
        recording=rec,
        signal=a.signal,
        measurements=a.measurements,
        artefacts=a.artefacts,
        spectrum=a.spectrum,
        markers=a.markers,
    )


def test_annotated_meta_path() -> None:
    assert annotated_meta_path("d/x.sigmf-meta") == Path("d/x.graded.sigmf-meta")
    assert annotated_meta_path("d/x.sigmf-data") == Path("d/x.graded.sigmf-meta")
    assert annotated_meta_path("d/x.sigmf") is None
    assert annotated_meta_path("d/x.wav") is None


def test_annotate_writes_new_valid_sigmf_and_leaves_input(tmp_path: Path) -> None:
    """The new metadata validates with the sigmf package (its JSON schema, spec 1.2.x)
    and reads the same samples through core:dataset; the input files are unchanged."""
    import sigmf

    written = _write_sigmf(tmp_path)
    meta = written if written.name.endswith(".sigmf-meta") else written.with_name("bench.sigmf-meta")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    result = grade(_analysis_for(meta))
    out = write_annotated_meta(result)
    assert out == tmp_path / "bench.graded.sigmf-meta"
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir() if p != out} == before
    assert not (tmp_path / "bench.graded.sigmf-data").exists()  # nothing copied

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        handle = sigmf.fromfile(str(out))
    handle.validate()
    original = sigmf.fromfile(str(meta))
    np.testing.assert_array_equal(handle.read_samples(), original.read_samples())
    doc = json.loads(out.read_text(encoding="utf-8"))
    assert {"name": "iqscope", "version": "1.0.0", "optional": True} in doc["global"]["core:extensions"]
    ours = [a for a in doc["annotations"] if "iqscope:overall" in a]
    assert len(ours) == 1 and ours[0]["iqscope:overall"] == "fail"
    assert ours[0]["core:label"] == "iqscope fail"
    assert ours[0]["core:freq_lower_edge"] == pytest.approx(CENTER + 3210.0 - 1050.0)
    assert any(v["measurement"] == "carrier_suppression_db" for v in ours[0]["iqscope:verdicts"])
    assert any(a.get("iqscope:artefact") == "dc_line" for a in doc["annotations"])
    starts = [a["core:sample_start"] for a in doc["annotations"]]
    assert starts == sorted(starts)


def test_annotate_refuses_to_overwrite(tmp_path: Path) -> None:
    from iqscope.errors import OutputError

    written = _write_sigmf(tmp_path)
    meta = written if written.name.endswith(".sigmf-meta") else written.with_name("bench.sigmf-meta")
    result = grade(_analysis_for(meta))
    write_annotated_meta(result)
    with pytest.raises(OutputError, match="already exists"):
        write_annotated_meta(result)
    write_annotated_meta(result, force=True)


def test_plots_survive_silence_and_nan() -> None:
    """A recording of digital silence (PSD all zero) or a PSD with NaN still draws."""
    from dataclasses import replace

    a = dsb_analysis(37.6)
    assert a.spectrum is not None
    for psd in (np.zeros_like(a.spectrum.psd), np.where(np.arange(a.spectrum.psd.size) % 7 == 0, np.nan, a.spectrum.psd)):
        b = replace(a, spectrum=replace(a.spectrum, psd=psd), traces={})
        pngs = render_plots(grade(b))
        assert pngs["spectrum"].startswith(PNG_MAGIC)


def test_html_shows_spur_table_bounds_and_designator() -> None:
    """The spur table (receiver artefacts marked), noise-limited values as bounds
    (DESIGN.md section 3) and the emission designator beside the necessary bandwidth."""
    from grading_helpers import dsb_measurements

    from iqscope.measure._result import Measurement

    ms = dsb_measurements(62.7, noise_limited=True)
    ms["necessary_bandwidth_hz"] = Measurement(2100.0, "Hz", 2.6, details={"designator": "2K10A3E"})
    html = render_html([grade(dsb_analysis(62.7, measurements=ms, spectrum=False, with_traces=False))], generated="x")
    p = _Collector()
    p.feed(html)
    text = " ".join(p.text)
    assert "≥ 62 dB (noise-limited)" in text
    assert "2.100 ± 0.003 kHz (2K10A3E)" in text
    assert "Spurs" in text and '<table class="spurs">' in html
    assert '<tr class="receiver"><td class="line">7.100000 MHz</td>' in html
    assert "receiver DC" in text and "+16.000 kHz" in text and "-61.3 ± 0.4 dBc" in text


def test_spectrum_draws_spurs_limit_and_receiver_lines() -> None:
    """Stored numbers only: a spurious-domain line at reference + level (dBc re mean
    power), the graded spur limit (47 CFR 97.307(d): -43 dBc) over the spurious domain,
    and the receiver's DC line named as such."""
    from grading_helpers import SIGNAL_DBFS

    from iqscope.report._plots import spectrum_figure

    dc = Artefact("dc_line", 0.0, -52.0, "line at the capture centre")
    fig = spectrum_figure(grade(dsb_analysis(37.6, artefacts=(dc,), with_traces=False)))
    ax = fig.axes[0]
    labels = [t.get_text() for legend in fig.legends for t in legend.get_texts()]
    assert "spur limit (a line's level): -43 dBc re mean power" in labels
    limit = [ln for ln in ax.lines if ln.get_linestyle() == "--" and ln.get_color() == "#c0392b"]
    assert limit and all(np.allclose(ln.get_ydata(), SIGNAL_DBFS - 43.0) for ln in limit)
    marks = [ln for ln in ax.lines if ln.get_marker() == "v"]
    assert len(marks) == 1 and np.allclose(marks[0].get_ydata(), SIGNAL_DBFS - 61.3)
    assert np.allclose(marks[0].get_xdata(), 16.0)  # kHz from the carrier
    texts = [t.get_text() for t in ax.texts]
    assert "receiver DC" in texts and "-61 dBc" in texts


def test_carrier_limit_drawn_against_the_sideband_power() -> None:
    """carrier_suppression_db = P_sidebands / P_carrier (DESIGN.md section 3): the 40 dB
    limit line sits 40 dB below the stored sideband power (carrier power + the figure)."""
    from grading_helpers import SIGNAL_DBFS, dsb_measurements

    from iqscope.measure._result import Measurement
    from iqscope.report._plots import spectrum_figure

    ms = dsb_measurements(37.6)
    ms["carrier_suppression_db"] = Measurement(
        37.6, "dB", 0.2, details={"carrier_power_dbfs": SIGNAL_DBFS - 37.6}
    )
    fig = spectrum_figure(grade(dsb_analysis(37.6, measurements=ms, with_traces=False)))
    labels = [t.get_text() for legend in fig.legends for t in legend.get_texts()]
    assert "carrier limit: 40 dB below the sideband power" in labels
    bar = [ln for ln in fig.axes[0].lines if ln.get_linewidth() == 2.0]
    assert len(bar) == 1 and np.allclose(bar[0].get_ydata(), SIGNAL_DBFS - 40.0)
