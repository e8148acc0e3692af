"""Junction-FET common source with divider bias: the steeper bias line for a wide spread.

Roles and reference designators:

    R1  divider, supply side                 C1  input coupling (in -> gate)
    R2  divider, ground side                 C2  output coupling (drain -> out)
    R3  gate resistor RG (divider -> gate)   C3  source bypass across RS2
    R4  drain resistor RD                    J1  the junction FET
    R5  unbypassed source RS1
    R6  bypassed source RS2

The divider lifts the gate to VG, so the bias line is VGS = VG - ID·RS with a larger RS:
a steeper line crosses the transfer curves of the low and the high unit at drain currents
much closer together than plain self-bias can (Horowitz & Hill, from memory), which a
5:1 IDSS spread with a narrow drain window needs. RG carries no DC current but the gate
leakage, so it sets the input resistance on its own. P channel: the mirror image.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.jfetbias import gm_at, source_resistance_for, spread_points
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut
from stagesynth.synthesis.topologies.jfet_common import (
    drain_window,
    gain_knob,
    gate_resistors,
    input_note,
    jfet,
    make_design,
    nominal_unit,
    place,
    rails,
    supply_low,
    swing_amplitude,
)
from stagesynth.synthesis.topologies.jfet_cs import cs_notes, inverting_conflict

NAME = "jfet_cs_div"
TITLE = "JFET common source, divider bias and source resistor, split source resistor"
STAGES = 1
DEVICES = "jfet"
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6")
CAPACITORS = ("C1", "C2", "C3")
GAIN_SPLIT = ("R5", "R6")
OPTIONAL = frozenset({"R5"})

ROLES = {
    "R1": "gate bias divider, supply side",
    "R2": "gate bias divider, ground side",
    "R3": "gate resistor RG (sets the input resistance; carries only the gate leakage)",
    "R4": "drain resistor RD",
    "R5": "source degeneration RS1 (unbypassed)",
    "R6": "source bias RS2 (bypassed: with RS1 and the divider sets the bias line)",
    "C1": "input coupling",
    "C2": "output coupling",
    "C3": "source bypass",
    "J1": "amplifying junction FET",
}
VG_FRACTIONS = np.array([0.08, 0.16, 0.26])  # gate lift, fraction of the supply
ID_FRACTIONS = np.array([0.04, 0.1, 0.2, 0.35, 0.55])  # of the low unit's IDSS (hot)
POSITIONS = np.array([0.2, 0.5, 0.8])
DIVIDER_R = 1e6  # ohm: the divider's Thevenin resistance aimed for (RG carries the input)


def divider(spec: Spec, vg: np.ndarray, rth: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(R1 supply side, R2 ground side) with Thevenin VG above the source rail and RTH."""
    vcc = spec.supply.voltage
    top = rth * vcc / vg
    bottom = rth * vcc / (vcc - vg)
    if jfet(spec).polarity == "p":  # the gate sits VG below the supply
        top, bottom = bottom, top
    return top, bottom


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); N or P channel from the spec."""
    rail_s, rail_d = rails(spec)
    nodes = {
        "R1": ("vcc", "xg"),
        "R2": ("xg", "0"),
        "R3": ("xg", "g1"),
        "R4": (rail_d, "d1"),
        "R5": ("s1", "x1"),
        "R6": ("x1", rail_s),
        "C1": ("in", "g1"),
        "C2": ("d1", "out"),
        "C3": ("x1", rail_s),
    }
    return make_design(spec, NAME, nodes, values, {"J1": ("d1", "g1", "s1")}, ROLES, title)


def first_cut(spec: Spec) -> FirstCut:
    """Divider lines: a gate lift VG and a drain current for the nominal unit give RS; the
    corner units' crossings bound the drain window; RD placed in it."""
    dev = jfet(spec)
    idss_n, vp_n = nominal_unit(dev)
    vcc = spec.supply.voltage
    idss_low_hot = dev.idss_min * (1.0 + dev.idss_tempco * (spec.require.ambient[-1] - 25.0))
    ids = ID_FRACTIONS * min(idss_low_hot, idss_n)
    rg = gate_resistors(spec)
    VG, ID, RG, P = (a.ravel() for a in np.meshgrid(VG_FRACTIONS * vcc, ids, rg, POSITIONS,
                                                     indexing="ij"))
    rs = source_resistance_for(idss_n, vp_n, ID, VG)
    rth = np.minimum(DIVIDER_R, 0.45 * spec.parts.resistor_max * np.minimum(VG, vcc - VG) / vcc)
    pts = spread_points(dev, spec.require.ambient, rs, VG, RG + rth)
    rl = spec.load.resistance
    amp = swing_amplitude(spec)
    rd_lo, rd_hi = drain_window(spec, pts, rs, ac_load=rl, headroom=0.3 * amp)
    rd = place(rd_lo, rd_hi, P)
    ok = (rd_hi > rd_lo) & (pts.id_low > 1.5e-6) & (0.5 * supply_low(spec) > VG)
    r1, r2 = divider(spec, VG, rth)
    rac = rd * rl / (rd + rl)
    knob = gain_knob(spec.require.gain, gm_at(idss_n, vp_n, ID), rac, 1.0, rs)
    values = {"R1": r1, "R2": r2, "R3": RG, "R4": rd, "R5": np.zeros_like(rs), "R6": rs}
    keep = ok if np.any(ok) else np.isfinite(rd) & (rd > 0) & (rs > 0)
    info = {"id_nominal": ID, "vg": VG, "id_low": pts.id_low, "id_high": pts.id_high}
    return FirstCut(values={k: v[keep] for k, v in values.items()}, knob=knob[keep],
                    info={k: v[keep] for k, v in info.items()})


def precheck(spec: Spec) -> list[Conflict]:
    """What a single common-source stage can never do."""
    return inverting_conflict(spec, "a common-source stage")


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for this bias line and split (for the report)."""
    v = design.values()
    vcc = spec.supply.voltage
    vg = vcc * v["R2"] / (v["R1"] + v["R2"])
    if jfet(spec).polarity == "p":
        vg = vcc - vg
    rs = v.get("R5", 0.0) + v.get("R6", 0.0)
    return [
        *cs_notes(spec, design, analysis, v.get("R5", 0.0), v.get("R6", 0.0), v["R4"]),
        f"Divider bias: the gate sits at VG ≈ {eng(vg, 'V', 3)}, so the bias line VGS = VG − "
        f"ID·RS with RS = {eng(rs, 'Ω', 3)} is steeper than plain self-bias: the drain "
        "current moves less between the low and the high unit (Horowitz & Hill).",
        input_note(spec, analysis, v["R3"], False),
    ]
