"""The report figures' shared look: palette, matplotlib style, engineering-notation axes,
band lines and forbidden areas, and the stable SVG/PNG writing every figure goes through.

matplotlib is imported inside the functions (it is heavy); figures are drawn on the Agg
canvas without touching pyplot's global state.
"""

from __future__ import annotations

import io
import math
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.quantities.units import format_quantity

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

# Our own neutral, colour-blind-safe palette (a blue/orange pair stays distinct under
# the common colour-vision deficiencies and in greyscale, helped by line styles).
INK = "#1f1f1f"
BLUE = "#1d4e89"
ORANGE = "#c0640f"
MASK = "#9a9a9a"
BAND = "#5a5a5a"
GRID_MAJOR = "#c8c8c8"
GRID_MINOR = "#e6e6e6"

_STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 10.0,
    "axes.titlesize": 11.5,
    "axes.labelsize": 10.5,
    "axes.edgecolor": "#444444",
    "axes.linewidth": 0.8,
    "axes.labelcolor": INK,
    "xtick.color": "#333333",
    "ytick.color": "#333333",
    "xtick.labelsize": 9.5,
    "ytick.labelsize": 9.5,
    "legend.fontsize": 9.0,
    "legend.framealpha": 0.92,
    "legend.edgecolor": "#bbbbbb",
    "hatch.linewidth": 0.6,
    "svg.hashsalt": "stagesynth",  # stable element ids: the same design gives the same file
    "svg.fonttype": "none",  # text as text: several times faster to write, searchable
}


def eng_label(value: float, unit: str) -> str:
    """Engineering text for a tick or label: 1000 -> "1 kHz", 8.3 -> "8.3 Hz"."""
    return format_quantity(value, unit, digits=3)


def _num(value: float, spec: str) -> str:
    """A number with a typographic minus sign, matching matplotlib's tick labels."""
    return format(value, spec).replace("-", "\u2212")


def _eng_log_axis(axis, unit: str, span_decades: float) -> None:
    """Decade ticks labelled with SI prefixes; on a short axis the 2 and 5 minors too."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    def label(v: float, _pos: int | None = None) -> str:
        return eng_label(v, unit) if v > 0 else ""

    def minor_label(v: float, _pos: int | None = None) -> str:
        mantissa = v / 10.0 ** math.floor(math.log10(v) + 1e-9)
        return label(v) if round(mantissa, 6) in (2.0, 5.0) else ""

    axis.set_major_locator(LogLocator(base=10.0, numticks=15))
    axis.set_minor_locator(LogLocator(base=10.0, subs=np.arange(2, 10), numticks=15))
    axis.set_major_formatter(FuncFormatter(label))
    axis.set_minor_formatter(FuncFormatter(minor_label) if span_decades < 2.5 else NullFormatter())


def _grid(ax) -> None:
    ax.grid(True, which="major", color=GRID_MAJOR, linewidth=0.8)
    ax.grid(True, which="minor", color=GRID_MINOR, linewidth=0.5)
    ax.set_axisbelow(True)


def _new_figure(width: float, height: float) -> Figure:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), facecolor="white")
    FigureCanvasAgg(fig)  # the Agg canvas, without pyplot's global state
    return fig


def _band_lines(ax, band: tuple[float, float] | None, label: bool) -> None:
    if band is None:
        return
    for k, f in enumerate(band):
        ax.axvline(f, color=BAND, linestyle=(0, (2, 2)), linewidth=1.0, zorder=1,
                   label="required band edge" if label and k == 0 else None)


def _forbidden(ax, f0: float, f1: float, y0: float, y1: float, label: str | None,
               colour: str = MASK, edge: float | None = None) -> None:
    """A shaded rectangle the response must stay out of, its limit drawn as a solid edge.

    Flat fills and lines only (no hatching): SVG hatch patterns do not survive every
    browser's inline rendering, and the HTML report must look like the PNG.
    """
    ax.fill_between([f0, f1], [y0, y0], [y1, y1], facecolor=colour, alpha=0.22,
                    edgecolor="none", linewidth=0.0, zorder=1, label=label)
    if edge is not None:
        ax.plot([f0, f1], [edge, edge], color=colour, linewidth=1.3, zorder=2)


def _label_box() -> dict:
    return {"boxstyle": "round,pad=0.25", "facecolor": "white", "edgecolor": "#bbbbbb",
            "alpha": 0.95, "linewidth": 0.6}


# ---------------------------------------------------------------------------
# Saving
# ---------------------------------------------------------------------------
def figure_svg(fig: Figure) -> bytes:
    """The figure as a standalone SVG document (no timestamp, stable ids)."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context(_STYLE):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    return buf.getvalue()


def figure_png(fig: Figure, dpi: int = 150) -> bytes:
    """The figure as a PNG raster at `dpi`."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context(_STYLE):
        fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()

