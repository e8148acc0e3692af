"""The noise figure of the report: input-referred density and spot noise figure against
frequency, drawn from the engine's own noise sweep (noise.noise_curves)."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.report.plots import plot_range, sweep
from stagesynth.report.plotstyle import (
    _STYLE,
    BLUE,
    MASK,
    ORANGE,
    _band_lines,
    _eng_log_axis,
    _grid,
    _label_box,
    _new_figure,
    eng_label,
)

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis


def noise_data(analysis: Analysis, spec: Spec | None = None) -> dict[str, np.ndarray]:
    """The sweep behind the plot (the engine's figures over the plot's range)."""
    from stagesynth.engine.noise import noise_curves

    lo, hi = plot_range(analysis, spec)
    return noise_curves(analysis, sweep(lo, hi, 40))


def noise_plot(analysis: Analysis, spec: Spec | None = None) -> Figure:
    """Density (log–log) with the requirement and the source's own thermal noise; below
    it the spot noise figure (when the source has a resistance)."""
    import matplotlib

    from stagesynth.engine.noise import noise_summary

    with matplotlib.rc_context(_STYLE):
        data = noise_data(analysis, spec)
        summary = noise_summary(analysis)
        f = data["f"]
        has_nf = bool(np.any(np.isfinite(data["figure_db"])))
        fig = _new_figure(8.6, 7.4 if has_nf else 5.4)
        ax = fig.add_subplot(2 if has_nf else 1, 1, 1)
        band = (spec.require.f_low, spec.require.f_high) if spec is not None else None
        _band_lines(ax, band, label=False)
        ax.loglog(f, data["density"], color=BLUE, linewidth=2.0, zorder=3,
                  label="stage, input-referred (source's own noise excluded)")
        src = data["source"]
        values = [float(np.min(data["density"])), float(np.max(data["density"]))]
        if np.all(src > 0):
            ax.loglog(f, src, color=MASK, linewidth=1.4, linestyle=(0, (5, 3)), zorder=2,
                      label=f"source resistance's thermal noise at 290 K "
                            f"({eng_label(float(src[0]), 'V/√Hz')})")
            values += [float(src[0])]
        if spec is not None and spec.require.noise is not None:
            at = spec.require.noise_frequency
            lim = spec.require.noise
            ax.plot([at], [lim], marker="v", markersize=9, color=ORANGE, linestyle="none",
                    zorder=5, label=f"requirement ≤ {eng_label(lim, 'V/√Hz')} at "
                                    f"{eng_label(at, 'Hz')}")
            values.append(lim)
        if summary is not None:
            ax.plot([summary.spot], [summary.density], marker="o", markersize=6.5,
                    markerfacecolor="white", markeredgecolor=BLUE, markeredgewidth=1.6,
                    linestyle="none", zorder=6)
            ax.annotate(eng_label(summary.density, "V/√Hz"), xy=(summary.spot, summary.density),
                        xytext=(10, 10), textcoords="offset points", fontsize=9.5,
                        bbox=_label_box(), zorder=7)
        lo, hi = max(min(values), 1e-30), max(values)
        ax.set_xlim(f[0], f[-1])
        ax.set_ylim(lo / 3.0, hi * 3.0)
        _eng_log_axis(ax.xaxis, "Hz", math.log10(f[-1] / f[0]))
        _eng_log_axis(ax.yaxis, "V/√Hz", math.log10(9.0 * hi / lo))
        _grid(ax)
        ax.set_ylabel("noise density")
        ax.set_title("Input-referred noise density (nominal)", loc="left")
        ax.legend(loc="upper right", frameon=True)
        if has_nf:
            ax2 = fig.add_subplot(2, 1, 2, sharex=ax)
            nf = data["figure_db"]
            ax2.semilogx(f, nf, color=ORANGE, linewidth=2.0, zorder=3, label="noise figure")
            if spec is not None and spec.require.noise_figure_db is not None:
                ax2.plot([spec.require.noise_frequency], [spec.require.noise_figure_db],
                         marker="v", markersize=9, color=BLUE, linestyle="none", zorder=5,
                         label=f"requirement ≤ {spec.require.noise_figure_db:g} dB")
                ax2.legend(loc="upper right", frameon=True)
            finite = nf[np.isfinite(nf)]
            ax2.set_ylim(0.0, max(float(np.max(finite)) * 1.15, 1.0))
            _grid(ax2)
            ax2.set_xlabel("frequency")
            ax2.set_ylabel("noise figure (dB)")
            ax2.set_title("Spot noise figure, source at 290 K", loc="left")
        else:
            ax.set_xlabel("frequency")
        fig.subplots_adjust(left=0.14, right=0.97, top=0.95, bottom=0.08, hspace=0.3)
    return fig
