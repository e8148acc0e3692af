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

from stagesynth.quantities.units import format_quantity

if TYPE_CHECKING:  # pragma: no cover - typing only
    from stagesynth.contracts.netlist import Design, Part
    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis, PointResult

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
# The order list (bom.csv): identical parts grouped, what to buy, in ASCII units.
ORDER_COLUMNS = ("qty", "refs", "part", "value", "series", "tolerance", "rating", "type",
                 "note")
PART_NAMES = {"resistor": "resistor", "capacitor": "capacitor", "transistor": "transistor"}


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
    from stagesynth.quantities import eseries

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
    return _series_without_spec(part, value)


def _series_without_spec(part: Part, value: float, tolerance: float | None = None):
    from stagesynth.quantities import eseries

    tol_text = format_quantity(tolerance, "%") if tolerance is not None else ""
    for name in RESISTOR_SERIES if part.kind == "resistor" else CAPACITOR_SERIES:
        if eseries.is_standard(value, name):
            return name, tol_text, ""
    return "none", tol_text, "not an IEC 60063 value"


def _recorded_tolerance(design: Design, kind: str) -> float | None:
    """The part tolerance the design was synthesized (and checked) with, when recorded."""
    record = design.extra.get("synthesis") if isinstance(design.extra, Mapping) else None
    tol = record.get(f"{kind}_tolerance") if isinstance(record, Mapping) else None
    return float(tol) if isinstance(tol, int | float) and not isinstance(tol, bool) else None


def capacitor_stress(design: Design, analysis: Analysis, part: Part) -> dict:
    """A capacitor's DC stress as data: worst voltage, suggested rating, polarity advice."""
    a, b = part.nodes
    volts = [dc_across(design, p, a, b) for p in _points(analysis) if p.converged]
    worst = max((abs(v) for v in volts), default=math.nan)
    rating = next_rating(max(DERATING * worst, CAP_VOLTAGE_RATINGS[0]), CAP_VOLTAGE_RATINGS)
    same_sign = bool(volts) and (all(v > 0 for v in volts) or all(v < 0 for v in volts))
    value = float(part.value)
    polarized = value >= ELECTROLYTIC_FROM and same_sign and worst >= POLAR_MIN_VOLTS
    leak = leakage_kind(design, part)
    if leak is not None and not leak.electrolytic_ok and value >= ELECTROLYTIC_FROM:
        polarized = False  # its leakage would move the bias: no electrolytic here
        kind = "film or ceramic required"
    elif polarized:
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
        **_leakage_fields(leak),
    }


_LEAK_CACHE: list = []  # (design, kinds) of the last design asked: one engine call per design


def leakage_kind(design: Design, part: Part):
    """The engine's leakage verdict for one capacitor (leakage.py), or None if unavailable."""
    from stagesynth.quantities.errors import ConvergenceError
    from stagesynth.synthesis.leakage import capacitor_kinds

    if not _LEAK_CACHE or _LEAK_CACHE[0][0] is not design:
        try:
            kinds = capacitor_kinds(design)
        except (ValueError, ArithmeticError, ConvergenceError):
            kinds = {}  # a parts list still lists the parts without the leakage verdict
        _LEAK_CACHE[:] = [(design, kinds)]
    return _LEAK_CACHE[0][1].get(part.ref)


def _leakage_fields(leak) -> dict:
    """Leakage data for design.json: may this capacitor be an electrolytic, and why."""
    if leak is None:
        return {}
    return {"electrolytic_ok": leak.electrolytic_ok,
            "electrolytic_leakage_a": leak.leakage,
            "leakage_bias_shift": leak.bias_shift,
            "leakage_note": leak.reason}


