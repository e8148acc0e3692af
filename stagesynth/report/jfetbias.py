"""The "Bias over the JFET spread" section: both corner units' transfer curves, the bias line.

The picture practitioners draw by hand for a junction FET: the square-law transfer curves
of the low unit (IDSS min, VP nearest zero) and the high unit (IDSS max, VP farthest) at
the ambient extremes, with the bias line crossing them. Everything drawn comes from
`stagesynth.engine.jfetbias.bias_views` (the engine's own DC solution and laws); nothing
here computes physics.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from stagesynth.judging.textout import fmt
from stagesynth.report.docmodel import Figure as DocFigure
from stagesynth.report.docmodel import Section, Table
from stagesynth.report.plotstyle import _STYLE, BLUE, INK, ORANGE, _new_figure

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

    from stagesynth.engine.analysis import Analysis
    from stagesynth.engine.jfetbias import BiasView

GREY = "#6b6b6b"


def views(analysis: Analysis) -> tuple[BiasView, ...]:
    """The engine's bias views of every junction FET of the design (empty for none)."""
    from stagesynth.engine.jfetbias import bias_views

    return bias_views(analysis)


def bias_figure(views_: tuple[BiasView, ...]) -> Figure:
    """One panel per junction FET: ID against VGS (N-channel frame) for both corner units at
    both ambient extremes, their operating points and each ambient's bias line."""
    import matplotlib

    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(8.6, 4.9 * len(views_))
        axes = fig.subplots(len(views_), 1, squeeze=False)[:, 0]
        for ax, v in zip(axes, views_, strict=True):
            ambients = sorted({p.ambient for p in v.points})
            # the operating points, not IDSS, set the scale: the region the bias uses
            top = min(float(np.max(v.curves)),
                      2.5 * max(p.i_d for p in v.points)) * 1e3
            for k, p in enumerate(v.points):
                color = BLUE if p.unit == "low" else ORANGE
                dash = "-" if p.ambient == ambients[0] else (0, (5, 2.5))
                name = ("low unit (IDSS min, VP nearest 0)" if p.unit == "low"
                        else "high unit (IDSS max, VP farthest)")
                ax.plot(v.vgs, v.curves[k] * 1e3, color=color, linestyle=dash, linewidth=1.8,
                        label=f"{name}, {p.ambient:g} °C")
                ax.plot([p.vgs], [p.i_d * 1e3], marker="o", markersize=6, color=color,
                        markeredgecolor=INK, zorder=5)
            for amb in ambients:
                line = v.line(amb)
                if line is None:
                    continue
                vg, rs = line
                ids = v.line_current(amb)
                keep = (ids >= 0) & (ids * 1e3 <= 1.08 * top)
                dash = "-" if amb == ambients[0] else (0, (5, 2.5))
                ax.plot(v.vgs[keep], ids[keep] * 1e3, color=GREY, linestyle=dash,
                        linewidth=1.2, label=f"bias line at {amb:g} °C: VGS = "
                        f"{fmt(vg, 'V')} − ID·{fmt(rs, 'Ω')}")
            lit = v.curves * 1e3 <= 1.08 * top  # where the curves are inside the frame
            lo = float(np.min(v.vgs[np.any(lit, axis=0)])) if np.any(lit) else float(v.vgs[0])
            ax.set_xlim(lo, 0.0)
            ax.set_ylim(0.0, 1.08 * top)
            ax.set_xlabel("VGS (N-channel sense), V")
            ax.set_ylabel("ID, mA")
            ax.set_title(f"{v.ref}: transfer curves of the corner units and the bias line",
                         fontsize=10, loc="left")
            ax.grid(True, color="#e2e2de", linewidth=0.6)
            ax.legend(fontsize=7.5, loc="upper left", frameon=False)
        fig.tight_layout()
        return fig


def bias_table(views_: tuple[BiasView, ...]) -> Table:
    """Each corner unit's law and operating point, and its distance from the triode edge."""
    rows = []
    for v in views_:
        for p in v.points:
            rows.append((v.ref, p.label, fmt(p.idss, "A"), fmt(p.vp, "V"), fmt(p.vgs, "V"),
                         fmt(p.i_d, "A"), fmt(p.vds, "V"), fmt(p.edge, "V"),
                         fmt(p.headroom, "V")))
    return Table(("JFET", "corner", "IDSS", "VP", "VGS", "ID", "VDS", "VGS − VP",
                  "VDS above the triode edge"), tuple(rows), numeric=(2, 3, 4, 5, 6, 7, 8))


def bias_section(views_: tuple[BiasView, ...]) -> Section:
    """The report section for a design holding a junction FET."""
    return Section("Bias over the JFET spread", (
        "A junction FET's IDSS and pinch-off voltage spread several-fold between units, "
        "together: the low unit of the pairing has IDSS min with the VP nearest zero, the "
        "high unit IDSS max with the VP farthest. The bias network puts every unit on one "
        "bias line in the VGS–ID plane; each unit runs where that line crosses its transfer "
        "curve. The design was chosen so that both corner units, at both ambient extremes "
        "(and with the gate leakage through the gate resistor, doubling every 10 K), stay "
        "in saturation with the required swing.",
        DocFigure("jfetbias", "Transfer curves of the corner units with the bias line",
                  "Square-law transfer curves ID = IDSS·(1 − VGS/VP)² of the corner units "
                  "at their junction temperature (solid: coldest ambient, dashed: hottest), "
                  "the operating points from the DC solution at the low-supply corners "
                  "(circles), and the bias line through each ambient's pair of points "
                  "(grey; its offset includes the gate leakage's lift at that ambient)."),
        bias_table(views_),
    ))
