"""DC operating point: the engine's node voltages judged by physics written out here.

Branch currents are recomputed from the returned node voltages with the reference
equations of spec-format.md section 2 (written again below, not imported from the
engine), and Kirchhoff's current law is checked at every node.
"""

from __future__ import annotations

import itertools
import math
from collections import defaultdict
from dataclasses import replace

import numpy as np
import pytest
from conftest import (
    FIXTURE_BUILDERS,
    TEST_NPN,
    TEST_PNP,
    ce_follower,
    emitter_follower,
    mirror_design,
    npn_ce,
    pnp_ce,
)
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stagesynth.contracts.device import Device
from stagesynth.contracts.netlist import Design, Part
from stagesynth.engine.circuit import Circuit, compile_design
from stagesynth.engine.dc import DcBatch, solve_dc

# CODATA 2018 exact values of k and q (SI redefinition of 2019).
K_B = 1.380649e-23
Q_E = 1.602176634e-19
KCL_RTOL = 1e-6  # node current sum relative to the largest branch current
GMIN_SLACK = 1e-12  # S: a solver's customary shunt from each node to ground


# ----------------------------------------------------------------------------- reference model
def vt(tj_c: float) -> float:
    """VT = k*T/q (CODATA k and q; T in kelvin)."""
    return K_B * (tj_c + 273.15) / Q_E


def ref_is(dev: Device, tj_c: float) -> float:
    """IS(Tj), spec-format.md section 2: VBE at vbe_current is `vbe` at 25 degC and moves
    by vbe_tempco per kelvin."""
    return dev.vbe_current * math.exp(-(dev.vbe + dev.vbe_tempco * (tj_c - 25.0)) / vt(tj_c))


def ref_hfe(dev: Device, hfe25: float, tj_c: float) -> float:
    """hFE(Tj) = hFE25*(1 + hfe_tempco*(Tj - 25 degC)), spec-format.md section 2."""
    return hfe25 * (1.0 + dev.hfe_tempco * (tj_c - 25.0))


def ref_ic(dev: Device, vbe: float, vce: float, tj_c: float) -> float:
    """IC = IS(Tj)*exp(VBE'/VT)*(1 + VCE/VA) - IS*exp(VBC/VT)*(1 + 1/beta_R):
    spec-format.md section 2, forward law plus the base-collector junction in the
    Ebers-Moll transport form (Ebers & Moll 1954; Gray & Meyer, device-model chapter;
    the "-1" terms are left out, as the contract's forward law has none)."""
    i_s = ref_is(dev, tj_c)
    i_r = i_s * math.exp(min((vbe - vce) / vt(tj_c), 80.0))
    forward = i_s * math.exp(vbe / vt(tj_c)) * (1.0 + vce / dev.early_voltage)
    return forward - i_r * (1.0 + 1.0 / dev.hfe_reverse)


def ref_ib(dev: Device, vbe: float, vce: float, tj_c: float, hfe: float) -> float:
    """IB = IS*exp(VBE'/VT)*(1 + VCE/VA)/hFE + IS*exp(VBC/VT)/beta_R (transport form)."""
    i_s = ref_is(dev, tj_c)
    i_r = i_s * math.exp(min((vbe - vce) / vt(tj_c), 80.0))
    forward = i_s * math.exp(vbe / vt(tj_c)) * (1.0 + vce / dev.early_voltage)
    return forward / hfe + i_r / dev.hfe_reverse


def ref_heat(dev: Device, vbe: float, vce: float, ambient: float, tj: float) -> float:
    """Residual of Tj = Ta + theta_ja*VCE*IC(Tj) (K), spec-format.md section 2.

    A transistor driven below VCE = 0 (outside the active region) is taken to dissipate
    nothing rather than to cool itself. At fixed terminal voltages this equation can have
    two roots close together, so the engine's Tj is checked, not recomputed.
    """
    theta = dev.theta_ja or 0.0
    ic = ref_ic(dev, vbe, vce, tj)
    return tj - ambient - theta * (vce * ic if vce > 0 and ic > 0 else 0.0)


