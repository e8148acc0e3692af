"""Synthesis: from a spec to a complete stage with standard values, verified exactly.

The search, in order:
1. physics pre-checks that name an impossible requirement outright;
2. a first-cut grid over the design variables (bias current, emitter voltage,
   collector-emitter voltage, divider stiffness), every candidate's DC point
   solved exactly (batched);
3. the gain-setting split (RE1 vs RE2, total fixed so the DC point stays) moved
   by secant steps until the exact midband gain is on target;
4. every candidate judged at every corner by the exact analysis; the best few
   refined on a finer grid around them;
5. standard values: all combinations of the neighbouring IEC 60063 values of
   every resistor, re-verified exactly; the capacitors sized for the low corner;
6. the final design analysed once more: its `predicted` figures are the engine's.

Objective: among designs that meet every requirement, the largest smallest
normalized margin, then the lower supply current (margins within TIE of the
best count as equal); `prefer="current"` reverses the two.
"""

from __future__ import annotations

import itertools
import math
import time
from dataclasses import dataclass, field

import numpy as np

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import (
    Analysis,
    Environment,
    analyze,
    condition_arrays,
    corner_conditions,
)
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.dc import solve_dc
from stagesynth.engine.distortion import DistortionRequest
from stagesynth.engine.evaluate import Conditions, Figures, evaluate
from stagesynth.engine.noise import plan_for
from stagesynth.judging.verdict import (
    Row,
    Verdict,
    assess,
    judge,
    smallest_margin,
    with_checks,
    yield_check,
)
from stagesynth.quantities.errors import NoDesignError, StageError
from stagesynth.quantities.eseries import nearest, neighbours, values_between
from stagesynth.quantities.units import format_quantity as eng
from stagesynth.synthesis.capsizing import size_capacitors
from stagesynth.synthesis.practical import (
    CAP_HALVING_WORTH,
    MARGIN_CAP,
    PART_COST,
    R_DOUBLING_COST,
    capacitor_cost,
    capacitor_estimate,
    leakage_limits,
    practicality,
)
from stagesynth.synthesis.topologies import FAMILIES
from stagesynth.synthesis.topologies.base import FLOOR, Conflict, finalize

TIE = 0.03  # normalized margins this close to the best count as equal
DROOP_DB = 0.1  # midband gain lost to the sized capacitors that calls for a second search
SCREEN_KEEP = 240  # candidates judged at every corner after the nominal screen
YIELD_CANDIDATES = 6  # standard-value candidates judged by Monte Carlo when a yield is asked
YIELD_SCREEN_UNITS = 1500  # units per candidate while choosing (common random numbers)
YIELD_FINAL_UNITS = 10_000  # units for the figure written to the design file
_LF_SKIP = ("f_low",)  # capacitors are sized after the resistors
SEARCH_NOISE_GRID = 8  # points per decade of the band rms while searching (final: 16)
# The search screens THD with the power-series estimate (volterra.py), held to the limit
# less this allowance: the estimate stays within about 0.3 dB of harmonic balance while
# HD2 is below a few per cent (tests/test_distortion.py); the verdict is harmonic balance.
THD_ALLOWANCE_DB = 0.5


@dataclass(frozen=True)
class FamilyReport:
    """How one circuit family fared for the spec (for the choice of circuit)."""

    name: str
    title: str
    stages: int
    meets: bool
    worst_margin: float
    failed: tuple[str, ...]
    note: str = ""
    tightest: str = ""  # the requirement closest to its limit (or missing it most), readable


@dataclass(frozen=True)
class SynthesisResult:
    spec: Spec
    design: Design
    analysis: Analysis
    verdict: Verdict
    conflicts: tuple[Conflict, ...]
    notes: tuple[str, ...]
    stats: dict = field(default_factory=dict)
    families: tuple[FamilyReport, ...] = ()

    @property
    def meets_spec(self) -> bool:
        return self.verdict.meets_spec


