"""Checks of the independent reference model against textbook closed forms and libraries.

The reference (tests/independent/refmodel.py) is what the engine is compared with, so it
must itself be right: CODATA, Kirchhoff's laws, Sedra & Smith closed forms, python-control
and scikit-rf two-port cascades are the outside judges here.
"""

from __future__ import annotations

import copy
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from independent import designs as ds
from independent import refmodel as rm

# ----------------------------------------------------------------------------- helpers


def _ideal(dev: dict[str, Any]) -> dict[str, Any]:
    """A device with ro -> inf and negligible capacitances, for textbook midband forms."""
    d = copy.deepcopy(dev)
    d.update(early_voltage=1e12, ft=1e18, c_cb=1e-21)
    d.pop("theta_ja", None)
    return d


def _ce_closed_form_design(r_bb: float) -> dict[str, Any]:
    """ce_npn with huge capacitors (1 F) and an ideal device: midband = textbook midband."""
    d = copy.deepcopy(ds.DESIGNS["ce_npn"])
    for p in d["parts"]:
        if p["kind"] == "capacitor":
            p["value"] = 1.0
    d["load"]["capacitance"] = 0.0
    d["devices"]["Q"] = _ideal(d["devices"]["Q"]) | {"r_bb": r_bb}
    return d


def _part(design: dict[str, Any], ref: str) -> float:
    """Value of one part by reference."""
    return next(p["value"] for p in design["parts"] if p["ref"] == ref)


def _nominal(design: dict[str, Any]) -> tuple[rm.Circuit, rm.OperatingPoint]:
    """Circuit and nominal operating point of a design."""
    cir = rm.circuit_from_design(design)
    return cir, rm.solve_dc(cir, rm.nominal_conditions(cir))


# ----------------------------------------------------------------------------- constants


def test_thermal_voltage_codata() -> None:
    # CODATA 2018: k = 1.380649e-23 J/K, q = 1.602176634e-19 C exactly; kT/q at 300 K
    # = 25.852 mV (8.617333262e-5 V/K * 300 K).
    assert rm.thermal_voltage(300.0 - 273.15) == pytest.approx(25.852e-3, abs=0.5e-6)
    assert rm.thermal_voltage(300.0 - 273.15) == pytest.approx(8.617333262e-5 * 300, rel=1e-9)


@pytest.mark.parametrize("tj", [-40.0, 0.0, 25.0, 85.0])
def test_vbe_tempco_and_hfe_tempco_as_contract_defines(tj: float) -> None:
    # Contract section 2: VBE at vbe_current (Early factor 1 at VCE = 0) moves by vbe_tempco
    # per kelvin about 25 degC; hFE = hFE25*(1 + hfe_tempco*(Tj - 25)).
    from scipy.optimize import brentq

    dev = rm.device_from_dict(ds.SMALL_NPN)
    vbe = brentq(lambda v: rm.collector_current(dev, v, 0.0, tj) - dev.vbe_current, 0.1, 1.2,
                 xtol=1e-15)
    assert vbe == pytest.approx(0.65 - 2e-3 * (tj - 25.0), abs=1e-12)
    assert rm.hfe_at(175.0, dev, tj) == pytest.approx(175.0 * (1 + 0.005 * (tj - 25.0)))


# ----------------------------------------------------------------------------- DC