def node_volts(circuit: Circuit, dc: DcBatch, i: int) -> dict[str, float]:
    """Node voltages by name for batch member i (internal bases as the engine names them)."""
    return {name: float(dc.v[i, k]) for name, k in circuit.index.items()}


def reference_flows(
    design: Design,
    circuit: Circuit,
    dc: DcBatch,
    i: int,
    ambient: float,
    hfe25: dict[str, float],
) -> tuple[dict[str, float], float, dict[str, tuple[float, float, float, float]]]:
    """Current leaving each node into its branches, the largest branch current, and per
    transistor (IC, VCE, Tj, IB, thermal residual) - from the node voltages and junction
    temperatures the engine returned, through the reference equations."""
    v = node_volts(circuit, dc, i)
    flows: dict[str, float] = defaultdict(float)
    biggest = 0.0

    def branch(a: str, b: str, current: float) -> None:
        nonlocal biggest
        flows[a] += current
        flows[b] -= current
        biggest = max(biggest, abs(current))

    for p in design.parts:
        if p.kind == "resistor":
            a, b = p.nodes
            branch(a, b, (v[a] - v[b]) / p.value)
    branch(design.output, design.ground, v[design.output] / design.load_resistance)
    if design.source_resistance > 0:
        branch(design.input, design.ground, v[design.input] / design.source_resistance)
    states = {}
    for k, p in enumerate(design.bjts):
        dev = design.devices[p.device]
        s = 1.0 if dev.polarity == "npn" else -1.0
        c, b, e = p.nodes
        bi = f"{p.ref}.b'" if dev.r_bb > 0 else b
        vbe = s * (v[bi] - v[e])
        vce = s * (v[c] - v[e])
        tj = float(dc.tj[i, k])
        ic = ref_ic(dev, vbe, vce, tj)
        ib = ref_ib(dev, vbe, vce, tj, ref_hfe(dev, hfe25[p.ref], tj))
        # NPN: IC enters the collector and IB the base; IE = IC + IB leaves the emitter
        flows[c] += s * ic
        flows[bi] += s * ib
        flows[e] -= s * (ic + ib)
        biggest = max(biggest, abs(ic) + abs(ib))
        if dev.r_bb > 0:
            branch(b, bi, (v[b] - v[bi]) / dev.r_bb)
        states[p.ref] = (ic, vce, tj, ib, ref_heat(dev, vbe, vce, ambient, tj))
    return flows, biggest, states


def assert_kcl(
    design: Design,
    circuit: Circuit,
    dc: DcBatch,
    i: int,
    ambient: float,
    hfe25: dict[str, float],
) -> dict[str, tuple[float, float, float, float, float]]:
    """Kirchhoff's current law at every node the engine solved for (all but ground, supply
    and an input held at 0 V by a zero source resistance) and the thermal equation."""
    flows, biggest, states = reference_flows(design, circuit, dc, i, ambient, hfe25)
    volts = node_volts(circuit, dc, i)
    held = {design.ground, design.supply_node}
    if design.source_resistance == 0:
        held.add(design.input)
    for node in circuit.node_names:
        if node in held:
            continue
        # Kirchhoff's current law (Kirchhoff 1845; any circuit text). Slack: 1 pS per node
        # to ground, a customary solver aid, is not in the reference model.
        slack = KCL_RTOL * biggest + GMIN_SLACK * abs(volts[node]) + 1e-13
        assert abs(flows[node]) <= slack, f"KCL at {node}: {flows[node]:.3e} A of {biggest:.3e} A"
    for ref, state in states.items():
        # spec section 2: Tj = Ta + theta_ja*VCE*IC at the solution
        assert abs(state[4]) < 1e-6, f"{ref}: Tj off the thermal equation by {state[4]:.3e} K"
    return states


