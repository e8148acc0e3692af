"""Bootstrapped junction-FET source follower into a bipolar common emitter (AC-coupled).

Roles and reference designators:

    R1  follower gate divider, supply side      C1  input coupling (in -> gate)
    R2  follower gate divider, ground side      C3  bootstrap (source -> divider midpoint)
    R3  gate resistor RG, bootstrapped          C4  interstage coupling (source -> base)
    R4  follower source resistor RS             C5  emitter bypass across RE2
    R5  base divider, supply side               C2  output coupling (collector -> out)
    R6  base divider, ground side               J1  junction-FET source follower
    R7  collector resistor RC                   Q1  bipolar common emitter
    R8  unbypassed emitter RE1
    R9  bypassed emitter RE2

The practitioner's front end for a high-impedance sensor that also needs gain within a
small resistor limit: the follower's bootstrapped gate resistor gives tens of megohms
from parts of a megohm (jfet_sf_boot.py), its low source impedance drives a common emitter
that runs at a current where an electrolytic emitter bypass leaks harmlessly
(common_emitter.py). The bipolar transistor is the spec's [companion], else
"generic-npn" ("generic-pnp" beside a P channel); the stages are AC-coupled, so either
sense goes with either channel.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Source, Spec
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.topologies import common_emitter, jfet_sf_boot
from stagesynth.synthesis.topologies.base import Conflict, FirstCut
from stagesynth.synthesis.topologies.jfet_common import (
    bipolar,
    companion_note,
    input_note,
    make_design,
    rails,
)

NAME = "jfet_sf_ce"
TITLE = "bootstrapped JFET source follower into a bipolar common emitter"
STAGES = 2
DEVICES = "jfet+bjt"
RESISTORS = ("R1", "R2", "R3", "R4", "R5", "R6", "R7", "R8", "R9")
CAPACITORS = ("C1", "C2", "C3", "C4", "C5")
MINOR_CAPACITORS = ("C1", "C3")  # bootstrap and input hold well below f_low
GAIN_SPLIT = ("R8", "R9")
OPTIONAL = frozenset({"R8"})
FOLLOWERS = 3  # follower bias points combined with the common emitter's first cut
STAGES_CE = 200  # common-emitter candidates kept (spread over its grid)

ROLES = {
    **{k: v for k, v in jfet_sf_boot.ROLES.items() if k in ("R1", "R2", "R3", "R4", "C1",
                                                           "C3", "J1")},
    "R5": "base divider of the gain stage, supply side",
    "R6": "base divider of the gain stage, ground side",
    "R7": "collector load RC",
    "R8": "emitter degeneration RE1 (unbypassed)",
    "R9": "emitter bias RE2 (bypassed)",
    "C2": "output coupling",
    "C4": "interstage coupling (follower source -> base)",
    "C5": "emitter bypass",
}
ROLES["J1"] = "junction-FET source follower (input stage)"
ROLES["Q1"] = "bipolar common emitter (gain stage)"


def _ce_spec(spec: Spec) -> Spec:
    """The gain stage's own spec: the bipolar transistor, driven from the follower's low
    source impedance (a few hundred ohms) instead of the sensor."""
    return replace(spec, transistor=bipolar(spec), companion=None,
                   source=Source(resistance=300.0))


def build(spec: Spec, values: dict[str, float], *, title: str = "") -> Design:
    """The netlist for `values` (by reference designator)."""
    rail_s, rail_d = rails(spec)
    pnp = bipolar(spec).polarity == "pnp"
    rail_e = "vcc" if pnp else "0"
    rail_c = "0" if pnp else "vcc"
    nodes = {
        "R1": ("vcc", "xb"),
        "R2": ("xb", "0"),
        "R3": ("xb", "g1"),
        "R4": ("s1", rail_s),
        "R5": ("vcc", "b2"),
        "R6": ("b2", "0"),
        "R7": (rail_c, "c2"),
        "R8": ("e2", "x2"),
        "R9": ("x2", rail_e),
        "C1": ("in", "g1"),
        "C2": ("c2", "out"),
        "C3": ("s1", "xb"),
        "C4": ("s1", "b2"),
        "C5": ("x2", rail_e),
    }
    return make_design(spec, NAME, nodes, values, {"J1": (rail_d, "g1", "s1")}, ROLES, title,
                       bjts={"Q1": ("c2", "b2", "e2")})


def first_cut(spec: Spec) -> FirstCut:
    """The follower's best-spread bias points (jfet_sf_boot's first cut) times a spread of
    the common emitter's first cut (driven from the follower), the gain knob the CE's."""
    fol = jfet_sf_boot.first_cut(spec)
    ce = common_emitter.first_cut(_ce_spec(spec))
    if fol.count == 0 or ce.count == 0:
        return FirstCut(values={ref: np.zeros(0) for ref in RESISTORS}, knob=np.zeros(0))
    # followers: the largest bootstrap factors among those the follower's cut kept
    boot = fol.info.get("bootstrap", np.ones(fol.count))
    fi = np.argsort(-boot, kind="stable")[:FOLLOWERS]
    ci = np.unique(np.linspace(0, ce.count - 1, min(STAGES_CE, ce.count)).astype(int))
    F, C = (a.ravel() for a in np.meshgrid(fi, ci, indexing="ij"))
    values = {
        "R1": fol.values["R1"][F], "R2": fol.values["R2"][F], "R3": fol.values["R3"][F],
        "R4": fol.values["R4"][F],
        "R5": ce.values["R1"][C], "R6": ce.values["R2"][C], "R7": ce.values["R3"][C],
        "R8": ce.values["R4"][C], "R9": ce.values["R5"][C],
    }
    knob = ce.knob[C] if ce.knob is not None else None
    info = {"follower": F, "stage": C}
    return FirstCut(values=values, knob=knob, info=info)


def precheck(spec: Spec) -> list[Conflict]:
    """The common emitter inverts."""
    if spec.require.inverting != "no":
        return []
    return [Conflict("inverting", "no", "the common-emitter gain stage inverts",
                     'set inverting = "any" or "yes", or use a follower alone')]


def describe(spec: Spec, design: Design, analysis) -> list[str]:
    """Plain-language reasons for the two stages (for the report)."""
    v = design.values()
    j = analysis.nominal.transistors["J1"]
    q = analysis.nominal.transistors["Q1"]
    rl = spec.load.resistance
    rac = v["R7"] * rl / (v["R7"] + rl)
    return [
        f"Input: junction-FET follower at ID ≈ {eng(j.ic, 'A', 3)} on the divider line "
        f"(gate near {eng(v['R2'] / (v['R1'] + v['R2']) * spec.supply.voltage, 'V', 3)}); "
        f"its bootstrapped gate resistor RG = {eng(v['R3'], 'Ω', 3)} gives an input "
        f"impedance of {eng(analysis.z_in, 'Ω', 3)} at midband.",
        f"Gain stage: Q1 at IC ≈ {eng(q.ic, 'A', 3)}, VCE ≈ {eng(q.vce, 'V', 3)}; gain ≈ "
        f"Rac/(re + RE1) with Rac = RC ∥ RL ≈ {eng(rac, 'Ω', 3)} and RE1 = "
        f"{eng(v.get('R8', 0.0), 'Ω', 3)} (Sedra & Smith); at this current an electrolytic "
        "emitter bypass may carry the low corner.",
        companion_note(spec),
        input_note(spec, analysis, v["R3"], True),
    ]
