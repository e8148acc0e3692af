"""The search for one circuit family, from a spec to a stage with standard values.

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

import numpy as np

from stagesynth.contracts.jfet import is_jfet
from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import (
    Analysis,
    analyze,
)
from stagesynth.judging.verdict import (
    Row,
    assess,
    judge,
    with_checks,
    yield_check,
)
from stagesynth.quantities.errors import NoDesignError
from stagesynth.quantities.eseries import nearest, neighbours
from stagesynth.synthesis.candidates import (
    _LF_SKIP,
    DROOP_DB,
    THD_ALLOWANCE_DB,
    TIE,
    YIELD_CANDIDATES,
    YIELD_FINAL_UNITS,
    YIELD_SCREEN_UNITS,
    _bounded_cut,
    _centre_gain,
    _rank,
    _Search,
    _within_limit,
)
from stagesynth.synthesis.capsizing import size_capacitors
from stagesynth.synthesis.conflicts import (
    _advice,
    _as_written,
    _check_limit,
    _conflicts,
    _empty_reason,
    _fmt,
    _fmt_check,
    _number,
    _physics_conflicts,
    _thd_conflict,
)
from stagesynth.synthesis.outcome import SynthesisResult
from stagesynth.synthesis.practical import (
    leakage_limits,
)
from stagesynth.synthesis.topologies.base import FLOOR, Conflict, finalize


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
                                    capacitor_max=spec.parts.capacitor_max, limits=limits,
                                    minor=getattr(family, "MINOR_CAPACITORS", ()))
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
    polarity = {"pnp": "PNP", "npn": "NPN", "n": "N-channel JFET",
                "p": "P-channel JFET"}[spec.transistor.polarity]
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
    # a larger capacitor leaks more: where the raised one's leakage would move the bias,
    # hold it to the largest size that does not (film size at least), never below its
    # old value
    from stagesynth.synthesis.practical import leakage_limits

    old = {p.ref: p.value for p in design.parts}
    flagged = leakage_limits(design.with_values(values), spec)
    for ref in values:
        if ref in flagged and values[ref] > flagged[ref]:
            ceiling = flagged[ref]
            below = [v for v in (nearest(ceiling, series), *neighbours(ceiling, series, 1))
                     if v <= ceiling * (1 + 1e-9)]
            values[ref] = max(old[ref], max(below) if below else old[ref])
    return design.with_values(values)


def _noise_notes(spec: Spec, analysis: Analysis) -> list[str]:
    """The noise rationale (dominant term, bias current against the optimum) when asked."""
    if not spec.require.wants_noise:
        return []
    if is_jfet(spec.transistor):
        from stagesynth.synthesis.jfetnoise import rationale as fet_rationale

        return fet_rationale(spec, analysis)
    from stagesynth.synthesis.lownoise import rationale

    return rationale(spec, analysis)
def _linearity_notes(spec: Spec, analysis: Analysis) -> list[str]:
    """What limits the THD and what local feedback bought (when the spec asks a THD)."""
    if spec.require.thd is None:
        return []
    from stagesynth.synthesis.linearity import linearity, notes

    lin = linearity(analysis)
    return notes(lin) if lin is not None else []



def _low_frequency_droop(design: Design, spec: Spec, search: _Search) -> float:
    """|gain at midband| with the sized capacitors over that with them out of the way."""
    big = {p.ref: float(search.c_big[0]) for p in design.parts if p.kind == "capacitor"}
    real = _nominal_midband_gain(design, spec)
    wide = _nominal_midband_gain(design.with_values(big), spec)
    return real / wide if wide > 0 else 1.0


def _nominal_midband_gain(design: Design, spec: Spec) -> float:
    """|gain| at the spec's midband and the nominal condition: analyze(design, spec).gain
    without the corners, noise, distortion and stability a full analysis adds (a refusal
    runs this for every family, and harmonic balance near the swing limit is slow)."""
    from stagesynth.engine.analysis import (
        Environment,
        batch_values,
        condition_arrays,
        corner_conditions,
    )
    from stagesynth.engine.circuit import compile_design
    from stagesynth.engine.evaluate import evaluate

    env = Environment.for_design(design, spec)
    circuit = compile_design(design)
    r, c = batch_values(design, circuit)
    nominal = condition_arrays(circuit, corner_conditions(design, env)[:1])
    fig = evaluate(circuit, r, c, nominal, source_resistance=design.source_resistance,
                   load_resistance=design.load_resistance,
                   load_capacitance=design.load_capacitance,
                   source_capacitance=design.source_capacitance, band=env.band,
                   corners="none", ripple_at=env.ripple_at, response=False)
    return abs(complex(fig.gain[0, 0]))


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

