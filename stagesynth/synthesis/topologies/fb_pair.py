"""Feedback pair: two common-emitter stages in one series–shunt loop (NPN, and its PNP mirror).

Roles and reference designators:

    R1  divider, supply side          C1  input coupling (in -> base of Q1)
    R2  divider, ground side          C2  output coupling (Q2 collector -> out)
    R3  Q1 collector resistor         C3  blocks DC through RE (x1 -> emitter rail)
    R4  RE: AC feedback resistor      Q1  input transistor (its emitter sums the feedback)
    R5  Q1 emitter DC resistor        Q2  output transistor (base on Q1's collector)
    R6  Q2 collector resistor         C4  Q2 emitter bypass (across R7)
    R7  Q2 emitter resistor (DC)
    R8  RF: feedback, Q2 collector -> Q1 emitter

Q1 and Q2 each invert, so the pair does not: RF returns a fraction
β = RE'/(RE' + RF) of the output to Q1's emitter (RE' = R4 ∥ R5 at midband), in series
with the input. With loop gain T = A·β the closed-loop gain is A/(1 + T) ≈ 1/β =
1 + RF/RE' (Sedra & Smith, series–shunt feedback), so hFE and temperature move it
only by about 1/(1 + T). C4 bypasses Q2's emitter resistor so that Q2 adds its full
gm·RC2 to the loop gain (R7 only lifts Q1's collector off the rail at DC). C3 keeps
R4 out of the DC loop: there the feedback factor is R5/(R5 + RF), so the DC gain from
Q1's base to the output stays small and VBE drift
is not multiplied by the AC gain. R4 alone is the gain knob (it changes no DC
quantity); the first cut sizes Q2 for the swing, Q1 around it, RF against the output load.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design
from stagesynth.synthesis.topologies.ce_ef import VT25, divider, par, rails, within_current
from stagesynth.synthesis.topologies.common_emitter import _vbe, ic_range

NAME = "fb_pair"
TITLE = "feedback pair (two common-emitter stages, series-shunt feedback RF/RE)"
STAGES = 2
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6", "R7", "R8")
CAPACITORS = ("C1", "C2", "C3", "C4")
GAIN_SPLIT = None
GAIN_KNOB = "R4"  # in series with C3: sets the AC feedback factor, leaves the DC point
OPTIONAL: frozenset[str] = frozenset()

ROLES = {
    "R1": "bias divider, supply side",
    "R2": "bias divider, ground side",
    "R3": "Q1 collector load",
    "R4": "RE: feedback divider, AC part (sets the gain 1 + RF/RE)",
    "R5": "Q1 emitter DC resistor (bias)",
    "R6": "Q2 collector load",
    "R7": "Q2 emitter resistor (DC; bypassed by C4)",
    "R8": "RF: feedback from the output to Q1's emitter",
    "C1": "input coupling",
    "C2": "output coupling",
    "C3": "keeps RE out of the DC loop",
    "C4": "Q2 emitter bypass (full loop gain)",
    "Q1": "input transistor (sums input and feedback)",
    "Q2": "output transistor",
}


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    _, rail_e, rail_c = rails(spec)
    nodes = {
        "R1": ("vcc", "b1"),
        "R2": ("b1", "0"),
        "R3": (rail_c, "c1"),
        "R4": ("e1", "x1"),
        "R5": ("e1", rail_e),
        "R6": (rail_c, "c2"),
        "R7": ("e2", rail_e),
        "R8": ("c2", "e1"),
        "C1": ("in", "b1"),
        "C2": ("c2", "out"),
        "C3": ("x1", rail_e),
        "C4": ("e2", rail_e),
    }
    bjts = {"Q1": ("c1", "b1", "e1"), "Q2": ("c2", "c1", "e2")}
    return make_design(spec, NAME, nodes, values, bjts, ROLES, title)


def first_cut(spec: Spec) -> FirstCut:
    """A grid over both bias currents, both emitter voltages, the output's DC level, the
    DC loop factor and the divider stiffness, turned into part values (voltages from the
    emitter rail).

    Q2 (output): IC2 from the swing, its collector near the middle of what is left above
    VE2. Q1: its collector sits at VE2 + VBE2 (Q2's base), so VE1 must stay below that by
    VCE(sat) plus room. The loop gain is about T ≈ hFE·(RC2 ∥ RL ∥ RF)/RF (Q1's collector
    current all enters Q2's base; RE' ≈ RF/(gain − 1)), so RF is a small multiple M of
    the output's own load RC2 ∥ RL. R5 carries IE1 plus RF's DC current; the DC gain from
    Q1's emitter to the output, 1 + RF/R5, stays small. Common practice: RTH <=
    (hFE_min + 1)·(R5 ∥ RF)/K for a stiff bias.
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    beta = dev.hfe_nominal
    lo, hi = ic_range(spec)
    ic2 = np.geomspace(lo, hi, 8)
    ve2 = np.array([0.8, 1.6, 2.8])
    out_frac = np.array([0.4, 0.5, 0.6])
    ratio = np.array([0.06, 0.15, 0.4])  # IC1 / IC2
    ve1_frac = np.array([0.5, 0.85])  # of the room Q1's emitter has below its collector
    rf_mult = np.array([1.5, 3.0, 6.0])  # M = RF / (RC2 || RL)
    stiff = np.array([4.0, 12.0])
    grid = np.meshgrid(ic2, ve2, out_frac, ratio, ve1_frac, rf_mult, stiff, indexing="ij")
    IC2, VE2, OF, RA, V1F, M, K = (a.ravel() for a in grid)
    IC1 = RA * IC2
    vbe1, vbe2 = _vbe(dev, IC1), _vbe(dev, IC2)
    r7 = VE2 / (IC2 * (1.0 + 1.0 / beta))
    vc1 = VE2 + vbe2
    r3 = (vcc - vc1) / (IC1 + IC2 / beta)
    room = vc1 - dev.vce_sat - 0.3
    VE1 = np.maximum(V1F * room, 0.05)
    vc2 = VE2 + OF * (vcc - VE2)
    rf = M * par((vcc - vc2) / IC2, spec.load.resistance)
    i_rf = (vc2 - VE1) / rf
    r6 = (vcc - vc2) / (IC2 + i_rf)
    r5 = VE1 / (IC1 * (1.0 + 1.0 / beta) + i_rf)
    rth = (dev.hfe_min + 1.0) * par(r5, rf) / K
    vth = VE1 + vbe1 + IC1 / beta * (rth + dev.r_bb)
    keep = ((room > 0.1) & (r3 > 1.0) & (r6 > 1.0) & (r5 > 1.0) & (vth < 0.95 * vcc)
            & (vc2 - VE2 > dev.vce_sat + 0.3))
    estimate = IC1 + IC2 + i_rf + vcc / np.maximum(rth * vcc / np.maximum(vth, 1e-9), 1.0)
    keep = within_current(spec, keep, estimate)
    r1, r2 = divider(dev, vcc, vth, rth)
    values = {"R1": r1, "R2": r2, "R3": r3, "R4": np.zeros_like(r3), "R5": r5, "R6": r6,
              "R7": r7, "R8": rf}
    values = {k: v[keep] for k, v in values.items()}
    knob = _first_re(spec, values)
    values["R4"] = np.maximum(knob, 1.0)  # the synthesizer then tunes it on the exact gain
    info = {"ic1": IC1[keep], "ic2": IC2[keep], "ve1": VE1[keep], "ve2": VE2[keep],
            "stiffness": K[keep]}
    return FirstCut(values=values, knob=knob, info=info)


def _first_re(spec: Spec, v: dict[str, np.ndarray]) -> np.ndarray:
    """R4 for the target from the ideal closed loop 1 + RF/(R4 ∥ R5), the input divider
    RTH/(RTH + Rs) taken off (the loop raises Q1's own input resistance well above RTH)."""
    rth = par(v["R1"], v["R2"])
    kin = rth / (rth + spec.source.resistance)
    closed = np.maximum(spec.require.gain / kin, 1.05)
    re_ac = v["R8"] / (closed - 1.0)
    inv = 1.0 / re_ac - 1.0 / v["R5"]
    return np.where(inv > 0, 1.0 / np.maximum(inv, 1e-30), v["R5"] * 100.0)


def loop_gain(spec: Spec, values: dict[str, float], ic1: float, ic2: float) -> float:
    """Loop gain T = A·β of the series–shunt loop at midband (Sedra & Smith's method, from
    memory): A from Q1's base to the output with the feedback network's loading (RE' ∥ RF
    in Q1's emitter, RF + RE' across the output; Q2's emitter bypassed), β = RE'/(RE' + RF)."""
    dev = spec.transistor
    beta = dev.hfe_nominal
    re_ac = par(values["R4"], values["R5"])
    rf = values["R8"]
    re1, re2 = VT25 / ic1, VT25 / ic2
    rin2 = (beta + 1.0) * re2 + dev.r_bb
    a1 = par(values["R3"], rin2) / (re1 + par(re_ac, rf))
    load2 = par(par(values["R6"], spec.load.resistance), rf + re_ac)
    a2 = beta / (beta + 1.0) * load2 / re2
    return float(a1 * a2 * re_ac / (re_ac + rf))


def precheck(spec: Spec) -> list[Conflict]:
    """What the feedback pair can never do: invert (two inversions in the loop)."""
    if spec.require.inverting == "yes":
        return [Conflict("inverting", "yes",
                         "two common-emitter stages in one loop give a non-inverted output",
                         'set inverting = "any" or "no", or use an inverting circuit')]
    return []


def unlikely(spec: Spec) -> list[Conflict]:
    """Rules of thumb that make this family a poor first try (they order the search only)."""
    from stagesynth.synthesis.topologies.ce_ef import gbw_conflict

    return gbw_conflict(spec, 2)


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for the bias points and the loop (for the report)."""
    v = design.values()
    q1 = analysis.nominal.transistors["Q1"]
    q2 = analysis.nominal.transistors["Q2"]
    re_ac = par(v["R4"], v["R5"])
    ideal = 1.0 + v["R8"] / re_ac
    t = loop_gain(spec, v, q1.ic, q2.ic)
    dc_factor = v["R5"] / (v["R5"] + v["R8"])
    return [
        f"Feedback pair: Q1 (IC ≈ {eng(q1.ic, 'A', 3)}) drives Q2 (IC ≈ {eng(q2.ic, 'A', 3)}, "
        f"VCE ≈ {eng(q2.vce, 'V', 3)}); RF = {eng(v['R8'], 'Ω', 4)} from the output to Q1's "
        "emitter and "
        f"RE' = R4 ∥ R5 ≈ {eng(re_ac, 'Ω', 4)} set the closed-loop gain ≈ 1 + RF/RE' = "
        f"{eng(ideal, 'V/V', 4)} ({20 * np.log10(ideal):.2f} dB) at Q1's base (series–shunt "
        "feedback, Sedra & Smith).",
        f"Loop gain T ≈ {t:.3g} at midband (textbook estimate): hFE and temperature move the "
        f"gain by about 1/(1 + T) ≈ {100 / (1 + t):.2g} % of their effect without feedback, "
        "and the loop raises the input resistance at Q1's base and lowers the output "
        "resistance by about (1 + T).",
        f"DC: C3 takes R4 out of the DC loop, so the output's DC level follows Q1's emitter "
        f"with 1 + RF/R5 ≈ {1 / dc_factor:.3g} only; VBE drift is not multiplied by the "
        f"AC gain. Q1's collector sits at Q2's VBE plus R7's drop ({eng(v['R7'], 'Ω', 4)}, "
        "bypassed by C4 so that Q2 gives the loop its full gain).",
    ]