def _independent_currents(design: dict[str, Any], op: rm.OperatingPoint) -> dict[str, float]:
    """Net current leaving every node, recomputed here from the element laws alone."""
    v = op.voltages
    gnd = design.get("ground", "0")
    net: dict[str, float] = {n: 0.0 for n in v}

    def flow(a: str, b: str, i: float) -> None:
        net[a] += i
        net[b] -= i

    for p in design["parts"]:
        if p["kind"] == "resistor":
            a, b = p["nodes"]
            flow(a, b, (v[a] - v[b]) / p["value"])
    rs = design["source"]["resistance"]
    if rs > 0 and not design["source"].get("capacitance"):  # a series capacitor blocks DC
        flow(design["input"], gnd, v[design["input"]] / rs)
    flow(design["output"], gnd, v[design["output"]] / design["load"]["resistance"])
    k_over_q = 1.380649e-23 / 1.602176634e-19  # CODATA 2018
    for p in design["parts"]:
        if p["kind"] != "bjt":
            continue
        dev = design["devices"][p["device"]]
        n = p["nodes"]
        sgn = 1.0 if dev["polarity"] == "npn" else -1.0
        rbb = dev.get("r_bb", 0.0)
        bi = f"{p['ref']}:b'" if rbb > 0 else n["b"]
        t = op.transistors[p["ref"]]
        ta = op.conditions.ambient
        vbe, vce = sgn * (v[bi] - v[n["e"]]), sgn * (v[n["c"]] - v[n["e"]])
        tj = ta + dev.get("theta_ja", 0.0) * vce * t.ic if dev.get("theta_ja") else ta
        vt = k_over_q * (tj + 273.15)
        i_s = dev["vbe_current"] * math.exp(
            -(dev["vbe"] + dev.get("vbe_tempco", -2e-3) * (tj - 25)) / vt)
        i_f = i_s * math.exp(vbe / vt) * (1 + vce / dev.get("early_voltage", 100.0))
        hfe = op.conditions.hfe_of(p["device"]) * (1 + dev.get("hfe_tempco", 5e-3) * (tj - 25))
        # second release: the base-collector junction, Ebers-Moll transport form (Ebers &
        # Moll 1954), reverse gain hfe_reverse (default 1); negligible when active
        i_r = i_s * math.exp((vbe - vce) / vt)
        beta_r = dev.get("hfe_reverse", 1.0)
        ic = i_f - i_r * (1 + 1 / beta_r)
        ib = i_f / hfe + i_r / beta_r
        assert t.ic == pytest.approx(ic, rel=1e-9)
        assert t.tj == pytest.approx(tj, abs=1e-6)
        if rbb > 0:
            flow(n["b"], bi, (v[n["b"]] - v[bi]) / rbb)
        net[n["c"]] += sgn * ic
        net[bi] += sgn * ib
        net[n["e"]] -= sgn * (ic + ib)
    return net


@pytest.mark.parametrize("name", sorted(ds.DESIGNS))
def test_dc_solution_obeys_kirchhoff_current_law(name: str) -> None:
    # Kirchhoff's current law at every node but ground and supply; the supply current is
    # what leaves the supply node (its KCL balance). gmin of 1e-12 S allowed for.
    design = ds.DESIGNS[name]
    cir = rm.circuit_from_design(design)
    corners = rm.corner_conditions(cir, (-20.0, 70.0), 0.1)
    for cond in [rm.nominal_conditions(cir), corners[0], corners[-1]]:
        op = rm.solve_dc(cir, cond)
        net = _independent_currents(design, op)
        for node, i in net.items():
            if node == design["supply"]["node"]:
                assert i == pytest.approx(op.supply_current, rel=1e-9)
            elif node != "0":
                assert abs(i) < 1e-12 * 20 + 1e-9 * op.supply_current, (name, node, i)


def test_dc_bias_matches_scalar_thevenin_equation() -> None:
    # Sedra & Smith (from memory), DC bias with a Thevenin base network:
    # VTH = IB*(RTH + rbb) + VBE(IC) + IE*RE, solved here as one scalar equation in IC.
    from scipy.optimize import brentq

    design = copy.deepcopy(ds.DESIGNS["ce_npn"])
    design["devices"]["Q"].pop("theta_ja")
    dev = design["devices"]["Q"]
    vcc, r1, r2 = 12.0, _part(design, "R1"), _part(design, "R2")
    rc, re = _part(design, "RC"), _part(design, "RE1") + _part(design, "RE2")
    vth, rth = vcc * r2 / (r1 + r2), r1 * r2 / (r1 + r2)
    vt = rm.thermal_voltage(25.0)
    i_s = dev["vbe_current"] * math.exp(-dev["vbe"] / vt)
    hfe = dev["hfe_typ"]

    def f(ic: float) -> float:
        ib = ic / hfe
        vce = vcc - ic * rc - (ic + ib) * re
        vbe = vt * math.log(ic / (i_s * (1 + vce / dev["early_voltage"])))
        return vth - ib * (rth + dev["r_bb"]) - vbe - (ic + ib) * re

    ic = brentq(f, 1e-6, 3e-3, xtol=1e-16)
    _, op = _nominal(design)
    assert op.transistors["Q1"].ic == pytest.approx(ic, rel=1e-8)
    assert op.supply_current == pytest.approx(ic + (vcc - op.voltages["b1"]) / r1, rel=1e-8)


