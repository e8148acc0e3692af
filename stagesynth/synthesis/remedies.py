"""Netlist remedies the synthesizer adds after a circuit family's build: a decoupling
filter from the rail (supply rejection) and output isolation or a base stopper
(peaking into a capacitive load).

Each remedy is a netlist transform that works on any family's design; every
candidate is re-verified by the exact analysis against the whole spec, and the
rationale says where the ripple entered, what the filter costs and what it bought.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from stagesynth.contracts.netlist import Design, Part
from stagesynth.contracts.spec import Spec
from stagesynth.engine.analysis import Analysis, analyze
from stagesynth.judging.verdict import Verdict, judge
from stagesynth.quantities.eseries import neighbours, values_between

FILTER_MARGIN_DB = 3.0  # aim this far past the required rejection (part tolerances, corners)
DROP_SHARES = (0.04, 0.08, 0.12, 0.18, 0.25)  # DC drop of the stage filter, share of the rail
CAP_MAX = 470e-6  # largest filter capacitor (the spec's capacitor_max when it has one)
ISO_STEPS = 10  # isolating resistor candidates


@dataclass(frozen=True)
class Candidate:
    """A remedied design with its exact analysis and verdict."""

    design: Design
    analysis: Analysis
    verdict: Verdict
    notes: tuple[str, ...]

    @property
    def key(self) -> tuple[int, float]:
        """Fewer failed requirements first, then the larger smallest margin."""
        return (len(self.verdict.failed), -self.verdict.worst_margin)


def _judge(design: Design, spec: Spec, notes: tuple[str, ...]) -> Candidate:
    a = analyze(design, spec)
    return Candidate(design, a, judge(a, spec), notes)


def _cap_max(spec: Spec) -> float:
    return float(getattr(spec.parts, "capacitor_max", None) or CAP_MAX)


def _fresh(design: Design, stem: str) -> str:
    """A reference designator not yet used: stem + the first free number."""
    used = {p.ref for p in design.parts}
    k = 1
    while f"{stem}{k}" in used:
        k += 1
    return f"{stem}{k}"


def _node(design: Design, stem: str) -> str:
    used = set(design.nodes())
    k = 1
    while f"{stem}{k}" in used:
        k += 1
    return f"{stem}{k}"


def _with_roles(design: Design, roles: dict[str, str]) -> Design:
    extra = dict(design.extra)
    extra["roles"] = {**dict(extra.get("roles", {})), **roles}
    return replace(design, extra=extra)


# ---------------------------------------------------------------------------
# Where the ripple enters
# ---------------------------------------------------------------------------
def ripple_entries(design: Design, analysis: Analysis) -> list[tuple[str, float]]:
    """(description, ripple at the load in dB per volt on the rail) for each stage node the
    rail drives, largest first: a base (divider), a collector (load), an emitter."""
    from stagesynth.engine.supply import ripple_by_node

    paths = ripple_by_node(analysis.system, analysis.environment.ripple_at)
    out = []
    for node, v in paths.items():
        feeders = [p.ref for p in design.parts if not p.is_bjt and design.supply_node in p.nodes
                   and node in p.nodes]
        terminal = ""
        for q in design.bjts:
            c, b, e = q.nodes
            if node == b:
                terminal = f"{q.ref} base (bias divider)"
            elif node == c:
                terminal = f"{q.ref} collector (collector load)"
            elif node == e:
                terminal = f"{q.ref} emitter (emitter resistor or bypass)"
        if not terminal:
            terminal = f"node {node}"
        via = f" through {', '.join(feeders)}" if feeders else " through the transistor"
        out.append((terminal + via, 20.0 * math.log10(max(abs(v), 1e-300))))
    return sorted(out, key=lambda t: -t[1])


# ---------------------------------------------------------------------------
# Transforms
# ---------------------------------------------------------------------------
def with_rail_filter(design: Design, r: float, c: float, refs: set[str] | None = None
                     ) -> tuple[Design, str, str, str]:
    """Feed the parts `refs` (default: every part on the rail) from a new filtered node:
    a series resistor from the rail and a bulk capacitor to ground. Returns the design and
    the new resistor, capacitor and node names."""
    rail = design.supply_node
    node = _node(design, "vf")
    rr, cc = _fresh(design, "RD"), _fresh(design, "CD")
    parts = []
    for p in design.parts:
        if rail in p.nodes and (refs is None or p.ref in refs):
            p = replace(p, nodes=tuple(node if n == rail else n for n in p.nodes))
        parts.append(p)
    parts += [Part(rr, "resistor", (rail, node), float(r)),
              Part(cc, "capacitor", (node, design.ground), float(c))]
    d = replace(design, parts=tuple(parts))
    return _with_roles(d, {rr: "supply filter, series resistor from the rail",
                           cc: "supply filter, bulk capacitor (electrolytic)"}), rr, cc, node


def split_divider(design: Design, ref: str, r_rail: float, r_rest: float, c: float
                  ) -> tuple[Design, str, str]:
    """Split the divider's rail-side resistor `ref` into r_rail (from the rail) and r_rest,
    with a bulk capacitor from their junction to ground: the divider's own filtered node.
    The DC path is unchanged when r_rail + r_rest equals the old value."""
    node = _node(design, "vfb")
    rr, cc = _fresh(design, "RD"), _fresh(design, "CD")
    rail = design.supply_node
    parts = []
    for p in design.parts:
        if p.ref == ref:
            p = replace(p, nodes=tuple(node if n == rail else n for n in p.nodes),
                        value=float(r_rest))
        parts.append(p)
    parts += [Part(rr, "resistor", (rail, node), float(r_rail)),
              Part(cc, "capacitor", (node, design.ground), float(c))]
    d = replace(design, parts=tuple(parts))
    return _with_roles(d, {rr: f"bias filter, rail side of the divider ({ref} split)",
                           cc: "bias filter capacitor: the divider's own filtered node"}), rr, cc


def with_output_resistor(design: Design, r: float) -> tuple[Design, str]:
    """A series resistor between the stage and the output terminal (load isolation)."""
    inner = _node(design, "xo")
    ref = _fresh(design, "RO")
    out = design.output
    parts = [replace(p, nodes=tuple(inner if n == out else n for n in p.nodes))
             for p in design.parts]
    parts.append(Part(ref, "resistor", (inner, out), float(r)))
    d = replace(design, parts=tuple(parts))
    return _with_roles(d, {ref: "output isolating resistor (keeps the load capacitance "
                                "off the emitter)"}), ref


def with_base_stopper(design: Design, qref: str, r: float) -> tuple[Design, str]:
    """A series resistor in the base lead of transistor `qref`."""
    q = design.part(qref)
    node = _node(design, "bs")
    ref = _fresh(design, "RB")
    parts = []
    for p in design.parts:
        if p.ref == qref:
            c, b, e = p.nodes
            p = replace(p, nodes=(c, node, e))
            base = b
        parts.append(p)
    parts.append(Part(ref, "resistor", (base, node), float(r)))
    d = replace(design, parts=tuple(parts))
    del q
    return _with_roles(d, {ref: f"base stopper of {qref}"}), ref


# ---------------------------------------------------------------------------
# Supply rejection
# ---------------------------------------------------------------------------
def _snap_down(v: float, series: str) -> float:
    opts = [x for x in neighbours(v, series, 2) if x <= v * 1.0000001]
    return max(opts) if opts else min(values_between(v * 0.5, v, series))


def _snap_up(v: float, series: str) -> float:
    opts = [x for x in neighbours(v, series, 2) if x >= v * 0.9999999]
    return min(opts) if opts else v


def _worst_rejection(analysis: Analysis) -> float:
    return min(p.supply_rejection for p in (analysis.nominal, *analysis.corners))


def divider_filters(spec: Spec, design: Design, analysis: Analysis, need_db: float
                    ) -> list[Candidate]:
    """Split each divider's rail-side resistor, a filtered node for the bias alone: no DC
    change (the two halves sum to the old value); the capacitor sized for `need_db`."""
    out = []
    w = 2 * math.pi * spec.require.ripple_at
    x = math.sqrt(10 ** (need_db / 10.0) - 1.0)
    series_r, series_c = spec.parts.resistors, spec.parts.capacitors
    bases = {q.nodes[1] for q in design.bjts}
    for p in design.parts:
        if p.kind != "resistor" or design.supply_node not in p.nodes:
            continue
        other = p.nodes[0] if p.nodes[1] == design.supply_node else p.nodes[1]
        if other not in bases:
            continue
        r_rail = _snap_down(0.5 * p.value, series_r)
        r_rest = _snap_up(p.value - r_rail, series_r)
        # the junction sees r_rail in parallel with r_rest plus the divider's lower part
        r_eq = r_rail * r_rest / (r_rail + r_rest)
        c = _snap_up(x / (w * r_eq), series_c)
        if c > _cap_max(spec):
            continue
        d, rr, cc = split_divider(design, p.ref, r_rail, r_rest, c)
        note = (f"Bias filter: {p.ref} split into {rr} = {_fmt(r_rail, 'Ω')} from the rail and "
                f"{p.ref} = {_fmt(r_rest, 'Ω')}, with {cc} = {_fmt(c, 'F')} from their "
                f"junction to ground: the divider gets its own filtered node, a corner at "
                f"{_fmt(1 / (2 * math.pi * r_eq * c), 'Hz')}, with no change to the DC bias.")
        out.append(_judge(d, spec, (note,)))
    return out


def stage_filter(spec: Spec, design: Design, analysis: Analysis, need_db: float,
                 drop: float) -> Candidate | None:
    """An RC filter feeding the whole stage, sized so the DC drop at the worst supply
    current is at most `drop` volts and the first-order attenuation at ripple_at reaches
    `need_db`: R = drop / I, C = sqrt(10^(A/10) - 1) / (w R), standard values."""
    current = max(p.supply_current for p in (analysis.nominal, *analysis.corners))
    if current <= 0:
        return None
    w = 2 * math.pi * spec.require.ripple_at
    x = math.sqrt(10 ** (need_db / 10.0) - 1.0)
    r = _snap_down(drop / current, spec.parts.resistors)
    c = _snap_up(x / (w * r), spec.parts.capacitors)
    if c > _cap_max(spec):
        return None
    d, rr, cc, node = with_rail_filter(design, r, c)
    fc = 1 / (2 * math.pi * r * c)
    note = (f"Supply filter: {rr} = {_fmt(r, 'Ω')} from the rail and {cc} = {_fmt(c, 'F')} "
            f"to ground feed the stage from node {node} (first-order corner "
            f"{_fmt(fc, 'Hz')}, about {10 * math.log10(1 + (w * r * c) ** 2):.0f} dB at "
            f"{_fmt(spec.require.ripple_at, 'Hz')}); it costs {_fmt(r * current, 'V')} of DC "
            f"headroom at the highest supply current ({_fmt(current, 'A')}), which the bias "
            f"was designed around.")
    return _judge(d, spec, (note,))


def _fmt(value: float, unit: str) -> str:
    from stagesynth.judging.textout import fmt

    return fmt(value, unit)


def improve_rejection(spec: Spec, design: Design, analysis: Analysis, resynth
                      ) -> Candidate | None:
    """Candidates that raise the supply rejection, best first by the objective; None when
    the spec asks for none or the design already has it.

    `resynth(supply_voltage)` re-runs the family's search on a lower rail (the filtered
    node) and returns its (design, analysis).
    """
    target = spec.require.supply_rejection_db
    if target is None:
        return None
    worst = _worst_rejection(analysis)
    if worst >= target:
        return None
    need = target - worst + FILTER_MARGIN_DB
    entries = ripple_entries(design, analysis)
    where = "; ".join(f"{d}: {v:+.1f} dB" for d, v in entries[:3])
    head = (f"Supply rejection: without a filter {worst:.1f} dB at "
            f"{_fmt(spec.require.ripple_at, 'Hz')} (worst condition) against "
            f"{target:g} dB asked. Ripple entered at {where} (load ripple per volt on the "
            "rail, each path alone).")
    tried: list[Candidate] = list(divider_filters(spec, design, analysis, need))
    if any(c.verdict.meets_spec for c in tried):
        return _best(tried, head, target)
    vmin = spec.supply.voltage * (1 - spec.supply.tolerance)
    for share in DROP_SHARES:
        drop = share * vmin
        lower = replace(spec, supply=replace(spec.supply, voltage=spec.supply.voltage - drop))
        base = resynth(lower)
        if base is None:
            continue
        d0 = replace(base[0], supply_voltage=spec.supply.voltage)
        a0 = analyze(d0, spec)
        need_here = max(target - _worst_rejection(a0) + FILTER_MARGIN_DB, 1.0)
        for _ in range(3):  # the stage loads the filtered node: aim higher if short
            cand = stage_filter(spec, d0, a0, need_here, drop)
            if cand is None:
                break
            tried.append(cand)
            short = target - _worst_rejection(cand.analysis)
            if cand.verdict.meets_spec or short <= 0:
                break
            need_here += short + FILTER_MARGIN_DB
        if tried and tried[-1].verdict.meets_spec:
            break
    return _best(tried, head, target) if tried else None


def _best(tried: list[Candidate], head: str, target: float) -> Candidate:
    best = min(tried, key=lambda c: c.key)
    got = _worst_rejection(best.analysis)
    tail = f"With the filter: {got:.1f} dB at the worst condition (asked {target:g} dB)."
    return replace(best, notes=(head, *best.notes, tail))


# ---------------------------------------------------------------------------
# Capacitive loads
# ---------------------------------------------------------------------------
def output_transistor(design: Design) -> str | None:
    """The transistor whose emitter drives the output (through a coupling capacitor or
    directly): a follower output stage."""
    out = design.output
    near = {out} | {n for p in design.parts if p.kind == "capacitor" and out in p.nodes
                    for n in p.nodes}
    for q in design.bjts:
        if q.nodes[2] in near:
            return q.ref
    return None


def tame_peaking(spec: Spec, design: Design, analysis: Analysis) -> Candidate | None:
    """Isolating resistors and base stoppers for a follower output peaking into the load
    capacitance; None when nothing peaks or no follower drives the output."""
    worst = max(p.peaking_db for p in (analysis.nominal, *analysis.corners))
    if worst <= spec.require.peaking_db or spec.load.capacitance <= 0:
        return None
    qref = output_transistor(design)
    if qref is None:
        return None
    series = spec.parts.resistors
    budget = spec.require.z_out - analysis.z_out if spec.require.z_out else 0.1 * (
        spec.load.resistance)
    budget = min(budget, 0.1 * spec.load.resistance)
    tried: list[Candidate] = []
    why = (f"Peaking: the follower {qref} peaked {worst:.1f} dB into "
           f"{_fmt(spec.load.capacitance, 'F')}: its output impedance rises like an "
           "inductance above the hFE corner and resonates with the load capacitance.")
    if budget > 1.0:
        steps = values_between(1.0, budget, series)
        for r in steps[:: max(1, len(steps) // ISO_STEPS)]:
            d, ref = with_output_resistor(design, r)
            tried.append(_judge(d, spec, (why, f"An isolating resistor {ref} = {_fmt(r, 'Ω')} "
                                               "in series with the output damps the "
                                               "resonance (it adds to the output impedance "
                                               "and costs a little gain).")))
            if tried[-1].verdict.meets_spec:
                break
    if not any(c.verdict.meets_spec for c in tried):
        for r in (47.0, 100.0, 220.0, 470.0):
            d, ref = with_base_stopper(design, qref, _snap_up(r, series))
            tried.append(_judge(d, spec, (why, f"A base stopper {ref} = {_fmt(r, 'Ω')} in "
                                               f"the base of {qref} adds damping at the "
                                               "resonance.")))
            if tried[-1].verdict.meets_spec:
                break
    if not tried:
        return None
    best = min(tried, key=lambda c: c.key)
    got = max(p.peaking_db for p in (best.analysis.nominal, *best.analysis.corners))
    return replace(best, notes=(*best.notes, f"Peaking with it: {got:.2f} dB at the worst "
                                             f"condition (limit {spec.require.peaking_db:g} "
                                             "dB)."))
