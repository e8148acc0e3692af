"""Emitter follower driving a common emitter, direct-coupled (NPN, and its PNP mirror): inverting.

Roles and reference designators:

    R1  divider, supply side (follower base)     C1  input coupling (in -> follower base)
    R2  divider, ground side                     C2  output coupling (collector -> out)
    R3  follower emitter resistor                C3  emitter bypass across RE2
    R4  collector resistor RC of the CE stage    Q1  emitter follower (input buffer)
    R5  unbypassed emitter RE1 of the CE stage   Q2  common-emitter gain transistor
    R6  bypassed emitter RE2 of the CE stage

The follower's emitter drives the CE base directly, so one divider biases both
transistors: the follower raises the input resistance by (hFE + 1) and lets
the divider be large (high input impedance), while the CE stage's emitter
resistor sets its current from VE2 = VB1 - 2 VBE. The CE stage is sized first
for swing and output impedance; the follower and the divider then around its
base current and input resistance. The split RE1/RE2 of the CE stage is the
gain knob, as in common_emitter.py.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_number as num
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
from stagesynth.synthesis.topologies.common_emitter import _vbe, ic_range

NAME = "ef_ce"
TITLE = "emitter follower driving a common emitter (direct-coupled)"
STAGES = 2
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6")
CAPACITORS = ("C1", "C2", "C3")
GAIN_SPLIT = ("R5", "R6")  # the CE stage's RE1/RE2: sum fixed keeps every DC point
OPTIONAL = frozenset({"R5"})


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    _, rail_e, rail_c = rails(spec)
    nodes = {
        "R1": ("vcc", "b1"),
        "R2": ("b1", "0"),
        "R3": ("e1", rail_e),
        "R4": (rail_c, "c2"),
        "R5": ("e2", "x2"),
        "R6": ("x2", rail_e),
        "C1": ("in", "b1"),
        "C2": ("c2", "out"),
        "C3": ("x2", rail_e),
    }
    roles = {
        "R1": "bias divider, supply side (sets both bias points)",
        "R2": "bias divider, ground side",
        "R3": "follower emitter resistor (its standing current)",
        "R4": "collector load RC of the gain stage",
        "R5": "emitter degeneration RE1 of the gain stage (unbypassed)",
        "R6": "emitter bias RE2 of the gain stage (bypassed)",
        "C1": "input coupling",
        "C2": "output coupling",
        "C3": "emitter bypass",
        "Q1": "emitter follower (input buffer)",
        "Q2": "common-emitter gain transistor",
    }
    bjts = {"Q1": (rail_c, "b1", "e1"), "Q2": ("c2", "e1", "e2")}
    return make_design(spec, NAME, nodes, values, bjts, roles, title)


def first_cut(spec: Spec) -> FirstCut:
    """CE stage first (swing, z_out), then the follower current and the divider.

    Grid: CE collector current, emitter voltage (larger than a single stage's: it
    absorbs two VBE drifts), collector voltage; the follower's standing current as
    a multiple of the CE base current; divider stiffness against the DC resistance
    seen at the follower base, (hFE_min + 1)(R3 || (hFE_min + 1) RE) (common practice:
    about 10 for a stiff bias; bracketed, traded against input impedance).
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    r = spec.require
    beta, bmin = dev.hfe_nominal, dev.hfe_min
    rl = spec.load.resistance
    amp = max(r.swing_vpp / 2.0, 0.05)
    lo, hi = ic_range(spec)
    lo = min(max(lo, 1.2 * amp / rl, 10e-6), hi / 4.0)
    ic2 = np.geomspace(lo, hi, 10)
    ve_frac = np.array([0.1, 0.16, 0.24])
    vce_frac = np.array([0.3, 0.45, 0.6])
    follow = np.array([1.0, 4.0, 16.0])  # follower standing current / CE base current
    stiff = np.array([2.0, 5.0, 12.0])
    IC2, VEf, VCEf, F, K = (x.ravel() for x in np.meshgrid(ic2, ve_frac, vce_frac, follow,
                                                           stiff, indexing="ij"))
    ve2 = np.maximum(VEf * vcc, 0.4)
    vce2 = VCEf * (vcc - ve2)
    rc = (vcc - ve2 - vce2) / IC2
    re2_tot = ve2 / (IC2 * (1.0 + 1.0 / beta))
    ib2 = IC2 / beta
    vb2 = ve2 + _vbe(dev, IC2) + ib2 * dev.r_bb
    i3 = F * ib2  # current in R3
    r3 = vb2 / i3
    ie1 = i3 + ib2
    # DC resistance at the follower base with hFE at its minimum, for the stiffness rule
    r_base = (bmin + 1.0) * par(r3, (bmin + 1.0) * re2_tot)
    rth = r_base / K
    vth = vb2 + _vbe(dev, ie1) + ie1 / (beta + 1.0) * (rth + dev.r_bb)
    keep = (vth < 0.95 * vcc) & (rc > 1.0) & (vce2 > dev.vce_sat + 0.3)
    if r.z_out is not None:  # the CE output impedance is about RC
        keep = prefer(keep, rc <= 0.9 * r.z_out)
    r1, r2 = divider(dev, vcc, vth, rth)
    keep = within_current(spec, keep, ie1 + IC2 + vcc / (r1 + r2))
    values = {"R1": r1, "R2": r2, "R3": r3, "R4": rc, "R5": np.zeros_like(rc), "R6": re2_tot}
    keep = nonempty(keep, values)
    values = {k: v[keep] for k, v in values.items()}
    info = {"ic2": IC2[keep], "ie1": ie1[keep], "ve2": ve2[keep], "stiffness": K[keep]}
    return FirstCut(values=values, knob=_first_re1(spec, values, IC2[keep], ie1[keep]),
                    info=info)


