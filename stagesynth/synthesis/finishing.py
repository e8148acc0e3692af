"""After a circuit family's search: add the remedies a practitioner would (a supply
filter for ripple, output isolation or a base stopper for peaking into a capacitive
load) and adopt the remedied design when the exact analysis says it is better.

Kept apart from synth.py: the search sizes a family's own parts; this step edits
the finished netlist and re-verifies it.
"""

from __future__ import annotations

from dataclasses import replace

from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import analyze
from stagesynth.synthesis.remedies import Candidate, improve_rejection, tame_peaking

RELAXED_PEAKING_DB = 60.0  # the search's peaking limit when a remedy will damp it
# a remedy is tried only when every failed requirement is one it can help with (a family
# that misses its gain or input impedance is not saved by a filter or a damping resistor)
_FILTER_HELPS = frozenset({"supply_rejection", "peaking", "swing"})
_DAMPING_HELPS = frozenset({"peaking", "swing", "z_out", "f_high", "supply_rejection"})


def _key(verdict) -> tuple[int, float]:
    return (len(verdict.failed), -verdict.worst_margin)


def finish_family(spec: Spec, family, result, prefer: str, search):
    """`result` of `search(spec, family, prefer)`, remedied where that helps.

    Supply rejection first (a filter feeds the whole stage, so the search may re-run on
    the filtered rail), then peaking into the load capacitance (damping at the output).
    """
    out = result
    failed = {c.name for c in out.verdict.failed}
    if "supply_rejection" in failed and failed <= _FILTER_HELPS:
        def resynth(lower: Spec):
            r = search(lower, family, prefer)
            return r.design, r.analysis

        cand = improve_rejection(spec, out.design, out.analysis, resynth)
        if cand is not None and _key(cand.verdict) < _key(out.verdict):
            out = adopt(spec, out, cand)
    failed = {c.name for c in out.verdict.failed}
    if ("peaking" in failed or ("swing" in failed and spec.load.capacitance > 0)) and (
            failed <= _DAMPING_HELPS):
        cands = []
        own = tame_peaking(spec, out.design, out.analysis)
        if own is not None:
            cands.append(own)
        if not (own is not None and own.verdict.meets_spec):
            # let the search pick a bias point that peaks (more standing current for the
            # load capacitance's current at f_high), then damp the peak at the output
            relaxed = replace(spec, require=replace(spec.require,
                                                    peaking_db=RELAXED_PEAKING_DB))
            alt = search(relaxed, family, prefer)
            alt_analysis = analyze(alt.design, spec)
            if _rejection_ok(spec, alt_analysis):
                c = tame_peaking(spec, alt.design, alt_analysis)
                if c is not None:
                    cands.append(replace(c, notes=(
                        "The bias point was chosen with peaking left to the output damping: "
                        "more standing current so the load capacitance's current at f_high "
                        "does not cut the follower off.", *c.notes)))
        if cands:
            best = min(cands, key=lambda c: _key(c.verdict))
            if _key(best.verdict) < _key(out.verdict):
                out = adopt(spec, out, best)
    return out


def _rejection_ok(spec: Spec, analysis) -> bool:
    target = spec.require.supply_rejection_db
    if target is None:
        return True
    return min(p.supply_rejection for p in (analysis.nominal, *analysis.corners)) >= target


def adopt(spec: Spec, result, cand: Candidate):
    """A SynthesisResult for the remedied design: verdict, notes, predicted figures."""
    from stagesynth.judging.results import predicted_block
    from stagesynth.judging.verdict import with_checks, yield_check
    from stagesynth.synthesis.synth import (
        YIELD_FINAL_UNITS,
        SynthesisResult,
        _advice,
        _check_limit,
        _fmt_check,
    )
    from stagesynth.synthesis.topologies.base import Conflict

    design, analysis, verdict = cand.design, cand.analysis, cand.verdict
    predicted = predicted_block(analysis)
    extra = dict(design.extra)
    if spec.require.yield_target is not None:
        from stagesynth.judging.montecarlo import monte_carlo

        est = monte_carlo(design, spec, YIELD_FINAL_UNITS)
        verdict = with_checks(verdict, yield_check(est.estimate, est.interval,
                                                   spec.require.yield_target))
        predicted["yield"] = est.estimate
        predicted["yield_interval_95"] = list(est.interval)
        extra["yield"] = est.to_dict()
    notes = (*result.notes, *cand.notes)
    extra["meets_spec"] = verdict.meets_spec
    synthesis = dict(extra.get("synthesis", {}))
    synthesis["notes"] = list(notes)
    extra["synthesis"] = synthesis
    design = replace(design, predicted=predicted, extra=extra)
    analysis = replace(analysis, design=design)
    conflicts = []
    if not verdict.meets_spec:
        known = {c.name: c for c in result.conflicts}
        for c in verdict.failed:
            conflicts.append(known.get(c.name) or Conflict(
                c.name, _check_limit(c), f"{_fmt_check(c)} in the closest design",
                _advice(c.name, float(c.value) if isinstance(c.value, int | float) else 0.0,
                        spec, c.unit)))
    return SynthesisResult(spec, design, analysis, verdict, tuple(conflicts), notes,
                           result.stats, result.families)