def hfe_map(design: Design, case: str = "typ") -> dict[str, float]:
    pick = {
        "typ": lambda d: d.hfe_nominal,
        "min": lambda d: d.hfe_min,
        "max": lambda d: d.hfe_max,
    }[case]
    return {p.ref: pick(design.devices[p.device]) for p in design.bjts}


def solve(
    design: Design,
    *,
    supply: list[float] | None = None,
    ambient: list[float] | None = None,
    hfe: list[dict[str, float]] | None = None,
    max_iter: int = 200,
) -> tuple[Circuit, DcBatch]:
    """Cold-start batched DC solve of `design` over the listed conditions."""
    circuit = compile_design(design)
    supply = supply or [design.supply_voltage]
    n = len(supply)
    ambient = ambient or [25.0] * n
    hfe = hfe or [hfe_map(design)] * n
    vals = {p.ref: p.value for p in design.parts if p.kind == "resistor"}
    r = np.tile([vals[ref] for ref, _, _ in circuit.resistors], (n, 1))
    h = np.array([[row[q.ref] for q in circuit.bjts] for row in hfe]).reshape(n, -1)
    dc = solve_dc(
        circuit,
        r,
        np.array(supply, dtype=float),
        h,
        np.array(ambient, dtype=float),
        design.source_resistance,
        design.load_resistance,
        max_iter=max_iter,
    )
    return circuit, dc


# ----------------------------------------------------------------------------- random networks
def _loguniform(lo: float, hi: float) -> st.SearchStrategy[float]:
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda x: 10.0**x)


@st.composite
def random_device(draw: st.DrawFn, polarity: str) -> Device:
    """A made-up transistor type with datasheet values drawn over their usual ranges."""
    hfe_min = draw(_loguniform(30.0, 400.0))
    return Device(
        polarity=polarity,
        hfe_min=hfe_min,
        hfe_max=hfe_min * draw(st.floats(1.0, 5.0)),
        vbe=draw(st.floats(0.55, 0.78)),
        vbe_current=draw(_loguniform(1e-4, 1e-2)),
        early_voltage=draw(_loguniform(15.0, 300.0)),
        ft=draw(_loguniform(50e6, 2e9)),
        c_cb=draw(_loguniform(0.5e-12, 10e-12)),
        r_bb=draw(st.one_of(st.just(0.0), _loguniform(5.0, 300.0))),
        theta_ja=draw(st.one_of(st.none(), _loguniform(50.0, 500.0))),
        vbe_tempco=draw(st.floats(-2.5e-3, -1.5e-3)),
        hfe_tempco=draw(st.floats(2e-3, 8e-3)),
    )