def _capacitor_row(design: Design, analysis: Analysis, part: Part) -> dict[str, str]:
    st = capacitor_stress(design, analysis, part)
    worst = st["dc_voltage_max"]
    rating = st["suggested_rating_v"]
    rating_text = (f"{format_quantity(rating, 'V')} or more" if rating is not None
                   else "above 630 V: choose with care")
    if st["polarized"]:
        plus = st["positive"]
        kind = f"electrolytic (aluminium, polarized), + to {plus}"
        note = (f"positive end on node {plus} (higher DC voltage at every corner); "
                f"rating ≥ {DERATING:g}× the highest DC voltage (common practice)")
        if st.get("leakage_note"):
            note += f"; {st['leakage_note']}"
    elif st["type"] == "film or ceramic required":
        kind = "film or ceramic required (no electrolytic)"
        note = (f"{st.get('leakage_note', '')}; rating ≥ {DERATING:g}× the highest DC voltage "
                "(common practice)")
    elif st["type"] == "bipolar electrolytic or film":
        kind = "bipolar (non-polar) electrolytic or film"
        note = ("DC voltage across it is tiny or changes sign: a polarized part would be "
                "barely biased, so a non-polar type is safer")
    else:
        band = analysis.environment.band
        kind = dielectric(float(part.value), band[1] if band else analysis.f_high)
        note = f"rating ≥ {DERATING:g}× the highest DC voltage (common practice)"
    return {
        "dc_voltage_max": format_quantity(worst, "V") if worst is not None else "n/a",
        "dissipation_max": "",
        "suggested_rating": rating_text,
        "type": kind,
        "note": note,
    }


RF_FROM = 1e6  # Hz: a band reaching above this wants ceramic, not film (lead inductance)


def dielectric(value: float, f_top: float = 0.0) -> str:
    """A non-electrolytic capacitor's dielectric for a signal path (common practice): C0G
    ceramic (no voltage or temperature coefficient to speak of) up to 1 nF, film above,
    where class-2 ceramics (X7R) would add distortion through their voltage coefficient.
    A stage whose band reaches above RF_FROM takes ceramic throughout (a film part's
    inductance resonates there): C0G up to 10 nF, X7R above."""
    if value <= 1e-9 or (f_top > RF_FROM and value <= 10e-9):
        return "ceramic C0G/NP0"
    if f_top > RF_FROM:
        return "ceramic X7R (coupling or bypass)"
    return "film (polyester or polypropylene)"


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
        "type": "metal film",
        "note": f"rating ≥ {DERATING:g}× worst-corner dissipation (common practice)",
    }


def transistor_needs(design: Design, analysis: Analysis, part: Part) -> dict:
    """What the transistor bought for `part` must offer, from the design's worst corner:
    the hFE spread and fT/Ccb the analysis assumed, and the ratings it needs (common
    practice: IC and dissipation ratings at least DERATING x the worst stress; VCE
    rated above the highest supply, which VCE approaches at cutoff)."""
    dev = design.devices[part.device]
    points = _points(analysis)
    states = [(p, p.transistors[part.ref]) for p in points if p.converged]
    active = [(p, s) for p, s in states if s.active]
    supply = max(p.condition.supply for p in points)
    out = {"polarity": dev.polarity.upper(), "hfe": (dev.hfe_min, dev.hfe_max), "ft": dev.ft,
           "c_cb": dev.c_cb, "vce_needed": supply, "ic_worst": None, "p_worst": None,
           "p_point": None, "tj_max": max((s.tj for _, s in states), default=None),
           "ambient_max": max(p.condition.ambient for p in points)}
    if active:
        point, worst = max(active, key=lambda ps: ps[1].vce * ps[1].ic)
        out.update(ic_worst=max(s.ic for _, s in active), p_worst=worst.vce * worst.ic,
                   p_point=(point, worst))
    return out


def _bjt_row(design: Design, analysis: Analysis, part: Part) -> dict[str, str]:
    dev = design.devices[part.device]
    need = transistor_needs(design, analysis, part)
    ratings = [f"VCEO ≥ {format_quantity(need['vce_needed'], 'V')}"]
    if need["p_point"] is not None:
        point, worst = need["p_point"]
        ratings += [f"IC(max) ≥ {format_quantity(DERATING * need['ic_worst'], 'A')}",
                    f"Ptot ≥ {format_quantity(DERATING * need['p_worst'], 'W')} at "
                    f"{need['ambient_max']:g} °C"]
        diss = format_quantity(need["p_worst"], "W")
        note = (f"worst at {point.condition.label} "
                f"(VCE {format_quantity(worst.vce, 'V')}, IC {format_quantity(worst.ic, 'A')}); "
                f"Tj up to {need['tj_max']:.1f} °C; ratings: VCE approaches the supply at "
                f"cutoff, IC and Ptot ≥ {DERATING:g}× the worst corner (common practice)")
    else:
        diss, note = "n/a", "not in the active region at any corner: no stress to rate"
    if dev.name:
        note += f"; verified with the data of '{dev.name}'"
    return {
        "dc_voltage_max": "",
        "dissipation_max": diss,
        "suggested_rating": ", ".join(ratings),
        "type": (f"{need['polarity']} small-signal, fT ≥ {format_quantity(need['ft'], 'Hz')}, "
                 f"Ccb ≤ {format_quantity(need['c_cb'], 'F')}"),
        "note": note,
    }


