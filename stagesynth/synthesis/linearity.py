"""What limits an analysed design's distortion, and what its local feedback bought.

Engine-side explanation for the synthesis rationale, the report and the message of an
unreachable THD: per transistor, the junction drive v̂b'e at the THD level (from the
linear solution at thd_at), the collector-current modulation îc/IC, and the local
feedback factor F = |v_b'| / |v_b'e| (1 + gm·RE for a degenerated common emitter, large
for a follower), which divides that transistor's second harmonic at a given output
(Gray & Meyer's feedback relation). A junction FET's square law gives, alone, HD2 =
v̂gs/(4·(VGS − VP)) and îd/ID = 2·v̂gs/(VGS − VP) (Sedra & Smith, the FET chapter).
Each transistor's share of HD2 is the first term of the power series: its second-order
current at 2f carried to the load by the linear network. The Early effect's share comes
from the power-series estimate with and without its nonlinear term.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stagesynth.contracts.device import thermal_voltage
from stagesynth.engine.analysis import Analysis
from stagesynth.quantities.units import format_quantity as fq


@dataclass(frozen=True)
class Contribution:
    ref: str
    vbe_peak: float  # V, junction drive at the THD level
    modulation: float  # îc/IC
    feedback: float  # F = |v_b'|/|v_b'e| (>= 1)
    hd2_share: float  # this transistor's second harmonic at the load over V1, alone
    overdrive: float = 0.0  # V, VGS − VP for a junction FET (0: bipolar)


@dataclass(frozen=True)
class Linearity:
    thd: float
    hd2: float
    hd3: float
    level_vpp: float
    freq: float
    contributions: tuple[Contribution, ...]
    early_share: float  # fraction of HD2 due to the Early effect (ro), estimate

    @property
    def limiting(self) -> Contribution:
        return max(self.contributions, key=lambda c: c.hd2_share)


def linearity(analysis: Analysis) -> Linearity | None:
    """The breakdown at the analysis's own THD level and frequency (None without THD)."""
    fig = analysis.figures
    if (fig is None or fig.thd is None or analysis.thd is None
            or not analysis.design.transistors):
        return None
    from stagesynth.engine.circuit import compile_design
    from stagesynth.engine.distortion import _dc_subset
    from stagesynth.engine.volterra import harmonics

    circuit = compile_design(analysis.design)
    level = float(fig.thd_level[0])
    freq = float(fig.thd_freq[0])
    system = analysis.system
    v = system.node_voltages(np.array([[freq]]))[0, 0, :]
    ext = np.concatenate([v, [0.0, 0.0]])
    per_volt = level / 2.0 / max(abs(v[circuit.output]), 1e-300)  # EMF for the level
    dc = fig.dc
    out = []
    # each transistor's second-order current at 2f, injected collector-to-emitter, reaches
    # the load through the linear network at 2f (first term of the power series): the
    # circuit's feedback around that transistor is in that transimpedance, so a common
    # base fed a current by the stage below is ranked as the little it adds
    from stagesynth.engine.noise import adjoint

    z2 = adjoint(system, np.array([[2.0 * freq]]))[0][0, 0]
    v1 = level / 2.0
    nb = len(circuit.bjts)
    for k, q in enumerate(circuit.transistors):
        vbe = abs(ext[q.bi] - ext[q.e]) * per_volt
        vb = abs(ext[q.bi]) * per_volt
        feedback = max(vb / max(vbe, 1e-300), 1.0)
        bias = abs(float(dc.ic[0, k]))
        reach = abs(z2[q.c] - z2[q.e]) / v1
        if k < nb:  # exponential: i2 = IC·x²/4, x = v̂be/VT
            vt = float(thermal_voltage(dc.tj[0, k]))
            out.append(Contribution(q.ref, vbe, vbe / vt, feedback,
                                    bias * (vbe / vt) ** 2 / 4.0 * reach))
        else:  # square law: i2 = ID·(v̂gs/VOV)²/2, VOV = VGS − VP(Tj) in the N frame
            vov = max(float(dc.vbe[0, k] - dc.vp[0, k - nb]), 1e-6)
            out.append(Contribution(q.ref, vbe, 2.0 * vbe / vov, feedback,
                                    bias * (vbe / vov) ** 2 / 2.0 * reach, vov))
    member = _dc_subset(dc, np.array([0]))
    with_ro = harmonics(system, member, freq, level / 2.0)[0][0]
    without = harmonics(system, member, freq, level / 2.0, early=False)[0][0]
    share = 1.0 - without / with_ro if with_ro > 0 else 0.0
    return Linearity(analysis.nominal.thd, analysis.nominal.hd2 or 0.0,
                     analysis.nominal.hd3 or 0.0, level, freq, tuple(out), float(share))


def _pct(x: float) -> str:
    return f"{100 * x:.3g} %"


def mechanism(lin: Linearity) -> str:
    """One sentence naming what limits the THD."""
    q = lin.limiting
    order = "second" if lin.hd2 >= lin.hd3 else "third"
    level = fq(lin.level_vpp, "Vpp")
    if q.overdrive:
        text = (f"the limit is {q.ref}'s square law: at {level} its gate–source voltage swings "
                f"{fq(q.vbe_peak, 'V')} peak against VGS − VP = {fq(q.overdrive, 'V')}, and its "
                f"drain current ±{_pct(q.modulation)} of the bias, mostly {order} harmonic")
    else:
        text = (f"the limit is {q.ref}'s exponential: at {level} its junction swings "
                f"{fq(q.vbe_peak, 'V')} peak and its collector current ±{_pct(q.modulation)} "
                f"of the bias, mostly {order} harmonic")
    if q.feedback > 1.05:
        text += (f", already divided about {q.feedback:.3g}-fold by local feedback "
                 f"(1 + gm·{'RS' if q.overdrive else 'RE'})")
    else:
        text += ", with no local feedback to reduce it"
    if abs(lin.early_share) > 0.2:
        text += f"; the Early effect (ro) adds about {_pct(lin.early_share)} of HD2"
    return text


def notes(lin: Linearity) -> list[str]:
    """Rationale lines for the report and the synthesis notes."""
    q = lin.limiting
    lines = [
        f"Distortion: THD {_pct(lin.thd)} at {fq(lin.level_vpp, 'Vpp')}, {fq(lin.freq, 'Hz')} "
        f"(HD2 {_pct(lin.hd2)}, HD3 {_pct(lin.hd3)}; harmonic balance, nominal); "
        + mechanism(lin) + ".",
    ]
    if q.feedback > 1.05:
        lines.append(
            f"Local feedback: without it {q.ref} would give about {_pct(lin.hd2 * q.feedback)} "
            f"HD2 at the same output ({20 * math.log10(q.feedback):.1f} dB more); more "
            f"unbypassed {'source' if q.overdrive else 'emitter'} resistance, a larger bias "
            "current (a smaller share of it swung) or the gain shared between two stages each "
            "buy more.")
    for c in lin.contributions:
        if c is not q:
            what = "gate–source swing" if c.overdrive else "junction swing"
            lines.append(f"{c.ref}: {what} {fq(c.vbe_peak, 'V')} peak, "
                         f"{'drain' if c.overdrive else 'collector'} current "
                         f"±{_pct(c.modulation)}, local feedback ×{c.feedback:.3g}.")
    return lines