class _Search:
    """Holds the compiled circuit and conditions shared by every candidate batch."""

    def __init__(self, spec: Spec, family) -> None:
        self.spec = spec
        self.family = family
        placeholder = {ref: 1e3 for ref in family.RESISTORS}
        placeholder.update({ref: 1e-6 for ref in family.CAPACITORS})
        self.template = family.build(spec, placeholder)
        self.circuit = compile_design(self.template)
        self.env = Environment.for_design(self.template, spec)
        self.conditions = condition_arrays(
            self.circuit, corner_conditions(self.template, self.env)
        )
        self.r_refs = [ref for ref, _, _ in self.circuit.resistors]
        self.c_refs = [ref for ref, _, _ in self.circuit.capacitors]
        # capacitors large enough to keep the low corner far below midband while
        # the resistors are searched; they are sized properly afterwards
        big = 50.0 / (2 * math.pi * spec.require.f_low * 10.0)
        self.c_big = np.full(len(self.c_refs), big)
        self.midband = spec.require.midband
        # peaking above midband only while the capacitors are placeholders, up to ten
        # times the fastest transistor's ft (the final analysis sweeps everything)
        ft = max((q.device.ft for q in self.circuit.bjts), default=1e9)
        self.peak_span = (self.midband, 10.0 * ft)
        self.evaluated = 0

    def practical(self, fig: Figures) -> tuple[np.ndarray, np.ndarray]:
        """(margin cost of the largest capacitor, estimated f_low margin within the part
        limits) for every candidate in `fig` (practical.py)."""
        d = self.template
        c_big, lf_margin = capacitor_estimate(fig, self.circuit, self.spec.require.f_low,
                                              self.spec.parts.capacitor_max,
                                              d.source_resistance, d.load_resistance)
        return capacitor_cost(c_big), lf_margin

    def r_matrix(self, values: dict[str, np.ndarray]) -> np.ndarray:
        return np.stack([np.asarray(values[ref], dtype=float) for ref in self.r_refs], axis=1)

    @property
    def distortion(self) -> DistortionRequest | None:
        """The THD screen (power-series estimate) when the spec asks for a THD."""
        r = self.spec.require
        if r.thd is None:
            return None
        return DistortionRequest(r.thd_level_vpp, r.thd_freq, "estimate")

    def evaluate(self, r: np.ndarray, c: np.ndarray | None = None) -> Figures:
        k = r.shape[0]
        self.evaluated += k
        caps = np.tile(self.c_big, (k, 1)) if c is None else c
        d = self.template
        return evaluate(self.circuit, r, caps, self.conditions,
                        source_resistance=d.source_resistance,
                        load_resistance=d.load_resistance,
                        load_capacitance=d.load_capacitance,
                        source_capacitance=d.source_capacitance,
                        band=(self.spec.require.f_low, self.spec.require.f_high),
                        corners="high", noise=plan_for(self.spec.require, SEARCH_NOISE_GRID),
                        ripple_at=self.spec.require.ripple_at,
                        peak_span=self.peak_span, distortion=self.distortion)

    def screen(self, r: np.ndarray, spec: Spec) -> np.ndarray:
        """Indices of the candidates worth judging at every corner.

        One cheap pass at the nominal condition alone; the SCREEN_KEEP candidates with the
        best smallest margin there go on (a candidate that fails clearly at nominal
        cannot do better at the corners), so the corner solve stays a fixed size.
        """
        k = r.shape[0]
        if k <= SCREEN_KEEP:
            return np.arange(k)
        c = self.conditions
        nominal = Conditions(c.hfe25[:1], c.ambient[:1], c.supply[:1])
        d = self.template
        fig = evaluate(self.circuit, r, np.tile(self.c_big, (k, 1)), nominal,
                       source_resistance=d.source_resistance,
                       load_resistance=d.load_resistance,
                       load_capacitance=d.load_capacitance,
                        source_capacitance=d.source_capacitance,
                       band=(spec.require.f_low, spec.require.f_high), corners="high",
                       noise=plan_for(spec.require, SEARCH_NOISE_GRID),
                       ripple_at=spec.require.ripple_at, peak_span=self.peak_span,
                       distortion=self.distortion)
        self.evaluated += k
        rows = assess(fig, spec, self.circuit, first_corner=0)
        score = smallest_margin(rows, _LF_SKIP)
        score = np.where(np.isfinite(score), score, -1e9)
        return np.sort(np.argsort(-score, kind="stable")[:SCREEN_KEEP])

    def tune_gain(self, r: np.ndarray, re1: np.ndarray,
                  target_gain: np.ndarray | float | None = None) -> np.ndarray:
        """Move resistance between RE1 and RE2 (sum fixed, DC point unchanged) so the
        exact nominal midband gain is on target (`target_gain` V/V, one per candidate or
        the spec's): secant steps on 1/|A|, nearly linear in RE1."""
        from stagesynth.engine.ac import linearize

        split = self.family.GAIN_SPLIT
        k = r.shape[0]
        r0 = r.copy()
        if split is not None:
            i4, i5 = self.r_refs.index(split[0]), self.r_refs.index(split[1])
            total = r[:, i4] + r[:, i5]
            r0[:, i4] = FLOOR
            r0[:, i5] = total - FLOOR
            lo, hi = FLOOR, total - FLOOR
        else:  # a single resistor that no DC current flows through (GAIN_KNOB)
            i4, i5 = self.r_refs.index(self.family.GAIN_KNOB), None
            r0[:, i4] = np.clip(re1, 1.0, self.spec.parts.resistor_max)
            lo, hi = 1.0, np.full(k, self.spec.parts.resistor_max)
        nominal = Conditions(self.conditions.hfe25[:1], self.conditions.ambient[:1],
                             self.conditions.supply[:1])
        d = self.template
        dc = solve_dc(self.circuit, r0, np.repeat(nominal.supply, k),
                      np.repeat(nominal.hfe25, k, axis=0), np.repeat(nominal.ambient, k),
                      d.source_resistance, d.load_resistance,
                      source_capacitance=d.source_capacitance)
        caps = np.tile(self.c_big, (k, 1))
        fm = np.full((k, 1), self.midband)

        def inv_gain(x: np.ndarray) -> np.ndarray:
            rr = r0.copy()
            rr[:, i4] = x
            if i5 is not None:
                rr[:, i5] = total - x
            sys = linearize(self.circuit, dc, rr, caps, d.source_resistance,
                            d.load_resistance, d.load_capacitance, d.source_capacitance)
            return 1.0 / np.maximum(np.abs(sys.gain(fm)[:, 0]), 1e-30)

        target = 1.0 / (self.spec.require.gain if target_gain is None else target_gain)
        x0 = np.clip(re1, lo, hi)
        x1 = np.clip(x0 * 1.2 + 1.0, lo, hi)
        y0, y1 = inv_gain(x0), inv_gain(x1)
        for _ in range(4):
            slope = (y1 - y0) / np.where(np.abs(x1 - x0) > 1e-12, x1 - x0, 1e-12)
            slope = np.where(slope > 0, slope, np.abs(slope) + 1e-12)
            x2 = np.clip(x1 + (target - y1) / slope, lo, hi)
            x0, y0 = x1, y1
            x1, y1 = x2, inv_gain(x2)
        return x1