def test_pnp_is_the_mirror_image_of_npn() -> None:
    # Contract section 2, "PNP is the mirror image": swapping supply and ground rails and
    # the polarity must give the same currents and V_pnp(n) = VCC - V_npn(n).
    pnp = ds.DESIGNS["ce_pnp"]
    npn = copy.deepcopy(pnp)
    swap = {"vcc": "0", "0": "vcc"}
    for p in npn["parts"]:
        if p["kind"] == "bjt":
            continue
        p["nodes"] = [swap.get(n, n) for n in p["nodes"]]
    npn["devices"]["Q"]["polarity"] = "npn"
    _, op_p = _nominal(pnp)
    cir_n, op_n = _nominal(npn)
    assert op_p.transistors["Q1"].ic == pytest.approx(op_n.transistors["Q1"].ic, rel=1e-9)
    assert op_p.supply_current == pytest.approx(op_n.supply_current, rel=1e-9)
    for node in ("b1", "c1", "e1", "e2"):
        assert op_p.voltages[node] == pytest.approx(9.0 - op_n.voltages[node], abs=1e-9)
    # AC: both rails are AC ground, so the responses are identical
    cir_p = rm.circuit_from_design(pnp)
    f = np.logspace(0, 8, 9)
    np.testing.assert_allclose(rm.gain(cir_p, op_p, f), rm.gain(cir_n, op_n, f), rtol=1e-9)


# ----------------------------------------------------------------------------- AC closed forms


@pytest.mark.parametrize("r_bb", [0.0, 120.0])
def test_degenerated_ce_gain_input_resistance_and_load_line(r_bb: float) -> None:
    # Sedra & Smith (from memory), CE with unbypassed RE1, ro -> inf:
    #   Rin(base) = rx + rpi + (hfe+1)*RE1,  vo/vb' chain  -> Av = -hfe*Rc'/Rin(base),
    #   overall gain = Av * Rin/(Rin + Rs) with Rin = RTH || Rin(base), Rc' = RC || RL.
    # Swing on the AC load line (design notes, common practice): cutoff IC*Rac, saturation
    # (VCE - VCEsat)/(1 + RE1/(alpha*Rac)) (alpha kept because ro -> inf makes it exact).
    design = _ce_closed_form_design(r_bb)
    cir, op = _nominal(design)
    t = op.transistors["Q1"]
    rc, re1 = _part(design, "RC"), _part(design, "RE1")
    r1, r2, rs, rl = _part(design, "R1"), _part(design, "R2"), 600.0, 10e3
    rth = r1 * r2 / (r1 + r2)
    rac = rc * rl / (rc + rl)
    rin_base = r_bb + t.rpi + (t.hfe + 1) * re1
    rin = rth * rin_base / (rth + rin_base)
    expected = -t.hfe * rac / rin_base * rin / (rin + rs)
    fm = 1e3
    assert complex(rm.gain(cir, op, [fm])[0]).real == pytest.approx(expected, rel=1e-5)
    assert abs(rm.input_impedance(cir, op, fm)) == pytest.approx(rin, rel=1e-5)
    # z_out with the load removed: RC (ro -> inf)
    assert abs(rm.output_impedance(cir, op, fm)) == pytest.approx(rc, rel=1e-5)
    alpha = t.hfe / (t.hfe + 1)
    a_cut = t.ic * rac
    a_sat = (t.vce - 0.2) / (1 + re1 / (alpha * rac))
    assert rm.swing_vpp(cir, op, fm) == pytest.approx(2 * min(a_cut, a_sat), rel=1e-5)


