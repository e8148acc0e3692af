"""Bias stability factors and thermal safety (stagesynth.judging.stability).

Checked against the textbook closed forms of the divider-biased common emitter
(Millman & Halkias, *Integrated Electronics*, bias-stability chapter; Sedra & Smith,
*Microelectronic Circuits*; both from memory), against finite differences of the
DC solver taken a different way (separate solves, larger steps, Richardson
extrapolation), against scipy's root finder, and against common practice for the
temperature behaviour and the thermal derating.
"""

from __future__ import annotations

import itertools
import json
import math
from dataclasses import replace

import numpy as np
import pytest
from conftest import TEST_NPN, _c, _q, _r, ce_follower, emitter_follower, mirror_design, npn_ce
from conftest import pnp_ce as pnp_ce_builder
from scipy.optimize import brentq

from stagesynth.contracts.netlist import Design
from stagesynth.engine.analysis import Environment, analyze, batch_values
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.dc import solve_dc
from stagesynth.judging.stability import (
    derated_power,
    junction_max,
    robustness_dict,
    stability_factors,
    thermal_checks,
)

# CODATA 2018 exact values (SI 2019), kept here so the checks do not lean on device.py
K_B = 1.380649e-23
Q_E = 1.602176634e-19


def vt(t_c: float) -> float:
    return K_B * (t_c + 273.15) / Q_E


# ---------------------------------------------------------------------------
# Hand-built stages (our own scenarios, invented values)
# ---------------------------------------------------------------------------
R1, R2, RC, RE, VCC = 47e3, 10e3, 3.3e3, 1e3, 12.0


def textbook_ce(theta: float | None = None, rc: float = RC, one_hfe: bool = False) -> Design:
    """Seismic-sensor preamp: NPN CE, divider bias, bypassed RE; VA huge, r_bb = 0.

    `one_hfe` collapses the hFE spread onto hfe_typ (every corner at the nominal hFE).
    """
    dev = TEST_NPN.with_overrides(early_voltage=1e12, r_bb=0.0, theta_ja=theta)
    if one_hfe:
        dev = dev.with_overrides(hfe_min=dev.hfe_typ, hfe_max=dev.hfe_typ)
    parts = (
        _r("R1", "vcc", "b1", R1),
        _r("R2", "b1", "0", R2),
        _r("R3", "vcc", "c1", rc),
        _r("R4", "e1", "0", RE),
        _c("C1", "in", "b1", 10e-6),
        _c("C2", "c1", "out", 10e-6),
        _c("C3", "e1", "0", 470e-6),
        _q("Q1", "c1", "b1", "e1"),
    )
    return Design(parts=parts, devices={"Q": dev}, supply_voltage=VCC, load_resistance=22e3,
                  source_resistance=600.0, title="seismic preamp (test)", band=(20.0, 20e3))


def power_stage(theta: float | None, r2: float = 90.0, p_max: float | None = 0.5) -> Design:
    """Lamp-driver stage: stiff divider, 1 ohm emitter resistor, small collector resistor."""
    dev = TEST_NPN.with_overrides(early_voltage=1e12, r_bb=0.0, theta_ja=theta, p_max=p_max)
    parts = (
        _r("R1", "vcc", "b1", 1500.0),
        _r("R2", "b1", "0", r2),
        _r("R3", "vcc", "c1", 47.0),
        _r("R4", "e1", "0", 1.0),
        _c("C1", "in", "b1", 10e-6),
        _c("C2", "c1", "out", 10e-6),
        _q("Q1", "c1", "b1", "e1"),
    )
    return Design(parts=parts, devices={"Q": dev}, supply_voltage=12.0, load_resistance=10e3,
                  source_resistance=600.0, title="lamp driver (test)", band=(20.0, 20e3))


ENV25 = Environment((25.0, 25.0), 0.0)


def thevenin() -> tuple[float, float]:
    """Thevenin's theorem on the divider (any circuits text)."""
    return R1 * R2 / (R1 + R2), VCC * R2 / (R1 + R2)