@st.composite
def random_network(draw: st.DrawFn) -> tuple[Design, float, dict[str, float]]:
    """Resistor ladders and dividers around 1-3 transistors, NPN or PNP, each biased the
    way a designer would (divider + emitter resistor, follower, collector feedback) with
    values drawn over decades, chained by resistive links, capacitor-coupled input,
    resistive output into the load. Returns (design, ambient, hFE25)."""
    vs = draw(_loguniform(5.0, 30.0))
    count = draw(st.integers(1, 3))
    parts: list[Part] = []
    devices: dict[str, Device] = {}
    hfe25: dict[str, float] = {}
    prev_out: str | None = None
    for k in range(1, count + 1):
        pol = draw(st.sampled_from(("npn", "pnp")))
        kind = draw(st.sampled_from(("ce", "follower", "feedback")))
        dev = draw(random_device(pol))
        devices[f"D{k}"] = dev
        h25 = draw(st.floats(dev.hfe_min, dev.hfe_max))
        hfe25[f"Q{k}"] = h25
        top, bot = ("vcc", "0") if pol == "npn" else ("0", "vcc")
        b, c, e = f"b{k}", f"c{k}", f"e{k}"
        ic = draw(_loguniform(30e-6, 10e-3))
        ve = vs * draw(st.floats(0.05, 0.3))
        vb = ve + 0.65
        re = ve / ic * draw(st.floats(0.7, 1.4))
        rth = (dev.hfe_min + 1.0) * re * draw(_loguniform(0.03, 0.5))
        vc = ve + (vs - ve) * draw(st.floats(0.3, 0.7))
        parts.append(Part(f"RE{k}", "resistor", (e, bot), re))
        if kind == "feedback":
            parts.append(Part(f"RC{k}", "resistor", (top, c), (vs - vc) / ic))
            parts.append(
                Part(f"RF{k}", "resistor", (c, b), (vc - vb) / (ic / h25) * draw(st.floats(0.5, 2)))
            )
            base_scale = (vc - vb) / (ic / h25)
        else:
            parts.append(Part(f"RA{k}", "resistor", (top, b), rth * vs / vb))
            parts.append(Part(f"RB{k}", "resistor", (b, bot), rth * vs / (vs - vb)))
            base_scale = rth * vs / vb + rth * vs / (vs - vb)
        if kind == "ce":
            parts.append(Part(f"RC{k}", "resistor", (top, c), (vs - vc) / ic))
        collector = top if kind == "follower" else c
        parts.append(Part(f"Q{k}", "bjt", (collector, b, e), device=f"D{k}"))
        if prev_out is None:
            # the signal enters through a coupling capacitor: no DC path from the source
            parts.append(Part("CIN", "capacitor", ("in", b), 10e-6))
        else:
            # a link drawing at most a tenth of the divider's current: the previous stage
            # nudges this one's bias without driving it out of the active region
            link = base_scale * draw(_loguniform(10.0, 2000.0))
            parts.append(Part(f"RL{k}", "resistor", (prev_out, b), link))
        prev_out = e if kind == "follower" else c
        out_scale = re if kind == "follower" else (vs - vc) / ic
    # a DC-coupled output path at least a few times the stage's own output resistor
    rout = out_scale * draw(_loguniform(3.0, 1000.0))
    parts.append(Part("ROUT", "resistor", (prev_out, "out"), rout))
    design = Design(
        parts=tuple(parts),
        devices=devices,
        supply_voltage=vs,
        load_resistance=draw(_loguniform(100.0, 1e6)),
        source_resistance=draw(st.one_of(st.just(0.0), _loguniform(50.0, 1e5))),
        title="random network",
    )
    ambient = draw(st.floats(-40.0, 100.0))
    return design, ambient, hfe25


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(random_network())
def test_kcl_holds_at_every_node_of_random_networks(case):
    design, ambient, hfe25 = case
    circuit, dc = solve(design, ambient=[ambient], hfe=[hfe25])
    assert dc.converged[0]
    states = assert_kcl(design, circuit, dc, 0, ambient, hfe25)
    for k, p in enumerate(design.bjts):
        ic, vce, _, ib, _ = states[p.ref]
        # the engine's own transistor figures agree with the reference equations
        assert dc.ic[0, k] == pytest.approx(ic, rel=1e-6, abs=1e-15)
        assert dc.ib[0, k] == pytest.approx(ib, rel=1e-6, abs=1e-15)
        assert dc.vce[0, k] == pytest.approx(vce, rel=1e-9, abs=1e-12)


# ----------------------------------------------------------------------------- fixtures
def test_cold_start_converges_for_every_fixture_at_extreme_corners(any_design):
    """hFE min/max x -55/+125 degC x supply +-20 %, all from zero volts in one batch."""
    conds = list(itertools.product(("min", "max"), (-55.0, 125.0), (0.8, 1.2)))
    conds.append(("typ", 25.0, 1.0))
    circuit, dc = solve(
        any_design,
        supply=[any_design.supply_voltage * s for _, _, s in conds],
        ambient=[a for _, a, _ in conds],
        hfe=[hfe_map(any_design, h) for h, _, _ in conds],
    )
    assert dc.converged.all()
    for i, (h, amb, _) in enumerate(conds):
        states = assert_kcl(any_design, circuit, dc, i, amb, hfe_map(any_design, h))
        for ic, vce, *_ in states.values():
            # the fixtures are biased to stay forward active at every corner (spec section 2)
            assert ic > 0 and vce > 0.25


