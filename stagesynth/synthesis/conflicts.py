"""Why no design meets: physical bounds, the requirements in the way with the best value
reached, what to relax, and the requirement that empties a family's first cut."""

from __future__ import annotations

import itertools
import math

import numpy as np

from stagesynth.contracts.jfet import is_jfet
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import (
    Analysis,
)
from stagesynth.judging.verdict import (
    Row,
)
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.candidates import _bounded_cut
from stagesynth.synthesis.topologies.base import Conflict


def _physics_conflicts(spec: Spec) -> list[Conflict]:
    """Requirements that no single stage on this supply and transistor can meet."""
    out = []
    r = spec.require
    dev = spec.transistor
    vmin = spec.supply.voltage * (1 - spec.supply.tolerance)
    if is_jfet(dev):  # a channel's triode edge is a bias matter; the rail is the bound
        most, edge = vmin, "ground"
    else:
        most, edge = vmin - dev.vce_sat, f"VCE(sat) = {eng(dev.vce_sat, 'V', 3)}"
    if r.swing_vpp >= most:
        out.append(Conflict(
            "swing", f"{eng(r.swing_vpp, 'V', 3)}pp",
            f"no circuit on this supply can swing more than about {eng(most, 'V', 3)}pp: the "
            f"output "
            f"transistor moves at most between the supply ({eng(vmin, 'V', 3)} at its low "
            f"tolerance) and {edge}",
            "ask for less swing, or raise the supply voltage",
        ))
    out.extend(_noise_floor_conflicts(spec))
    return out


def _noise_floor_conflicts(spec: Spec) -> list[Conflict]:
    """Noise requirements below the input transistor's physical floor (lownoise.py)."""
    if not spec.require.wants_noise or is_jfet(spec.transistor):
        return []  # the two-generator floors are the bipolar transistor's
    from stagesynth.synthesis.lownoise import advice, unreachable

    out = []
    for fl, limit in unreachable(spec):
        unit = {"noise": "V/√Hz", "noise_figure": "dB", "noise_rms": "V"}[fl.name]
        out.append(Conflict(
            fl.name, f"<= {_fmt(limit, unit)}",
            f"no bias current or circuit gets below the floor of {_fmt(fl.value, unit)} "
            f"({fl.condition}), set by {fl.cause}",
            f"relax {fl.name} to {_fmt(1.1 * fl.value if unit != 'dB' else fl.value + 0.3, unit)}"
            f" or more, or: {advice(spec, fl.name)}",
        ))
    return out


def _conflicts(rows: list[Row], spec: Spec) -> list[Conflict]:
    """The requirements that stand in the way, with the best value the search reached.

    A requirement is named when no candidate meets it at all, or when every
    candidate that failed did so only on it (dropping it alone makes the rest
    feasible); its best value is taken among candidates meeting the others.
    """
    out = []
    for row in rows:
        if row.name == "f_low":
            continue
        others = _others_ok(rows, row.name)
        never = not np.any(row.ok)
        alone = np.any(others) and not np.any(row.ok & others)
        if not (never or alone):
            continue
        pool = others if np.any(others) else np.ones_like(row.ok)
        held = "with the other requirements met" if np.any(others) else (
            "(at the best compromise for the others)")
        vals = np.asarray(row.value, dtype=float)[pool]
        if row.relation == ">=":
            best = float(np.max(vals))
        elif row.relation == "<=":
            best = float(np.min(vals))
        elif row.relation == "within":
            # the search may aim the gain up by the capacitors' droop at midband; say
            # the user's window and the gain the finished design would have
            aim_offset = 0.5 * (row.limit[0] + row.limit[1]) - spec.require.gain_db
            vals = vals - aim_offset
            best = float(vals[np.argmin(np.abs(vals - spec.require.gain_db))])
            tol = spec.require.gain_tolerance_db
            out.append(Conflict(
                row.name, _limit_text(row, (spec.require.gain_db - tol,
                                            spec.require.gain_db + tol)),
                f"{_fmt(best, row.unit)} {held}", _advice(row.name, best, spec, row.unit)))
            continue
        else:
            out.append(Conflict(row.name, str(row.limit), "never met",
                                _advice(row.name, 0.0, spec, row.unit)))
            continue
        out.append(Conflict(
            row.name, _limit_text(row), f"{_fmt(best, row.unit)} {held}",
            _advice(row.name, best, spec, row.unit),
        ))
    return out


