"""Junction-FET common source under a bipolar common-base stage: the JFET-bipolar cascode.

Roles and reference designators:

    R1  gate return RG                  C1  input coupling (in -> gate)
    R2  collector resistor RC           C2  output coupling (collector -> out)
    R3  unbypassed source RS1           C3  source bypass across RS2
    R4  bypassed source RS2             C4  base bypass (holds the cascode base still)
    R5  base divider, supply side       J1  junction FET, common source
    R6  base divider, ground side       Q1  bipolar common base (emitter on the drain)

The bipolar transistor holds the JFET's drain at VB - VBE, so the drain barely moves and
the gate-drain capacitance is no longer multiplied by the stage gain (the Miller effect
is gone; Sedra & Smith, the cascode, from memory): the bandwidth a large RC would cost a
plain common source comes back. The gain stays gm·(RC ∥ RL)/(1 + gm·RS1)·α. VB is set just
high enough that the high unit at its largest drain current keeps its VDS above the
triode edge with the source swing; RC is placed in the window the corner units leave.
The bipolar transistor is the spec's [companion], else "generic-npn" (P: "generic-pnp").
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.jfetbias import gm_at, source_resistance_for, spread_points
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut
from stagesynth.synthesis.topologies.ce_ef import divider as bjt_divider
from stagesynth.synthesis.topologies.jfet_common import (
    companion_note,
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
from stagesynth.synthesis.topologies.jfet_cs_ef import matching_bipolar, polarity_conflict

NAME = "jfet_cascode"
TITLE = "JFET-bipolar cascode (common source under a common base)"
STAGES = 2
DEVICES = "jfet+bjt"
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6")
CAPACITORS = ("C1", "C2", "C3", "C4")
GAIN_SPLIT = ("R3", "R4")
OPTIONAL = frozenset({"R3"})

ROLES = {
    "R1": "gate return RG (sets the input resistance; carries the gate leakage)",
    "R2": "collector resistor RC (the stage's load)",
    "R3": "source degeneration RS1 (unbypassed)",
    "R4": "source bias RS2 (bypassed)",
    "R5": "cascode base divider, supply side",
    "R6": "cascode base divider, ground side",
    "C1": "input coupling",
    "C2": "output coupling",
    "C3": "source bypass",
    "C4": "cascode base bypass",
    "J1": "junction FET, common source (input)",
    "Q1": "bipolar common base (cascode: holds the drain still)",
}
FRACTIONS = np.array([0.04, 0.08, 0.15, 0.26, 0.42])
POSITIONS = np.array([0.25, 0.55, 0.85])
STIFFNESS = np.array([8.0, 30.0])  # divider current over the base current, roughly


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); N or P channel from the spec."""
    from dataclasses import replace

    rail_s, rail_d = rails(spec)
    nodes = {
        "R1": ("g1", rail_s),
        "R2": (rail_d, "c2"),
        "R3": ("s1", "x1"),
        "R4": ("x1", rail_s),
        "R5": ("vcc", "b2"),
        "R6": ("b2", "0"),
        "C1": ("in", "g1"),
        "C2": ("c2", "out"),
        "C3": ("x1", rail_s),
        "C4": ("b2", rail_s),
    }
    design = make_design(spec, NAME, nodes, values, {"J1": ("d1", "g1", "s1")}, ROLES, title,
                         bjts={"Q1": ("c2", "b2", "d1")})
    return replace(design, devices={**design.devices, "Q": matching_bipolar(spec)})


def first_cut(spec: Spec) -> FirstCut:
    """Self-bias lines; the cascode base just high enough for the high unit; RC in the
    window between the low unit's cutoff and the common base's saturation."""
    dev = jfet(spec)
    q = matching_bipolar(spec)
    idss_n, vp_n = nominal_unit(dev)
    vcc = spec.supply.voltage
    rg = gate_resistors(spec)
    F, RG, P, K = (a.ravel() for a in np.meshgrid(FRACTIONS, rg, POSITIONS, STIFFNESS,
                                                   indexing="ij"))
    id_n = F * idss_n
    rs = source_resistance_for(idss_n, vp_n, id_n)
    pts = spread_points(dev, spec.require.ambient, rs, 0.0, RG)
    amp = swing_amplitude(spec)
    vs_top = np.max(-pts.vgs + pts.vg, axis=(-2, -1))  # the source's highest point
    vb = vs_top + pts.overdrive_high + 0.5 + 0.3 * amp + q.vbe
    rl = spec.load.resistance
    id_lo, id_hi = pts.id_low, pts.id_high
    with np.errstate(divide="ignore", invalid="ignore"):
        denom = id_lo * rl - amp
        rc_lo = np.where(denom > 0, amp * rl / denom, np.inf)
        rc_hi = (supply_low(spec) - (vb - q.vbe) - q.vce_sat - amp) / id_hi
    rc = place(rc_lo, rc_hi, P)
    rth = np.minimum(q.hfe_min * 1.0 / (K * id_hi),
                     0.45 * spec.parts.resistor_max * np.minimum(vb, vcc - vb) / vcc)
    ok = (rc_hi > rc_lo) & (vb < 0.8 * vcc) & (pts.id_low > 1.5e-6)
    r5, r6 = bjt_divider(q, vcc, vb, rth)
    rac = rc * rl / (rc + rl)
    alpha = q.hfe_nominal / (q.hfe_nominal + 1.0)
    knob = gain_knob(spec.require.gain, gm_at(idss_n, vp_n, id_n) * alpha, rac, 1.0, rs)
    values = {"R1": RG, "R2": rc, "R3": np.zeros_like(rs), "R4": rs, "R5": r5, "R6": r6}
    keep = ok if np.any(ok) else np.isfinite(rc) & (rc > 0) & (vb < vcc)
    info = {"id_nominal": id_n, "vb": vb}
    return FirstCut(values={k: v[keep] for k, v in values.items()}, knob=knob[keep],
                    info={k: v[keep] for k, v in info.items()})


def precheck(spec: Spec) -> list[Conflict]:
    """The cascode inverts like a common source; the companion must match the channel."""
    return [*inverting_conflict(spec, "a cascode"), *polarity_conflict(spec)]


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for the cascode (for the report)."""
    v = design.values()
    j = analysis.nominal.transistors["J1"]
    q = analysis.nominal.transistors["Q1"]
    return [
        *cs_notes(spec, design, analysis, v.get("R3", 0.0), v.get("R4", 0.0), v["R2"],
                  load="RC"),
        f"Cascode: Q1 holds the drain at VDS ≈ {eng(j.vce, 'V', 3)} (Q1 VCE ≈ "
        f"{eng(q.vce, 'V', 3)}), so the gate-drain capacitance sees almost no voltage gain "
        f"(no Miller multiplication); upper corner {eng(analysis.nominal.f_high, 'Hz', 3)} at "
        "nominal.",
        companion_note(spec),
        input_note(spec, analysis, v["R1"], False),
    ]
