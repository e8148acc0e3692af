"""Junction-FET common source with source-resistor self-bias, split source resistor.

Roles and reference designators:

    R1  gate return RG (gate to the source rail)   C1  input coupling (in -> gate)
    R2  drain resistor RD                          C2  output coupling (drain -> out)
    R3  unbypassed source RS1                      C3  source bypass across RS2
    R4  bypassed source RS2                        J1  the junction FET

The gate sits at the source rail through RG, so VGS = -ID·(RS1 + RS2): the self-bias
line. The drain current of every unit lies where that line crosses its transfer curve
(engine/jfetbias.py); the first cut takes the line through the nominal unit at a grid of
fractions of its IDSS and places RD inside the window the two corner units leave. The
split RS1/RS2 is the gain knob: the gain ≈ gm·(RD ∥ RL)/(1 + gm·RS1) (Sedra & Smith).
The P-channel mirror puts the source network and RG at the supply, RD at ground.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.jfetbias import gm_at, source_resistance_for, spread_points
from stagesynth.quantities.units import format_number as num
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut
from stagesynth.synthesis.topologies.jfet_common import (
    bias_notes,
    drain_window,
    gain_knob,
    gate_resistors,
    input_note,
    jfet,
    make_design,
    nominal_unit,
    place,
    rails,
    swing_amplitude,
)

NAME = "jfet_cs"
TITLE = "JFET common source, source-resistor self-bias, split source resistor"
STAGES = 1
DEVICES = "jfet"
RESISTORS = ("R1", "R2", "R3", "R4")  # RG, RD, RS1, RS2
CAPACITORS = ("C1", "C2", "C3")
GAIN_SPLIT = ("R3", "R4")
OPTIONAL = frozenset({"R3"})

ROLES = {
    "R1": "gate return RG (sets the input resistance; carries the gate leakage)",
    "R2": "drain resistor RD",
    "R3": "source degeneration RS1 (unbypassed: sets the gain, holds it over the spread)",
    "R4": "source bias RS2 (bypassed: with RS1 sets the self-bias line VGS = -ID·RS)",
    "C1": "input coupling",
    "C2": "output coupling",
    "C3": "source bypass",
    "J1": "amplifying junction FET",
}
FRACTIONS = np.array([0.04, 0.08, 0.14, 0.22, 0.33, 0.5, 0.7])  # ID/IDSS of the nominal unit
POSITIONS = np.array([0.15, 0.4, 0.65, 0.9])  # RD within its window


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); N or P channel from the spec."""
    rail_s, rail_d = rails(spec)
    nodes = {
        "R1": ("g1", rail_s),
        "R2": (rail_d, "d1"),
        "R3": ("s1", "x1"),
        "R4": ("x1", rail_s),
        "C1": ("in", "g1"),
        "C2": ("d1", "out"),
        "C3": ("x1", rail_s),
    }
    return make_design(spec, NAME, nodes, values, {"J1": ("d1", "g1", "s1")}, ROLES, title)


def first_cut(spec: Spec) -> FirstCut:
    """Self-bias lines through the nominal unit at a grid of ID/IDSS, each gate return the
    input needs, RD placed in the corner units' window (jfet_common.drain_window)."""
    dev = jfet(spec)
    idss_n, vp_n = nominal_unit(dev)
    rg = gate_resistors(spec)
    F, RG, P = (a.ravel() for a in np.meshgrid(FRACTIONS, rg, POSITIONS, indexing="ij"))
    id_n = F * idss_n
    rs = source_resistance_for(idss_n, vp_n, id_n)
    pts = spread_points(dev, spec.require.ambient, rs, 0.0, RG)
    rl = spec.load.resistance
    amp = swing_amplitude(spec)
    rd_lo, rd_hi = drain_window(spec, pts, rs, ac_load=rl, headroom=0.3 * amp)
    rd = place(rd_lo, rd_hi, P)
    ok = (rd_hi > rd_lo) & (pts.id_low > 1.5e-6)
    rac = rd * rl / (rd + rl)
    knob = gain_knob(spec.require.gain, gm_at(idss_n, vp_n, id_n), rac, 1.0, rs)
    values = {"R1": RG, "R2": rd, "R3": np.zeros_like(rs), "R4": rs}
    keep = ok if np.any(ok) else np.isfinite(rd) & (rd > 0)
    info = {"id_nominal": id_n, "id_low": pts.id_low, "id_high": pts.id_high}
    return FirstCut(values={k: v[keep] for k, v in values.items()}, knob=knob[keep],
                    info={k: v[keep] for k, v in info.items()})


def inverting_conflict(spec: Spec, what: str) -> list[Conflict]:
    """A common-source stage inverts: refuse inverting = "no"."""
    if spec.require.inverting != "no":
        return []
    return [Conflict("inverting", "no", f"{what} always inverts",
                     'set inverting = "any" or "yes", or use a source follower')]


def precheck(spec: Spec) -> list[Conflict]:
    """What a single common-source stage can never do."""
    return inverting_conflict(spec, "a common-source stage")


def cs_notes(spec: Spec, design: Design, analysis, rs1: float, rs2: float, rd: float,
             ref: str = "J1", load: str = "RD") -> list[str]:
    """Bias, gain and split lines shared by the common-source families (`load` names the
    resistor that carries the signal current: RD, or RC on a cascode's collector)."""
    st = analysis.nominal.transistors[ref]
    rl = spec.load.resistance
    rac = rd * rl / (rd + rl)
    gm = gm_at(st.idss, st.vp, st.ic) if st.idss else float("nan")
    dev = design.devices[next(p.device for p in design.parts if p.ref == ref)]
    spread = dev.idss_max / dev.idss_min
    return [
        f"Bias point (nominal unit) ID ≈ {eng(st.ic, 'A', 3)}, VDS ≈ {eng(st.vce, 'V', 3)}, "
        f"VGS ≈ {eng(st.vbe, 'V', 3)} (IDSS {eng(st.idss or 0.0, 'A', 3)}, VP "
        f"{eng(st.vp or 0.0, 'V', 3)} at its junction temperature); gm = 2·√(IDSS·ID)/|VP| ≈ "
        f"{eng(float(gm), 'S', 3)} (Sedra & Smith).",
        f"Gain ≈ gm·({load} ∥ RL)/(1 + gm·RS1) with {load} ∥ RL ≈ {eng(rac, 'Ω', 3)}, RS1 = "
        f"{eng(rs1, 'Ω', 3)}: the unbypassed part makes gm·RS1 ≈ {num(float(gm * rs1), 3)}, "
        f"which holds the gain over the {num(spread, 2)}:1 IDSS spread between the corner "
        "units; "
        f"RS2 = {eng(rs2, 'Ω', 3)} is bypassed and only sets the bias.",
        *bias_notes(spec, analysis, ref),
    ]


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for this bias line and split (for the report)."""
    v = design.values()
    return [*cs_notes(spec, design, analysis, v.get("R3", 0.0), v.get("R4", 0.0), v["R2"]),
            input_note(spec, analysis, v["R1"], False)]