def _first_re1(spec: Spec, v: dict[str, np.ndarray], ic2: np.ndarray,
               ie1: np.ndarray) -> np.ndarray:
    """Analytic RE1: |A| = Kin * Af * Rac / (re2 + RE1) (textbook cascade product).

    Rin2 = (beta + 1)(re2 + RE1); follower gain Af = R3||Rin2 / (R3||Rin2 + re1
    + (RTH || Rs + rbb)/(beta + 1)); Kin = Rin / (Rin + Rs) with
    Rin = RTH || (beta + 1)(re1 + R3 || Rin2) (Sedra & Smith, from memory).
    """
    dev = spec.transistor
    beta = dev.hfe_nominal
    rs = spec.source.resistance
    rac = par(v["R4"], spec.load.resistance)
    re_s2 = VT25 / ic2 + dev.r_bb / (beta + 1.0)
    re1 = VT25 / ie1
    rth = par(v["R1"], v["R2"])
    src = (rth * rs / (rth + rs) if rs > 0 else 0.0) + dev.r_bb

    def pre(x: np.ndarray) -> np.ndarray:
        rload1 = par(v["R3"], (beta + 1.0) * (re_s2 + x))
        af = rload1 / (rload1 + re1 + src / (beta + 1.0))
        rin = par(rth, (beta + 1.0) * (re1 + rload1))
        return rin / (rin + rs) * af

    return solve_re1(spec.require.gain, rac, re_s2, v["R6"], pre)


def precheck(spec: Spec) -> list[Conflict]:
    """What a follower plus common emitter can never do."""
    out = []
    if spec.require.inverting == "no":
        out.append(Conflict("inverting", "no",
                            "the follower does not invert and the common-emitter stage does",
                            'set inverting = "any" or "yes", or use a non-inverting circuit'))
    return out


def unlikely(spec: Spec) -> list[Conflict]:
    """Rules of thumb that make this family a poor first try (they order the search only)."""
    return gbw_conflict(spec, 1)


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for the two bias points and the split (for the report)."""
    v = design.values()
    dev = spec.transistor
    beta = dev.hfe_nominal
    q1 = analysis.nominal.transistors["Q1"]
    q2 = analysis.nominal.transistors["Q2"]
    rl = spec.load.resistance
    re1, re2 = v.get("R5", 0.0), v.get("R6", 0.0)
    rac = par(v["R4"], rl)
    rin2 = (beta + 1.0) * (VT25 / q2.ic + re1)
    rth = par(v["R1"], v["R2"])
    r_base = (dev.hfe_min + 1.0) * par(v["R3"], (dev.hfe_min + 1.0) * (re1 + re2))
    return [
        f"Gain stage Q2: IC ≈ {eng(q2.ic, 'A', 3)}, VCE ≈ {eng(q2.vce, 'V', 3)} on the AC "
        f"load line "
        f"Rac = RC ∥ RL ≈ {eng(rac, 'Ω', 4)}: cutoff after IC·Rac ≈ "
        f"{eng(q2.ic * rac, 'V', 3)} peak, "
        f"saturation after (VCE − VCEsat)/(1 + RE1/Rac) ≈ "
        f"{eng((q2.vce - dev.vce_sat) / (1 + re1 / rac), 'V', 3)} peak. RE1 = "
        f"{eng(re1, 'Ω', 4)} sets its "
        f"gain ≈ Rac/(re + RE1) ≈ {eng(rac / (VT25 / q2.ic + re1), 'V/V', 3)}; RE2 = "
        f"{eng(re2, 'Ω', 4)} "
        "is bypassed.",
        f"Follower Q1: IE ≈ {eng(q1.ic, 'A', 3)}, VCE ≈ {eng(q1.vce, 'V', 3)}, loaded by "
        f"R3 ∥ Rin2 ≈ {eng(par(v['R3'], rin2), 'Ω', 4)}; it multiplies that by (hFE + 1), so the "
        f"input impedance is set mostly by the divider RTH ≈ {eng(rth, 'Ω', 4)} "
        f"(analysis: {eng(analysis.z_in, 'Ω', 4)}).",
        "Direct coupling: one divider biases both transistors; the CE emitter sits two "
        "VBE below the divider voltage, so its VE is chosen larger than a single stage's "
        "to absorb both VBE drifts. Stiffness (DC resistance at the follower base) / RTH "
        f"≈ {num(r_base / rth, 3)} (common practice asks about 10; less trades stability for "
        "input impedance).",
    ]