@pytest.mark.parametrize("builder", [npn_ce, emitter_follower, ce_follower])
def test_pnp_mirror_gives_same_magnitudes(builder):
    """Spec section 2: "PNP is the mirror image" - swapping the rails and the polarity of
    every transistor must leave |IC|, |VCE|, VBE and Tj unchanged."""
    design = builder()
    mirror = mirror_design(design)
    _, dn = solve(design)
    _, dp = solve(mirror)
    assert dn.converged.all() and dp.converged.all()
    np.testing.assert_allclose(np.abs(dp.ic), np.abs(dn.ic), rtol=1e-6)
    np.testing.assert_allclose(np.abs(dp.vce), np.abs(dn.vce), rtol=1e-6)
    np.testing.assert_allclose(dp.vbe, dn.vbe, rtol=1e-6)
    np.testing.assert_allclose(dp.tj, dn.tj, atol=1e-6)
    np.testing.assert_allclose(dp.supply_current, dn.supply_current, rtol=1e-6)


def _fixed_base_current_stage(dev: Device, rb: float) -> Design:
    """Emitter grounded, base fed from the supply through rb: IC set by rb and hFE."""
    return Design(
        parts=(
            Part("RB", "resistor", ("vcc", "b"), rb),
            Part("RC", "resistor", ("vcc", "c"), 1e3),
            Part("C1", "capacitor", ("in", "b"), 1e-6),
            Part("C2", "capacitor", ("c", "out"), 1e-6),
            Part("Q1", "bjt", ("c", "b", "0"), device="Q"),
        ),
        devices={"Q": dev},
        supply_voltage=12.0,
        load_resistance=10e3,
    )


def _vbe_at_current(dev: Device, ambient: float, target: float) -> float:
    """VBE the solver gives when rb is tuned until IC equals `target` (fixed-point on rb)."""
    rb = dev.hfe_nominal * 11.3 / target
    for _ in range(60):
        design = _fixed_base_current_stage(dev, rb)
        _, dc = solve(design, ambient=[ambient])
        assert dc.converged[0]
        ic = float(dc.ic[0, 0])
        if abs(ic / target - 1.0) < 1e-13:
            break
        # IB = (Vcc - VBE)/rb, IC = hFE*IB: rb scales with 1/IC at fixed VBE
        rb *= ic / target
    assert ic == pytest.approx(target, rel=1e-11)
    return float(dc.vbe[0, 0])


@pytest.mark.parametrize("vbe_current", [1e-3, 100e-6])
def test_vbe_at_vbe_current_and_its_tempco(vbe_current):
    # Early factor 1 (VA huge) and no self-heating so the datasheet point is exactly met
    dev = replace(TEST_NPN, vbe_current=vbe_current, early_voltage=1e12, r_bb=0.0, theta_ja=None)
    # spec-format.md section 2: VBE at vbe_current is `vbe` at 25 degC ...
    assert _vbe_at_current(dev, 25.0, vbe_current) == pytest.approx(dev.vbe, abs=1e-9)
    # ... and moves by vbe_tempco per kelvin
    for ambient in (-40.0, 0.0, 85.0, 125.0):
        expect = dev.vbe + dev.vbe_tempco * (ambient - 25.0)
        assert _vbe_at_current(dev, ambient, vbe_current) == pytest.approx(expect, abs=1e-9)
    # common practice: about -2 mV/K for a silicon junction at constant current
    slope = _vbe_at_current(dev, 75.0, vbe_current) - _vbe_at_current(dev, 25.0, vbe_current)
    assert -2.5e-3 < slope / 50.0 < -1.5e-3