def _others_ok(rows: list[Row], name: str) -> np.ndarray:
    ok = np.ones_like(rows[0].ok, dtype=bool)
    for row in rows:
        if row.name not in (name, "f_low"):
            ok &= row.ok
    return ok


def _fmt(value: float, unit: str) -> str:
    from stagesynth.judging.textout import fmt

    return fmt(value, unit)


def _limit_text(row: Row, window: tuple[float, float] | None = None) -> str:
    if row.relation == "within":
        lo, hi = window or row.limit
        return f"{lo:.2f} … {hi:.2f} dB"
    return f"{row.relation} {_fmt(float(row.limit), row.unit)}"


def _advice(name: str, best: float, spec: Spec, unit: str) -> str:
    if name == "gain":
        return (f"the gain reachable at this swing, supply and bandwidth is about {best:.1f} dB: "
                "ask for that, or use two stages")
    if name == "swing":
        return f"relax swing to {_fmt(0.98 * best, 'Vpp')} or raise the supply"
    if name == "f_high":
        return (f"relax f_high to {_fmt(0.98 * best, 'Hz')}, lower the gain, reduce the load "
                "capacitance or source resistance, or choose a faster transistor")
    if name == "z_in":
        from stagesynth.contracts.jfet import is_jfet

        if is_jfet(spec.transistor):
            # a JFET's gate draws only leakage: a plain gate return of the asked size
            # is the practitioner's answer once the part limit allows it
            wanted = 1.5 * float(spec.require.z_in or 0.0)
            return (f"relax z_in to {_fmt(0.98 * best, 'Ω')}, or allow a gate return of "
                    f"about {_fmt(wanted, 'Ω')} ([parts] resistor_max, now "
                    f"{_fmt(spec.parts.resistor_max, 'Ω')}; a bootstrapped gate resistor "
                    "multiplies a resistor only by 1 + gm·RS)")
        return (f"relax z_in to {_fmt(0.98 * best, 'Ω')}, or let a follower input stage "
                "(ef_ce) or a bootstrapped bias (ef_boot) carry the input impedance")
    if name == "z_out":
        return f"relax z_out to {_fmt(1.02 * best, 'Ω')}, or add a follower stage"
    if name == "supply_current":
        return f"allow {_fmt(1.02 * best, 'A')} of supply current"
    if name == "active":
        return "widen the supply, narrow the ambient range or the hFE spread"
    if name == "z_in_max":
        return (f"widen the z_in range to {_fmt(1.02 * best, 'Ω')}, or terminate the input "
                "with a resistor of the wanted value in front of a high-impedance stage")
    if name == "z_out_min":
        return (f"widen the z_out range down to {_fmt(0.98 * best, 'Ω')}, or add a series "
                "output resistor (back termination)")
    if name == "return_loss":
        return (f"relax return_loss to {best:.1f} dB, or terminate the input with a "
                "resistor equal to the source resistance")
    if name == "thd":
        return (f"relax thd to {_fmt(1.05 * best, '%')}, or lower thd_level or the gain "
                "(more of the emitter resistance can then stay unbypassed)")
    if name.endswith(("ic_max", "vce_max", "p_max")):
        return "choose a transistor with higher ratings, or a lower supply"
    if name in ("noise", "noise_figure", "noise_rms"):
        from stagesynth.synthesis.lownoise import advice

        relaxed = best + 0.2 if unit == "dB" else 1.05 * best
        return f"relax {name} to {_fmt(relaxed, unit)}, or: {advice(spec, name)}"
    return "relax this requirement"



