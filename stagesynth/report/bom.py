"""Parts list with the stresses each part sees: DC voltage, dissipation, suggested ratings.

Every stress is the worst over the analysed operating points (nominal and every
corner), read from the engine's DC node voltages and transistor states. Suggested
ratings follow common practice (about 2x the worst stress, next standard step).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Mapping
from typing import TYPE_CHECKING

from ..units import format_quantity

if TYPE_CHECKING:  # pragma: no cover - typing only
    from ..analysis import Analysis, PointResult
    from ..netlist import Design, Part
    from ..spec import Spec

# Standard DC working voltages of capacitors (common practice, the usual catalogue steps).
CAP_VOLTAGE_RATINGS = (6.3, 10.0, 16.0, 25.0, 35.0, 50.0, 63.0, 100.0, 160.0, 200.0, 250.0,
                       400.0, 450.0, 630.0)
# Standard resistor power ratings in watts (common practice).
RESISTOR_POWER_RATINGS = (0.125, 0.25, 0.5, 1.0, 2.0, 3.0, 5.0)
DERATING = 2.0  # suggested rating >= 2x the worst stress (common practice: 1.5-2x)
ELECTROLYTIC_FROM = 1e-6  # F: from here up an aluminium electrolytic is the practical choice
POLAR_MIN_VOLTS = 0.5  # V: below this a polarized capacitor has too little forward bias

RESISTOR_SERIES = ("E6", "E12", "E24", "E48", "E96", "E192")
CAPACITOR_SERIES = ("E3", "E6", "E12", "E24")

COLUMNS = ("ref", "kind", "value", "series", "tolerance", "nodes", "dc_voltage_max",
           "dissipation_max", "suggested_rating", "type", "note")


def next_rating(needed: float, steps: tuple[float, ...]) -> float | None:
    """The smallest standard step >= `needed`; None when beyond the table."""
    for step in steps:
        if step >= needed * (1 - 1e-12):
            return step
    return None


def _points(analysis: Analysis) -> list[PointResult]:
    return [analysis.nominal, *analysis.corners]


def _node_key(design: Design, node: str) -> str:
    """Key of `node` in PointResult.node_voltages (ground and supply have fixed keys)."""
    if node == design.ground:
        return "ground"
    if node == design.supply_node:
        return "supply"
    return node


def dc_across(design: Design, point: PointResult, a: str, b: str) -> float:
    """DC voltage V(a) - V(b) at one operating point."""
    v = point.node_voltages
    return float(v[_node_key(design, a)] - v[_node_key(design, b)])


def _series_of(part: Part, spec: Spec | None) -> tuple[str, str, str]:
    """(series, tolerance, note): the spec's series when given, else the coarsest that fits."""
    from .. import eseries

    value = float(part.value)
    if spec is not None:
        if part.kind == "resistor":
            name, tol = spec.parts.resistors, spec.parts.resistor_tolerance
        else:
            name, tol = spec.parts.capacitors, spec.parts.capacitor_tolerance
        tol_text = format_quantity(tol, "%")
        if eseries.is_standard(value, name):
            return name, tol_text, ""
        return f"not {name}", tol_text, f"value is not in the spec's {name} series"
    for name in RESISTOR_SERIES if part.kind == "resistor" else CAPACITOR_SERIES:
        if eseries.is_standard(value, name):
            return name, "", ""
    return "none", "", "not an IEC 60063 value"


def capacitor_stress(design: Design, analysis: Analysis, part: Part) -> dict:
    """A capacitor's DC stress as data: worst voltage, suggested rating, polarity advice."""
    a, b = part.nodes
    volts = [dc_across(design, p, a, b) for p in _points(analysis) if p.converged]
    worst = max((abs(v) for v in volts), default=math.nan)
    rating = next_rating(max(DERATING * worst, CAP_VOLTAGE_RATINGS[0]), CAP_VOLTAGE_RATINGS)
    same_sign = bool(volts) and (all(v > 0 for v in volts) or all(v < 0 for v in volts))
    value = float(part.value)
    polarized = value >= ELECTROLYTIC_FROM and same_sign and worst >= POLAR_MIN_VOLTS
    if polarized:
        kind = "electrolytic"
    elif value >= ELECTROLYTIC_FROM:
        kind = "bipolar electrolytic or film"
    else:
        kind = "film or ceramic"
    return {
        "dc_voltage_max": worst if math.isfinite(worst) else None,
        "suggested_rating_v": rating,
        "type": kind,
        "polarized": polarized,
        "positive": (a if volts[0] > 0 else b) if polarized else None,
    }


