"""Synthesis: from a spec to a complete stage, choosing among the circuit families.

Each family is searched by family_search.py (first cut, exact gain split, corners,
standard values, capacitors); this module runs the families in the order of
simplicity, stops at the fewest transistors that meet, keeps the most practical
design and writes why each other family won or lost into the rationale.
"""

from __future__ import annotations

import math
from dataclasses import replace

from stagesynth.contracts.netlist import Design
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import Analysis
from stagesynth.quantities.errors import NoDesignError, StageError
from stagesynth.synthesis.candidates import TIE, YIELD_FINAL_UNITS  # noqa: F401
from stagesynth.synthesis.conflicts import (  # noqa: F401 (finishing.py reads these here)
    _advice,
    _check_limit,
    _fmt_check,
    _physics_conflicts,
)
from stagesynth.synthesis.devices import family_spec, missing_device
from stagesynth.synthesis.family_search import _synthesize_family
from stagesynth.synthesis.fetchoice import fet_notes
from stagesynth.synthesis.outcome import FamilyReport, SynthesisResult
from stagesynth.synthesis.practical import (
    CAP_HALVING_WORTH,
    MARGIN_CAP,
    PART_COST,
    R_DOUBLING_COST,
    practicality,
)
from stagesynth.synthesis.topologies import FAMILIES


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
        fspec = family_spec(spec, FAMILIES[circuit])
        if fspec is None:
            raise StageError(f"circuit {circuit!r} cannot be built from this spec's devices",
                             file=spec.path or None, key="--circuit",
                             accepted=missing_device(spec, FAMILIES[circuit]))
        result = _remedied(fspec, FAMILIES[circuit], prefer, spec)
        report = _family_report(FAMILIES[circuit], result)
        note = f"Circuit: {FAMILIES[circuit].TITLE}, as asked (--circuit {circuit})."
        return _with_choice(result, (report,), [note])
    reports: list[FamilyReport] = []
    results: list[tuple[FamilyReport, SynthesisResult]] = []
    empty: list[str] = []
    impossible = _physics_conflicts(spec)  # limits no circuit on this supply escapes
    met_stages: int | None = None
    for name, family, fspec in _search_order(spec):
        if met_stages is not None and met_stages < family.STAGES:
            break  # more transistors than a circuit that already meets
        if impossible and results:
            reports.append(FamilyReport(name, family.TITLE, family.STAGES, False, -math.inf,
                                        tuple(c.name for c in impossible),
                                        "; ".join(c.best for c in impossible)))
            continue
        blocked = family.precheck(fspec)
        if blocked:
            reports.append(FamilyReport(name, family.TITLE, family.STAGES, False, -math.inf,
                                        tuple(c.name for c in blocked),
                                        "; ".join(c.best for c in blocked)))
            continue
        try:
            res = _remedied(fspec, family, prefer, spec)
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
        return _with_choice(res, tuple(reports), _choice_notes(rep, reports, meeting)
                            + fet_notes(spec, rep, results))
    if not results:  # every family blocked outright: show the first family's best try
        _, family, fspec = _search_order(spec)[0]
        try:
            res = replace(_synthesize_family(fspec, family, prefer), spec=spec)
        except NoDesignError as exc:
            why = "; ".join(dict.fromkeys([*empty, exc.message]))
            raise NoDesignError(f"no circuit family has a candidate: {why}") from None
        return _with_choice(res, tuple(reports), _choice_notes(None, reports))
    rep, res = min(results, key=lambda pair: (len(pair[0].failed), -pair[0].worst_margin))
    return _with_choice(res, tuple(reports), _choice_notes(None, reports)
                        + fet_notes(spec, None, results))


def _search_order(spec: Spec) -> list[tuple[str, object, Spec]]:
    """The registry's order, held to the families the spec's devices can build (each with
    the spec it is searched with, devices.py), with the families a rule of thumb calls
    unlikely moved to the back (stable, so the order of simplicity holds in each group)."""
    def hint(family, fspec: Spec) -> bool:
        check = getattr(family, "unlikely", None)
        return bool(check(fspec)) if check is not None else False

    items = [(name, family, fspec) for name, family in FAMILIES.items()
             if (fspec := family_spec(spec, family)) is not None]
    return sorted(items, key=lambda item: hint(item[1], item[2]))


def _remedied(fspec: Spec, family, prefer: str, spec: Spec | None = None) -> SynthesisResult:
    """One family's search (with the spec `fspec` devices.py gives it), then the remedies of
    finishing.py (supply filter, output damping) where the spec asks for what the bare
    family misses; the result carries the user's `spec`."""
    from stagesynth.synthesis.finishing import finish_family

    res = finish_family(fspec, family, _synthesize_family(fspec, family, prefer), prefer,
                        _synthesize_family)
    return res if spec is None or spec is fspec else replace(res, spec=spec)


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
                f"{', '.join(_buildable(reports))}, rules of thumb moving unlikely ones to "
                f"the back; "
                f"circuits with more transistors are searched only when none with fewer "
                f"meets).{why}")
    return [head, *lines]


def _buildable(reports: list[FamilyReport]) -> list[str]:
    """The registry's names of the families the searched spec's devices can build (the
    bipolar ones alone for a bipolar spec without a junction-FET companion)."""
    from stagesynth.synthesis.devices import needs

    fet = any(needs(FAMILIES[r.name]) != "bjt" for r in reports)
    bjt = any(needs(FAMILIES[r.name]) == "bjt" for r in reports)
    return [n for n, f in FAMILIES.items() if (needs(f) == "bjt" and bjt)
            or (needs(f) != "bjt" and fet)]


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

