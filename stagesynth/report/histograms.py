"""The Monte Carlo histograms of the report: gain, f_low, f_high and swing over the built
units, bins over the data's own span, the spec's limits drawn."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.quantities.units import format_quantity
from stagesynth.report.plotstyle import (
    _STYLE,
    BLUE,
    GRID_MINOR,
    INK,
    ORANGE,
    _new_figure,
    _num,
    eng_label,
)

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

    from stagesynth.contracts.spec import Spec


_HIST_PANELS = (
    ("gain_db", "gain", "dB"),
    ("f_low", "f_low", "Hz"),
    ("f_high", "f_high", "Hz"),
    ("swing_vpp", "swing", "Vpp"),
)
_HIST_BINS = (12, 40)  # fewest and most bins a panel gets


def histogram_bins(vals: np.ndarray) -> np.ndarray:
    """Bin edges over the data's own span (Freedman–Diaconis width, numpy's "fd"), kept
    between 12 and 40 bins, so a narrow spread shows its shape wherever the limits lie."""
    lo, hi = float(vals.min()), float(vals.max())
    if not hi > lo:
        width = abs(lo) * 1e-3 or 1e-3
        return np.linspace(lo - 6 * width, hi + 6 * width, _HIST_BINS[0] + 1)
    n = len(np.histogram_bin_edges(vals, bins="fd")) - 1
    n = int(min(max(n, _HIST_BINS[0]), _HIST_BINS[1]))
    pad = (hi - lo) / n / 2
    return np.linspace(lo - pad, hi + pad, n + 1)


def _tick_formatter(unit: str):
    """Tick labels in engineering notation with as many digits as the tick spacing needs
    (neighbouring ticks never print the same text)."""
    from matplotlib.ticker import Formatter

    class _Eng(Formatter):
        def _text(self, v: float, digits: int) -> str:
            if unit == "dB":
                return _num(v, f".{max(0, digits - 2)}f")
            text = format_quantity(v, "V" if unit == "Vpp" else unit, digits=digits)
            return text + ("pp" if unit == "Vpp" else "")

        def format_ticks(self, values):
            locs = np.asarray(values, dtype=float)
            step = float(np.min(np.abs(np.diff(locs)))) if locs.size > 1 else 0.0
            big = float(np.max(np.abs(locs))) if locs.size else 1.0
            digits = (int(min(max(math.ceil(math.log10(big / step)) + 1, 2), 7))
                      if step > 0 and big > 0 else 3)
            return [self._text(v, digits) for v in locs]

        def __call__(self, v, pos=None):
            return self._text(v, 4)

    return _Eng()


def histogram_figure(estimate, spec: Spec) -> Figure:
    """Monte Carlo spread of gain, f_low, f_high and swing, with the spec's limits drawn.

    Each unit contributes its value at the worse of the two ambient extremes, so a unit
    is inside every limit drawn here exactly when it passes those requirements. Bins
    follow the data; a limit far from the spread is named at the panel's edge with an
    arrow instead of squeezing the histogram into one bar. No legend sits on the data:
    the limits are named in each panel's title and once below the figure.
    """
    import matplotlib
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.ticker import MaxNLocator

    r = spec.require
    limits = {
        "gain_db": (r.gain_db - r.gain_tolerance_db, r.gain_db + r.gain_tolerance_db),
        "f_low": (None, r.f_low),
        "f_high": (r.f_high, None),
        "swing_vpp": (r.swing_vpp if r.swing_vpp > 0 else None, None),
    }
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(8.6, 6.4)
        axes = fig.subplots(2, 2)
        for ax, (key, title, unit) in zip(axes.ravel(), _HIST_PANELS, strict=True):
            vals = np.asarray(estimate.metrics[key], dtype=float)
            vals = vals[np.isfinite(vals)]
            lo, hi = limits[key]
            named = []
            if vals.size:
                bins = histogram_bins(vals)
                ax.hist(vals, bins=bins, color=BLUE, alpha=0.85, edgecolor="white",
                        linewidth=0.4, zorder=2)
                left, right = float(bins[0]), float(bins[-1])
                span = right - left
                # show a limit in place when it lies within a span of the data
                for x in (lo, hi):
                    if x is not None and left - span <= x <= right + span:
                        left, right = min(left, x - 0.04 * span), max(right, x + 0.04 * span)
                ax.set_xlim(left, right)
                for x, side in ((lo, "min"), (hi, "max")):
                    if x is None:
                        continue
                    named.append(f"{side} {eng_label(x, 'V' if unit == 'Vpp' else unit)}"
                                 + ("pp" if unit == "Vpp" else ""))
                    if left <= x <= right:
                        ax.axvline(x, color=ORANGE, linewidth=1.8, zorder=3)
                    else:
                        at_right = x > right
                        ax.annotate(f"{side} limit {'→' if at_right else '←'}",
                                    xy=(1.0 if at_right else 0.0, 0.93),
                                    xycoords="axes fraction", ha="right" if at_right
                                    else "left", va="top", fontsize=8, color=ORANGE)
            limits_text = (", limits " + ", ".join(named)) if named else ""
            ax.set_title(f"{title} at the worse ambient{limits_text}", fontsize=9.5,
                         color=INK, loc="left")
            ax.set_ylabel("units (count)", fontsize=9)
            ax.set_xlabel(f"{title}  ({unit})", fontsize=9)
            ax.xaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
            ax.yaxis.set_major_locator(MaxNLocator(nbins=5, integer=True))
            ax.xaxis.set_major_formatter(_tick_formatter(unit))
            ax.tick_params(labelsize=8)
            ax.grid(True, color=GRID_MINOR, linewidth=0.5)
            ax.set_axisbelow(True)
            ax.set_ylim(0, ax.get_ylim()[1] * 1.12)  # headroom for the edge notes
        fig.legend([Patch(facecolor=BLUE, alpha=0.85), Line2D([], [], color=ORANGE,
                                                              linewidth=1.8)],
                   ["simulated units", "spec limit (an arrow: beyond the panel's edge)"],
                   loc="lower center", ncols=2, frameon=False, fontsize=8.5)
        fig.suptitle(
            f"Monte Carlo: {estimate.units} units, {100 * estimate.estimate:.2f} % meet every "
            f"requirement (seed {estimate.seed})", fontsize=10.5, x=0.02, ha="left",
            color=INK)
        fig.subplots_adjust(left=0.08, right=0.98, top=0.89, bottom=0.15, hspace=0.62,
                            wspace=0.22)
    return fig
