"""Two capacitor-coupled common-emitter stages (NPN, and its PNP mirror): non-inverting.

Roles and reference designators (stage 1 = input stage, stage 2 = output stage):

    R1, R2   stage-1 divider (supply side, ground side)      C1  input coupling
    R3       stage-1 collector resistor RC1                   C2  interstage coupling
    R4, R5   stage-1 emitter: RE1 unbypassed, RE2 bypassed    C3  output coupling
    R6, R7   stage-2 divider (supply side, ground side)       C4  stage-1 emitter bypass
    R8       stage-2 collector resistor RC2                   C5  stage-2 emitter bypass
    R9, R10  stage-2 emitter: RE1 unbypassed, RE2 bypassed    Q1, Q2  the transistors

Each stage is biased on its own (the interstage capacitor decouples the DC
points), so each survives the hFE spread and temperature like a single CE.
The output stage is sized first for swing and output impedance, with its gain
taken from a small grid; the input stage is then sized around the output
stage's input resistance, and its RE1/RE2 split is the synthesizer's gain knob.
Why the input stage's split: its RE1 sets the input impedance
(hFE + 1)(re + RE1) together with the remaining gain, while the output stage's
RE1 sets the swing at saturation, (VCE - VCEsat)/(1 + RE1/Rac); putting the
output stage's gain on the grid lets the search trade swing against input
impedance explicitly, and the knob then lands the total gain exactly.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design
from stagesynth.synthesis.topologies.ce_ef import (
    VT25,
    divider,
    gbw_conflict,
    nonempty,
    par,
    prefer,
    rails,
    solve_re1,
    within_current,
)
from stagesynth.synthesis.topologies.common_emitter import (
    _vbe,
    ic_range,
    noise_grid,
    noise_optimal_current,
)

NAME = "ce_ce"
TITLE = "two capacitor-coupled common-emitter stages"
STAGES = 2
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6", "R7", "R8", "R9", "R10")
CAPACITORS = ("C1", "C2", "C3", "C4", "C5")
GAIN_SPLIT = ("R4", "R5")  # the input stage's RE1/RE2
OPTIONAL = frozenset({"R4", "R9"})
OUTPUT_OPTIONS = 28  # output-stage bias points kept for the product grid


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    _, rail_e, rail_c = rails(spec)
    nodes = {
        "R1": ("vcc", "b1"),
        "R2": ("b1", "0"),
        "R3": (rail_c, "c1"),
        "R4": ("e1", "x1"),
        "R5": ("x1", rail_e),
        "R6": ("vcc", "b2"),
        "R7": ("b2", "0"),
        "R8": (rail_c, "c2"),
        "R9": ("e2", "x2"),
        "R10": ("x2", rail_e),
        "C1": ("in", "b1"),
        "C2": ("c1", "b2"),
        "C3": ("c2", "out"),
        "C4": ("x1", rail_e),
        "C5": ("x2", rail_e),
    }
    roles = {
        "R1": "input stage bias divider, supply side",
        "R2": "input stage bias divider, ground side",
        "R3": "input stage collector load RC1",
        "R4": "input stage emitter degeneration RE1 (unbypassed)",
        "R5": "input stage emitter bias RE2 (bypassed)",
        "R6": "output stage bias divider, supply side",
        "R7": "output stage bias divider, ground side",
        "R8": "output stage collector load RC2",
        "R9": "output stage emitter degeneration RE1 (unbypassed)",
        "R10": "output stage emitter bias RE2 (bypassed)",
        "C1": "input coupling",
        "C2": "interstage coupling",
        "C3": "output coupling",
        "C4": "input stage emitter bypass",
        "C5": "output stage emitter bypass",
        "Q1": "input stage transistor",
        "Q2": "output stage transistor",
    }
    bjts = {"Q1": ("c1", "b1", "e1"), "Q2": ("c2", "b2", "e2")}
    return make_design(spec, NAME, nodes, values, bjts, roles, title)


def _output_stage(spec: Spec) -> dict[str, np.ndarray]:
    """Output-stage bias points worth keeping: swing (and z_out) first, gain from a grid.

    Closed forms at nominal (design-notes relations, common practice): cutoff amplitude
    IC*Rac, saturation amplitude (VCE - VCEsat)/(1 + RE1/Rac), Rac = RC || RL; gain
    Rac/(re + RE1). Kept: those with 20 % swing to spare, a few per gain value.
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    r = spec.require
    beta = dev.hfe_nominal
    rl = spec.load.resistance
    amp = max(r.swing_vpp / 2.0, 0.05)
    _, hi = ic_range(spec)
    lo = min(max(1.2 * amp / rl, 20e-6), hi / 4.0)
    ic = np.geomspace(lo, hi, 7)
    ve_frac = np.array([0.08, 0.15])
    vce_frac = np.array([0.3, 0.45, 0.6])
    a2 = np.clip(r.gain ** np.array([0.3, 0.45, 0.6, 0.75]), 1.5, None)
    stiff = np.array([4.0, 10.0])
    IC, VEf, VCEf, ag, K = (x.ravel() for x in np.meshgrid(ic, ve_frac, vce_frac, a2, stiff,
                                                           indexing="ij"))
    ve = np.maximum(VEf * vcc, 0.3)
    vce = VCEf * (vcc - ve)
    rc = (vcc - ve - vce) / IC
    rac = par(rc, rl)
    re_small = VT25 / IC + dev.r_bb / (beta + 1.0)
    re1 = rac / ag - re_small
    re = ve / (IC * (1.0 + 1.0 / beta))
    swing = np.minimum(IC * rac, (vce - dev.vce_sat) / (1.0 + np.maximum(re1, 0) / rac))
    keep = (re1 >= 0.0) & (re1 < 0.9 * re) & (vce > dev.vce_sat + 0.3) & (swing > 1.2 * amp)
    if r.z_out is not None:  # the CE output impedance is about RC
        keep = prefer(keep, rc <= 0.9 * r.z_out)
    keep = within_current(spec, keep, 1.1 * IC)  # room for the input stage and dividers
    idx = []
    for g in a2:  # a few per gain value, spread over the collector current
        members = np.flatnonzero(keep & (ag == g))
        take = min(members.size, OUTPUT_OPTIONS // a2.size)
        if take:
            idx.extend(members[np.round(np.linspace(0, members.size - 1, take)).astype(int)])
    if not idx:  # nothing clears the closed forms: keep the widest swings for the verdict
        fits = (re1 >= 0.0) & (re1 < 0.9 * re) & (vce > dev.vce_sat + 0.3)
        idx = list(np.argsort(-np.where(fits, swing, -1.0))[:OUTPUT_OPTIONS])
    i = np.array(sorted(set(idx)))
    re1 = np.maximum(re1[i], 0.0)
    rth = (dev.hfe_min + 1.0) * re[i] / K[i]
    vth = ve[i] + _vbe(dev, IC[i]) + IC[i] / beta * (rth + dev.r_bb)
    return {"ic": IC[i], "rc": rc[i], "re1": re1, "re": re[i], "rth": rth, "vth": vth,
            "gain": rac[i] / (re_small[i] + re1),
            "rin": (beta + 1.0) * (re_small[i] + re1)}


def first_cut(spec: Spec) -> FirstCut:
    """Output stage first (swing, z_out, its share of the gain), then the input stage.

    Input-stage grid: collector current, collector voltage, divider stiffness
    (common practice: RTH <= (hFE_min + 1) * RE / 10 for a stiff bias; bracketed); its
    emitter voltage follows from the gain share left to it.
    Its load is RC1 || RTH2 || Rin2 of the output stage (textbook loaded-cascade rule).
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    beta = dev.hfe_nominal
    amp = max(spec.require.swing_vpp / 2.0, 0.05)
    out = _output_stage(spec)
    _, hi = ic_range(spec)
    top1 = max(min(hi, 3e-3), 20e-6)
    ic1 = np.geomspace(10e-6, top1, 5)
    ic1 = noise_grid(spec, ic1, 10e-6, max(top1, min(hi, 3.0 * (noise_optimal_current(spec)
                                                                  or 0.0))))
    vce_frac = np.array([0.35, 0.55])
    stiff = np.array([3.0, 8.0, 20.0])
    J, IC1, VCEf, K1 = (x.ravel() for x in np.meshgrid(np.arange(out["ic"].size), ic1,
                                                       vce_frac, stiff, indexing="ij"))
    # the knob can only lower the stage gain to about RC1/RE1_total (fully degenerated):
    # VE1 large enough that this is 2/3 of the share asked, VE1 >= 1.5 D / A1 with the
    # collector drop D = (1 - VCEf)(VCC - VE1); common practice VE ~ VCC/10 otherwise
    a1 = spec.require.gain / out["gain"][J]
    drop = 1.0 - VCEf
    ve1 = np.clip(1.5 * drop * vcc / (a1 + 1.5 * drop), max(0.1 * vcc, 0.3), 0.35 * vcc)
    vce1 = VCEf * (vcc - ve1)
    rc1 = (vcc - ve1 - vce1) / IC1
    re1_tot = ve1 / (IC1 * (1.0 + 1.0 / beta))
    rth1 = (dev.hfe_min + 1.0) * re1_tot / K1
    vth1 = ve1 + _vbe(dev, IC1) + IC1 / beta * (rth1 + dev.r_bb)
    rth2 = out["rth"][J]
    load1 = par(rc1, par(rth2, out["rin"][J]))
    keep = (vth1 < 0.95 * vcc) & (rc1 > 1.0) & (IC1 * load1 > 1.3 * amp / out["gain"][J])
    r1, r2 = divider(dev, vcc, vth1, rth1)
    r6, r7 = divider(dev, vcc, out["vth"][J], rth2)
    keep = within_current(spec, keep, IC1 + out["ic"][J] + vcc / (r1 + r2) + vcc / (r6 + r7))
    values = {
        "R1": r1, "R2": r2, "R3": rc1, "R4": np.zeros_like(rc1), "R5": re1_tot,
        "R6": r6, "R7": r7, "R8": out["rc"][J], "R9": np.maximum(out["re1"][J], 1e-3),
        "R10": out["re"][J] - out["re1"][J],
    }
    keep = nonempty(keep, values)
    values = {k: v[keep] for k, v in values.items()}
    info = {"ic1": IC1[keep], "ic2": out["ic"][J][keep], "gain2": out["gain"][J][keep],
            "stiffness1": K1[keep]}
    re_small = VT25 / IC1[keep] + dev.r_bb / (beta + 1.0)
    rth1k = rth1[keep]
    a2 = out["gain"][J][keep]
    rs = spec.source.resistance

    def pre(re1: np.ndarray) -> np.ndarray:
        rin = par(rth1k, (beta + 1.0) * (re_small + re1))
        return rin / (rin + rs) * a2

    knob = solve_re1(spec.require.gain, load1[keep], re_small, values["R5"], pre)
    return FirstCut(values=values, knob=knob, info=info)


def precheck(spec: Spec) -> list[Conflict]:
    """What two common-emitter stages in cascade can never do."""
    out = []
    if spec.require.inverting == "yes":
        out.append(Conflict("inverting", "yes",
                            "two inverting stages in cascade give a non-inverted output",
                            'set inverting = "any" or "no", or use an inverting circuit'))
    return out


def unlikely(spec: Spec) -> list[Conflict]:
    """Rules of thumb that make this family a poor first try (they order the search only)."""
    return gbw_conflict(spec, 2)


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for both bias points and the gain shares (for the report)."""
    v = design.values()
    dev = spec.transistor
    beta = dev.hfe_nominal
    rl = spec.load.resistance
    q1 = analysis.nominal.transistors["Q1"]
    q2 = analysis.nominal.transistors["Q2"]
    re1_1, re1_2 = v.get("R4", 0.0), v.get("R9", 0.0)
    rac2 = par(v["R8"], rl)
    re_s2 = VT25 / q2.ic + dev.r_bb / (beta + 1.0)
    rin2 = (beta + 1.0) * (re_s2 + re1_2)
    rth2 = par(v["R6"], v["R7"])
    load1 = par(v["R3"], par(rth2, rin2))
    a1 = load1 / (VT25 / q1.ic + dev.r_bb / (beta + 1.0) + re1_1)
    a2 = rac2 / (re_s2 + re1_2)
    return [
        f"Output stage Q2: IC ≈ {eng(q2.ic, 'A', 3)}, VCE ≈ {eng(q2.vce, 'V', 3)}, sized first for "
        f"the swing on its AC load line Rac = RC2 ∥ RL ≈ {eng(rac2, 'Ω', 4)}: cutoff after "
        f"IC·Rac ≈ {eng(q2.ic * rac2, 'V', 3)} peak, saturation after (VCE − VCEsat)/(1 + "
        f"RE1/Rac) ≈ "
        f"{eng((q2.vce - dev.vce_sat) / (1 + re1_2 / rac2), 'V', 3)} peak. Its RE1 = "
        f"{eng(re1_2, 'Ω', 4)} "
        f"gives it a gain of about {eng(a2, 'V/V', 3)}.",
        f"Input stage Q1: IC ≈ {eng(q1.ic, 'A', 3)}, VCE ≈ {eng(q1.vce, 'V', 3)}; it is loaded by "
        f"RC1 ∥ RTH2 ∥ Rin2 ≈ {eng(load1, 'Ω', 4)} (Rin2 = (hFE + 1)(re2 + RE1) ≈ "
        f"{eng(rin2, 'Ω', 4)}), "
        f"so its gain is about {eng(a1, 'V/V', 3)}; its RE1 = {eng(re1_1, 'Ω', 4)} was set "
        f"last so that "
        f"the product lands on the target, and raises the input impedance "
        f"(analysis: {eng(analysis.z_in, 'Ω', 4)}).",
        "Two inverting stages: the output is in phase with the input. The interstage "
        "capacitor decouples the bias points, so each stage keeps its own stiff divider bias.",
    ]