def bom_rows(design: Design, analysis: Analysis, spec: Spec | None = None) -> list[dict[str, str]]:
    """One row per part (keys: COLUMNS), values as display text in engineering units."""
    rows = []
    for part in design.parts:
        if part.is_jfet:
            from stagesynth.report.jfet_rows import jfet_row

            rows.append(jfet_row(design, analysis, part))
            continue
        if part.is_bjt:
            dev = design.devices[part.device]
            base = {
                "ref": part.ref,
                "kind": "transistor",
                "value": f"{dev.polarity.upper()}, hFE {dev.hfe_min:g}–{dev.hfe_max:g}",
                "series": "",
                "tolerance": f"hFE {dev.hfe_min:g}–{dev.hfe_max:g} at 25 °C",
                "nodes": ", ".join(f"{t}={n}" for t, n in zip("cbe", part.nodes, strict=True)),
            }
            base.update(_bjt_row(design, analysis, part))
        else:
            unit = "Ω" if part.kind == "resistor" else "F"
            if spec is not None:
                series, tol, note = _series_of(part, spec)
            else:
                series, tol, note = _series_without_spec(
                    part, float(part.value), _recorded_tolerance(design, part.kind))
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
    """The order list as CSV text, ASCII only: a header row, then one row per group of
    identical parts with its quantity (ORDER_COLUMNS)."""
    rows = rows if rows is not None else bom_rows(design, analysis, spec)
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(ORDER_COLUMNS), lineterminator="\r\n")
    writer.writeheader()
    for row in order_rows(rows):
        writer.writerow({k: ascii_text(v) for k, v in row.items()})
    return buf.getvalue()


_ASCII = {"Ω": "ohm", "µ": "u", "μ": "u", "–": "-", "—": "-", "≥": ">=", "≤": "<=",
          "°C": "degC", "×": "x", "…": "...", "∥": "||", "·": "*", "−": "-"}


def ascii_text(text: str) -> str:
    """Units and signs in ASCII ("4.7 kohm", "10 uF", ">="): a CSV that opens with the
    right characters in any spreadsheet, whatever encoding it guesses."""
    for uni, plain in _ASCII.items():
        text = text.replace(uni, plain)
    return text.encode("ascii", "replace").decode("ascii")


def order_rows(rows: list[Mapping[str, str]]) -> list[dict[str, str]]:
    """Identical parts grouped into one line with a quantity, in the order they first
    appear: same kind, value, series, tolerance, type and rating (a polarized capacitor's
    "+ to node" is where it goes, not what to buy)."""
    groups: dict[tuple, dict[str, object]] = {}
    for r in rows:
        kind = r["type"].split(", + to ")[0]
        key = (r["kind"], r["value"], r["series"], r["tolerance"], kind,
               r["suggested_rating"])
        if key not in groups:
            groups[key] = {"refs": [], "row": r, "type": kind}
        groups[key]["refs"].append(r["ref"])
    out = []
    for g in groups.values():
        r = g["row"]
        notes = [n for n in r["note"].split("; ") if n and not n.startswith(
            ("positive end", "worst at"))]
        out.append({
            "qty": str(len(g["refs"])),
            "refs": " ".join(g["refs"]),
            "part": PART_NAMES.get(r["kind"], r["kind"]),
            "value": r["value"],
            "series": r["series"],
            "tolerance": r["tolerance"],
            "rating": r["suggested_rating"],
            "type": g["type"],
            "note": "; ".join(notes),
        })
    return out
