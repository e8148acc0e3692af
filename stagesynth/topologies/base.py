"""What every circuit family gives the synthesizer, and the values they share.

A family is a module with these attributes (see common_emitter.py for one):

    NAME, TITLE       short id written to the design file, and a readable name
    STAGES            1 or 2: the selector prefers fewer stages
    RESISTORS         reference designators of the resistors the search sizes
    CAPACITORS        reference designators of the coupling/bypass capacitors
    GAIN_SPLIT        (a, b) or None: moving resistance from b to a (sum fixed)
                      changes the gain but not the DC point; the synthesizer
                      tunes it so the exact gain is on target
    OPTIONAL          resistors that may be left out: a value at FLOOR means
                      "no part", and the finished netlist shorts it
    build(spec, values) -> Design
    first_cut(spec) -> FirstCut
    precheck(spec) -> list[Conflict]     requirements the family can never meet
    describe(spec, design, analysis) -> list[str]   rationale for the report
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..netlist import Design

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


def finalize(family, spec, values: dict[str, float]) -> Design:
    """The family's netlist with every optional resistor at FLOOR shorted out."""
    design = family.build(spec, values)
    for ref in family.OPTIONAL:
        if values.get(ref, 1.0) <= FLOOR:
            design = design.shorted(ref)
    return design
