"""Plots and report text read by people: tick labels, titles, budget, recommended point, colours,
spectrogram axes (HTML around the image), and Markdown without needless HTML entities.

Figures are inspected through matplotlib's own artist API after drawing (tick label texts,
window extents in pixels). Markdown: CommonMark 0.31 spec, "Block quotes" (``>`` only opens a
block quote at the start of a line; elsewhere it is literal text, so no escape is needed) and
"Entity and numeric character references" (``&gt;`` would be shown as ``>`` by a renderer, but
as ``&gt;`` to someone reading the file).
"""
from __future__ import annotations

import json
import re

import matplotlib.colors as mcolors
import numpy as np
import pytest

from test_report_fixture import make_run

from vocobench.report import ReportOptions, render_report
from vocobench.report import spectrogram
from vocobench.report.plots import rtf_figure, spread

MARGINS = {"mcd_db": 0.5, "pesq_wb": 0.1}


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    run_dir = make_run(tmp_path_factory.mktemp("plots"))
    # 4 utterances: the lowered evidence bars of tests/test_report.py (min_items 4, confidence 0.9)
    res = render_report(run_dir, ReportOptions(margins=MARGINS, rtf_budget=0.2, resamples=300,
                                               plots=False, page=False, min_items=4,
                                               confidence=0.9), echo=False)
    return run_dir, res


def _drawn(fig):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return canvas.get_renderer()


def _visible_tick_labels(ax) -> list[str]:
    lo, hi = sorted(ax.get_xlim())
    out = []
    for minor in (False, True):
        for tick in ax.xaxis.get_major_ticks() if not minor else ax.xaxis.get_minor_ticks():
            text = tick.label1.get_text()
            if text and lo <= tick.get_loc() <= hi and tick.label1.get_visible():
                out.append(text)
    return out


def test_one_schedule_inside_one_decade_has_labels_and_whole_title(result):
    # The fixture's linear/ddim configurations at 16-64 steps: RTF 0.16-0.64, one schedule, less
    # than a decade. Before: a log axis with no power of ten in view had no tick labels at all.
    _, res = result
    t = res.table
    one = t[(t["schedule"] == "linear") & (t["sampler"] == "ddim") & (t["steps"] >= 16)]
    fig = rtf_figure(res.stats, one, "mcd_db", res.decision)
    renderer = _drawn(fig)
    ax = fig.axes[0]
    labels = _visible_tick_labels(ax)
    assert len(labels) >= 3, labels
    assert all(float(x) > 0 for x in labels)
    box, title = fig.bbox, fig._suptitle.get_window_extent(renderer)
    assert box.x0 <= title.x0 and title.x1 <= box.x1 and title.y1 <= box.y1


def test_wide_rtf_range_is_logarithmic_with_labels(result):
    _, res = result
    fig = rtf_figure(res.stats, res.table, "pesq_wb", res.decision)
    _drawn(fig)
    assert fig.axes[0].get_xscale() == "log"          # 0.04 … 0.66 with the budget: > 1 decade
    assert len(_visible_tick_labels(fig.axes[0])) >= 2


def test_budget_line_and_recommended_point(result):
    # Hand (tests/test_report.py): with budget 0.2 the recommendation is linear/ddim/16 at
    # median RTF 0.16 (fixture timing) and PESQ mean 3.65 − 0.035 = 3.615.
    _, res = result
    assert res.decision.recommended == ["linear/ddim/16"]
    fig = rtf_figure(res.stats, res.table, "pesq_wb", res.decision)
    _drawn(fig)
    ax = fig.axes[0]                                   # schedule "linear"
    budget = [ln for ln in ax.get_lines() if ln.get_label().startswith("RTF budget")]
    assert budget and np.allclose(budget[0].get_xdata(), 0.2)
    stars = [c for c in ax.collections if c.get_label() == "recommended"]
    assert len(stars) == 1
    assert np.allclose(stars[0].get_offsets(), [[0.16, 3.615]])
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "recommended" in legend and "RTF budget 0.2" in legend


