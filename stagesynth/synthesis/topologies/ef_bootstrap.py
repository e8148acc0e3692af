"""Emitter follower with a bootstrapped bias network: a buffer for very high input impedance.

Roles and reference designators:

    R1  divider, supply side          C1  input coupling (in -> base)
    R2  divider, ground side          C2  output coupling (emitter -> out)
    R3  series base resistor          C3  bootstrap (emitter -> divider midpoint x1)
    R4  emitter resistor RE           Q1  the transistor, collector on the supply

The divider (R1, R2) sets the base voltage through R3; C3 drives the divider's
midpoint with the emitter signal, so both ends of R3 move almost together and it
draws only (1 - A) of the current it would otherwise: it looks like R3 / (1 - A)
(Horowitz & Hill, bootstrapping, from memory). The input impedance then rises
far above RTH, up to the transistor's own (beta + 1) R'E.

A separate family rather than optional parts of "ef": leaving R3 out would put C3
straight from emitter to base and short the follower's input, and the
synthesizer's OPTIONAL mechanism can only short resistors, not remove capacitors.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut, make_design
from stagesynth.synthesis.topologies.emitter_follower import (
    divider,
    follower_conflicts,
    follower_ic_range,
    follower_notes,
    vbe25,
)

NAME = "ef_boot"
TITLE = "emitter follower, bootstrapped divider bias"
STAGES = 1
RESISTORS = ("R1", "R2", "R3", "R4")  # divider top, divider bottom, series base R, RE
CAPACITORS = ("C1", "C2", "C3")
GAIN_SPLIT = None  # a follower's gain has no DC-preserving knob
OPTIONAL: frozenset[str] = frozenset()

ROLES = {
    "R1": "bias divider, supply side",
    "R2": "bias divider, ground side",
    "R3": "series base resistor, bootstrapped (looks like R3 / (1 - A) to the input)",
    "R4": "emitter resistor RE (DC bias and emitter load)",
    "C1": "input coupling",
    "C2": "output coupling from the emitter",
    "C3": "bootstrap: drives the divider midpoint with the emitter signal",
    "Q1": "follower transistor (collector on the supply rail)",
}


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); NPN or PNP from the spec."""
    pnp = spec.transistor.polarity == "pnp"
    rail_e = "vcc" if pnp else "0"
    rail_c = "0" if pnp else "vcc"
    nodes = {
        "R1": ("vcc", "x1"),
        "R2": ("x1", "0"),
        "R3": ("x1", "b1"),
        "R4": ("e1", rail_e),
        "C1": ("in", "b1"),
        "C2": ("e1", "out"),
        "C3": ("e1", "x1"),
    }
    return make_design(spec, NAME, nodes, values, {"Q1": (rail_c, "b1", "e1")}, ROLES, title)


def first_cut(spec: Spec, *, ic_points: int = 12) -> FirstCut:
    """A grid over IC, VE, bias stiffness and the share of the base resistance put in R3.

    Common practice (no single source): the emitter near mid-supply for symmetric
    clipping; (RTH + R3) <= (hFE_min + 1) * RE / K for a stable bias. Bootstrapping
    wants R3 and RTH both large against RE, since RTH now loads the emitter.
    """
    dev = spec.transistor
    vcc = spec.supply.voltage
    lo, hi = follower_ic_range(spec, lo_floor=10e-6)
    ic = np.geomspace(lo, hi, ic_points)
    ve_frac = np.array([0.35, 0.5, 0.65])
    stiff = np.array([1.0, 2.0, 4.0, 8.0])
    share = np.array([0.2, 0.4, 0.6, 0.8])
    IC, VEf, K, F = (a.ravel() for a in np.meshgrid(ic, ve_frac, stiff, share, indexing="ij"))
    beta = dev.hfe_nominal
    ve = VEf * vcc
    re = ve / (IC * (1.0 + 1.0 / beta))
    r_base = (dev.hfe_min + 1.0) * re / K
    r3 = F * r_base
    rth = r_base - r3
    vth = ve + vbe25(dev, IC) + IC / beta * (r_base + dev.r_bb)
    keep = (vth < 0.97 * vcc) & (re > 1.0) & (vcc - ve > dev.vce_sat + 0.3)
    r1, r2 = divider(spec, rth, vth)
    values = {"R1": r1[keep], "R2": r2[keep], "R3": r3[keep], "R4": re[keep]}
    info = {"ic": IC[keep], "ve": ve[keep], "stiffness": K[keep], "r3_share": F[keep]}
    return FirstCut(values=values, knob=None, info=info)


def precheck(spec: Spec) -> list[Conflict]:
    """What a bootstrapped follower can never do (as any follower)."""
    return follower_conflicts(spec)


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for this bias point and the bootstrap (for the report)."""
    values = design.values()
    rth = values["R1"] * values["R2"] / (values["R1"] + values["R2"])
    r3 = values["R3"]
    notes = follower_notes(spec, analysis, values["R4"], rth, r3)
    notes.append(
        f"Bootstrap: C3 drives the divider midpoint with the emitter signal, so R3 = "
        f"{eng(r3, 'Ω', 4)} carries only (1 − A) of its plain current and looks like R3/(1 − A) "
        "(Horowitz & Hill). The input impedance is "
        f"{eng(analysis.z_in, 'Ω', 4)} at midband against {eng(rth, 'Ω', 4)} for the bare divider; "
        "the ceiling is now the transistor's own (β + 1)·(RE ∥ RTH ∥ RL).")
    return notes
