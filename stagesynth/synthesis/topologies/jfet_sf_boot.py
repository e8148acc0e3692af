"""Junction-FET source follower with a bootstrapped gate resistor: very high input resistance.

Roles and reference designators:

    R1  divider, supply side               C1  input coupling (in -> gate)
    R2  divider, ground side               C2  output coupling (source -> out)
    R3  gate resistor RG (divider -> gate) C3  bootstrap (source -> divider midpoint)
    R4  source resistor RS                 J1  the junction FET, drain on the supply

The divider sets the gate at VG and the source follows at VG - VGS, so the bias line is
VGS = VG - ID·RS (steep: the drain current hardly depends on the unit). C3 drives the
divider midpoint with the source signal, so both ends of RG move almost together and it
draws only (1 - A) of its plain current: it looks like RG/(1 - A) with
1 - A = 1/(1 + gm·R'), R' = RS ∥ RL ∥ (R1 ∥ R2) (Horowitz & Hill, bootstrapping, from
memory). Input resistances of tens to hundreds of megohms come from a gate resistor
within resistor_max. P channel: the mirror image.
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
    gate_resistors,
    input_note,
    jfet,
    make_design,
    nominal_unit,
    rails,
    supply_low,
    swing_amplitude,
)
from stagesynth.synthesis.topologies.jfet_cs_div import divider

NAME = "jfet_sf_boot"
TITLE = "JFET source follower, bootstrapped gate resistor"
STAGES = 1
DEVICES = "jfet"
RESISTORS = ("R1", "R2", "R3", "R4")
CAPACITORS = ("C1", "C2", "C3")
MINOR_CAPACITORS = ("C1", "C3")  # bootstrap and input hold well below f_low (else it peaks)
GAIN_SPLIT = None
OPTIONAL: frozenset[str] = frozenset()

ROLES = {
    "R1": "gate bias divider, supply side",
    "R2": "gate bias divider, ground side",
    "R3": "gate resistor RG, bootstrapped (looks like RG/(1 - A) to the input)",
    "R4": "source resistor RS (bias line and follower load)",
    "C1": "input coupling",
    "C2": "output coupling from the source",
    "C3": "bootstrap: drives the divider midpoint with the source signal",
    "J1": "source follower (drain on the supply rail)",
}
VG_FRACTIONS = np.array([0.3, 0.4, 0.5, 0.6])
ID_FRACTIONS = np.array([0.03, 0.06, 0.1, 0.16, 0.25, 0.4, 0.6])  # of the low unit's IDSS (hot)
DIVIDER_SHARE = np.array([3.0, 8.0, 20.0])  # divider Thevenin resistance over RS


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator); N or P channel from the spec."""
    rail_s, rail_d = rails(spec)
    nodes = {
        "R1": ("vcc", "xb"),
        "R2": ("xb", "0"),
        "R3": ("xb", "g1"),
        "R4": ("s1", rail_s),
        "C1": ("in", "g1"),
        "C2": ("s1", "out"),
        "C3": ("s1", "xb"),
    }
    return make_design(spec, NAME, nodes, values, {"J1": (rail_d, "g1", "s1")}, ROLES, title)


def first_cut(spec: Spec) -> FirstCut:
    """Divider lines for the follower: gate lift, drain current of the nominal unit, the
    divider's share of the source load and the gate resistor; both corner units must
    swing before cutoff (ID_low·(RS ∥ RL ∥ RTH) ≥ A) and before the triode edge."""
    dev = jfet(spec)
    idss_n, vp_n = nominal_unit(dev)
    vcc = spec.supply.voltage
    rmax = spec.parts.resistor_max
    idss_low_hot = dev.idss_min * (1.0 + dev.idss_tempco * (spec.require.ambient[-1] - 25.0))
    ids = ID_FRACTIONS * min(idss_low_hot, idss_n)
    rg = gate_resistors(spec, bootstrap=8.0)
    VG, ID, K, RG = (a.ravel() for a in np.meshgrid(VG_FRACTIONS * vcc, ids, DIVIDER_SHARE,
                                                     rg, indexing="ij"))
    rs = source_resistance_for(idss_n, vp_n, ID, VG)
    rth = np.minimum(K * rs, 0.45 * rmax * np.minimum(VG, vcc - VG) / vcc)
    pts = spread_points(dev, spec.require.ambient, rs, VG, RG + rth)
    amp = swing_amplitude(spec)
    rl = spec.load.resistance
    r_ac = 1.0 / (1.0 / rs + 1.0 / rl + 1.0 / rth)
    vs_high = np.max(pts.vg - pts.vgs, axis=(-2, -1))  # the source at its highest
    cut_ok = pts.id_low * r_ac >= amp
    edge_ok = supply_low(spec) - vs_high - pts.overdrive_high >= amp
    ok = cut_ok & edge_ok & (rs > 0) & (pts.id_low > 1.5e-6)
    r1, r2 = divider(spec, VG, rth)
    values = {"R1": r1, "R2": r2, "R3": RG, "R4": rs}
    keep = ok if np.any(ok) else (rs > 0) & np.isfinite(rs)
    gm = gm_at(idss_n, vp_n, ID)
    info = {"id_nominal": ID, "vg": VG, "bootstrap": 1.0 + gm * r_ac}
    return FirstCut(values={k: v[keep] for k, v in values.items()}, knob=None,
                    info={k: v[keep] for k, v in info.items()})


def precheck(spec: Spec) -> list[Conflict]:
    """What any follower can never do: gain at or above unity, or inversion."""
    from stagesynth.synthesis.topologies.emitter_follower import follower_conflicts

    return [Conflict(c.name, c.limit, c.best.replace("emitter", "source").replace(
        "base", "gate"), c.advice) for c in follower_conflicts(spec)]


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for the bias line and the bootstrap (for the report)."""
    v = design.values()
    st = analysis.nominal.transistors["J1"]
    gm = float(gm_at(st.idss, st.vp, st.ic)) if st.idss else float("nan")
    rth = v["R1"] * v["R2"] / (v["R1"] + v["R2"])
    rl = spec.load.resistance
    r_ac = 1.0 / (1.0 / v["R4"] + 1.0 / rl + 1.0 / rth)
    return [
        f"Follower bias (nominal unit): ID ≈ {eng(st.ic, 'A', 3)}, VDS ≈ {eng(st.vce, 'V', 3)},"
        f" VGS ≈ {eng(st.vbe, 'V', 3)}; gm ≈ {eng(gm, 'S', 3)}; gain ≈ gm·R'/(1 + gm·R') with "
        f"R' = RS ∥ RL ∥ RTH ≈ {eng(r_ac, 'Ω', 3)} (Sedra & Smith).",
        f"Bootstrap: C3 drives the divider midpoint with the source, so RG = "
        f"{eng(v['R3'], 'Ω', 3)} looks about 1 + gm·R' ≈ {num(1.0 + gm * r_ac, 3)} times "
        f"larger (Horowitz & Hill): the input sees {eng(analysis.z_in, 'Ω', 3)} at midband "
        "from parts within resistor_max.",
        *bias_notes(spec, analysis),
        input_note(spec, analysis, v["R3"], True),
    ]
