"""The independent JFET reference (tests/independent/refjfet*.py) against outside sources.

Textbook closed forms, each source named beside its check: the square law, gm and the
self-bias quadratic (Sedra & Smith, the FET chapter; Horowitz & Hill, the FET chapter),
common-source and source-follower gains, channel thermal noise 4kT(2/3)gm (van der Ziel,
Noise in Solid State Devices and Circuits), gate shot noise 2qIG (Schottky), and the
first-order RC corner of a capacitive source into a resistive input. Tolerance 0.1 %.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path
from typing import Any

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from independent import jfetdesigns as jd
from independent import refjfet as rj
from independent import refjfetac as ra

K, Q = 1.380649e-23, 1.602176634e-19  # CODATA 2018, exact
IDSS, VP = 4e-3, -2.0


def ideal(**over: Any) -> dict[str, Any]:
    """A device without spread, capacitances or channel-length modulation (VA -> inf)."""
    return {"kind": "jfet", "polarity": "n", "idss": [IDSS, IDSS], "vp": [VP, VP],
            "early_voltage": 1e12, "c_gs": 0.0, "c_gd": 0.0, "i_gss": 1e-18,
            "flicker_corner": 0.0} | over


def run(design: dict[str, Any], **req: Any) -> ra.Analysis:
    """Reference analysis for a band (and spot) given as keywords."""
    return ra.analyze(design, {"require": {"f_low": 1.0, "f_high": 1e6} | req})


def self_bias_id(idss: float, vp: float, rs: float, vg: float = 0.0) -> float:
    """ID = IDSS*(1 - VGS/VP)^2 with VGS = VG - ID*RS: the smaller root of the quadratic
    IDSS*k^2*ID^2 - (2*IDSS*k*c + 1)*ID + IDSS*c^2 = 0, k = RS/|VP|, c = 1 + VG/|VP|
    (Sedra & Smith, FET chapter, self-bias; derivation from memory)."""
    k, c = rs / abs(vp), 1.0 + vg / abs(vp)
    b = 2.0 * idss * k * c + 1.0
    return (b - math.sqrt(b * b - 4.0 * idss**2 * k**2 * c**2)) / (2.0 * idss * k**2)


# ------------------------------------------------------------------------------ device law


def test_square_law_triode_cutoff_and_channel_resistance() -> None:
    # Sedra & Smith, FET chapter: saturation iD = IDSS(1 - vGS/VP)^2; triode
    # iD = IDSS[2(1 - vGS/VP)(vDS/-VP) - (vDS/VP)^2]; cutoff at vGS <= VP; near vDS = 0 the
    # channel is a resistor rDS = |VP| / (2 IDSS (1 - vGS/VP)).
    for vgs in (-1.5, -1.0, -0.3, 0.0):
        sat = IDSS * (1 - vgs / VP) ** 2
        assert rj.drain_law(IDSS, VP, 1e12, vgs, 8.0)[0] == pytest.approx(sat, rel=1e-3)
        vds = 0.5 * (vgs - VP)
        tri = IDSS * (2 * (1 - vgs / VP) * (vds / -VP) - (vds / VP) ** 2)
        assert rj.drain_law(IDSS, VP, 1e12, vgs, vds)[0] == pytest.approx(tri, rel=1e-3)
        rds = abs(VP) / (2 * IDSS * (1 - vgs / VP))
        assert 1e-6 / rj.drain_law(IDSS, VP, 1e12, vgs, 1e-6)[0] == pytest.approx(rds, rel=1e-3)
    assert rj.drain_law(IDSS, VP, 1e12, -2.5, 5.0) == (0.0, 0.0, 0.0)
    # the two laws meet at the saturation edge vDS = vGS - VP (Sedra & Smith)
    lo, hi = (rj.drain_law(IDSS, VP, 1e12, -1.0, 1.0 + s)[0] for s in (-1e-9, 1e-9))
    assert lo == pytest.approx(hi, rel=1e-6)


def test_gm_matches_horowitz_hill_form_and_early_output_resistance() -> None:
    # Horowitz & Hill, FET chapter: gm = 2 IDSS/|VP| (1 - VGS/VP) = gm0 sqrt(ID/IDSS);
    # Sedra & Smith: ro = (VA + VDS)/ID for iD proportional to (1 + vDS/VA) (from memory).
    for vgs in (-1.6, -0.8, -0.1):
        i, gm, gds = rj.drain_law(IDSS, VP, 1e12, vgs, 6.0)
        assert gm == pytest.approx(2 * IDSS / abs(VP) * math.sqrt(i / IDSS), rel=1e-3)
        i, gm, gds = rj.drain_law(IDSS, VP, 50.0, vgs, 6.0)
        assert 1 / gds == pytest.approx((50.0 + 6.0) / i, rel=1e-3)


def test_self_bias_point_is_the_textbook_quadratic_root() -> None:
    # A self-biased common source (gate returned to ground by RG, RS to ground, RD to the
    # supply) solved as a circuit against the quadratic's root (Sedra & Smith).
    for rs in (270.0, 1e3, 3.3e3):
        d = jd._design("self bias", 15.0, {"resistance": 0.0}, 1e15, 0.0, [
            jd._r("RG", 10e6, "in", "g1"), jd._r("RD", 1.5e3, "vdd", "d1"),
            jd._r("RS", rs, "s1", "0"), jd._c("C1", 1e-6, "in", "g1"),
            jd._j("J1", "d1", "g1", "s1")], {"J": ideal()})
        cir = rj.circuit_from_design(d)
        op = rj.solve_dc(cir, rj.nominal_conditions(cir))
        assert op.jfets["J1"].id == pytest.approx(self_bias_id(IDSS, VP, rs), rel=1e-3)
        assert op.jfets["J1"].vgs == pytest.approx(-op.jfets["J1"].id * rs, rel=1e-3)


def test_gate_leakage_doubles_per_10_kelvin_and_raises_the_gate() -> None:
    # Contract §2 and common practice (reverse junction current doubles every 10 K): an
    # N-channel gate leaks out through RG, lifting the gate by i_gss(Tj)*RG, and the bias
    # follows the quadratic with that gate voltage.
    dev = rj.jfet_from_dict(ideal(i_gss=10e-12))
    assert rj.i_gss_at(dev, 35.0) == pytest.approx(20e-12, rel=1e-12)
    assert rj.i_gss_at(dev, 85.0) == pytest.approx(640e-12, rel=1e-12)
    d = jd._design("leak", 15.0, {"resistance": 0.0}, 1e15, 0.0, [
        jd._r("RG", 1e9, "in", "g1"), jd._r("RD", 1.5e3, "vdd", "d1"),
        jd._r("RS", 1e3, "s1", "0"), jd._c("C1", 1e-6, "in", "g1"),
        jd._j("J1", "d1", "g1", "s1")], {"J": ideal(i_gss=10e-12, idss_tempco=0.0,
                                                     vp_tempco=0.0)})
    cir = rj.circuit_from_design(d)
    op = rj.solve_dc(cir, rj.Conditions((("J", 0.5),), (), 85.0, 15.0))
    vg = 640e-12 * 1e9
    assert op.voltages["g1"] == pytest.approx(vg, rel=1e-6)
    assert op.jfets["J1"].id == pytest.approx(self_bias_id(IDSS, VP, 1e3, vg), rel=1e-3)


def test_temperature_laws_pairing_and_self_heating() -> None:
    # Contract §2: IDSS and VP linear about 25 degC; the spread's nominal is the geometric
    # mean, its corners pair (idss min, vp nearest zero) and (idss max, vp farthest); Tj =
    # Ta + theta_ja*VDS*ID. Horowitz & Hill (FET chapter): with these tempcos the drain
    # current has a zero-temperature-coefficient bias some 0.6-0.7 V above pinch-off; from
    # the law, d ln ID/dT = a + 2b/x - 2b/|VP| = 0 at overdrive x = 2b/(2b/|VP| - a).
    dev = rj.jfet_from_dict(jd.GENERAL_NJFET)
    assert dev.unit(0.0) == (2e-3, 0.8) and dev.unit(1.0) == pytest.approx((10e-3, 3.0))
    assert dev.unit(0.5) == pytest.approx((math.sqrt(20e-6), math.sqrt(2.4)), rel=1e-12)
    assert rj.idss_at(2e-3, dev, 85.0) == pytest.approx(2e-3 * (1 - 0.006 * 60), rel=1e-12)
    assert rj.vp_at(0.8, dev, 85.0) == pytest.approx(-0.8 - 0.002 * 60, rel=1e-12)
    a, b, vp = -6e-3, 2e-3, 3.0
    x = 2 * b / (2 * b / vp - a)
    assert 0.5 < x < 0.7  # 0.67 V as |VP| grows; 0.55 V at |VP| = 3 V

    def ln_id(t: float) -> float:
        return math.log(rj.drain_law(rj.idss_at(10e-3, dev, t), rj.vp_at(vp, dev, t), 1e12,
                                     -vp + x, 5.0)[0])

    assert abs(ln_id(25.5) - ln_id(24.5)) < 1e-6
    cir = rj.circuit_from_design(jd.DESIGNS["cs_piezo"])
    conds = rj.corner_conditions(cir, (0.0, 85.0), 0.05)
    assert sorted(dict(c.spread)["J"] for c in conds) == [0.0] * 4 + [1.0] * 4
    for cond in conds[::3]:
        t = rj.solve_dc(cir, cond).jfets["J1"]
        assert t.tj - cond.ambient == pytest.approx(250.0 * t.vds * t.id, rel=1e-6)


# ------------------------------------------------------------------------------ AC


def test_common_source_gain_with_unbypassed_source_resistor() -> None:
    # Sedra & Smith, FET chapter: Av = -gm RD / (1 + gm RS1) with ro -> inf, RS2 bypassed,
    # gm from the self-bias quadratic (Horowitz & Hill's gm = gm0 sqrt(ID/IDSS)).
    rs1, rs2, rd = 220.0, 680.0, 3.3e3
    d = jd._design("cs", 15.0, {"resistance": 0.0}, 1e15, 0.0, [
        jd._r("RG", 1e6, "in", "0"), jd._r("RD", rd, "vdd", "out"),
        jd._r("RS1", rs1, "s1", "s2"), jd._r("RS2", rs2, "s2", "0"),
        jd._c("CS", 1.0, "s2", "0"), jd._j("J1", "out", "in", "s1")], {"J": ideal()})
    i = self_bias_id(IDSS, VP, rs1 + rs2)
    gm = 2 * IDSS / abs(VP) * math.sqrt(i / IDSS)
    an = run(d)
    assert 10 ** (an.nominal.gain_db / 20) == pytest.approx(gm * rd / (1 + gm * rs1), rel=1e-3)
    assert an.nominal.inverting


def test_source_follower_gain() -> None:
    # Sedra & Smith / Horowitz & Hill, FET chapter: Av = gm RS / (1 + gm RS), ro -> inf.
    rs = 2.2e3
    d = jd._design("sf", 15.0, {"resistance": 0.0}, 1e15, 0.0, [
        jd._r("RG", 1e6, "in", "0"), jd._r("RS", rs, "out", "0"),
        jd._j("J1", "vdd", "in", "out")], {"J": ideal()})
    gm = 2 * IDSS / abs(VP) * math.sqrt(self_bias_id(IDSS, VP, rs) / IDSS)
    an = run(d)
    assert 10 ** (an.nominal.gain_db / 20) == pytest.approx(gm * rs / (1 + gm * rs), rel=1e-3)
    assert not an.nominal.inverting


def test_capacitive_source_sets_first_order_low_corner() -> None:
    # First-order RC high-pass (any circuit text): a capacitance Cs in series with the EMF
    # into an input resistance Rin gives |H| = A x/sqrt(1 + x^2), x = f/fc, fc = 1/(2 pi Rin
    # Cs). A follower with no other low-frequency element: Rin = RG (c_gs = c_gd = 0). The
    # contract's corner is 3.0 dB below |H(f_mid)| (not 10 log10 2), solved in closed form.
    for rg, cs in ((100e6, 1e-9), (1e9, 300e-12), (10e6, 5e-9)):
        d = jd._design("piezo follower", 12.0, {"resistance": 0.0, "capacitance": cs}, 1e15,
                       0.0, [jd._r("RG", rg, "in", "0"), jd._r("RS", 2.2e3, "out", "0"),
                             jd._j("J1", "vdd", "in", "out")], {"J": ideal()})
        an = run(d, f_low=0.01, f_high=1e6)
        fc = 1 / (2 * math.pi * rg * cs)
        xm = math.sqrt(0.01 * 1e6) / fc
        r = 10 ** (-3 / 20) * xm / math.sqrt(1 + xm * xm)
        assert an.nominal.f_low == pytest.approx(fc * r / math.sqrt(1 - r * r), rel=1e-3)
        assert an.nominal.f_low == pytest.approx(fc, rel=3e-3)  # the textbook 1/(2 pi R C)
        assert an.nominal.z_in == pytest.approx(rg, rel=1e-3)


# ------------------------------------------------------------------------------ noise


def test_channel_thermal_noise_of_a_bypassed_common_source() -> None:
    # van der Ziel: channel thermal noise 4kT(2/3)gm (drain current, A^2/Hz); with the
    # source fully bypassed and an ideal source, input noise^2 = 4kT(2/3)/gm + 4kT/(gm^2 RD)
    # (the drain resistor referred through gain gm RD).
    rs, rd = 1e3, 3.3e3
    d = jd._design("cs noise", 15.0, {"resistance": 0.0}, 1e15, 0.0, [
        jd._r("RG", 1e9, "in", "0"), jd._r("RD", rd, "vdd", "out"),
        jd._r("RS", rs, "s1", "0"), jd._c("CS", 10.0, "s1", "0"),
        jd._j("J1", "out", "in", "s1")], {"J": ideal()})
    gm = 2 * IDSS / abs(VP) * math.sqrt(self_bias_id(IDSS, VP, rs) / IDSS)
    t = 298.15
    expect = math.sqrt(4 * K * t * (2 / 3) / gm + 4 * K * t / (gm**2 * rd))
    an = run(d, noise_at=1e3)
    assert an.nominal.noise == pytest.approx(expect, rel=1e-3)


def test_gate_shot_noise_into_a_high_source_resistance() -> None:
    # Schottky: gate current shot noise 2q IG; with source Rs and gate return RG in
    # parallel the gate sees (4kT/RG + 2q IG)(Rs||RG)^2, plus the channel term above; all
    # referred to the EMF through the divider RG/(Rs + RG).
    rs_src, rg, ig, rs, rd = 100e6, 100e6, 1e-9, 1e3, 3.3e3
    d = jd._design("gate noise", 15.0, {"resistance": rs_src}, 1e15, 0.0, [
        jd._r("RG", rg, "in", "0"), jd._r("RD", rd, "vdd", "out"), jd._r("RS", rs, "s1", "0"),
        jd._c("CS", 10.0, "s1", "0"), jd._j("J1", "out", "in", "s1")],
        {"J": ideal(i_gss=ig, vp_tempco=0.0, idss_tempco=0.0)})
    an = run(d, noise_at=1e3)
    t = 298.15
    vg = an.nominal.op.voltages["in"]
    i = self_bias_id(IDSS, VP, rs, vg)
    gm = 2 * IDSS / abs(VP) * math.sqrt(i / IDSS)
    par = rs_src * rg / (rs_src + rg)
    div = rg / (rs_src + rg)
    gate = (4 * K * t / rg + 2 * Q * ig) * par**2
    chan = 4 * K * t * (2 / 3) / gm + 4 * K * t / (gm**2 * rd)
    assert an.nominal.noise == pytest.approx(math.sqrt(gate + chan) / div, rel=1e-3)


# ------------------------------------------------------------------------------ distortion


def test_square_law_second_harmonic_is_v_over_4_vov() -> None:
    # Razavi / Sedra & Smith (square-law device, from memory): with iD = k(VOV + v)^2 the
    # drain current carries 2k VOV v + k v^2, so HD2 = V/(4 VOV) and no third harmonic, for a
    # common source with its source grounded (no bias shift under drive), driven at VGS = 0
    # by an ideal source, ro -> inf.
    from independent import refjfetthd as rt

    d = jd._design("cs thd", 15.0, {"resistance": 0.0}, 1e15, 0.0, [
        jd._r("RG", 1e9, "in", "0"), jd._r("RD", 2.2e3, "vdd", "out"),
        jd._j("J1", "out", "in", "0")], {"J": ideal()})
    cir = rj.circuit_from_design(d)
    op = rj.solve_dc(cir, rj.nominal_conditions(cir))
    res = rt.distortion(cir, op, 2.0, 1e3)
    assert res.hd2 == pytest.approx(res.emf / (4 * abs(VP)), rel=1e-3)
    assert res.hd3 < 1e-9


def test_p_channel_is_the_mirror_image() -> None:
    # Contract §2 "N-channel, P the mirror image": a P-channel stage built as the N-channel
    # one with supply and ground exchanged has every node at 12 V minus the N-channel node,
    # the same drain current, gain, input noise (gate leakage mirrored too).
    dev = {"early_voltage": 60.0, "c_gs": 8e-12, "c_gd": 3e-12, "i_gss": 1e-9,
           "theta_ja": 300.0, "flicker_corner": 100.0}
    n_dev = jd.GENERAL_NJFET | dev
    p_dev = jd.GENERAL_PJFET | dev

    def stage(dev: dict[str, Any], hi: str, lo: str) -> dict[str, Any]:
        return jd._design("mirror", 12.0, {"resistance": 1e3}, 47e3, 0.0, [
            jd._c("C1", 47e-9, "in", "g1"), jd._r("RG", 22e6, "g1", lo),
            jd._r("RS2", 680.0, lo, "s2"), jd._c("CS", 100e-6, lo, "s2"),
            jd._r("RS1", 330.0, "s2", "s1"), jd._r("RD", 2.7e3, "d1", hi),
            jd._c("C2", 2.2e-6, "d1", "out"), jd._j("J1", "d1", "g1", "s1")], {"J": dev})

    req = {"f_low": 20.0, "f_high": 2e4, "ambient": [0.0, 60.0], "noise_at": 1e3}
    an_n = ra.analyze(stage(n_dev, "vdd", "0"), {"require": req})
    an_p = ra.analyze(stage(p_dev, "0", "vdd"), {"require": req})
    for fn, fp in zip((an_n.nominal, *an_n.corners), (an_p.nominal, *an_p.corners),
                      strict=True):
        for node in ("g1", "s1", "s2", "d1"):
            assert fp.op.voltages[node] == pytest.approx(12.0 - fn.op.voltages[node], abs=1e-9)
        assert fp.op.jfets["J1"].id == pytest.approx(fn.op.jfets["J1"].id, rel=1e-9)
        assert fp.gain_db == pytest.approx(fn.gain_db, abs=1e-9)
        assert fp.noise == pytest.approx(fn.noise, rel=1e-9)


def test_second_harmonic_by_the_method_of_nonlinear_currents() -> None:
    # Wambacq & Sansen, Distortion Analysis of Analog Integrated Circuits (method of
    # nonlinear currents, from memory): at a small level the second harmonic is the linear
    # network's response at 2f to the drain current's second-order term,
    # I2 = K(1 + VDS/VA) Vgs^2/2 + K VOV Vgs Vds/VA with K = IDSS/VP^2 and Vgs, Vds the
    # fundamental phasors; c_gs and c_gd stay in that network. Against the collocation of
    # refjfetthd on the piezo preamp (1 nF source, 10 MOhm gate return).
    from independent import refjfetthd as rt

    d = jd.DESIGNS["cs_piezo"]
    cir = rj.circuit_from_design(d)
    op = rj.solve_dc(cir, rj.nominal_conditions(cir))
    net, t, j = ra.Network(cir, op), op.jfets["J1"], cir.jfets[0]
    f, vout = 1e3, 0.1
    s1 = net.emf([f])[0]
    scale = vout / abs(s1[net.idx[cir.output]])
    vgs = (s1[net.idx[j.g]] - s1[net.idx[j.s]]) * scale
    vds = (s1[net.idx[j.d]] - s1[net.idx[j.s]]) * scale
    k, va = t.idss / t.vp**2, cir.jdevices["J"].early_voltage
    i2 = k * (1 + t.vds / va) * vgs**2 / 2 + k * (t.vgs - t.vp) * vgs * vds / va
    s2 = net.solve([2 * f], load=True, source=True, fixed={cir.supply_node: 0.0},
                   inject={j.d: -i2, j.s: i2})
    hd2 = abs(s2[0, net.idx[cir.output]]) / vout
    assert rt.distortion(cir, op, 2 * vout, f).hd2 == pytest.approx(hd2, rel=1e-3)
