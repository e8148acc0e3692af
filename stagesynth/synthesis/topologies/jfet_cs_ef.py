"""Junction-FET common source driving a bipolar emitter follower (direct-coupled).

Roles and reference designators:

    R1  gate divider, supply side       C1  input coupling (in -> gate)
    R2  gate divider, ground side       C2  output coupling (follower emitter -> out)
    R3  gate resistor RG                C3  source bypass across RS2
    R4  drain resistor RD               J1  junction FET, common source
    R5  unbypassed source RS1           Q1  bipolar emitter follower (base on the drain)
    R6  bypassed source RS2
    R7  follower emitter resistor RE

The JFET gives the high input resistance and low input current noise; the follower's
input resistance (hFE + 1)(re + RE ∥ RL) replaces the load on the drain, so RD and the gain
can be large while the output impedance is the follower's, about re + RD/(hFE + 1) —
the case where one device cannot meet gain, swing and output impedance together. The
bipolar transistor is the spec's [companion], else "generic-npn" ("generic-pnp" for a P
channel). The gate sits on a divider (the steeper bias line of jfet_cs_div.py: the drain
current moves little between the corner units, so RD can be large); RS1/RS2 is the gain
split as in jfet_cs.py.
"""

from __future__ import annotations

import numpy as np

from stagesynth.contracts.device import PRESETS
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.jfetbias import gm_at, source_resistance_for, spread_points
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies.base import Conflict, FirstCut
from stagesynth.synthesis.topologies.ce_ef import VT25, follower_current
from stagesynth.synthesis.topologies.jfet_common import (
    bipolar,
    companion_note,
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
from stagesynth.synthesis.topologies.jfet_cs import cs_notes, inverting_conflict
from stagesynth.synthesis.topologies.jfet_cs_div import DIVIDER_R, divider

NAME = "jfet_cs_ef"
TITLE = "JFET common source driving a bipolar emitter follower"
STAGES = 2
DEVICES = "jfet+bjt"
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6", "R7")
CAPACITORS = ("C1", "C2", "C3")
GAIN_SPLIT = ("R5", "R6")
OPTIONAL = frozenset({"R5"})

ROLES = {
    "R1": "gate bias divider, supply side",
    "R2": "gate bias divider, ground side",
    "R3": "gate resistor RG (sets the input resistance; carries only the gate leakage)",
    "R4": "drain resistor RD (also biases the follower's base)",
    "R5": "source degeneration RS1 (unbypassed)",
    "R6": "source bias RS2 (bypassed)",
    "R7": "follower emitter resistor RE",
    "C1": "input coupling",
    "C2": "output coupling",
    "C3": "source bypass",
    "J1": "junction FET, common source (input stage)",
    "Q1": "bipolar emitter follower (output buffer)",
}
VG_FRACTIONS = np.array([0.07, 0.15])  # gate lift, fraction of the supply
ID_FRACTIONS = np.array([0.04, 0.1, 0.22, 0.45])  # of the low unit's IDSS (hot)
POSITIONS = np.array([0.35, 0.65, 0.9])
FOLLOWER_MULT = np.array([1.5, 3.0])


def matching_bipolar(spec: Spec):
    """The follower's transistor: the companion, or the generic preset of the JFET's sense
    (an NPN follows an N-channel drain, a PNP a P-channel drain)."""
    dev = bipolar(spec)
    comp = getattr(spec, "companion", None)
    if comp is None and jfet(spec).polarity == "p":
        return PRESETS["generic-pnp"]
    return dev


def polarity_conflict(spec: Spec) -> list[Conflict]:
    """A companion of the wrong sense cannot be direct-coupled to the drain."""
    want = "npn" if jfet(spec).polarity == "n" else "pnp"
    if matching_bipolar(spec).polarity == want:
        return []
    return [Conflict("companion", want, f"a {jfet(spec).polarity.upper()}-channel drain "
                     f"direct-couples to an {want.upper()} transistor",
                     f"give a {want.upper()} [companion]")]


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
        "R7": ("e2", rail_s),
        "C1": ("in", "g1"),
        "C2": ("e2", "out"),
        "C3": ("x1", rail_s),
    }
    design = make_design(spec, NAME, nodes, values, {"J1": ("d1", "g1", "s1")}, ROLES, title,
                         bjts={"Q1": (rail_d, "d1", "e2")})
    devices = dict(design.devices)
    devices["Q"] = matching_bipolar(spec)
    from dataclasses import replace

    return replace(design, devices=devices)


