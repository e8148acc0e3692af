"""Common base with divider bias (NPN, and its PNP mirror): low, defined input impedance.

Roles and reference designators:

    R1  divider, supply side          C1  input coupling (in -> emitter)
    R2  divider, ground side          C2  output coupling (collector -> out)
    R3  collector resistor RC         C3  base bypass (base to AC ground)
    R4  emitter resistor RE           Q1  the transistor

The base is held at AC ground by C3, the signal enters the emitter and leaves
the collector: non-inverting, current gain alpha < 1, input impedance about
RE || re (re = VT/IC), and no Miller multiplication of Cmu, hence a wide band.
For the PNP mirror RE and the bypass go to the supply and RC to ground. There is
no DC-preserving gain knob: the first cut computes RC from the gain target per
bias point (closed form below) and brackets it.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.device import T_REF_C, thermal_voltage
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design
from stagesynth.synthesis.topologies.emitter_follower import divider, vbe25

NAME = "cb"
TITLE = "common base, divider bias, bypassed base"
STAGES = 1
RESISTORS = ("R1", "R2", "R3", "R4")  # divider top, divider bottom, RC, RE
CAPACITORS = ("C1", "C2", "C3")
GAIN_SPLIT = None  # the gain is set by RC and IC; no split keeps the DC point
OPTIONAL: frozenset[str] = frozenset()
IC_MIN = 20e-6  # A: the smallest bias current the first cut tries

ROLES = {
    "R1": "bias divider, supply side",
    "R2": "bias divider, ground side",
    "R3": "collector load RC (sets the gain with re)",
    "R4": "emitter resistor RE (DC bias; in parallel with re at the input)",
    "C1": "input coupling into the emitter",
    "C2": "output coupling",
    "C3": "base bypass (holds the base at AC ground)",
    "Q1": "common-base transistor",
}


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    pnp = spec.transistor.polarity == "pnp"
    rail_e = "vcc" if pnp else "0"
    rail_c = "0" if pnp else "vcc"
    nodes = {
        "R1": ("vcc", "b1"),
        "R2": ("b1", "0"),
        "R3": (rail_c, "c1"),
        "R4": ("e1", rail_e),
        "C1": ("in", "e1"),
        "C2": ("c1", "out"),
        "C3": ("b1", rail_e),
    }
    return make_design(spec, NAME, nodes, values, {"Q1": ("c1", "b1", "e1")}, ROLES, title)


def input_resistance_bound(spec: Spec) -> float:
    """The largest input impedance the family can reach: re' at IC_MIN, raised a little by
    the output side through ro (Gray & Meyer, common-base input, from memory:
    Rin ~= re (1 + Rac/ro)), with 20 % to spare."""
    dev = spec.transistor
    vt = float(thermal_voltage(T_REF_C))
    re = vt / IC_MIN + dev.r_bb / (dev.hfe_min + 1.0)
    ro = dev.early_voltage / IC_MIN
    return 1.2 * re * (1.0 + spec.load.resistance / ro)


def cb_gain(spec: Spec, ic: np.ndarray, re_bias: np.ndarray, rac: np.ndarray) -> np.ndarray:
    """|A| = alpha * Rac * RE / ((RE + re') (Rs + RE || re')) with re' = re + rx/(beta + 1).

    Sedra & Smith, common-base amplifier (from memory): the source drives RE || re', the
    share RE/(RE + re') of its current enters the emitter and alpha of that reaches Rac.
    """
    dev = spec.transistor
    beta = dev.hfe_nominal
    alpha = beta / (beta + 1.0)
    rep = thermal_voltage(T_REF_C) / ic * alpha + dev.r_bb / (beta + 1.0)
    par = re_bias * rep / (re_bias + rep)
    return alpha * rac * re_bias / ((re_bias + rep) * (spec.source.resistance + par))


def first_cut(spec: Spec, *, ic_points: int = 16) -> FirstCut:
    """A grid over IC, VE and divider stiffness; RC from the gain target, bracketed.

    Common practice (no single source): VE of roughly a tenth of the supply, a stiff
    divider RTH <= (hFE_min + 1) * RE / K (the base is bypassed, so RTH costs no input
    impedance). RC follows from the closed-form gain of cb_gain, times 0.94 / 1 / 1.06.
    """
    dev = spec.transistor
    r = spec.require
    vcc = spec.supply.voltage
    vt = float(thermal_voltage(T_REF_C))
    hi = 30e-3 if r.f_high <= 5e6 else 60e-3
    if dev.ic_max:
        hi = min(hi, 0.5 * dev.ic_max)
    if dev.p_max:
        hi = min(hi, 0.5 * dev.p_max / max(vcc / 2.0, 0.1))
    if r.supply_current is not None:
        hi = min(hi, 0.9 * r.supply_current)
    if r.z_in > 0:  # re = VT/IC must stay above z_in: no use in larger currents
        hi = min(hi, 1.5 * vt / r.z_in)
    lo = min(IC_MIN, hi / 8.0)
    ic = np.geomspace(lo, hi, ic_points)
    ve_frac = np.array([0.05, 0.1, 0.15, 0.2])
    stiff = np.array([3.0, 6.0, 12.0, 24.0])
    trim = np.array([0.94, 1.0, 1.06])
    IC, VEf, K, T = (a.ravel() for a in np.meshgrid(ic, ve_frac, stiff, trim, indexing="ij"))
    beta = dev.hfe_nominal
    ve = np.maximum(VEf * vcc, 0.25)
    re = ve / (IC * (1.0 + 1.0 / beta))
    unit = cb_gain(spec, IC, re, np.ones_like(re))  # the gain is linear in Rac
    rac = T * r.gain / unit
    rl = spec.load.resistance
    rc = np.where(rac < 0.95 * rl, rac * rl / np.maximum(rl - rac, 1e-9), np.nan)
    vce = vcc - ve - IC * rc
    rth = (dev.hfe_min + 1.0) * re / K
    vth = ve + vbe25(dev, IC) + IC / beta * (rth + dev.r_bb)
    keep = (np.isfinite(rc) & (rc > 1.0) & (vth < 0.95 * vcc)
            & (vce > dev.vce_sat + 0.3))
    r1, r2 = divider(spec, rth, vth)
    values = {"R1": r1[keep], "R2": r2[keep], "R3": rc[keep], "R4": re[keep]}
    info = {"ic": IC[keep], "ve": ve[keep], "vce": vce[keep], "stiffness": K[keep]}
    return FirstCut(values=values, knob=None, info=info)


def precheck(spec: Spec) -> list[Conflict]:
    """What a single common-base stage can never do."""
    out = []
    r = spec.require
    if r.inverting == "yes":
        out.append(Conflict("inverting", "yes",
                            "a common-base stage never inverts: collector and emitter move "
                            "together", 'set inverting = "any" or "no", or use a '
                            "common-emitter stage"))
    rs = spec.source.resistance
    if rs > 0:
        ceiling = spec.load.resistance / rs  # alpha < 1, Rac < RL, re > 0
        low = r.gain * 10 ** (-r.gain_tolerance_db / 20.0)
        if low >= ceiling:
            out.append(Conflict(
                "gain", f"≥ {num(20 * np.log10(low), 3)} dB",
                f"a common-base stage's current gain is below unity, so its voltage gain "
                f"stays below RL/Rs = {num(20 * np.log10(ceiling), 3)} dB",
                "lower the gain, or use a common-emitter stage"))
    return out


def unlikely(spec: Spec) -> list[Conflict]:
    """Rules of thumb that make this family a poor first try (they order the search only):
    the input impedance it reaches at the smallest bias its first cut tries."""
    bound = input_resistance_bound(spec)
    if spec.require.z_in <= bound:
        return []
    return [Conflict(
        "z_in", f"≥ {eng(spec.require.z_in, 'Ω', 4)}",
        f"a common-base input looks into the emitter, about RE ∥ re with re = VT/IC; at the "
        f"smallest bias this family's first cut uses ({IC_MIN * 1e6:.0f} µA) that stays below "
        f"{eng(bound, 'Ω', 4)}",
        "use a common-emitter stage or a follower for a high input impedance")]


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for this bias point and collector load (for the report)."""
    values = design.values()
    dev = spec.transistor
    q = analysis.nominal.transistors["Q1"]
    ic, vce = q.ic, q.vce
    vt = float(thermal_voltage(T_REF_C))
    rc, re = values["R3"], values["R4"]
    rl = spec.load.resistance
    rac = rc * rl / (rc + rl)
    rth = values["R1"] * values["R2"] / (values["R1"] + values["R2"])
    stiff = (dev.hfe_min + 1) * re / rth
    return [
        f"Bias point IC ≈ {eng(ic, 'A', 3)}, VCE ≈ {eng(vce, 'V', 3)}; re = VT/IC ≈ "
        f"{eng(vt / ic, 'Ω', 3)}.",
        f"Input impedance ≈ RE ∥ re (Sedra & Smith): {eng(analysis.z_in, 'Ω', 4)} at midband with "
        f"RE = {eng(re, 'Ω', 4)}; the bias current is what sets it, which is why this stage "
        f"suits a "
        "low-impedance (e.g. 50 Ω) source.",
        f"Gain ≈ α·Rac / (Rs + RE ∥ re) with Rac = RC ∥ RL ≈ {eng(rac, 'Ω', 4)}: "
        f"{analysis.gain_db:.2f} dB, non-inverting; the base is held at AC ground by C3, so "
        "Cμ is not Miller-multiplied and the band reaches "
        f"{eng(analysis.f_high, 'Hz', 4)}.",
        f"AC load line: the load can swing about IC·Rac ≈ {eng(ic * rac, 'V', 3)} peak before "
        f"cutoff and about VCE − VCEsat ≈ {eng(vce - dev.vce_sat, 'V', 3)} before saturation.",
        f"Divider: RTH ≈ {eng(rth, 'Ω', 4)}, (hFE_min + 1)·RE / RTH ≈ {num(stiff, 3)} (common "
        f"practice "
        "asks for about 10; C3 bypasses it, so it costs no input impedance).",
    ]
