"""Parts-list row of a junction FET: the spread and capacitances assumed, the ratings needed.

Kept apart from the bipolar row so that bom.py only dispatches (the report computes no
physics: the stresses come from the analysis' per-corner states).
"""

from __future__ import annotations

from stagesynth.contracts.netlist import Design, Part
from stagesynth.engine.analysis import Analysis
from stagesynth.quantities.units import format_quantity as fq

DERATING = 2.0  # rating at least twice the worst-corner stress (common practice)


def jfet_row(design: Design, analysis: Analysis, part: Part) -> dict[str, str]:
    """The parts-list columns for junction FET `part` (ref, kind, value, ... note)."""
    dev = design.devices[part.device]
    points = [analysis.nominal, *analysis.corners]
    states = [(p, p.transistors[part.ref]) for p in points if p.converged]
    active = [(p, s) for p, s in states if s.active]
    supply = max(p.condition.supply for p in points)
    channel = "N-channel" if dev.polarity == "n" else "P-channel"
    vp_lo, vp_hi = sorted(dev.vp, key=abs)
    spread = (f"IDSS {fq(dev.idss_min, 'A')} to {fq(dev.idss_max, 'A')} with VP "
              f"{fq(vp_lo, 'V')} to {fq(vp_hi, 'V')} (paired)")
    ratings = [f"VDS(max) ≥ {fq(supply, 'V')}"]
    if active:
        point, worst = max(active, key=lambda ps: ps[1].vce * ps[1].ic)
        p_worst = worst.vce * worst.ic
        ratings.append(f"Ptot ≥ {fq(DERATING * p_worst, 'W')}")
        diss = fq(p_worst, "W")
        note = (f"worst at {point.condition.label} (VDS {fq(worst.vce, 'V')}, "
                f"ID {fq(worst.ic, 'A')}); ratings: VDS approaches the supply at cutoff, "
                f"Ptot ≥ {DERATING:g}× the worst corner (common practice)")
    else:
        diss, note = "n/a", "not in the active region at any corner: no stress to rate"
    if dev.name:
        note += f"; verified with the data of '{dev.name}'"
    return {
        "ref": part.ref,
        "kind": "transistor",
        "value": f"{channel} JFET, {spread}",
        "series": "",
        "tolerance": f"{spread} at 25 °C",
        "nodes": ", ".join(f"{t}={n}" for t, n in zip("dgs", part.nodes, strict=True)),
        "dc_voltage_max": "",
        "dissipation_max": diss,
        "suggested_rating": ", ".join(ratings),
        "type": (f"{channel} junction FET, Cgs ≤ {fq(dev.c_gs, 'F')}, "
                 f"Cgd ≤ {fq(dev.c_gd, 'F')}, IGSS ≤ {fq(dev.i_gss, 'A')} at 25 °C"),
        "note": note,
    }