def first_cut(spec: Spec) -> FirstCut:
    """Divider lines (gate lift, drain current of the nominal unit) and RD in the corner
    units' window (the follower's high input resistance is the drain's load), then the
    follower's current for the swing and z_out at the lowest drain voltage (the high
    unit's)."""
    dev = jfet(spec)
    q = matching_bipolar(spec)
    idss_n, vp_n = nominal_unit(dev)
    vcc = spec.supply.voltage
    idss_low_hot = dev.idss_min * (1.0 + dev.idss_tempco * (spec.require.ambient[-1] - 25.0))
    ids = ID_FRACTIONS * min(idss_low_hot, idss_n)
    rg = gate_resistors(spec)
    VG, ID, RG, P, M = (a.ravel() for a in np.meshgrid(VG_FRACTIONS * vcc, ids, rg, POSITIONS,
                                                        FOLLOWER_MULT, indexing="ij"))
    rs = source_resistance_for(idss_n, vp_n, ID, VG)
    rth = np.minimum(DIVIDER_R, 0.45 * spec.parts.resistor_max * np.minimum(VG, vcc - VG) / vcc)
    pts = spread_points(dev, spec.require.ambient, rs, VG, RG + rth)
    amp = swing_amplitude(spec)
    # the follower needs its emitter a peak above its rail: one more A of headroom
    rd_lo, rd_hi = drain_window(spec, pts, rs, ac_load=1e9, headroom=amp + 0.3 * amp)
    zout = spec.require.z_out
    if zout is not None:
        # the follower shows RD/(hFE + 1) plus its re: keep RD where the slowest unit
        # still meets z_out with the follower's re at a few milliamperes
        rd_hi = np.minimum(rd_hi, 0.7 * (q.hfe_min + 1.0) * zout)
    rd = place(rd_lo, rd_hi, P)
    vd_high_unit = vcc - pts.id_high * rd  # N frame: the drain's lowest point
    ve2 = np.maximum(vd_high_unit - q.vbe, 0.05)
    ie2 = follower_current(spec, ve2) * M
    if zout is not None:  # and the follower's own re well inside z_out
        ie2 = np.maximum(ie2, 4.0 * VT25 / zout)
    re = ve2 / ie2
    ok = (rd_hi > rd_lo) & (ve2 > 1.2 * amp) & (pts.id_low > 1.5e-6) & (rs > 0)
    r1, r2 = divider(spec, VG, rth)
    beta = q.hfe_nominal
    rl = spec.load.resistance
    rin2 = (beta + 1.0) * (VT25 / ie2 + re * rl / (re + rl))
    rac = rd * rin2 / (rd + rin2)
    knob = gain_knob(spec.require.gain, gm_at(idss_n, vp_n, ID), rac, 1.0, rs)
    values = {"R1": r1, "R2": r2, "R3": RG, "R4": rd, "R5": np.zeros_like(rs), "R6": rs,
              "R7": re}
    keep = ok if np.any(ok) else np.isfinite(rd) & (rd > 0) & np.isfinite(re) & (rs > 0)
    info = {"id_nominal": ID, "vg": VG, "ie2": ie2}
    return FirstCut(values={k: v[keep] for k, v in values.items()}, knob=knob[keep],
                    info={k: v[keep] for k, v in info.items()})


def precheck(spec: Spec) -> list[Conflict]:
    """The common source inverts; the companion must match the channel's sense."""
    return [*inverting_conflict(spec, "a common source followed by a follower"),
            *polarity_conflict(spec)]


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for the two stages (for the report)."""
    v = design.values()
    q = analysis.nominal.transistors["Q1"]
    return [
        *cs_notes(spec, design, analysis, v.get("R5", 0.0), v.get("R6", 0.0), v["R4"]),
        f"Follower Q1: IE ≈ {eng(q.ic, 'A', 3)} through RE = {eng(v['R7'], 'Ω', 3)}; the drain "
        f"sees its input resistance instead of the {eng(spec.load.resistance, 'Ω', 3)} load, "
        f"and the output impedance is about re + RD/(hFE + 1) (analysis: "
        f"{eng(analysis.z_out, 'Ω', 3)}).",
        companion_note(spec),
        input_note(spec, analysis, v["R3"], False),
    ]
