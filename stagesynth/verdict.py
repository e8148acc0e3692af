"""Judge an analysed design against a spec, one row per requirement.

Nominal figures judge gain, corners and impedances; every corner judges the
active region, swing, supply current and the transistor's absolute ratings
(section 2 of the contract). Margins are normalized so that synthesis can
compare requirements: positive passes, 0.1 means 10 % of the limit to spare.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .analysis import Analysis
from .spec import Spec


@dataclass(frozen=True)
class Check:
    name: str
    value: float | bool
    limit: float | tuple[float, float] | str
    ok: bool
    margin: float  # normalized: > 0 passes
    relation: str  # ">=", "<=", "within", "is"
    unit: str
    where: str  # "nominal" or "every corner"
    detail: str = ""

    def to_dict(self) -> dict:
        limit = list(self.limit) if isinstance(self.limit, tuple) else self.limit
        return {
            "name": self.name,
            "value": self.value,
            "limit": limit,
            "ok": self.ok,
            "margin": self.margin,
            "relation": self.relation,
            "unit": self.unit,
            "where": self.where,
            "detail": self.detail,
        }


@dataclass(frozen=True)
class Verdict:
    checks: tuple[Check, ...]

    @property
    def meets_spec(self) -> bool:
        return all(c.ok for c in self.checks)

    @property
    def failed(self) -> tuple[Check, ...]:
        return tuple(c for c in self.checks if not c.ok)

    @property
    def worst_margin(self) -> float:
        return min((c.margin for c in self.checks), default=math.inf)

    def check(self, name: str) -> Check:
        for c in self.checks:
            if c.name == name:
                return c
        raise KeyError(name)


def _at_least(name, value, limit, unit, where, detail="") -> Check:
    margin = (value - limit) / limit if limit > 0 else (math.inf if value >= limit else -math.inf)
    return Check(name, value, limit, value >= limit, margin, ">=", unit, where, detail)


def _at_most(name, value, limit, unit, where, detail="") -> Check:
    if limit > 0:
        margin = (limit - value) / limit
    else:  # a zero limit: pass or fail outright
        margin = math.inf if value <= limit else -math.inf
    return Check(name, value, limit, value <= limit, margin, "<=", unit, where, detail)


def judge(analysis: Analysis, spec: Spec) -> Verdict:
    """Every requirement of `spec` as a Check against `analysis`."""
    r = spec.require
    checks: list[Check] = []
    target = r.gain_db
    tol = r.gain_tolerance_db
    err = analysis.gain_db - target
    checks.append(
        Check(
            "gain",
            analysis.gain_db,
            (target - tol, target + tol),
            abs(err) <= tol,
            (tol - abs(err)) / tol,
            "within",
            "dB",
            "nominal",
            f"{err:+.2f} dB from {target:.2f} dB",
        )
    )
    # corners: margins on a log scale would hide nothing here; relative is clearer
    checks.append(_at_most("f_low", analysis.f_low, r.f_low, "Hz", "nominal"))
    checks.append(_at_least("f_high", analysis.f_high, r.f_high, "Hz", "nominal"))
    if r.z_in > 0:
        checks.append(_at_least("z_in", analysis.z_in, r.z_in, "Ω", "nominal"))
    if r.z_out is not None:
        checks.append(_at_most("z_out", analysis.z_out, r.z_out, "Ω", "nominal"))
    if r.inverting != "any":
        want = r.inverting == "yes"
        checks.append(
            Check("inverting", analysis.inverting, r.inverting, analysis.inverting == want,
                  1.0 if analysis.inverting == want else -1.0, "is", "", "nominal")
        )
    worst = min(analysis.corners, key=lambda c: c.swing_vpp)
    checks.append(
        Check(
            "active",
            analysis.all_active,
            True,
            analysis.all_active,
            1.0 if analysis.all_active else -1.0,
            "is",
            "",
            "every corner",
            "" if analysis.all_active else _inactive_detail(analysis),
        )
    )
    if r.swing_vpp > 0:
        checks.append(
            _at_least("swing", worst.swing_vpp, r.swing_vpp, "Vpp", "every corner",
                      f"{worst.condition.label}: {worst.swing_limit}")
        )
    if r.supply_current is not None:
        top = max(analysis.corners, key=lambda c: c.supply_current)
        checks.append(
            _at_most("supply_current", top.supply_current, r.supply_current, "A",
                     "every corner", top.condition.label)
        )
    checks.extend(_rating_checks(analysis))
    return Verdict(tuple(checks))


def _inactive_detail(analysis: Analysis) -> str:
    for c in analysis.corners:
        if not c.active:
            bad = [ref for ref, s in c.transistors.items() if not s.active]
            why = f"{', '.join(bad)} out of the active region" if c.converged else "no DC solution"
            return f"{c.condition.label}: {why}"
    return ""


def _rating_checks(analysis: Analysis) -> list[Check]:
    """Absolute ratings of each transistor at the worst corner, when the device gives them."""
    checks = []
    design = analysis.design
    for part in design.bjts:
        dev = design.devices[part.device]
        for field, attr, unit in (("ic_max", "ic", "A"), ("vce_max", "vce", "V"),
                                  ("p_max", "power", "W")):
            rating = getattr(dev, field)
            if rating is None:
                continue
            worst = max(analysis.corners, key=lambda c, a=attr: getattr(c.transistors[part.ref], a))
            value = getattr(worst.transistors[part.ref], attr)
            if field == "vce_max":
                # the collector can swing up to the supply: judge the highest supply seen
                value = max(value, max(c.condition.supply for c in analysis.corners))
            checks.append(
                _at_most(f"{part.ref}.{field}", value, rating, unit, "every corner",
                         worst.condition.label)
            )
    return checks