def test_emitter_follower_output_resistance() -> None:
    # Sedra & Smith (from memory): Rout = RE || (rpi + rx + Rs')/(hfe + 1), Rs' = Rs||R1||R2,
    # and gain = (hfe+1)*RE' / (rpi + rx + (hfe+1)*RE') times the input divider.
    design = copy.deepcopy(ds.DESIGNS["ef_npn"])
    for p in design["parts"]:
        if p["kind"] == "capacitor":
            p["value"] = 1.0
    design["load"]["capacitance"] = 0.0
    design["devices"]["Q"] = _ideal(design["devices"]["Q"])
    cir, op = _nominal(design)
    t = op.transistors["Q1"]
    r1, r2, re, rs, rl = _part(design, "R1"), _part(design, "R2"), 2.2e3, 2.2e3, 1e3
    rth = r1 * r2 / (r1 + r2)
    rs_eff = rs * rth / (rs + rth)
    rx = design["devices"]["Q"]["r_bb"]
    branch = (t.rpi + rx + rs_eff) / (t.hfe + 1)
    assert abs(rm.output_impedance(cir, op, 1e3)) == pytest.approx(
        re * branch / (re + branch), rel=1e-5)
    re_l = re * rl / (re + rl)
    rin_base = rx + t.rpi + (t.hfe + 1) * re_l
    rin = rth * rin_base / (rth + rin_base)
    expected = (t.hfe + 1) * re_l / rin_base * rin / (rin + rs)
    assert complex(rm.gain(cir, op, [1e3])[0]).real == pytest.approx(expected, rel=1e-5)


def _passive(rs: float, parts: list[dict[str, Any]], rl: float, cl: float) -> dict[str, Any]:
    """A transistor-free design (RC network) for first-order checks."""
    return {"format": "stagesynth-design-1", "ground": "0",
            "supply": {"node": "vcc", "voltage": 1.0}, "input": "in", "output": "out",
            "source": {"resistance": rs}, "load": {"resistance": rl, "capacitance": cl},
            "parts": parts, "devices": {}}


def test_rc_high_pass_and_low_pass_corners_match_python_control() -> None:
    # First-order RC sections (any textbook): fc = 1/(2 pi R C); the contract's corner is
    # 3.0 dB down, i.e. x = f/fc with x^2/(1+x^2) = 10^(-0.3) for the high-pass.
    # python-control gives the transfer functions' frequency responses independently.
    import control

    rs, c, rl = 1e3, 1e-6, 9e3  # high-pass: series C into the load
    hp = _passive(rs, [ds._c("C1", c, "in", "out")], rl, 0.0)
    an = rm.analyze(hp, (1.0, 1e8))  # fm = 10 kHz, far above fc = 15.9 Hz
    fc = 1 / (2 * math.pi * (rs + rl) * c)
    r2 = 10 ** (-0.3)
    assert an.f_low == pytest.approx(fc * math.sqrt(r2 / (1 - r2)), rel=1e-5)
    assert an.f_high == math.inf
    tau = (rs + rl) * c
    sys_hp = control.tf([rl * c, 0], [tau, 1])
    f = np.logspace(0, 4, 13)
    resp = control.frequency_response(sys_hp, 2 * np.pi * f)
    cir, op = _nominal(hp)
    np.testing.assert_allclose(rm.gain(cir, op, f), np.squeeze(resp.complex), rtol=1e-9)

    # low-pass: series R then the load capacitance; fc = 1/(2 pi (Rs+R)||RL * CL)
    r, cl = 4.7e3, 1e-9
    lp = _passive(rs, [ds._r("R1", r, "in", "out")], rl, cl)
    an = rm.analyze(lp, (1.0, 100.0))  # fm = 10 Hz, far below the pole
    rp = (rs + r) * rl / (rs + r + rl)
    k = rl / (rs + r + rl)
    fc = 1 / (2 * math.pi * rp * cl)
    assert an.f_high == pytest.approx(fc * math.sqrt((1 - r2) / r2), rel=1e-5)
    assert an.f_low == 0.0
    assert an.gain_db == pytest.approx(20 * math.log10(k), abs=1e-6)
    sys_lp = control.tf([k], [rp * cl, 1])
    f = np.logspace(3, 7, 13)
    resp = control.frequency_response(sys_lp, 2 * np.pi * f)
    cir, op = _nominal(lp)
    np.testing.assert_allclose(rm.gain(cir, op, f), np.squeeze(resp.complex), rtol=1e-9)
    assert abs(rm.output_impedance(cir, op, 10.0)) == pytest.approx(rs + r, rel=1e-9)