def _centre_gain(search: _Search, r: np.ndarray, fig: Figures) -> tuple[np.ndarray, Figures]:
    """Centre each candidate's gain window (nominal and every corner) on the target.

    The gain is judged at every corner (contract section 2): hFE spread, temperature and
    supply move it unevenly about nominal, so the split is tuned once more to put the
    middle of the spread, not the nominal value, on target. The split leaves the DC
    point where it was, so the other requirements hardly move.
    """
    split = search.family.GAIN_SPLIT
    if split is not None:
        i4, i5 = search.r_refs.index(split[0]), search.r_refs.index(split[1])
    else:  # the single DC-free knob (GAIN_KNOB)
        i4, i5 = search.r_refs.index(search.family.GAIN_KNOB), None
    g_db = fig.gain_db
    offset = 0.5 * (np.max(g_db, axis=1) + np.min(g_db, axis=1)) - g_db[:, 0]
    if np.all(np.abs(offset) < 0.02):
        return r, fig
    aim = search.spec.require.gain * 10.0 ** (-offset / 20.0)
    r2 = r.copy()
    r2[:, i4] = search.tune_gain(r, r[:, i4], aim)
    if i5 is not None:
        r2[:, i5] = r[:, i4] + r[:, i5] - r2[:, i4]
    return r2, search.evaluate(r2)


