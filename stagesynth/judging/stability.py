"""Bias stability factors of any netlist, as pure functions over a Design, and the JSON
summary of bias stability and thermal safety (the thermal checks are in `thermal`).

Stability factors follow the classic definitions (Millman & Halkias, *Integrated
Electronics*, ch. on biasing; Sedra & Smith, from memory): S_I = dIC/dICBO,
S_V = dIC/dVBE (junction voltage at fixed current), S_beta = dIC/dhFE, each per
transistor at the nominal point, with IC the collector terminal current. They are
taken numerically from the reference-model DC solver, so they hold for any circuit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from stagesynth.contracts.device import T_REF_C, Device, hfe_at
from stagesynth.contracts.jfet import NOMINAL_U
from stagesynth.contracts.netlist import Design
from stagesynth.engine.analysis import Analysis, Environment
from stagesynth.engine.circuit import Circuit, compile_design
from stagesynth.engine.dc import solve_dc
from stagesynth.judging.thermal import (
    TJ_MAX_DEFAULT,
    TJ_STEP,
    ThermalCheck,
    derated_power,
    junction_max,
    thermal_checks,
)

# the thermal checks stay importable from here
__all__ = [
    "TJ_MAX_DEFAULT",
    "TJ_STEP",
    "BiasStiffness",
    "StabilityFactors",
    "ThermalCheck",
    "derated_power",
    "junction_max",
    "robustness",
    "robustness_dict",
    "stability_factors",
    "thermal_checks",
]

ICBO_STEP = 1e-8  # A, leakage injected for S_I (central difference, +- this; IC is linear in it)
VBE_STEP = 1e-3  # V, shift of the junction voltage at fixed current for S_V
HFE_STEP = 0.01  # relative step of hFE(25 degC) for S_beta
STIFF_RATIO = 0.1  # RTH <= 0.1*(hFE_min+1)*RE counts as a stiff divider (common practice)
_GMIN = 1e-15  # S, keeps floating nodes of the bias network defined
_OPEN = 1e12  # ohm: a driving-point resistance above this means "no DC path"
_RAIL_FRACTION = 1e-6  # a base whose Thevenin voltage lies this far inside the rails


# ---------------------------------------------------------------------------
# Values that travel
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class BiasStiffness:
    """Divider stiffness of one transistor's base, from the DC conductance matrix.

    `rth`, `vth`: Thevenin resistance and voltage seen from the base terminal with
    capacitors and transistors open; `re`: DC resistance seen from the emitter the
    same way; `ratio` = rth / ((hFE_min + 1) * re); stiff when ratio <= STIFF_RATIO.
    """

    rth: float
    vth: float
    re: float
    beta_re: float  # (hFE_min + 1) * re
    ratio: float
    stiff: bool


@dataclass(frozen=True)
class StabilityFactors:
    """Bias sensitivities of one transistor at the nominal point (signs: polarity-normalized).

    s_i dimensionless, s_v in A/V (negative: a higher VBE at fixed current lowers IC),
    s_beta in A per unit of hFE (at the junction temperature). Spreads: IC at hFE max
    minus IC at hFE min (25 degC), and IC at the hottest minus the coldest ambient.
    """

    ref: str
    s_i: float
    s_v: float
    s_beta: float
    ic: float
    stiffness: BiasStiffness | None
    ic_spread_hfe: float
    ic_spread_hfe_pct: float
    ic_spread_ambient: float
    ic_spread_ambient_pct: float
    ic_hfe_min: float
    ic_hfe_max: float
    ic_ambient_low: float
    ic_ambient_high: float
    ambient: tuple[float, float]
    converged: bool


# ---------------------------------------------------------------------------
# Bias network (conductance matrix, capacitors and transistors open)
# ---------------------------------------------------------------------------
def _bias_network(design: Design, circuit: Circuit) -> list[tuple[float, float, float]]:
    """(RTH, VTH, RE) per transistor: driving-point values of the resistive DC network.

    Source resistance and load are included as the DC solver sees them (a zero source
    resistance holds the input at 0 V). Fixed nodes (ground, supply) count as 0 ohm.
    """
    vals = design.values()
    branches = [(vals[ref], a, b) for ref, a, b in circuit.resistors]
    branches.append((design.load_resistance, circuit.output, circuit.ground))
    fixed = {circuit.ground, circuit.supply}
    if design.source_resistance > 0:
        branches.append((design.source_resistance, circuit.input, circuit.ground))
    else:
        fixed.add(circuit.input)
    size = circuit.n + 2
    g = np.zeros((size, size))
    for r, a, b in branches:
        y = 1.0 / r
        g[a, a] += y
        g[b, b] += y
        g[a, b] -= y
        g[b, a] -= y
    free = np.array([i for i in range(size) if i not in fixed], dtype=int)
    gff = g[np.ix_(free, free)] + _GMIN * np.eye(free.size)
    z = np.linalg.inv(gff)
    # open-circuit voltages with the supply at its value, everything else fixed at 0
    v_open = -z @ g[free, circuit.supply] * design.supply_voltage
    pos = {int(node): i for i, node in enumerate(free)}

    def seen(node: int) -> tuple[float, float]:
        if node in fixed:
            return 0.0, design.supply_voltage if node == circuit.supply else 0.0
        i = pos[node]
        r = float(z[i, i])
        return (math.inf if r > _OPEN else r), float(v_open[i])

    out = []
    for q in circuit.bjts:
        rth, vth = seen(q.b)
        re, _ = seen(q.e)
        out.append((rth, vth, re))
    return out


def _stiffness(design: Design, circuit: Circuit) -> list[BiasStiffness | None]:
    """Stiffness of each base that a divider biases (Thevenin voltage strictly inside the rails)."""
    vs = design.supply_voltage
    out: list[BiasStiffness | None] = []
    for q, (rth, vth, re) in zip(circuit.bjts, _bias_network(design, circuit), strict=True):
        frac = vth / vs if vs else 0.0
        divider = (
            math.isfinite(rth)
            and rth > 0
            and _RAIL_FRACTION < frac < 1.0 - _RAIL_FRACTION
        )
        if not divider:
            out.append(None)
            continue
        beta_re = (q.device.hfe_min + 1.0) * re
        ratio = rth / beta_re if beta_re > 0 else math.inf
        out.append(BiasStiffness(rth, vth, re, beta_re, ratio, bool(ratio <= STIFF_RATIO)))
    return out


# ---------------------------------------------------------------------------
# Stacked circuit: several copies of one netlist, each with its own devices
# ---------------------------------------------------------------------------
def _stack(
    circuit: Circuit,
    devices: Sequence[Sequence[Device]],
    source_resistance: float,
) -> Circuit:
    """One circuit holding K disjoint copies of `circuit` that share ground and supply.

    Copy k uses devices[k] (one per transistor, circuit.transistors order: bipolar
    transistors, then junction FETs). The load and, when non-zero, the
    source resistance become explicit resistors of every copy (append their values
    to each copy's resistor row); a zero source resistance ties each copy's input to
    ground, as the DC solver does. This lets one batched solve give each member its
    own device parameters (the solver's batch shares one device set).
    """
    n0 = circuit.n
    k_count = len(devices)
    gnd, sup = k_count * n0, k_count * n0 + 1
    tie_input = source_resistance <= 0

    def at(k: int, i: int) -> int:
        if i == circuit.ground or (tie_input and i == circuit.input):
            return gnd
        if i == circuit.supply:
            return sup
        return k * n0 + i

    names: list[str] = []
    resistors = []
    bjts = []
    jfets = []
    nb = len(circuit.bjts)
    for k in range(k_count):
        names.extend(f"{name}@{k}" for name in circuit.node_names)
        resistors.extend((f"{ref}@{k}", at(k, a), at(k, b)) for ref, a, b in circuit.resistors)
        resistors.append((f"RL@{k}", at(k, circuit.output), gnd))
        if not tie_input:
            resistors.append((f"RS@{k}", at(k, circuit.input), gnd))
        for q, dev in zip(circuit.jfets, devices[k][nb:], strict=True):
            jfets.append(replace(q, ref=f"{q.ref}@{k}", device=dev, d=at(k, q.d),
                                 g=at(k, q.g), s=at(k, q.s)))
        for q, dev in zip(circuit.bjts, devices[k][:nb], strict=True):
            bjts.append(
                replace(
                    q,
                    ref=f"{q.ref}@{k}",
                    device=dev,
                    c=at(k, q.c),
                    b=at(k, q.b),
                    bi=at(k, q.bi),
                    e=at(k, q.e),
                )
            )
    index = {name: i for i, name in enumerate(names)}
    index["ground"] = gnd
    index["supply"] = sup
    return Circuit(
        node_names=tuple(names),
        index=index,
        resistors=tuple(resistors),
        capacitors=(),
        bjts=tuple(bjts),
        input=gnd,
        output=gnd,
        jfets=tuple(jfets),
    )


# ---------------------------------------------------------------------------
# Stability factors
# ---------------------------------------------------------------------------
def stability_factors(
    design: Design, env: Environment | None = None
) -> tuple[StabilityFactors, ...]:
    """S_I, S_V, S_beta, divider stiffness and IC spreads of every transistor.

    One batched DC solve. Batch members (rows): nominal; ICBO +- and hFE +- per
    transistor; hFE min and max at 25 degC; the two ambient extremes of `env`. The
    VBE shifts need their own device parameters, which a batch shares, so the solved
    circuit stacks copies of the netlist: copy 0 as designed, then VBE +- per
    transistor (read in the nominal row). Self-heating stays in (the design as built).
    """
    env = env or Environment.for_design(design)
    circuit = compile_design(design)
    nq = len(circuit.bjts)
    if nq == 0:
        return ()
    base = [q.device for q in circuit.bjts]
    fets = [q.device for q in circuit.jfets]  # junction FETs ride along at their nominal
    hfe_typ = np.array([d.hfe_nominal for d in base])

    devices: list[list[Device]] = [list(base) + fets]
    for j in range(nq):
        for sign in (1.0, -1.0):
            devs = list(base) + fets
            devs[j] = base[j].with_overrides(vbe=base[j].vbe + sign * VBE_STEP)
            devices.append(devs)
    k_count = len(devices)
    stacked = _stack(circuit, devices, design.source_resistance)

    amb_lo, amb_hi = float(min(env.ambient)), float(max(env.ambient))
    hfe_rows, leak_rows, ambients = [hfe_typ], [np.zeros(nq)], [T_REF_C]
    for j in range(nq):
        for sign in (1.0, -1.0):
            leak = np.zeros(nq)
            leak[j] = sign * ICBO_STEP
            hfe_rows.append(hfe_typ)
            leak_rows.append(leak)
            ambients.append(T_REF_C)
        for sign in (1.0, -1.0):
            h = hfe_typ.copy()
            h[j] *= 1.0 + sign * HFE_STEP
            hfe_rows.append(h)
            leak_rows.append(np.zeros(nq))
            ambients.append(T_REF_C)
    for h, t in (
        (np.array([d.hfe_min for d in base]), T_REF_C),
        (np.array([d.hfe_max for d in base]), T_REF_C),
        (hfe_typ, amb_lo),
        (hfe_typ, amb_hi),
    ):
        hfe_rows.append(h)
        leak_rows.append(np.zeros(nq))
        ambients.append(t)
    b_count = len(ambients)

    vals = design.values()
    row = [vals[ref] for ref, _, _ in circuit.resistors] + [design.load_resistance]
    if design.source_resistance > 0:
        row.append(design.source_resistance)
    nj = len(fets)
    leakage = np.tile(np.array(leak_rows), (1, k_count))  # same injection in every copy
    leakage = np.concatenate([leakage, np.zeros((b_count, nj * k_count))], axis=1)
    spread = np.concatenate([np.tile(np.array(hfe_rows), (1, k_count)),
                             np.full((b_count, nj * k_count), NOMINAL_U)], axis=1)
    dc = solve_dc(
        stacked,
        np.tile(np.array(row * k_count), (b_count, 1)),
        np.full(b_count, design.supply_voltage),
        spread,
        np.array(ambients),
        0.0 if design.source_resistance <= 0 else math.inf,
        math.inf,
        leakage=leakage,
    )
    # collector terminal current = transport current + injected ICBO; (B, K, nQ)
    ic = (dc.ic + leakage)[:, :nq * k_count].reshape(b_count, k_count, nq)
    tj = dc.tj[:, :nq * k_count].reshape(b_count, k_count, nq)
    stiffness = _stiffness(design, circuit)

    out = []
    for j, q in enumerate(circuit.bjts):
        r = 1 + 4 * j  # rows I+, I-, B+, B- of transistor j
        ic0 = float(ic[0, 0, j])
        s_i = (ic[r, 0, j] - ic[r + 1, 0, j]) / (2.0 * ICBO_STEP)
        s_v = (ic[0, 1 + 2 * j, j] - ic[0, 2 + 2 * j, j]) / (2.0 * VBE_STEP)
        # per unit of hFE at Tj: d hFE(Tj) / d hFE25 = 1 + hfe_tempco*(Tj - 25)
        dh = 2.0 * HFE_STEP * hfe_typ[j] * float(hfe_at(q.device, 1.0, tj[0, 0, j]))
        s_beta = (ic[r + 2, 0, j] - ic[r + 3, 0, j]) / dh
        ic_min, ic_max, ic_lo, ic_hi = (float(ic[i, 0, j]) for i in range(b_count - 4, b_count))
        out.append(
            StabilityFactors(
                ref=q.ref,
                s_i=float(s_i),
                s_v=float(s_v),
                s_beta=float(s_beta),
                ic=ic0,
                stiffness=stiffness[j],
                ic_spread_hfe=ic_max - ic_min,
                ic_spread_hfe_pct=_pct(ic_max - ic_min, ic0),
                ic_spread_ambient=ic_hi - ic_lo,
                ic_spread_ambient_pct=_pct(ic_hi - ic_lo, ic0),
                ic_hfe_min=ic_min,
                ic_hfe_max=ic_max,
                ic_ambient_low=ic_lo,
                ic_ambient_high=ic_hi,
                ambient=(amb_lo, amb_hi),
                converged=bool(np.all(dc.converged)),
            )
        )
    return tuple(out)


def _pct(delta: float, ref: float) -> float:
    return 100.0 * delta / ref if ref > 0 else math.nan


# ---------------------------------------------------------------------------
# JSON
# ---------------------------------------------------------------------------
def _num(x: float | None) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def robustness_dict(
    factors: Sequence[StabilityFactors], checks: Sequence[ThermalCheck]
) -> dict:
    """JSON-ready summary for design.json and `analyze --json` (inf/nan become null)."""
    stability = []
    for f in factors:
        st = f.stiffness
        stability.append(
            {
                "ref": f.ref,
                "ic": _num(f.ic),
                "s_i": _num(f.s_i),
                "s_v": _num(f.s_v),
                "s_beta": _num(f.s_beta),
                "ic_spread_hfe": _num(f.ic_spread_hfe),
                "ic_spread_hfe_pct": _num(f.ic_spread_hfe_pct),
                "ic_hfe_min": _num(f.ic_hfe_min),
                "ic_hfe_max": _num(f.ic_hfe_max),
                "ic_spread_ambient": _num(f.ic_spread_ambient),
                "ic_spread_ambient_pct": _num(f.ic_spread_ambient_pct),
                "ic_ambient_low": _num(f.ic_ambient_low),
                "ic_ambient_high": _num(f.ic_ambient_high),
                "ambient_c": list(f.ambient),
                "divider": None
                if st is None
                else {
                    "rth": _num(st.rth),
                    "vth": _num(st.vth),
                    "re": _num(st.re),
                    "beta_min_re": _num(st.beta_re),
                    "ratio": _num(st.ratio),
                    "stiff": st.stiff,
                },
                "converged": f.converged,
            }
        )
    thermal = [
        {
            "ref": c.ref,
            "corner": c.corner,
            "ambient_c": _num(c.ambient_hot),
            "tj_c": _num(c.tj_hot),
            "tj_max_c": _num(c.tj_max),
            "tj_max_basis": c.tj_max_source,
            "power": _num(c.p_hot),
            "power_allowed": _num(c.p_allowed),
            "power_margin": _num(c.margin),
            "dp_dtj": _num(c.dp_dtj),
            "loop_gain": _num(c.loop_gain),
            "loop_gain_peak": _num(c.loop_gain_peak),
            "runaway_margin": _num(c.runaway_margin),
            "runaway": c.runaway,
            "ok": c.ok,
            "notes": list(c.notes),
        }
        for c in checks
    ]
    return {
        "stability": stability,
        "thermal": thermal,
        "violations": [v for c in checks for v in c.violations],
        "units": {"s_i": "A/A", "s_v": "A/V", "s_beta": "A per unit hFE", "ic": "A",
                  "power": "W", "dp_dtj": "W/K"},
    }


def robustness(analysis: Analysis) -> dict:
    """Stability factors and thermal checks of an analysed design, as one JSON-ready dict."""
    from stagesynth.judging.jfet_stability import jfet_stability, jfet_stability_dicts

    out = robustness_dict(
        stability_factors(analysis.design, analysis.environment), thermal_checks(analysis)
    )
    fets = jfet_stability(analysis.design, analysis.environment)
    if fets:  # junction FETs: IDSS, VP and temperature move the bias, not ICBO/VBE/hFE
        out["jfet_stability"] = jfet_stability_dicts(fets)
        out["units"].update(s_idss="(A/A)/(A/A)", s_vp="A/V", s_t="A/K", id="A")
    return out