def test_full_ce_stage_against_scikit_rf_two_port_cascade() -> None:
    # scikit-rf as an independent network calculator: the hybrid-pi stage as a two-port
    # (intrinsic y-parameters, rx in series at the base, the emitter impedance added as a
    # series-series connection: Z_total = Z_q + Ze*[[1,1],[1,1]], Gray & Meyer from memory),
    # cascaded with the coupling capacitors, the bias divider, RC and the load.
    import skrf as rf

    design = ds.DESIGNS["ce_npn"]
    cir, op = _nominal(design)
    t = op.transistors["Q1"]
    f = np.logspace(0.5, 8.5, 41)
    w = 2 * np.pi * f
    freq = rf.Frequency.from_f(f, unit="hz")
    med = rf.media.DefinedGammaZ0(frequency=freq, z0=50.0)
    y = np.zeros((len(f), 2, 2), dtype=complex)
    y[:, 0, 0] = 1 / t.rpi + 1j * w * (t.cpi + t.cmu)
    y[:, 0, 1] = -1j * w * t.cmu
    y[:, 1, 0] = t.gm - 1j * w * t.cmu
    y[:, 1, 1] = 1 / t.ro + 1j * w * t.cmu
    z_q = np.linalg.inv(y)
    z_q[:, 0, 0] += t.rx
    re1, re2, ce = _part(design, "RE1"), _part(design, "RE2"), _part(design, "CE")
    ze = re1 + re2 / (1 + 1j * w * re2 * ce)
    z_q += ze[:, None, None] * np.ones((2, 2))
    stage = rf.Network(frequency=freq, s=rf.network.z2s(z_q, z0=50.0))
    r1, r2 = _part(design, "R1"), _part(design, "R2")
    rs, rl, cl = 600.0, 10e3, 100e-12
    chain = (med.resistor(rs) ** med.capacitor(_part(design, "C1"))
             ** med.shunt_resistor(r1 * r2 / (r1 + r2)) ** stage
             ** med.shunt_resistor(_part(design, "RC")) ** med.capacitor(_part(design, "C2"))
             ** med.shunt_resistor(rl) ** med.shunt_capacitor(cl))
    g_skrf = 1 / chain.a[:, 0, 0]  # output open: the load is inside the chain
    np.testing.assert_allclose(rm.gain(cir, op, f), g_skrf, rtol=1e-7)
    after_source = (med.capacitor(_part(design, "C1"))
                    ** med.shunt_resistor(r1 * r2 / (r1 + r2)) ** stage
                    ** med.shunt_resistor(_part(design, "RC")) ** med.capacitor(_part(design, "C2"))
                    ** med.shunt_resistor(rl) ** med.shunt_capacitor(cl))
    z_in_skrf = after_source.a[:, 0, 0] / after_source.a[:, 1, 0]
    z_in_ref = np.array([rm.input_impedance(cir, op, fi) for fi in f[::8]])
    np.testing.assert_allclose(z_in_ref, z_in_skrf[::8], rtol=1e-7)


def test_band_edges_are_3db_below_midband_and_bracket_it() -> None:
    # Contract section 2: the corners are where |gain| is 3 dB below its midband value.
    design = ds.DESIGNS["ce_ce_cap"]
    an = rm.analyze(design, (20.0, 2e4))
    cir = rm.circuit_from_design(design)
    g = np.abs(rm.gain(cir, an.nominal, [an.f_low, an.fm, an.f_high]))
    assert an.f_low < an.fm < an.f_high
    np.testing.assert_allclose(g[[0, 2]] / g[1], 10 ** (-3 / 20), rtol=1e-8)
    assert an.gain_db == pytest.approx(20 * math.log10(g[1]), abs=1e-9)


def test_corners_are_every_combination_and_deduplicated() -> None:
    # Contract section 2: hFE min/max x ambient min/max x supply +-tolerance.
    cir = rm.circuit_from_design(ds.DESIGNS["ce_npn"])
    full = rm.corner_conditions(cir, (0.0, 50.0), 0.05)
    assert len(full) == 8
    assert {(c.hfe_of("Q"), c.ambient, round(c.supply, 9)) for c in full} == {
        (h, t, v) for h in (100.0, 300.0) for t in (0.0, 50.0) for v in (11.4, 12.6)}
    assert len(rm.corner_conditions(cir, (25.0,), 0.0)) == 2