def book_factors(ic: float, beta: float, t_c: float = 25.0) -> tuple[float, float]:
    """(S_V, S_beta) of textbook_ce() with the exponential law, dVBE/dIC = re = VT/IC
    (Millman & Halkias; Sedra & Smith; from memory): D = RTH + (beta+1) RE + beta re,
    S_V = -beta/D, S_beta = IC (RTH + RE)/(beta D). test_factors_match_textbook_closed_forms
    holds the engine to these within 5e-4."""
    rth, _ = thevenin()
    d = rth + (beta + 1) * RE + beta * vt(t_c) / ic
    return -beta / d, ic * (rth + RE) / (beta * d)


def solve_ic(design: Design, *, hfe=None, leakage=None, ambient: float = 25.0):
    """Collector terminal currents and Tj from one separate DC solve (B = 1)."""
    circuit = compile_design(design)
    r, _ = batch_values(design, circuit)
    nq = len(circuit.bjts)
    h = np.array([[q.device.hfe_nominal for q in circuit.bjts]]) if hfe is None else hfe
    leak = np.zeros((1, nq)) if leakage is None else np.asarray(leakage, float).reshape(1, nq)
    dc = solve_dc(circuit, r, np.array([design.supply_voltage]), h, np.array([ambient]),
                  design.source_resistance, design.load_resistance, leakage=leak)
    assert dc.converged.all()
    return dc.ic[0] + leak[0], dc.tj[0], dc.vce[0]


# ---------------------------------------------------------------------------
# 1. Closed forms of the divider-biased common emitter
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("mirror", [False, True], ids=["npn", "pnp"])
def test_factors_match_textbook_closed_forms(mirror):
    design = textbook_ce()
    if mirror:  # PNP mirror image: same magnitudes (reference model section 2)
        design = mirror_design(design)
    (f,) = stability_factors(design, ENV25)
    beta = TEST_NPN.hfe_typ  # theta_ja None: Tj = 25 degC, hFE = hfe_typ
    rth, _ = thevenin()
    ic = f.ic

    # Millman & Halkias / Sedra & Smith (from memory), VBE taken as constant:
    # IC = [beta (VTH - VBE) + (beta+1) ICBO (RTH+RE)] / (RTH + (beta+1) RE)
    s_i_book = (beta + 1) * (1 + rth / RE) / (beta + 1 + rth / RE)
    s_v_book = -beta / (rth + (beta + 1) * RE)
    s_b_book = ic * s_i_book / (beta * (1 + beta))  # exact derivative of IC(beta) above
    for got, book in ((f.s_i, s_i_book), (f.s_v, s_v_book), (f.s_beta, s_b_book)):
        assert got == pytest.approx(book, rel=0.03)  # the constant-VBE idealization: a few %

    # Same derivation keeping the exponential law, dVBE/dIC = re = VT/IC (Sedra & Smith's
    # re, from memory), and IC(terminal) = IC(transport) + ICBO:
    # D = RTH + (beta+1) RE + beta re
    # S_I = [(beta+1)(RTH+RE) + beta re]/D, S_V = -beta/D, S_beta = IC (RTH+RE)/(beta D)
    r_e = vt(25.0) / ic
    d = rth + (beta + 1) * RE + beta * r_e
    assert f.s_i == pytest.approx(((beta + 1) * (rth + RE) + beta * r_e) / d, rel=5e-4)
    assert f.s_v == pytest.approx(-beta / d, rel=5e-4)
    assert f.s_beta == pytest.approx(ic * (rth + RE) / (beta * d), rel=5e-4)


def test_hfe_spread_matches_scipy_root_of_the_bias_loop():
    """IC at hFE min/max: KVL round the base loop with the exponential law, solved by brentq."""
    env = Environment((25.0, 25.0), 0.0)
    (f,) = stability_factors(textbook_ce(), env)
    rth, vth = thevenin()
    dev = TEST_NPN

    def ic_of(beta: float) -> float:
        # VTH = IB RTH + VBE(IC) + IE RE,  VBE(IC) = vbe + VT ln(IC / vbe_current)
        def kvl(ic: float) -> float:
            vbe = dev.vbe + vt(25.0) * math.log(ic / dev.vbe_current)
            return vth - ic / beta * rth - vbe - ic * (beta + 1) / beta * RE

        return brentq(kvl, 1e-9, vth / RE, xtol=1e-15, rtol=1e-13)

    assert f.ic == pytest.approx(ic_of(dev.hfe_typ), rel=1e-5)
    assert f.ic_hfe_min == pytest.approx(ic_of(dev.hfe_min), rel=1e-5)
    assert f.ic_hfe_max == pytest.approx(ic_of(dev.hfe_max), rel=1e-5)
    spread = ic_of(dev.hfe_max) - ic_of(dev.hfe_min)
    assert f.ic_spread_hfe == pytest.approx(spread, rel=1e-3)
    assert f.ic_spread_hfe_pct == pytest.approx(100 * spread / ic_of(dev.hfe_typ), rel=1e-3)
    assert f.ic_spread_ambient == 0.0  # one ambient only