def _rank(rows: list[Row], current: np.ndarray, prefer: str, skip=_LF_SKIP,
          practical: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """Candidate order, best first, per the objective of the module docstring.

    `practical` = (margin cost of the largest capacitor, estimated f_low margin within the
    part limits): the cost is taken off the margin and the estimated f_low shortfall joins
    the smallest margin. The estimate is conservative, so it only orders: candidates
    meeting every requirement judged exactly come first, those of them whose capacitors
    also reach f_low within the limits (capacitor_max, film size where leakage matters)
    before the others.
    """
    ok = np.ones_like(current, dtype=bool)
    for row in rows:
        if row.name not in skip:
            ok &= row.ok
    score = smallest_margin(rows, skip)
    score = np.where(np.isfinite(score), score, -1e9)
    best_ok = ok
    if practical is not None:
        cost, lf_margin = practical
        best_ok = ok & (lf_margin >= 0)
        if not np.any(best_ok):
            best_ok = ok
        score = np.minimum(score, lf_margin) - cost
    if prefer == "current":
        primary = np.where(best_ok, -current / np.max(current),
                           np.where(ok, -1e6 + score, -1e9 + score))
        secondary = score
    else:
        best = np.max(np.where(best_ok, score, -np.inf)) if np.any(best_ok) else np.max(score)
        tied = best_ok & (score >= best - TIE)
        primary = np.where(tied, best, score) + np.where(ok, 1e6, 0.0)
        secondary = -current
    return np.lexsort((secondary, primary))[::-1]


def _physics_conflicts(spec: Spec) -> list[Conflict]:
    """Requirements that no single stage on this supply and transistor can meet."""
    out = []
    r = spec.require
    dev = spec.transistor
    vmin = spec.supply.voltage * (1 - spec.supply.tolerance)
    most = vmin - dev.vce_sat
    if r.swing_vpp >= most:
        out.append(Conflict(
            "swing", f"{eng(r.swing_vpp, 'V', 3)}pp",
            f"no circuit on this supply can swing more than about {eng(most, 'V', 3)}pp: the "
            f"output "
            f"transistor moves at most between the supply ({eng(vmin, 'V', 3)} at its low "
            f"tolerance) and VCE(sat) = {eng(dev.vce_sat, 'V', 3)}",
            "ask for less swing, or raise the supply voltage",
        ))
    out.extend(_noise_floor_conflicts(spec))
    return out


def _noise_floor_conflicts(spec: Spec) -> list[Conflict]:
    """Noise requirements below the input transistor's physical floor (lownoise.py)."""
    if not spec.require.wants_noise:
        return []
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
            best = float(vals[np.argmin(np.abs(vals - spec.require.gain_db))])
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


def _limit_text(row: Row) -> str:
    if row.relation == "within":
        lo, hi = row.limit
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


def synthesize(
    spec: Spec, *, prefer: str = "margin", circuit: str | None = None
) -> SynthesisResult:
    """Design a stage for `spec`: the most practical circuit family that meets it.

    Families are searched in the registry's order (single stages, then two-stage
    circuits); rules of thumb only move a family to the back of that order, and only
    bounds of the model refuse one outright. Once a family meets every requirement, the
    other families with as many transistors are searched too and the most practical
    design is kept (`practicality`: margin, part sizes, part count). When none meets,
    the closest (fewest failed requirements, then the best margin) is returned.
    `circuit` forces one family. A family that leaves no candidate at all is named
    with the requirement that empties it (NoDesignError, exit 1, when nothing is left).
    """
    if circuit is not None:
        if circuit not in FAMILIES:
            raise StageError(f"{circuit!r} is not a circuit stagesynth knows",
                             key="--circuit", accepted=", ".join(FAMILIES))
        result = _remedied(spec, FAMILIES[circuit], prefer)
        report = _family_report(FAMILIES[circuit], result)
        note = f"Circuit: {FAMILIES[circuit].TITLE}, as asked (--circuit {circuit})."
        return _with_choice(result, (report,), [note])
    reports: list[FamilyReport] = []
    results: list[tuple[FamilyReport, SynthesisResult]] = []
    empty: list[str] = []
    impossible = _physics_conflicts(spec)  # limits no circuit on this supply escapes
    met_stages: int | None = None
    for name, family in _search_order(spec):
        if met_stages is not None and met_stages < family.STAGES:
            break  # more transistors than a circuit that already meets
        if impossible and results:
            reports.append(FamilyReport(name, family.TITLE, family.STAGES, False, -math.inf,
                                        tuple(c.name for c in impossible),
                                        "; ".join(c.best for c in impossible)))
            continue
        blocked = family.precheck(spec)
        if blocked:
            reports.append(FamilyReport(name, family.TITLE, family.STAGES, False, -math.inf,
                                        tuple(c.name for c in blocked),
                                        "; ".join(c.best for c in blocked)))
            continue
        try:
            res = _remedied(spec, family, prefer)
        except NoDesignError as exc:
            empty.append(exc.message)
            reports.append(FamilyReport(name, family.TITLE, family.STAGES, False, -math.inf,
                                        ("no candidate",), exc.message))
            continue
        rep = _family_report(family, res)
        reports.append(rep)
        results.append((rep, res))
        if rep.meets and met_stages is None:
            met_stages = family.STAGES
    meeting = [(rep, res) for rep, res in results if rep.meets]
    if meeting:
        if prefer == "current":  # the asked objective decides between families too
            rep, res = min(meeting, key=lambda pair: (pair[1].analysis.supply_current,
                                                      -practicality(pair[1])))
        else:
            rep, res = max(meeting, key=lambda pair: practicality(pair[1]))
        return _with_choice(res, tuple(reports), _choice_notes(rep, reports, meeting))
    if not results:  # every family blocked outright: show the first family's best try
        family = next(iter(FAMILIES.values()))
        try:
            res = _synthesize_family(spec, family, prefer)
        except NoDesignError as exc:
            why = "; ".join(dict.fromkeys([*empty, exc.message]))
            raise NoDesignError(f"no circuit family has a candidate: {why}") from None
        return _with_choice(res, tuple(reports), _choice_notes(None, reports))
    rep, res = min(results, key=lambda pair: (len(pair[0].failed), -pair[0].worst_margin))
    return _with_choice(res, tuple(reports), _choice_notes(None, reports))


def _search_order(spec: Spec) -> list[tuple[str, object]]:
    """The registry's order with the families a rule of thumb calls unlikely moved to the
    back (stable, so the order of simplicity holds within each group)."""
    def hint(family) -> bool:
        check = getattr(family, "unlikely", None)
        return bool(check(spec)) if check is not None else False

    items = list(FAMILIES.items())
    return sorted(items, key=lambda item: hint(item[1]))
def _remedied(spec: Spec, family, prefer: str) -> SynthesisResult:
    """One family's search, then the remedies of finishing.py (supply filter, output
    damping) where the spec asks for what the bare family misses."""
    from stagesynth.synthesis.finishing import finish_family

    return finish_family(spec, family, _synthesize_family(spec, family, prefer), prefer,
                         _synthesize_family)


def _family_report(family, result: SynthesisResult) -> FamilyReport:
    from stagesynth.judging.textout import margin_text, status_text

    finite = [c for c in result.verdict.checks if math.isfinite(c.margin)]
    worst = min(finite, key=lambda c: c.margin, default=None)
    tightest = "" if worst is None else (
        f"{worst.name} {margin_text(worst)}" if worst.ok else f"{worst.name} "
        f"{status_text(worst)}")
    return FamilyReport(
        family.NAME, family.TITLE, family.STAGES, result.meets_spec,
        worst.margin if worst is not None else math.inf,
        tuple(c.name for c in result.verdict.failed), tightest=tightest,
    )


def _choice_notes(chosen: FamilyReport | None, reports: list[FamilyReport],
                  meeting: list | None = None) -> list[str]:
    """Which circuit was chosen and how, and what each other family reached (for the report)."""
    lines = []
    for r in reports:
        if r.note and r.failed == ("no candidate",):
            lines.append(f"{r.title}: no candidate ({r.note}).")
        elif r.note:
            lines.append(f"{r.title}: not tried ({r.note}).")
        elif r.meets:
            lines.append(f"{r.title}: meets every requirement; closest to its limit: "
                         f"{r.tightest}.")
        else:
            lines.append(f"{r.title}: fails {', '.join(r.failed)} ({r.tightest}).")
    if chosen is None:
        head = ("Circuit choice: no circuit family met every requirement; the closest "
                "(fewest failed requirements, then the best margin) is shown.")
        return [head, *lines]
    failed = sorted({name for r in reports if not r.meets and not r.note for name in r.failed})
    why = (f" Circuits that did not meet were held back by: {', '.join(failed)}."
           if failed else "")
    if meeting and len(meeting) > 1:
        scored = ", ".join(f"{rep.name} {practicality(res):+.3f}" for rep, res in meeting)
        head = (f"Circuit choice: {chosen.title}, the most practical of the {len(meeting)} "
                f"circuits with {chosen.stages} transistor(s) that meet every requirement "
                f"(practicality: smallest margin up to {MARGIN_CAP:.0%}, less "
                f"{CAP_HALVING_WORTH:.0%} per halving the largest capacitor could lose "
                f"below 1 µF, {R_DOUBLING_COST:.0%} per doubling of the largest resistor above "
                f"100 kΩ and {PART_COST:.1%} per part; {scored}).{why}")
    else:
        head = (f"Circuit choice: {chosen.title}, the only circuit with {chosen.stages} "
                f"transistor(s) that meets every requirement (families searched in the order "
                f"{', '.join(FAMILIES)}, rules of thumb moving unlikely ones to the back; "
                f"circuits with more transistors are searched only when none with fewer "
                f"meets).{why}")
    return [head, *lines]


def _with_choice(result: SynthesisResult, reports: tuple[FamilyReport, ...],
                 notes: list[str]) -> SynthesisResult:
    """Attach the circuit choice to the result, its notes and its design file."""
    all_notes = (*notes, *result.notes)
    extra = dict(result.design.extra)
    synthesis = dict(extra.get("synthesis", {}))
    synthesis["notes"] = list(all_notes)
    synthesis["families"] = [
        {"circuit": r.name, "title": r.title, "stages": r.stages, "meets_spec": r.meets,
         "smallest_margin": r.worst_margin if math.isfinite(r.worst_margin) else None,
         "failed": list(r.failed), "note": r.note}
        for r in reports
    ]
    extra["synthesis"] = synthesis
    design = Design(**{**result.design.__dict__, "extra": extra})
    analysis = Analysis(**{**result.analysis.__dict__, "design": design})
    return SynthesisResult(result.spec, design, analysis, result.verdict, result.conflicts,
                           all_notes, result.stats, reports)


def _synthesize_family(
    spec: Spec, family, prefer: str, *, gain_scale: float = 1.0
) -> SynthesisResult:
    """The search of the module docstring for one circuit family.

    The resistors are searched with the coupling and bypass capacitors out of the way;
    when the sized capacitors then pull the midband gain down noticeably (a band only a
    little wider than an octave or two), the search runs once more aiming the gain up by
    exactly that droop (`gain_scale`), so the finished design lands on target.
    """
    from dataclasses import replace

    t0 = time.perf_counter()
    aim = spec if gain_scale == 1.0 else replace(
        spec, require=replace(spec.require, gain=spec.require.gain * gain_scale))
    if spec.require.thd is not None:  # the screen's allowance for the estimate's error
        aim = replace(aim, require=replace(
            aim.require, thd=spec.require.thd * 10.0 ** (-THD_ALLOWANCE_DB / 20.0),
            thd_level=spec.require.thd_level_vpp, thd_at=spec.require.thd_freq))
    search = _Search(aim, family)
    physics = [*_physics_conflicts(spec), *family.precheck(spec)]

    # 2-4: first cut, exact gain split, exact judgement at every corner
    rmax = spec.parts.resistor_max
    cut = _bounded_cut(family, aim)
    if cut.count == 0:
        raise NoDesignError(_empty_reason(spec, family))
    values = dict(cut.values)
    if family.GAIN_SPLIT is not None and cut.knob is not None:
        a, b = family.GAIN_SPLIT
        total = cut.values[a] + cut.values[b]
        values[a] = search.tune_gain(search.r_matrix(values), cut.knob)
        values[b] = total - values[a]
    elif getattr(family, "GAIN_KNOB", None) and cut.knob is not None:
        values[family.GAIN_KNOB] = search.tune_gain(search.r_matrix(values), cut.knob)
    r = search.r_matrix(values)
    r = r[search.screen(r, aim)]
    fig = search.evaluate(r)
    tuned = family.GAIN_SPLIT is not None or getattr(family, "GAIN_KNOB", None)
    if tuned and cut.knob is not None and fig.gain.shape[1] > 1:
        r, fig = _centre_gain(search, r, fig)
    rows = assess(fig, aim, search.circuit)
    order = _rank(rows, fig.supply_current[:, 0], prefer, practical=search.practical(fig))
    t_search = time.perf_counter()

    # 5: standard values for the best few continuous candidates
    series = spec.parts.resistors
    wide = len(search.r_refs) <= 6  # three values a part while the product stays small
    top = order[: min(4 if wide else (1 if len(search.r_refs) > 8 else 2), order.size)]
    snapped = []
    for i in top:
        options = []
        for j, ref in enumerate(search.r_refs):
            v = float(r[i, j])
            if ref in family.OPTIONAL and v < 0.5:
                options.append([FLOOR])  # leave the part out
                continue
            if wide:
                opts = sorted({nearest(v, series), *neighbours(v, series, 1)})
                opts = [x for x in opts if 0.7 * v <= x <= 1.4 * v] or [nearest(v, series)]
            else:  # the two standard values that bracket it
                around = neighbours(v, series, 1)
                opts = [max([x for x in around if x <= v] or [around[0]]),
                        min([x for x in around if x >= v] or [around[-1]])]
                opts = sorted(set(opts))
            opts = _within_limit(opts, v, series, rmax)
            if ref in family.OPTIONAL and v < 5.0:
                opts = [FLOOR, *opts]
            options.append(opts)
        snapped.extend(itertools.product(*options))
    rs = np.array(snapped)
    fig_s = search.evaluate(rs)
    rows_s = assess(fig_s, aim, search.circuit)
    order_s = _rank(rows_s, fig_s.supply_current[:, 0], prefer,
                    practical=search.practical(fig_s))
    best = int(order_s[0])
    t_snap = time.perf_counter()

    def finish(i: int) -> tuple[Design, object]:
        chosen = {ref: float(rs[i, j]) for j, ref in enumerate(search.r_refs)}
        chosen.update({ref: float(v) for ref, v in zip(search.c_refs, search.c_big,
                                                         strict=True)})
        base = finalize(family, spec, chosen)
        limits: dict[str, float] = {}
        for _ in range(3):  # electrolytics only where their leakage leaves the bias alone
            sized = size_capacitors(base, spec.require.f_low, env=search.env,
                                    series=spec.parts.capacitors,
                                    tolerance=spec.parts.capacitor_tolerance,
                                    z_out_max=spec.require.z_out,
                                    capacitor_max=spec.parts.capacitor_max, limits=limits)
            more = {k: v for k, v in leakage_limits(sized.design, spec).items()
                    if k not in limits}
            if not more:
                break
            limits.update(more)
        if spec.require.wants_noise:
            return _quiet_input_coupling(sized.design, spec), sized
        return sized.design, sized

    design, sizing = finish(best)
    if gain_scale == 1.0:
        droop = _low_frequency_droop(design, spec, search)
        if abs(20.0 * math.log10(droop)) > DROOP_DB:
            return _synthesize_family(spec, family, prefer, gain_scale=1.0 / droop)
    t_caps = time.perf_counter()
    yield_notes: list[str] = []
    estimate = None
    if spec.require.yield_target is not None:
        passing = [int(i) for i in order_s if _ok_without_f_low(rows_s, int(i))]
        design, estimate, yield_notes, sizing = _centre_for_yield(
            spec, passing[:YIELD_CANDIDATES] or [best], finish, (design, sizing))
    t_yield = time.perf_counter()

    analysis = analyze(design, spec)
    verdict = judge(analysis, spec)
    if estimate is not None:
        verdict = with_checks(verdict, yield_check(estimate.estimate, estimate.interval,
                                                   spec.require.yield_target))
    conflicts: list[Conflict] = []
    if not verdict.meets_spec:
        found = {c.name: c for c in _conflicts(rows, spec)}
        for c in physics:  # the physical reason first, with the best value searched
            near = found.pop(c.name, None)
            best_text = f"{near.best}; {c.best}" if near else c.best
            conflicts.append(Conflict(c.name, c.limit, best_text, c.advice))
        conflicts.extend(found.values())
        conflicts = [_as_written(c, verdict) for c in conflicts]
        named = {c.name for c in conflicts}
        for c in verdict.failed:  # every requirement the closest design misses is named
            if c.name not in named:
                conflicts.append(Conflict(c.name, _check_limit(c),
                                          f"{_fmt_check(c)} in the closest design written",
                                          _advice(c.name, _number(c.value), spec, c.unit)))
        conflicts = [_thd_conflict(c, analysis) if c.name == "thd" else c for c in conflicts]
    polarity = "PNP" if spec.transistor.polarity == "pnp" else "NPN"
    from stagesynth.synthesis.leakage import capacitor_kinds

    kinds = capacitor_kinds(design, spec)
    notes = [
        f"Circuit: {family.TITLE} ({polarity}).",
        *family.describe(spec, design, analysis),
        *_noise_notes(spec, analysis),
        *_linearity_notes(spec, analysis),
        *sizing.notes,
        *_kind_notes(kinds, spec),
        *yield_notes,
        "Choice among candidates: every design meeting all requirements was ranked by its "
        "smallest normalized margin (value beyond the limit as a fraction of the limit), "
        f"then by lower supply current (margins within {TIE:.0%} count as equal)"
        + ("; --prefer current reversed that order." if prefer == "current" else "."),
        f"Search: {cut.count} first-cut bias points and {len(snapped)} standard-value "
        f"combinations ({series} resistors), each judged by the exact analysis at "
        f"{search.conditions.count} conditions.",
    ]
    extra = dict(design.extra)
    extra["meets_spec"] = verdict.meets_spec
    extra["synthesis"] = {
        "objective": "largest smallest-margin, then lower supply current"
        if prefer != "current" else "lower supply current, then largest smallest-margin",
        "prefer": prefer,
        "circuit": family.NAME,
        "candidates": int(cut.count),
        "standard_value_combinations": len(snapped),
        "resistor_series": series,
        "resistor_tolerance": spec.parts.resistor_tolerance,
        "capacitor_series": spec.parts.capacitors,
        "capacitor_tolerance": spec.parts.capacitor_tolerance,
        "capacitor_kinds": {ref: k.to_dict() for ref, k in kinds.items()},
        "resistor_max": spec.parts.resistor_max,
        "capacitor_max": spec.parts.capacitor_max,
        "notes": notes,
    }
    from stagesynth.judging.results import predicted_block

    predicted = predicted_block(analysis)
    if estimate is not None:
        predicted["yield"] = estimate.estimate
        predicted["yield_interval_95"] = list(estimate.interval)
        extra["yield"] = estimate.to_dict()
    design = Design(**{**design.__dict__, "predicted": predicted, "extra": extra})
    analysis = Analysis(**{**analysis.__dict__, "design": design})
    t_end = time.perf_counter()
    stats = {
        "first_cut_s": t_search - t0,
        "standard_values_s": t_snap - t_search,
        "capacitors_s": t_caps - t_snap,
        "yield_s": t_yield - t_caps,
        "verify_s": t_end - t_yield,
        "candidates": int(cut.count) + len(snapped),
        "circuit_evaluations": search.evaluated,
    }
    return SynthesisResult(spec, design, analysis, verdict, tuple(conflicts), tuple(notes),
                           stats)


def _kind_notes(kinds: dict, spec: Spec) -> list[str]:
    """The part limits and, per capacitor, whether it may be an electrolytic (for the report)."""
    from stagesynth.synthesis.leakage import BIAS_SHIFT_MAX

    lines = [f"Part limits: resistors up to {_fmt(spec.parts.resistor_max, 'Ω')}, capacitors up "
             f"to {_fmt(spec.parts.capacitor_max, 'F')}; the bias was chosen with the "
             "capacitor sizes each candidate needs (the largest one costs a little margin per "
             "doubling)."]
    if kinds:
        lines.append(
            "Capacitor types (an electrolytic leaks about 0.01·C·V µA, at least 3 µA, common "
            f"practice; it may sit only where that moves no collector current by more than "
            f"{100 * BIAS_SHIFT_MAX:g} %): "
            + "; ".join(f"{ref} {_fmt(k.value, 'F')}: {k.kind} ({k.reason})"
                        for ref, k in kinds.items()) + ".")
    return lines


def _within_limit(opts: list[float], v: float, series: str, rmax: float) -> list[float]:
    """The standard-value options of one resistor that respect resistor_max (the largest
    standard value at or below the limit when every option lies above it)."""
    kept = [x for x in opts if x <= rmax * (1 + 1e-9)]
    if kept:
        return kept
    below = values_between(min(v, rmax) / 10.0, rmax, series)
    return [max(below)] if below else [rmax]


def _bounded_cut(family, spec: Spec):
    """The family's first cut without the candidates that need a resistor above
    resistor_max (or a non-physical value): the limit bounds every value chosen."""
    from dataclasses import replace

    cut = family.first_cut(spec)
    if cut.count == 0:
        return cut
    keep = np.ones(cut.count, dtype=bool)
    for ref, v in cut.values.items():
        v = np.asarray(v, dtype=float)
        part_ok = np.isfinite(v) & (v <= spec.parts.resistor_max * (1 + 1e-9))
        if ref in family.OPTIONAL:
            part_ok |= np.isfinite(v) & (v <= FLOOR)
        else:
            part_ok &= v > 0
        keep &= part_ok
    if np.all(keep):
        return cut
    return replace(cut, values={k: np.asarray(v)[keep] for k, v in cut.values.items()},
                   knob=None if cut.knob is None else np.asarray(cut.knob)[keep],
                   info={k: np.asarray(v)[keep] for k, v in cut.info.items()})


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
QUIET_COUPLING = 3.0  # input coupling reactance at f_low at most Rs / this, when noise is asked
CAP_LIMIT = 470e-6  # F, the largest capacitor the contract's parts section defaults to


def _quiet_input_coupling(design: Design, spec: Spec) -> Design:
    """Raise the input coupling capacitor so that its reactance at f_low stays well below
    the source resistance: near f_low a small one leaves the base current's noise to
    flow in the large bias resistors instead of the source (the gain falls, that noise
    does not), which dominates a band-integrated noise. The low corner only moves down."""
    rs = max(spec.source.resistance, 100.0)
    target = QUIET_COUPLING / (2.0 * math.pi * spec.require.f_low * rs)
    series = spec.parts.capacitors
    values = {}
    for p in design.parts:
        if p.kind != "capacitor" or design.input not in p.nodes or p.value >= target:
            continue
        opts = sorted({nearest(target, series), *neighbours(target, series, 1)})
        up = [x for x in opts if x >= target]
        cap = min(CAP_LIMIT, spec.parts.capacitor_max)  # never past the part limit
        values[p.ref] = min(min(up) if up else max(opts), max(cap, p.value))
    if not values:
        return design
    # a larger capacitor leaks more: where the raised one would have to be film or
    # ceramic (its leakage moving the bias), hold it to film size, never below its old value
    from stagesynth.synthesis.leakage import FILM_MAX
    from stagesynth.synthesis.practical import leakage_limits

    old = {p.ref: p.value for p in design.parts}
    flagged = leakage_limits(design.with_values(values), spec)
    for ref in values:
        if ref in flagged and values[ref] > FILM_MAX:
            values[ref] = max(old[ref], max(v for v in (nearest(FILM_MAX, series), *neighbours(
                FILM_MAX, series, 1)) if v <= FILM_MAX * (1 + 1e-9)))
    return design.with_values(values)


def _noise_notes(spec: Spec, analysis: Analysis) -> list[str]:
    """The noise rationale (dominant term, bias current against the optimum) when asked."""
    if not spec.require.wants_noise:
        return []
    from stagesynth.synthesis.lownoise import rationale

    return rationale(spec, analysis)
def _linearity_notes(spec: Spec, analysis: Analysis) -> list[str]:
    """What limits the THD and what local feedback bought (when the spec asks a THD)."""
    if spec.require.thd is None:
        return []
    from stagesynth.synthesis.linearity import linearity, notes

    lin = linearity(analysis)
    return notes(lin) if lin is not None else []


def _thd_conflict(c: Conflict, analysis: Analysis) -> Conflict:
    """A THD no candidate reached: name the limiting mechanism of the closest design."""
    from stagesynth.synthesis.linearity import linearity, mechanism

    lin = linearity(analysis)
    if lin is None:
        return c
    return Conflict(c.name, c.limit, f"{c.best}; {mechanism(lin)}", c.advice)


def _low_frequency_droop(design: Design, spec: Spec, search: _Search) -> float:
    """|gain at midband| with the sized capacitors over that with them out of the way."""
    big = {p.ref: float(search.c_big[0]) for p in design.parts if p.kind == "capacitor"}
    real = abs(analyze(design, spec).gain)
    wide = abs(analyze(design.with_values(big), spec).gain)
    return real / wide if wide > 0 else 1.0


def _ok_without_f_low(rows: list[Row], i: int) -> bool:
    return all(bool(row.ok[i]) for row in rows if row.name not in _LF_SKIP)


def _centre_for_yield(spec: Spec, candidates: list[int], finish, first):
    """Among the best standard-value candidates, keep the one whose Monte Carlo yield has
    the highest lower confidence bound (margin for the estimate's own uncertainty)."""
    from stagesynth.judging.montecarlo import monte_carlo
    from stagesynth.judging.sensitivity import recommendations, spreads

    target = spec.require.yield_target
    best = None
    for rank, i in enumerate(candidates):
        design, sizing = first if rank == 0 else finish(i)
        est = monte_carlo(design, spec, YIELD_SCREEN_UNITS)  # same seed: common numbers
        key = (est.interval[0], -rank)
        if best is None or key > best[0]:
            best = (key, design, sizing)
        if est.interval[0] >= target and rank == 0:
            break  # the margin-best design already clears the target with confidence
    _, design, sizing = best
    est = monte_carlo(design, spec, YIELD_FINAL_UNITS)
    lo, hi = est.interval
    notes = [
        f"Yield: {100 * est.estimate:.2f} % of {est.units} simulated units meet every "
        f"requirement at both ambient extremes (95 % interval {100 * lo:.2f} … "
        f"{100 * hi:.2f} %; target {100 * target:g} %). The design was chosen among "
        f"{len(candidates)} standard-value candidates by the lower bound of that interval."
    ]
    if lo < target:
        limiting = ", ".join(f"{k} ({v} units)" for k, v in sorted(
            est.failures.items(), key=lambda kv: -kv[1]))
        notes.append(f"The yield target is not met with confidence; failing units fail: "
                     f"{limiting or 'none'}.")
        notes += [f"Tighter tolerance: {r}" for r in recommendations(
            spreads(design, spec), spec, tuple(est.failures))]
    return design, est, notes, sizing


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