_RELAXATIONS = ("resistor_max", "z_in", "supply_current", "swing", "z_out", "gain")


def _relaxed(spec: Spec, names: tuple[str, ...]) -> Spec:
    """`spec` with each named requirement (or part limit) made as easy as it gets."""
    from dataclasses import replace

    r, parts = spec.require, spec.parts
    for name in names:
        if name == "resistor_max":
            parts = replace(parts, resistor_max=math.inf)
        elif name == "gain":
            r = replace(r, gain=1.0)
        elif name == "swing":
            r = replace(r, swing_vpp=min(r.swing_vpp, 0.1))
        else:
            r = replace(r, **{name: {"z_in": 0.0}.get(name)})
    return replace(spec, require=r, parts=parts)


def _empty_reason(spec: Spec, family) -> str:
    """One line for a family whose first cut leaves no candidate: the requirement(s) (or
    part limit) that empty it, found by relaxing each in turn, then pairs, and the family."""
    r = spec.require
    shown = {
        "resistor_max": f"resistor_max = {_fmt(spec.parts.resistor_max, 'Ω')}",
        "z_in": f"z_in ≥ {_fmt(r.z_in, 'Ω')}",
        "supply_current": f"supply_current ≤ {_fmt(r.supply_current or 0.0, 'A')}",
        "swing": f"swing ≥ {_fmt(r.swing_vpp, 'Vpp')}",
        "z_out": f"z_out ≤ {_fmt(r.z_out or 0.0, 'Ω')}",
        "gain": f"gain = {r.gain_db:.3g} dB",
    }
    present = [n for n in _RELAXATIONS if not (
        (n == "supply_current" and r.supply_current is None)
        or (n == "z_out" and r.z_out is None) or (n == "z_in" and r.z_in <= 0))]
    head = f"circuit {family.NAME} ({family.TITLE}): no bias point of this circuit meets"
    tail = f"on a {_fmt(spec.supply.voltage, 'V')} supply with this transistor"
    for size in (1, 2):
        for names in itertools.combinations(present, size):
            try:
                found = _bounded_cut(family, _relaxed(spec, names)).count > 0
            except (ValueError, ZeroDivisionError, FloatingPointError):
                continue
            if found:
                return f"{head} {' together with '.join(shown[n] for n in names)} {tail}"
    return f"{head} these requirements together {tail}"

def _thd_conflict(c: Conflict, analysis: Analysis) -> Conflict:
    """A THD no candidate reached: name the limiting mechanism of the closest design."""
    from stagesynth.synthesis.linearity import linearity, mechanism

    lin = linearity(analysis)
    if lin is None:
        return c
    return Conflict(c.name, c.limit, f"{c.best}; {mechanism(lin)}", c.advice)



def _as_written(conflict: Conflict, verdict) -> Conflict:
    """The conflict's "best reached" led by the value of the closest design that was
    written, so the summary and the files agree; the search's own best follows when it
    reads differently (it may come from a candidate failing something else)."""
    try:
        check = verdict.check(conflict.name)
    except KeyError:
        return conflict
    shown = _fmt_check(check)
    others_met = all(c.ok for c in verdict.checks if c.name != conflict.name)
    written = f"{shown} in the closest design written" + (
        ", the other requirements met" if others_met else "")
    if conflict.best.startswith(shown + " "):
        rest = conflict.best[len(shown):]
        for held in (" with the other requirements met", " (at the best compromise for the "
                     "others)"):
            rest = rest.replace(held, "", 1)
        best = written + rest
    else:
        best = f"{written}; the search reached {conflict.best}"
    return Conflict(conflict.name, conflict.limit, best, conflict.advice)


def _check_limit(c) -> str:
    from stagesynth.judging.textout import check_limit

    return check_limit(c)


def _number(value) -> float:
    return float(value) if isinstance(value, int | float) else 0.0


def _fmt_check(c) -> str:
    from stagesynth.judging.textout import check_value

    return check_value(c)