# ---------------------------------------------------------------------------
# 2. Against finite differences of the solver taken differently
# ---------------------------------------------------------------------------
def _richardson_central(fun, h: float) -> float:
    """Central differences at h and 2h, Richardson-extrapolated: (4 D(h) - D(2h)) / 3."""
    d1 = (fun(h) - fun(-h)) / (2 * h)
    d2 = (fun(2 * h) - fun(-2 * h)) / (4 * h)
    return (4 * d1 - d2) / 3


def _shift_vbe(design: Design, ref: str, dv: float) -> Design:
    """Give transistor `ref` its own device type with vbe moved by dv."""
    part = design.part(ref)
    dev = design.devices[part.device]
    devices = dict(design.devices)
    devices["shifted"] = dev.with_overrides(vbe=dev.vbe + dv)
    parts = tuple(replace(p, device="shifted") if p.ref == ref else p for p in design.parts)
    return replace(design, parts=parts, devices=devices)


@pytest.mark.parametrize("builder", [npn_ce, pnp_ce_builder, ce_follower, emitter_follower])
def test_factors_match_separate_solves_with_richardson(builder):
    """Full model (r_bb, finite VA, self-heating): every transistor of 1- and 2-stage nets."""
    design = builder()
    factors = stability_factors(design, ENV25)
    circuit = compile_design(design)
    hfe0 = np.array([[q.device.hfe_nominal for q in circuit.bjts]])
    nq = len(circuit.bjts)
    _, tj0, _ = solve_ic(design)
    for j, (q, f) in enumerate(zip(circuit.bjts, factors, strict=True)):
        assert f.ref == q.ref

        def ic_leak(h, j=j):
            leak = np.zeros(nq)
            leak[j] = h
            return solve_ic(design, leakage=leak)[0][j]

        def ic_vbe(dv, j=j, ref=q.ref):
            return solve_ic(_shift_vbe(design, ref, dv))[0][j]

        def ic_hfe(dh, j=j):
            h = hfe0.copy()
            h[0, j] += dh
            return solve_ic(design, hfe=h)[0][j]

        s_i = _richardson_central(ic_leak, 2e-7)
        s_v = _richardson_central(ic_vbe, 5e-3)
        # per unit of hFE at Tj: hFE(Tj) = hFE25 (1 + hfe_tempco (Tj - 25))
        s_b = _richardson_central(ic_hfe, 0.03 * hfe0[0, j]) / (
            1 + q.device.hfe_tempco * (tj0[j] - 25.0)
        )
        assert f.s_i == pytest.approx(s_i, rel=5e-3)
        assert f.s_v == pytest.approx(s_v, rel=5e-3)
        assert f.s_beta == pytest.approx(s_b, rel=5e-3)


