"""What every circuit family gives the synthesizer, and the values they share.

A family is a module with these attributes (see common_emitter.py for one):

    NAME, TITLE       short id written to the design file, and a readable name
    STAGES            1 or 2: the selector prefers fewer stages
    RESISTORS         reference designators of the resistors the search sizes
    CAPACITORS        reference designators of the coupling/bypass capacitors
    GAIN_SPLIT        (a, b) or None: moving resistance from b to a (sum fixed)
                      changes the gain but not the DC point; the synthesizer
                      tunes it so the exact gain is on target
    GAIN_KNOB         optional, instead of GAIN_SPLIT: one resistor no DC current
                      flows through (in series with a capacitor); the synthesizer
                      tunes it alone so the exact gain is on target
    unlikely(spec)    optional -> list[Conflict]: rules of thumb that only move the
                      family to the back of the search (never refuse it)
    OPTIONAL          resistors that may be left out: a value at FLOOR means
                      "no part", and the finished netlist shorts it
    DEVICES           optional: "bjt" (default), "jfet" or "jfet+bjt": what the family
                      needs from the spec's [transistor]/[companion] (synthesis/devices.py)
    MINOR_CAPACITORS  optional: capacitors the low corner's sizing keeps well below f_low
                      (a bootstrap that fades near the corner makes the response peak)
    build(spec, values) -> Design
    first_cut(spec) -> FirstCut
    precheck(spec) -> list[Conflict]     requirements the family can never meet
                                         (bounds provable from the device model only)
    describe(spec, design, analysis) -> list[str]   rationale for the report
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from stagesynth.contracts.netlist import Design, Part
from stagesynth.contracts.spec import Spec

FLOOR = 1e-3  # ohm: stands for "no resistor here" inside a candidate batch


@dataclass(frozen=True)
class FirstCut:
    """K continuous candidates: resistor values by reference, and the knob's first guess."""

    values: dict[str, np.ndarray]
    knob: np.ndarray | None = None  # first value of GAIN_SPLIT[0], from the closed forms
    info: dict[str, np.ndarray] = field(default_factory=dict)  # design variables behind them

    @property
    def count(self) -> int:
        return int(next(iter(self.values.values())).shape[0])


@dataclass(frozen=True)
class Conflict:
    """A requirement no candidate met, with the best value reached and what to relax."""

    name: str
    limit: str
    best: str
    advice: str


def make_design(
    spec: Spec,
    name: str,
    nodes: Mapping[str, tuple[str, str]],
    values: Mapping[str, float],
    bjts: Mapping[str, tuple[str, str, str]],
    roles: Mapping[str, str],
    title: str = "",
) -> Design:
    """A family's netlist: passive parts (ref -> nodes, values) and transistors (ref ->
    c, b, e), all of the spec's device "Q", with the spec's source, load and conditions."""
    pnp = spec.transistor.polarity == "pnp"
    parts = [Part(ref, "resistor" if ref.startswith("R") else "capacitor", nodes[ref],
                  float(values[ref])) for ref in nodes]
    parts += [Part(ref, "bjt", cbe, device="Q") for ref, cbe in bjts.items()]
    r = spec.require
    return Design(
        parts=tuple(parts),
        devices={"Q": spec.transistor},
        supply_voltage=spec.supply.voltage,
        load_resistance=spec.load.resistance,
        source_resistance=spec.source.resistance,
        load_capacitance=spec.load.capacitance,
        source_capacitance=spec.source.capacitance or 0.0,
        title=title or spec.title,
        topology=name + ("-pnp" if pnp else "-npn"),
        band=(r.f_low, r.f_high),
        extra={
            "roles": dict(roles),
            "conditions": {"ambient": list(r.ambient), "supply_tolerance": spec.supply.tolerance},
        },
    )


def finalize(family, spec, values: dict[str, float]) -> Design:
    """The family's netlist with every optional resistor at FLOOR shorted out."""
    design = family.build(spec, values)
    for ref in family.OPTIONAL:
        if values.get(ref, 1.0) <= FLOOR:
            design = design.shorted(ref)
    return design