def test_hfe_and_bias_current_rise_with_temperature():
    design = npn_ce()
    ambients = [-55.0, -20.0, 0.0, 25.0, 50.0, 85.0, 125.0]
    _, dc = solve(design, supply=[12.0] * len(ambients), ambient=ambients)
    assert dc.converged.all()
    hfe = dc.hfe[:, 0]
    # common practice: hFE rises with temperature (about +0.5 %/K)
    assert np.all(np.diff(hfe) > 0)
    # spec section 2: hFE(Tj) = hFE25*(1 + hfe_tempco*(Tj - 25 degC)), Tj includes self-heating
    dev = design.devices["Q"]
    expect = [ref_hfe(dev, dev.hfe_nominal, float(t)) for t in dc.tj[:, 0]]
    np.testing.assert_allclose(hfe, expect, rtol=1e-12)
    # common practice: a divider-biased stage draws more collector current when hot
    # (VBE falls about 2 mV/K and less base current is drawn from the divider)
    assert np.all(np.diff(dc.ic[:, 0]) > 0)


@pytest.mark.parametrize("name", sorted(FIXTURE_BUILDERS))
def test_self_heating_junction_temperature(name):
    design = FIXTURE_BUILDERS[name]()
    ambients = [-20.0, 25.0, 70.0]
    _, dc = solve(design, supply=[design.supply_voltage] * 3, ambient=ambients)
    assert dc.converged.all()
    for i, amb in enumerate(ambients):
        for k, p in enumerate(design.bjts):
            theta = design.devices[p.device].theta_ja
            # spec section 2: Tj = Ta + theta_ja*VCE*IC at the solution
            expect = amb + theta * dc.vce[i, k] * dc.ic[i, k]
            assert dc.tj[i, k] == pytest.approx(expect, abs=1e-7)
            assert dc.tj[i, k] > amb


@pytest.mark.parametrize("name", sorted(FIXTURE_BUILDERS))
def test_supply_current_is_sum_of_branches_leaving_the_supply(name):
    design = FIXTURE_BUILDERS[name]()
    circuit, dc = solve(design)
    assert dc.converged[0]
    v = node_volts(circuit, dc, 0)
    total = 0.0
    for p in design.parts:
        if p.kind == "resistor" and design.supply_node in p.nodes:
            a, b = p.nodes
            sign = 1.0 if a == design.supply_node else -1.0
            total += sign * (v[a] - v[b]) / p.value
    _, _, states = reference_flows(design, circuit, dc, 0, 25.0, hfe_map(design))
    for p in design.bjts:
        ic, _, _, ib, _ = states[p.ref]
        npn = design.devices[p.device].polarity == "npn"
        c, b, e = p.nodes
        # current leaving the supply into each terminal tied to it (Kirchhoff's current law)
        if c == design.supply_node:
            total += ic if npn else -ic
        if e == design.supply_node:
            total += -(ic + ib) if npn else ic + ib
        if b == design.supply_node:
            total += ib if npn else -ib
    assert dc.supply_current[0] == pytest.approx(total, rel=1e-9)
    assert dc.supply_current[0] > 0


@pytest.mark.parametrize(
    ("builder", "device"), [(npn_ce, TEST_NPN), (pnp_ce, TEST_PNP)], ids=["npn", "pnp"]
)
@pytest.mark.parametrize("case", ["min", "max"])
@pytest.mark.parametrize("ambient", [-25.0, 25.0, 85.0])
def test_divider_bias_collector_current_closed_form(builder, device, case, ambient):
    dev = replace(device, early_voltage=1e12, r_bb=0.0, theta_ja=None)
    design = builder(dev)
    _, dc = solve(design, ambient=[ambient], hfe=[hfe_map(design, case)])
    assert dc.converged[0]
    vals = {p.ref: p.value for p in design.parts}
    vs = design.supply_voltage
    # divider legs seen from the emitter-side rail: ground for the NPN, the supply for the
    # PNP mirror (R1 runs supply->base and R2 base->ground in both fixtures)
    r_up, r_down = (vals["R1"], vals["R2"]) if dev.polarity == "npn" else (vals["R2"], vals["R1"])
    vth = vs * r_down / (r_up + r_down)
    rth = r_up * r_down / (r_up + r_down)
    re = vals["R4"] + vals["R5"]
    beta = float(dc.hfe[0, 0])
    alpha = beta / (beta + 1.0)
    vbe = float(dc.vbe[0, 0])
    # Sedra & Smith (from memory): IC = alpha*(VTH - VBE)/(RE + RTH/(beta + 1)),
    # evaluated with the solver's own VBE and hFE(Tj)
    expect = alpha * (vth - vbe) / (re + rth / (beta + 1.0))
    assert dc.ic[0, 0] == pytest.approx(expect, rel=1e-7)