def _capacitor_row(design: Design, analysis: Analysis, part: Part) -> dict[str, str]:
    st = capacitor_stress(design, analysis, part)
    worst = st["dc_voltage_max"]
    rating = st["suggested_rating_v"]
    rating_text = (f"{format_quantity(rating, 'V')} or more" if rating is not None
                   else "above 630 V: choose with care")
    if st["polarized"]:
        plus = st["positive"]
        kind = f"electrolytic suits, + to {plus}"
        note = (f"positive end on node {plus} (higher DC voltage at every corner); "
                f"rating ≥ {DERATING:g}× the highest DC voltage (common practice)")
    elif st["type"] == "bipolar electrolytic or film":
        kind = "bipolar (non-polar) electrolytic or film"
        note = ("DC voltage across it is tiny or changes sign: a polarized part would be "
                "barely biased, so a non-polar type is safer")
    else:
        kind = "film or ceramic (C0G/NP0 below 1 nF)"
        note = f"rating ≥ {DERATING:g}× the highest DC voltage (common practice)"
    return {
        "dc_voltage_max": format_quantity(worst, "V") if worst is not None else "n/a",
        "dissipation_max": "",
        "suggested_rating": rating_text,
        "type": kind,
        "note": note,
    }


def _resistor_row(design: Design, analysis: Analysis, part: Part) -> dict[str, str]:
    a, b = part.nodes
    r = float(part.value)
    powers = [dc_across(design, p, a, b) ** 2 / r for p in _points(analysis) if p.converged]
    worst = max(powers, default=math.nan)
    rating = next_rating(DERATING * worst, RESISTOR_POWER_RATINGS) if math.isfinite(worst) else None
    return {
        "dc_voltage_max": "",
        "dissipation_max": format_quantity(worst, "W") if math.isfinite(worst) else "n/a",
        "suggested_rating": (f"{format_quantity(rating, 'W')}" if rating is not None
                             else "above 5 W: choose with care"),
        "type": "",
        "note": f"rating ≥ {DERATING:g}× worst-corner dissipation (common practice)",
    }


def _bjt_row(design: Design, analysis: Analysis, part: Part) -> dict[str, str]:
    dev = design.devices[part.device]
    states = [(p, p.transistors[part.ref]) for p in _points(analysis) if p.converged]
    if states:
        point, worst = max(states, key=lambda ps: ps[1].vce * ps[1].ic)
        power = worst.vce * worst.ic
        hottest = max(s.tj for _, s in states)
        diss = format_quantity(power, "W")
        note = (f"worst at {point.condition.label} "
                f"(VCE {format_quantity(worst.vce, 'V')}, IC {format_quantity(worst.ic, 'A')}); "
                f"Tj up to {hottest:.1f} °C")
        if dev.p_max is not None:
            note += f"; rated {format_quantity(dev.p_max, 'W')}"
    else:
        diss, note = "n/a", "no DC solution at any corner"
    return {
        "dc_voltage_max": "",
        "dissipation_max": diss,
        "suggested_rating": "",
        "type": f"{dev.polarity.upper()}, device {part.device}",
        "note": note,
    }


def bom_rows(design: Design, analysis: Analysis, spec: Spec | None = None) -> list[dict[str, str]]:
    """One row per part (keys: COLUMNS), values as display text in engineering units."""
    rows = []
    for part in design.parts:
        if part.is_bjt:
            dev = design.devices[part.device]
            base = {
                "ref": part.ref,
                "kind": "transistor",
                "value": dev.name or part.device,
                "series": "",
                "tolerance": f"hFE {dev.hfe_min:g}–{dev.hfe_max:g}",
                "nodes": ", ".join(f"{t}={n}" for t, n in zip("cbe", part.nodes, strict=True)),
            }
            base.update(_bjt_row(design, analysis, part))
        else:
            unit = "Ω" if part.kind == "resistor" else "F"
            series, tol, note = _series_of(part, spec)
            base = {
                "ref": part.ref,
                "kind": part.kind,
                "value": format_quantity(float(part.value), unit),
                "series": series,
                "tolerance": tol,
                "nodes": f"{part.nodes[0]}, {part.nodes[1]}",
            }
            extra = (_resistor_row if part.kind == "resistor" else _capacitor_row)(
                design, analysis, part)
            if note:
                extra["note"] = f"{note}; {extra['note']}" if extra["note"] else note
            base.update(extra)
        rows.append({k: base.get(k, "") for k in COLUMNS})
    return rows


def bom_csv(design: Design, analysis: Analysis, spec: Spec | None = None,
            rows: list[Mapping[str, str]] | None = None) -> str:
    """The parts list as CSV text (header row, then one row per part)."""
    rows = rows if rows is not None else bom_rows(design, analysis, spec)
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(COLUMNS), lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow(row)
    return buf.getvalue()
