"""The "Distortion" section of the report: THD against level, spectrum, waveforms.

Draws what `stagesynth.engine.thdsweep` computed from the harmonic-balance solution; nothing
here computes physics.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from stagesynth.judging.textout import fmt
from stagesynth.report.document import Figure as DocFigure
from stagesynth.report.document import Section, Table
from stagesynth.report.plotstyle import BLUE, GRID_MINOR, INK, ORANGE, _new_figure

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

    from stagesynth.engine.thdsweep import DistortionViews

RED = "#9e1c1c"


def distortion_figure(v: DistortionViews) -> Figure:
    """Three panels: THD vs output level, the spectrum at the THD level, the waveforms."""
    fig = _new_figure(10.5, 3.5)
    ax_l, ax_s, ax_w = fig.subplots(1, 3)
    ok = v.converged
    ax_l.loglog(v.levels[ok], 100 * v.thd[ok], color=BLUE, linewidth=1.6, marker="o",
                markersize=3, label="THD (harmonic balance)")
    if np.any(~ok):
        ax_l.loglog(v.levels[~ok], 100 * v.thd[~ok], linestyle="none", marker="o",
                    markersize=4, markerfacecolor="none", color=BLUE,
                    label="not converged (hard clipping)")
    ax_l.loglog(v.levels[ok], 100 * v.hd2[ok], color="#6a8fc0", linewidth=0.9,
                linestyle=(0, (4, 2)), label="HD2")
    ax_l.loglog(v.levels[ok], 100 * v.hd3[ok], color="#9a9a9a", linewidth=0.9,
                linestyle=(0, (1, 1.5)), label="HD3")
    ax_l.axvline(v.swing_vpp, color=RED, linewidth=1.0, label="swing limit (clipping)")
    if v.thd_limit is not None:
        ax_l.axhline(100 * v.thd_limit, color=ORANGE, linewidth=1.0, linestyle=(0, (4, 2)),
                     label="required THD")
        ax_l.plot([v.level_vpp], [100 * v.thd_limit], marker="v", color=ORANGE, markersize=7,
                  label="at thd_level")
    ax_l.set_xlabel("output level (Vpp)")
    ax_l.set_ylabel("distortion (%)")
    ax_l.set_title(f"THD against level at {fmt(v.freq, 'Hz')}", fontsize=10, color=INK,
                   loc="left")
    k = np.arange(2, 11)
    db = 20 * np.log10(np.maximum(v.spectrum[1:], 1e-12))
    ax_s.bar(k, db - db.min() + 5, bottom=db.min() - 5, color=BLUE, width=0.6)
    ax_s.set_xticks(k)
    ax_s.set_xlabel("harmonic k")
    ax_s.set_ylabel("V_k / V_1 (dB)")
    ax_s.set_title(f"Spectrum at {v.level_vpp:.3g} Vpp", fontsize=10, color=INK, loc="left")
    ax_w.plot(v.phase, v.wave_clip, color=RED, linewidth=1.2,
              label=f"at the swing limit, {v.swing_vpp:.3g} Vpp")
    ax_w.plot(v.phase, v.wave_level, color=BLUE, linewidth=1.6,
              label=f"at {v.level_vpp:.3g} Vpp")
    ax_w.set_xlabel("time (periods)")
    ax_w.set_ylabel("v_load (V)")
    ax_w.set_title("Load voltage over one period", fontsize=10, color=INK, loc="left")
    for ax in (ax_l, ax_s, ax_w):
        ax.grid(True, color=GRID_MINOR, linewidth=0.5)
        ax.set_axisbelow(True)
        ax.tick_params(labelsize=8.5)
    for ax in (ax_l, ax_w):
        ax.legend(fontsize=7, loc="upper left", frameon=True, facecolor="white",
                  edgecolor="none", framealpha=0.92)
    fig.subplots_adjust(left=0.06, right=0.99, top=0.9, bottom=0.16, wspace=0.3)
    return fig


def distortion_section(v: DistortionViews, notes: list[str] | None = None) -> Section:
    """THD at the level, the clipping side and why, the figure and the rationale lines."""
    rows = [
        ("THD at the level", f"{100 * v.thd_at_level:.3g} %"),
        ("output level (fundamental)", f"{v.level_vpp:.3g} Vpp"),
        ("frequency", fmt(v.freq, "Hz")),
        ("HD2 / HD3", f"{100 * v.spectrum[1]:.3g} % / {100 * v.spectrum[2]:.3g} %"),
        ("swing limit (nominal)", f"{v.swing_vpp:.3g} Vpp, {v.clip_edge}"),
    ]
    if v.thd_limit is not None:
        rows.insert(1, ("required", f"at most {100 * v.thd_limit:.3g} %"))
    blocks: list = [
        "Periodic steady state of the large-signal circuit (the contract's device law on "
        "instantaneous values, capacitors linear, junction temperatures held at their DC "
        "values) by harmonic balance, nominal conditions; the EMF is set so that the "
        "fundamental at the load has the stated level. The verdict judges THD at nominal "
        "and at every corner (see Requirements).",
        Table(("figure", "value"), tuple(rows), numeric=(1,)),
        DocFigure("distortion", "Distortion against level, spectrum and waveforms",
                  "Left: THD (with HD2, HD3) against output level from 1 % of the swing limit "
                  "up to it, log scales; the red line is the swing limit"
                  + (", the orange line and marker the requirement at thd_level"
                     if v.thd_limit is not None else "")
                  + ". Middle: harmonics 2…10 at the THD level. Right: the load voltage over "
                  "one period at the THD level and at the swing limit."),
    ]
    if v.clip_side:
        blocks.append(f"Clipping: the {v.clip_side} output peaks meet the limit first. "
                      f"{v.clip_reason}.")
    if notes:
        blocks.append(list(notes))
    return Section("Distortion", tuple(blocks))