# ---------------------------------------------------------------------------
# 3. Divider stiffness from the conductance matrix
# ---------------------------------------------------------------------------
def test_divider_stiffness_matches_thevenin_and_rule_of_thumb():
    (f,) = stability_factors(textbook_ce(), ENV25)
    rth, vth = thevenin()
    st = f.stiffness
    assert st is not None
    assert st.rth == pytest.approx(rth, rel=1e-6)
    assert st.vth == pytest.approx(vth, rel=1e-6)
    assert st.re == pytest.approx(RE, rel=1e-6)
    assert st.ratio == pytest.approx(rth / ((TEST_NPN.hfe_min + 1) * RE), rel=1e-6)
    # common practice: RTH at most about a tenth of (hFE_min + 1) RE is a stiff divider
    assert st.stiff == (st.ratio <= 0.1)

    # PNP with RE split 100 + 560 ohm toward the supply; divider 15k / 62k
    (fp,) = stability_factors(pnp_ce_builder(), ENV25)
    assert fp.stiffness.re == pytest.approx(660.0, rel=1e-6)
    assert fp.stiffness.rth == pytest.approx(15e3 * 62e3 / 77e3, rel=1e-6)

    # two stages: Q1 divider 82k/15k over 220 + 1k; Q2's base hangs on Q1's collector
    # resistor only (no path to ground once the transistors are open): no divider
    f1, f2 = stability_factors(ce_follower(), ENV25)
    assert f1.stiffness.rth == pytest.approx(82e3 * 15e3 / 97e3, rel=1e-6)
    assert f1.stiffness.re == pytest.approx(1220.0, rel=1e-6)
    assert f2.stiffness is None


# ---------------------------------------------------------------------------
# 4. Temperature behaviour (common practice)
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("mirror", [False, True], ids=["npn", "pnp"])
def test_ic_rises_with_temperature_as_the_factors_predict(mirror):
    """VBE at fixed current falls about 2 mV/K and hFE rises (common practice), so IC rises."""
    design = textbook_ce()
    if mirror:
        design = mirror_design(design)
    (f,) = stability_factors(design, Environment((20.0, 30.0), 0.0))
    assert f.ic_ambient_high > f.ic > f.ic_ambient_low
    assert f.ic_spread_ambient > 0

    dev = TEST_NPN
    # dVBE/dT at fixed IC in the reference model: vbe_tempco + (k/q) ln(IC / vbe_current)
    dvbe_dt = dev.vbe_tempco + K_B / Q_E * math.log(f.ic / dev.vbe_current)
    assert -2.3e-3 < dvbe_dt < -1.7e-3  # "about -2 mV/K" (common practice)
    dbeta_dt = dev.hfe_typ * dev.hfe_tempco
    # dIC = S_V dVBE + S_beta d(beta) (Millman & Halkias, from memory; ICBO not modelled),
    # with the closed-form factors at the nominal point
    s_v, s_beta = book_factors(f.ic, dev.hfe_typ)
    predicted = (s_v * dvbe_dt + s_beta * dbeta_dt) * 10.0
    assert f.ic_spread_ambient == pytest.approx(predicted, rel=0.02)


# ---------------------------------------------------------------------------
# 5. Thermal derating
# ---------------------------------------------------------------------------
def test_derating_law():
    p_max, theta = 0.5, 250.0
    tj_max, basis = junction_max(p_max, theta)
    assert tj_max == pytest.approx(25.0 + p_max * theta)
    assert "p_max" in basis
    assert derated_power(p_max, theta, 25.0) == pytest.approx(p_max)  # full rating at 25 degC
    assert derated_power(p_max, theta, tj_max) == pytest.approx(0.0)  # nothing at Tj_max
    # the linear derating is the thermal-resistance law Tj = Ta + theta_ja P <= Tj_max
    for ta in (40.0, 70.0, 100.0, 140.0):
        assert derated_power(p_max, theta, ta) == pytest.approx((tj_max - ta) / theta)
    assert derated_power(p_max, theta, 0.0) == pytest.approx(p_max)  # flat below 25 degC
    assert derated_power(p_max, theta, 200.0) == 0.0
    # without theta_ja: Tj_max = 150 degC (common practice for small-signal silicon)
    assert junction_max(0.3, None)[0] == 150.0
    assert derated_power(0.3, None, 87.5) == pytest.approx(0.15)


# ---------------------------------------------------------------------------
# 6. Thermal runaway loop gain
# ---------------------------------------------------------------------------
def test_loop_gain_zero_without_thermal_resistance_and_rises_with_it():
    gains = []
    for theta in (0.0, 25.0, 50.0, 100.0):
        design = power_stage(theta)
        (c,) = thermal_checks(analyze(design, environment=ENV25))
        gains.append(c.loop_gain)
        assert not c.runaway and c.ok
        assert c.runaway_margin == pytest.approx(1.0 - max(c.loop_gain, c.loop_gain_peak))
    assert gains[0] == 0.0
    assert all(b > a for a, b in itertools.pairwise(gains))