def _stiff_base_stage(theta: float, r_lower: float) -> Design:
    """Base held near 0.65 V by a 10 k / r_lower divider, emitter grounded, collector on
    the 12 V supply: nothing but the divider's resistance limits a thermal runaway."""
    return Design(
        parts=(
            Part("R1", "resistor", ("vcc", "b"), 10e3),
            Part("R2", "resistor", ("b", "0"), r_lower),
            Part("C1", "capacitor", ("in", "b"), 1e-6),
            Part("C2", "capacitor", ("vcc", "out"), 1e-6),
            Part("Q1", "bjt", ("vcc", "b", "0"), device="Q"),
        ),
        devices={"Q": replace(TEST_NPN, r_bb=0.0, theta_ja=theta)},
        supply_voltage=12.0,
        load_resistance=1e3,
    )


def _runaway_roots(dev: Device, r_lower: float, t_max: float = 1000.0) -> list[float]:
    """Junction temperatures (Ta = 25 degC) where the stiff-base stage is in equilibrium,
    found without the engine: at each Tj the base node is solved by bisection in VBE,
    then the sign changes of Tj - Ta - theta*VCE*IC(Tj) are bracketed and bisected."""
    vs, r1 = 12.0, 10e3
    vth, rth = vs * r_lower / (r1 + r_lower), r1 * r_lower / (r1 + r_lower)

    def excess(tj: np.ndarray) -> np.ndarray:
        lo, hi = np.zeros_like(tj), np.full_like(tj, vth)
        for _ in range(80):  # base node: VTH - VBE = RTH*IB(VBE), monotone in VBE
            mid = 0.5 * (lo + hi)
            ic = np.array([ref_ic(dev, m, vs, t) for m, t in zip(mid, tj, strict=True)])
            hfe = np.array([ref_hfe(dev, dev.hfe_nominal, t) for t in tj])
            left = vth - mid - rth * ic / hfe > 0
            lo, hi = np.where(left, mid, lo), np.where(left, hi, mid)
        ic = np.array([ref_ic(dev, m, vs, t) for m, t in zip(lo, tj, strict=True)])
        return tj - 25.0 - dev.theta_ja * vs * ic

    grid = np.arange(25.0, t_max, 0.5)
    g = excess(grid)
    roots = []
    for i in np.flatnonzero(np.sign(g[:-1]) != np.sign(g[1:])):
        a, b = grid[i], grid[i + 1]
        for _ in range(50):
            m = 0.5 * (a + b)
            if np.sign(excess(np.array([m]))[0]) == np.sign(g[i]):
                a = m
            else:
                b = m
        roots.append(0.5 * (a + b))
    return roots


@pytest.mark.parametrize("theta", [100.0, 250.0, 500.0, 2000.0])
@pytest.mark.parametrize("r_lower", [560.0, 620.0, 680.0])
def test_converged_flag_is_honest_under_thermal_runaway(theta, r_lower):
    """Where self-heating outruns the bias there is no operating point below 1000 degC:
    the engine must say so; where there is one it must find the coolest, stable one."""
    design = _stiff_base_stage(theta, r_lower)
    roots = _runaway_roots(design.devices["Q"], r_lower)
    circuit, dc = solve(design)
    assert bool(dc.converged[0]) == bool(roots)
    if roots:
        assert_kcl(design, circuit, dc, 0, 25.0, hfe_map(design))
        assert dc.tj[0, 0] == pytest.approx(roots[0], abs=1e-6)
