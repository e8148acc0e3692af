"""The figures read right: no overlapping tick labels, no legend on the data, units on
every axis, histogram bins that show a narrow spread, each impedance limit on its own
curve's panel, and masks that look the same in a browser as in the PNG.

Outside judges: matplotlib's own text extents (Agg renderer), numpy's Freedman–Diaconis
bin width, and headless Chromium rendering the HTML report's inline SVG.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from test_report import DESIGN, SPEC, chromium

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.engine.analysis import analyze
from stagesynth.report.document import inline_svg
from stagesynth.report.plots import (
    bode_figure,
    figure_png,
    figure_svg,
    histogram_figure,
    impedance_figure,
)


@pytest.fixture(scope="module")
def analysis():
    return analyze(design_from_dict(DESIGN, "hydrophone.json"), SPEC)


def _narrow_estimate(seed: int = 7) -> SimpleNamespace:
    """Monte Carlo figures whose spread is far narrower than the distance to the limits
    (gain ±0.05 dB inside a ±1.5 dB window; f_low a few per cent under its limit)."""
    rng = np.random.default_rng(seed)
    n = 2000
    return SimpleNamespace(units=n, estimate=1.0, seed=seed, metrics={
        "gain_db": 26.0 + 0.02 * rng.standard_normal(n),
        "f_low": 11.0 * (1 + 0.003 * rng.standard_normal(n)),
        "f_high": 2.75e5 * (1 + 0.002 * rng.standard_normal(n)),
        "swing_vpp": 6.0 + 0.3 * rng.random(n),
    })


def _boxes(fig, texts):
    renderer = fig.canvas.get_renderer()
    return [t.get_window_extent(renderer) for t in texts if t.get_visible() and t.get_text()]


def _overlap(a, b) -> bool:
    return a.x0 < b.x1 and b.x0 < a.x1 and a.y0 < b.y1 and b.y0 < a.y1


def _tick_labels_clear(fig) -> None:
    fig.canvas.draw()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            labels = [t for t in axis.get_ticklabels() if t.get_text()]
            texts = [t.get_text() for t in labels]
            assert len(set(texts)) == len(texts), texts  # no two ticks read the same
            boxes = _boxes(fig, labels)
            for i in range(len(boxes) - 1):
                assert not _overlap(boxes[i], boxes[i + 1]), texts


def _legends_off_the_data(fig) -> None:
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    legends = list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend()]
    for legend in legends:
        box = legend.get_window_extent(renderer)
        for ax in fig.axes:
            assert not _overlap(box, ax.get_window_extent(renderer)), "legend covers an axes"


def _units_on_every_axis(fig) -> None:
    for ax in fig.axes:
        for label in (ax.get_xlabel(), ax.get_ylabel()):
            if label:
                assert "(" in label and label.rstrip().endswith(")"), label
        assert ax.get_ylabel(), "an axis without a label"
    assert fig.axes[-1].get_xlabel()


def test_histograms_read_right_for_a_narrow_spread():
    est = _narrow_estimate()
    fig = histogram_figure(est, SPEC)
    _tick_labels_clear(fig)
    _legends_off_the_data(fig)
    _units_on_every_axis(fig)
    for ax in fig.axes:
        assert ax.get_xlabel()
        heights = [p.get_height() for p in ax.patches]
        # the shape shows: at least as many filled bins as numpy's Freedman–Diaconis rule
        # gives over the data alone (capped at 12), not one bar squeezed by far limits
        assert sum(h > 0 for h in heights) >= 8, heights


def test_bode_and_impedance_axes_and_legends(analysis):
    for fig in (bode_figure(analysis, SPEC), impedance_figure(analysis, SPEC)):
        _tick_labels_clear(fig)
        _legends_off_the_data(fig)
        _units_on_every_axis(fig)


def test_each_impedance_limit_is_shaded_on_its_own_panel(analysis):
    fig = impedance_figure(analysis, SPEC)
    zin_ax, zout_ax = fig.axes[:2]

    def shaded(ax):
        return [c.get_label() for c in ax.collections if not c.get_label().startswith("_")]
    assert shaded(zin_ax) and all(s.startswith("Z_in") for s in shaded(zin_ax))
    assert shaded(zout_ax) and all(s.startswith("Z_out") for s in shaded(zout_ax))
    # each panel draws one curve: its own
    assert [ln.get_label() for ln in zin_ax.get_lines() if ln.get_label().startswith("|")] == [
        "|Z_in|, load in place"]
    assert [ln.get_label() for ln in zout_ax.get_lines() if ln.get_label().startswith("|")] == [
        "|Z_out|, source in place"]


def _share_of(img: np.ndarray, rgb: tuple[int, int, int], tol: int = 4) -> float:
    return float(np.mean(np.all(np.abs(img[..., :3].astype(int) - rgb) <= tol, axis=-1)))


def test_bode_masks_look_the_same_in_a_browser(analysis, tmp_path):
    """The mask's flat tint covers the same share of the plot in Chromium's rendering of
    the inline SVG as in the PNG (no hatch pattern the browser could lose)."""
    import matplotlib.image as mpimg

    fig = bode_figure(analysis, SPEC)
    svg = figure_svg(fig).decode("utf-8")
    assert "<pattern" not in svg
    png = tmp_path / "bode.png"
    png.write_bytes(figure_png(fig, dpi=100))
    page = tmp_path / "page.html"
    page.write_text("<!doctype html><html><body style='margin:0;background:#fff'>"
                    "<style>svg{width:860px;height:700px;display:block}</style>"
                    + inline_svg(svg, "fig-bode", "Bode") + "</body></html>", encoding="utf-8")
    shot = tmp_path / "shot.png"
    subprocess.run([chromium(), "--headless", "--no-sandbox", "--disable-gpu",
                    "--hide-scrollbars", f"--screenshot={shot}", "--window-size=860,700",
                    page.as_uri()], capture_output=True, timeout=120, check=True)
    ref = (mpimg.imread(png) * 255).round().astype(int)
    got = (mpimg.imread(shot) * 255).round().astype(int)
    # #9a9a9a at alpha 0.22 over white
    tint = tuple(round(255 - 0.22 * (255 - 0x9A)) for _ in range(3))
    a, b = _share_of(ref, tint), _share_of(got, tint)
    assert a > 0.05, a
    assert b == pytest.approx(a, rel=0.25), (a, b)