def test_loop_gain_matches_the_closed_form_factors():
    """dP/dTj = (dP/dIC)(dIC/dTj) with dIC = S_V dVBE + S_beta d(beta) (Millman & Halkias).

    P = VCE IC with VCE = VCC - IC RC - IC (1 + 1/beta) RE, so
    dP/dT = [VCE - IC (RC + RE (1 + 1/beta))] dIC/dT + IC^2 RE / beta^2 dbeta/dT.
    theta_ja = 1 K/W keeps Tj within a fraction of a kelvin of 25 degC; RC = 1 k keeps
    VCE well above VCC/2, away from the cancellation at the half-supply point.
    """
    rc = 1e3
    a = analyze(textbook_ce(1.0, rc, one_hfe=True), environment=ENV25)
    (c,) = thermal_checks(a)
    dev = TEST_NPN
    beta = dev.hfe_typ
    ic, _, vce = solve_ic(textbook_ce(None, rc, one_hfe=True))
    ic, vce = ic[0], vce[0]
    dvbe_dt = dev.vbe_tempco + K_B / Q_E * math.log(ic / dev.vbe_current)
    dbeta_dt = beta * dev.hfe_tempco
    s_v, s_beta = book_factors(ic, beta)  # closed forms, not the engine's factors
    dic_dt = s_v * dvbe_dt + s_beta * dbeta_dt
    dp_dt = (vce - ic * (rc + RE * (1 + 1 / beta))) * dic_dt + ic**2 * RE / beta**2 * dbeta_dt
    assert c.dp_dtj == pytest.approx(dp_dt, rel=0.01)
    assert c.loop_gain == pytest.approx(1.0 * dp_dt, rel=0.01)


@pytest.mark.parametrize("mirror", [False, True], ids=["npn", "pnp"])
def test_hot_stage_flags_runaway(mirror):
    """Large current, 1 ohm of emitter degeneration, VCE near the supply, theta_ja 400 K/W."""
    design = power_stage(400.0, r2=100.0)
    if mirror:
        design = mirror_design(design)
    (c,) = thermal_checks(analyze(design, environment=ENV25))
    assert c.runaway and not c.ok
    assert c.loop_gain_peak >= 1.0  # the loop gain passes 1 on the way up
    assert c.runaway_margin <= 0.0
    assert any("thermal runaway" in v for v in c.violations)
    out = robustness_dict((), (c,))
    assert any("thermal runaway" in v for v in out["violations"])


def test_overdissipating_stage_violates_derated_rating():
    """Tj above Tj_max is the same statement as P above the derated allowance."""
    design = power_stage(100.0, r2=100.0)
    (c,) = thermal_checks(analyze(design, environment=ENV25))
    # linear derating from 25 °C to Tj_max = 25 °C + p_max theta_ja (common practice)
    assert c.p_allowed == pytest.approx((25.0 + 0.5 * 100.0 - c.ambient_hot) / 100.0)
    assert c.p_hot > c.p_allowed and c.margin < 0 and not c.ok
    assert c.tj_hot > c.tj_max  # thermal-resistance law: Tj = Ta + theta_ja P
    assert c.tj_hot == pytest.approx(c.ambient_hot + 100.0 * c.p_hot, rel=1e-6)
    assert any("derated" in v for v in c.violations)


def test_well_behaved_design_passes_and_serializes():
    design = npn_ce()
    a = analyze(design, environment=Environment((0.0, 50.0), 0.05))
    factors = stability_factors(design, a.environment)
    checks = thermal_checks(a)
    (c,) = checks
    assert c.ok and not c.violations and not c.runaway
    assert c.ambient_hot == 50.0  # the hottest corner is at the hottest ambient
    assert abs(c.loop_gain) < 0.05
    assert 0 < c.margin <= 1
    out = json.loads(json.dumps(robustness_dict(factors, checks), allow_nan=False))
    assert out["violations"] == []
    assert out["stability"][0]["s_i"] == pytest.approx(factors[0].s_i)
    assert out["stability"][0]["divider"]["stiff"] == factors[0].stiffness.stiff
    assert out["thermal"][0]["loop_gain"] == pytest.approx(c.loop_gain)
