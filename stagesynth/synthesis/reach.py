"""Bounds no circuit family can beat, checked before any search: an unreachable spec fails fast.

Every family stagesynth builds is a single-ended class-A stage whose output
transistor carries the whole load current. To swing the output up by the peak
Vpk, the current the load draws, Vpk / R_L, must come out of the output
transistor's quiescent current (the collector or emitter resistor also takes its
share, so the true need is larger): I_Q >= Vpk / R_L (Sedra & Smith, class-A
output stage, from memory). The supply current therefore cannot stay below it.
"""

from __future__ import annotations

from stagesynth.contracts.spec import Spec
from stagesynth.quantities.units import format_quantity
from stagesynth.synthesis.topologies.base import Conflict


def unreachable(spec: Spec) -> list[Conflict]:
    """Requirements that no class-A stage can meet together with the others, with the bound."""
    r = spec.require
    out: list[Conflict] = []
    if r.supply_current is not None and r.swing_vpp > 0:
        need = 0.5 * r.swing_vpp / spec.load.resistance
        if r.supply_current < need:
            out.append(Conflict(
                "supply_current",
                f"at most {format_quantity(r.supply_current, 'A')}",
                f"at least {format_quantity(need, 'A')} is needed: a class-A output carries "
                f"the peak load current {format_quantity(0.5 * r.swing_vpp, 'V')} / "
                f"{format_quantity(spec.load.resistance, 'Ω')} out of its bias current",
                "allow more supply current, ask for less swing, or use a larger load "
                "resistance",
            ))
    return out
