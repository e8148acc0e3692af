"""The pulse response in the report: a two-panel figure and its section.

Draws what `stagesynth.engine.pulse` computed (python-control step responses of the
state-space gain); nothing here computes physics.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.judging.textout import fmt
from stagesynth.quantities.units import format_number, format_quantity
from stagesynth.report.document import Figure as DocFigure
from stagesynth.report.document import Section, Table
from stagesynth.report.plotstyle import BLUE, GRID_MINOR, INK, ORANGE, _new_figure, eng_label

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

    from stagesynth.engine.pulse import PulseResponse


def _time_axis(t: np.ndarray) -> tuple[np.ndarray, str]:
    """Times rescaled to a readable SI unit (s, ms, µs, ns)."""
    top = float(np.max(t)) if t.size else 1.0
    for scale, unit in ((1.0, "s"), (1e-3, "ms"), (1e-6, "µs"), (1e-9, "ns")):
        if top >= 2 * scale or unit == "ns":
            return t / scale, unit
    return t, "s"


def pulse_figure(p: PulseResponse) -> Figure:
    """Left: the step edge (normalized to the flat top); right: the whole pulse."""
    fig = _new_figure(8.6, 3.4)
    ax_e, ax_p = fig.subplots(1, 2)
    te, ue = _time_axis(p.edge_t)
    ax_e.plot(te, p.edge_y / p.flat_top, color=BLUE, linewidth=1.6)
    ax_e.axhline(1.0, color=ORANGE, linestyle=(0, (4, 2)), linewidth=1.0,
                 label="flat top (midband gain)")
    ax_e.axhspan(0.99, 1.01, color=ORANGE, alpha=0.12, linewidth=0, label="±1 % settling band")
    ax_e.set_xlabel(f"time after the step ({ue})")
    ax_e.set_ylabel("v_load / flat top")
    ax_e.set_title("Edge of a small step", fontsize=10, color=INK, loc="left")
    tp, up = _time_axis(p.pulse_t)
    ax_p.plot(tp, p.pulse_y / p.flat_top, color=BLUE, linewidth=1.6)
    w = p.width / (p.pulse_t[-1] / tp[-1]) if tp[-1] else 0.0
    ax_p.axvspan(0.0, w, color="#9a9a9a", alpha=0.12, linewidth=0, label="pulse at the source")
    ax_p.set_xlabel(f"time ({up})")
    ax_p.set_title(f"Pulse of {eng_label(p.width, 's')}: tilt {100 * p.tilt:.2f} %",
                   fontsize=10, color=INK, loc="left")
    for ax in (ax_e, ax_p):
        ax.grid(True, color=GRID_MINOR, linewidth=0.5)
        ax.set_axisbelow(True)
        ax.tick_params(labelsize=8.5)
        ax.legend(fontsize=7.5, loc="lower right", frameon=True, facecolor="white",
                  edgecolor="none", framealpha=0.92)
    fig.subplots_adjust(left=0.08, right=0.98, top=0.9, bottom=0.16, wspace=0.25)
    return fig


def pulse_section(p: PulseResponse) -> Section:
    """Rise, overshoot, settling and tilt as a table, with the figure."""
    def time(x: float) -> str:
        return fmt(x, "s") if math.isfinite(x) else "beyond the window"

    rows = (
        ("flat top (gain after the edge)", format_quantity(p.flat_top, "V/V", 4)),
        ("rise time, 10–90 %", time(p.rise_time)),
        ("overshoot", f"{100 * p.overshoot:.2f} %"),
        ("settling to 1 %", time(p.settling_time)),
        (f"tilt of a {fmt(p.width, 's')} pulse", f"{format_number(100 * p.tilt)} %"),
    )
    return Section("Pulse response", (
        "Small-signal response at the load to a step and to a pulse of the source EMF "
        "(nominal stage), from the state-space form of the gain simulated with "
        "python-control. The edge is set by the high-frequency poles, the tilt (droop of "
        "the pulse top) by the coupling and bypass capacitors.",
        Table(("figure", "value"), rows, numeric=(1,)),
        DocFigure("pulse", "Step edge and pulse response",
                  "Left: the first moments after a step, relative to the flat top. Right: "
                  "the whole pulse; the top droops by the tilt, and the trailing edge "
                  "undershoots by about as much."),
    ))
