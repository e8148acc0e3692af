"""Judge one analysed design against a spec: readable checks for reports and the CLI.

Each requirement row of `rows.assess` (worst over nominal and every corner, with the
deciding condition) becomes a `Check` with its value, limit, margin and the condition's
label; thermal runaway and yield checks join them. The batched rows stay importable
from here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import Analysis
from stagesynth.judging.rows import (
    TJ_MAX_DEFAULT,
    WORST_WHERE,
    Row,
    assess,
    derated_power,
    headroom_unit,
    junction_limit,
    meets,
    noise_rows,
    own_headroom,
    smallest_margin,
    supply_stability_rows,
    thd_row,
)
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.quantities.units import format_quantity as fq

__all__ = [
    "TJ_MAX_DEFAULT",
    "WORST_WHERE",
    "Check",
    "Row",
    "Verdict",
    "assess",
    "derated_power",
    "headroom_unit",
    "judge",
    "junction_limit",
    "meets",
    "noise_rows",
    "own_headroom",
    "smallest_margin",
    "supply_stability_rows",
    "thd_row",
    "with_checks",
    "yield_check",
]


# Single-design form: readable rows for reports and the CLI
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Check:
    name: str
    value: float | bool
    limit: float | tuple[float, float] | str | bool
    ok: bool
    margin: float  # normalized: > 0 passes
    relation: str
    unit: str
    where: str
    detail: str = ""
    condition: str = ""  # label of the condition that decided the row ("" when none)
    headroom: float = math.nan  # distance to the limit in headroom_unit (Row.headroom)
    headroom_unit: str = ""
    # junction FETs: which edge the "active" headroom is measured from ("bjt", "jfet" or
    # "mixed"), so the text names VCE(sat) or VGS − VP
    edge: str = "bjt"

    def to_dict(self) -> dict:
        limit = list(self.limit) if isinstance(self.limit, tuple) else self.limit
        value = self.value
        if isinstance(value, float) and not math.isfinite(value):
            value = None
        margin = self.margin if math.isfinite(self.margin) else None
        return {
            "name": self.name,
            "value": value,
            "limit": limit,
            "ok": self.ok,
            "margin": margin,
            "relation": self.relation,
            "unit": self.unit,
            "where": self.where,
            "detail": self.detail,
            "condition": self.condition,
            "headroom": self.headroom if math.isfinite(self.headroom) else None,
            "headroom_unit": self.headroom_unit,
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


def judge(analysis: Analysis, spec: Spec) -> Verdict:
    """Every requirement of `spec` as a readable Check for one analysed design."""
    from stagesynth.engine.circuit import compile_design

    fig = analysis.figures
    rows = assess(fig, spec, compile_design(analysis.design))
    points = (analysis.nominal, *analysis.corners)
    checks = []
    for row in rows:
        value = row.value[0]
        value = bool(value) if row.relation == "is" else float(value)
        detail = ""
        label = ""
        if row.condition is not None and not (row.name == "active" and bool(row.ok[0])):
            label = points[int(row.condition[0])].condition.label
        if row.name == "gain":
            detail = f"{float(row.value[0]) - spec.require.gain_db:+.2f} dB from target"
        elif row.where == WORST_WHERE:
            pass
        elif row.condition is not None:
            p = points[int(row.condition[0])]
            detail = p.condition.label
            if row.name == "swing":
                detail += f": {p.swing_limit}"
                if math.isfinite(p.swing_top_vpp) and p.swing_top_vpp < p.swing_mid_vpp:
                    detail += (f", at f_high {eng(spec.require.f_high, 'Hz')} (midband "
                               f"{eng(p.swing_mid_vpp, 'V')}pp)")
            elif row.name == "peaking":
                detail += f": peak at {eng(p.peak_freq, 'Hz')}"
            elif row.name == "supply_rejection":
                detail += f": at {eng(spec.require.ripple_at, 'Hz')}"
            elif row.name == "stable":
                detail = "" if bool(row.ok[0]) else detail + ": a pole in the right half-plane"
            elif row.name == "active" and not bool(row.ok[0]):
                bad = [ref for ref, s in p.transistors.items() if not s.active]
                why = f"{', '.join(bad)} out of the active region" if p.converged else (
                    "no DC solution")
                detail += f": {why}"
            elif row.name == "active":
                detail = ""
            elif row.name == "thd" and fig.thd_level is not None:
                detail += (f": at {float(fig.thd_level[0]):.3g} Vpp, "
                           f"{fq(float(fig.thd_freq[0]), 'Hz')} (harmonic balance)")
            if row.name.endswith(".vce_max"):
                top = max(pt.condition.supply for pt in points)
                detail += (f"; judged at the operating point; at cutoff VCE approaches "
                           f"the supply, up to {eng(top, 'V', 3)}: rate the part above that")
            if row.name.endswith(".p_max") and math.isfinite(float(row.margin[0])):
                allowed = float(row.value[0]) / max(1.0 - float(row.margin[0]), 1e-300)
                detail = f"allowance derated to {eng(allowed, 'W', 4)} there; " + detail
        head, head_unit = float(row.headroom[0]), row.headroom_unit
        if row.name.endswith((".vce_max", ".p_max", ".ic_max")) and row.condition is not None:
            ref = row.name.split(".")[0]
            state = points[int(row.condition[0])].transistors.get(ref)
            if state is not None and not state.active:  # a rating means nothing there
                value, head = math.nan, math.nan
                detail = (f"{ref} is out of the active region at "
                          f"{points[int(row.condition[0])].condition.label}: see 'active'")
        if row.name == "active":
            head, head_unit = _saturation_headroom(analysis, points), "V"
        d = analysis.design
        edge = "mixed" if d.bjts and d.jfets else ("jfet" if d.jfets else "bjt")
        checks.append(
            Check(row.name, value, row.limit, bool(row.ok[0]), float(row.margin[0]),
                  row.relation, row.unit, row.where, detail, label, head, head_unit, edge)
        )
    checks.extend(_runaway_checks(analysis))
    return Verdict(tuple(checks))


def _saturation_headroom(analysis: Analysis, points) -> float:
    """Smallest VCE − VCE(sat) over the transistors and the judged conditions (V): how far
    the stage is from saturating, the number behind "active at every corner"."""
    gaps = [s.vce - s.vsat for p in points if p.converged
            for s in p.transistors.values() if math.isfinite(s.vsat)]
    return min(gaps, default=math.nan)


def _runaway_checks(analysis: Analysis) -> list[Check]:
    """Thermal runaway: the loop gain theta_ja * dP/dTj must stay below 1 on the way from
    the ambient to the hottest corner's junction temperature (transistors with theta_ja)."""
    from stagesynth.judging.thermal import thermal_checks

    out = []
    for t in thermal_checks(analysis):
        dev = analysis.design.devices[analysis.design.part(t.ref).device]
        if dev.theta_ja is None:
            continue
        loop = max(t.loop_gain, t.loop_gain_peak)
        out.append(Check(f"{t.ref}.thermal_runaway", loop, 1.0, not t.runaway,
                         1.0 - loop, "<", "", "hottest corner",
                         f"loop gain θJA·∂P/∂Tj at {t.ambient_hot:g} °C ambient",
                         headroom=1.0 - loop, headroom_unit=""))
    return out


def yield_check(estimate: float, interval: tuple[float, float], target: float) -> Check:
    """The spec's yield requirement against a Monte Carlo estimate (with its interval)."""
    return Check("yield", estimate, target, estimate >= target,
                 (estimate - target) / target, ">=", "%", "built units",
                 f"95 % interval {100 * interval[0]:.2f} … {100 * interval[1]:.2f} %",
                 headroom=estimate - target, headroom_unit="%")


def with_checks(verdict: Verdict, *extra: Check) -> Verdict:
    return Verdict(verdict.checks + tuple(extra))