def test_spread_dots_keep_one_colour_per_utterance(result, tmp_path):
    _, res = result
    import vocobench.report.plots as plots

    seen = {}
    original = plots._save

    def capture(fig, out_dir, stem, *formats):
        seen["fig"] = fig
        return original(fig, out_dir, stem, *formats)

    plots._save = capture
    try:
        spread(res.stats, "mcd_db", tmp_path)
    finally:
        plots._save = original
    ax = seen["fig"].axes[0]
    dots = [c for c in ax.collections if c.get_label() in {"u1", "u2", "u3", "u4"}]
    assert sorted(c.get_label() for c in dots) == ["u1", "u2", "u3", "u4"]
    colours = []
    for c in dots:
        faces = {mcolors.to_hex(f) for f in c.get_facecolors()}
        assert len(faces) == 1                        # one colour across every configuration
        colours.append(faces.pop())
        # one dot per configuration that has a value for this utterance, at the same offset
        offsets = c.get_offsets()[:, 0] - np.round(c.get_offsets()[:, 0])
        assert np.ptp(offsets) < 1e-9 and len(c.get_offsets()) >= len(res.table) - 1
    assert len(set(colours)) == 4
    assert [t.get_text() for t in ax.get_legend().get_texts()] == ["u1", "u2", "u3", "u4"]


def test_spectrogram_has_time_and_frequency_axes(tmp_path):
    # The image is the spectrogram alone, high frequencies in the top row; its axes are HTML
    # around it: ticks at their value's share of the extent, time 0 to the clip's length,
    # frequency 0 to sr/2.
    from PIL import Image
    from scipy.signal import stft

    sr = 16000
    y = np.sin(2 * np.pi * 1000 * np.arange(int(1.5 * sr)) / sr)
    ext = spectrogram.write_spectrogram(y, sr, tmp_path / "s.png")
    assert ext.seconds == pytest.approx(1.5) and ext.khz == pytest.approx(8.0)
    img = np.asarray(Image.open(tmp_path / "s.png").convert("L"), dtype=float)   # magma: brighter = louder
    frames = stft(y, sr, nperseg=spectrogram.NPERSEG, noverlap=3 * spectrogram.NPERSEG // 4)[1]
    assert img.shape == (spectrogram.ROWS, min(frames.size, spectrogram.MAX_COLUMNS))
    # The 1 kHz tone is the brightest row: its centre, counted from the bottom, within one STFT
    # bin (sr / nperseg) of 1 kHz.
    row = img.shape[0] - 1 - int(np.argmax(img.mean(axis=1)))
    height = ext.khz / img.shape[0]
    assert abs((row + 0.5) * height - 1.0) <= sr / spectrogram.NPERSEG / 1000 + height
    cell = spectrogram.axes_html('<img src="s.png">', ext)
    xs = dict(re.findall(r'class="xt" style="left:([\d.]+)%">([\d.]+)<', cell))
    ys = dict(re.findall(r'class="yt" style="bottom:([\d.]+)%">([\d.]+)<', cell))
    assert xs == {"0.000": "0", "33.333": "0.5", "66.667": "1", "100.000": "1.5"}
    assert ys == {"0.000": "0", "25.000": "2", "50.000": "4", "75.000": "6", "100.000": "8"}
    assert "time (s)" in cell and "frequency (kHz)" in cell


def test_summary_keeps_greater_than_signs_readable(tmp_path):
    run_dir = make_run(tmp_path)
    manifest = json.loads((run_dir / "manifest.json").read_text())
    manifest["metrics"]["mcd"]["distance"] = "sqrt(2*sum_d>=1 dc_d^2)"
    (run_dir / "manifest.json").write_text(json.dumps(manifest))
    render_report(run_dir, ReportOptions(margins=MARGINS, resamples=300, plots=False, page=False),
                  echo=False)
    summary = (run_dir / "summary.md").read_text()
    assert "sum_d>=1" in summary
    assert "&gt;" not in summary
    for name in ("table.md", "recommendation.md", "worst_utterances.md"):
        assert "&gt;" not in (run_dir / "report" / name).read_text()
