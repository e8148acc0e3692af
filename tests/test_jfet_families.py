"""Junction-FET circuit families and the bias over the spread, against textbook closed forms.

Sources (quoted from memory): Sedra & Smith, *Microelectronic Circuits*, and Horowitz &
Hill, *The Art of Electronics*, the FET chapters: the square law ID = IDSS·(1 − VGS/VP)²,
gm = 2·IDSS/|VP|·(1 − VGS/VP), the self-bias point from the quadratic, the common-source
gain −gm·RD/(1 + gm·RS1) and the follower gain gm·R/(1 + gm·R) with ro → ∞, the
bootstrapped resistor RG/(1 − A). scipy's brentq solves the bias point independently.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.optimize import brentq

from stagesynth.contracts.jfet import JFET_PRESETS
from stagesynth.contracts.spec import Load, Parts, Requirements, Source, Spec, Supply
from stagesynth.engine.analysis import analyze
from stagesynth.engine.jfetbias import bias_point, gm_at, spread_points
from stagesynth.synthesis.topologies import (
    jfet_cascode,
    jfet_cs,
    jfet_cs_div,
    jfet_cs_ef,
    jfet_sf_boot,
)

# an ideal-ish N channel: no channel-length modulation, no capacitances worth the name,
# no leakage, no self-heating, no temperature drift (the textbook's device)
IDEAL = replace(JFET_PRESETS["generic-njfet"], early_voltage=1e12, c_gs=1e-18, c_gd=1e-18,
                i_gss=1e-18, theta_ja=None, idss_min=8e-3, idss_max=8e-3, vp=(-4.0, -4.0),
                vp_tempco=0.0, idss_tempco=0.0)


def _spec(device=IDEAL, *, gain=10.0, rl=1e9, f_low=10.0, f_high=1e4, vcc=20.0,
          ambient=(25.0, 25.0), source_c=None, rmax=1e9) -> Spec:
    return Spec(supply=Supply(vcc), load=Load(rl),
                require=Requirements(gain=gain, f_low=f_low, f_high=f_high, ambient=ambient),
                transistor=device, source=Source(0.0, source_c),
                parts=Parts(resistor_max=rmax), title="textbook check")


def test_self_bias_point_hand_example():
    # IDSS = 8 mA, VP = -4 V, RS = 1 kOhm: 8y^2 + 4y - 4 = 0 gives y = 1/2, so
    # ID = 2 mA and VGS = -2 V (the self-bias quadratic worked by hand; Sedra & Smith form)
    i_d, vgs = bias_point(8e-3, -4.0, 1e3)
    assert float(i_d) == pytest.approx(2e-3, rel=1e-12)
    assert float(vgs) == pytest.approx(-2.0, rel=1e-12)


@pytest.mark.parametrize("idss,vp,rs,vg", [(2e-3, -0.8, 6.2e3, 0.0), (12e-3, -3.0, 220.0, 0.0),
                                           (5e-3, -1.6, 27e3, 2.4), (24e-3, -1.6, 3.3e3, 0.7)])
def test_bias_point_against_brentq(idss, vp, rs, vg):
    # the line VGS = VG - ID*RS crossing the square law, found by scipy's brentq
    def f(x):  # x = VGS
        return (vg - x) / rs - idss * (1.0 - x / vp) ** 2

    x = brentq(f, vp, min(vg, 0.0))
    i_d, vgs = bias_point(idss, vp, rs, vg)
    assert float(vgs) == pytest.approx(x, rel=1e-9, abs=1e-12)
    assert float(i_d) == pytest.approx((vg - x) / rs, rel=1e-9)
    # gm = 2 IDSS/|VP| (1 - VGS/VP) (Sedra & Smith)
    assert float(gm_at(idss, vp, i_d)) == pytest.approx(
        2 * idss / abs(vp) * (1 - x / vp), rel=1e-9)


def test_engine_self_bias_point_within_a_tenth_of_a_percent():
    # the common-source family's netlist, solved by the engine's DC Newton, against the
    # textbook quadratic: ID = 2 mA at RS = 1 kOhm for IDSS = 8 mA, VP = -4 V
    spec = _spec()
    d = jfet_cs.build(spec, {"R1": 1e6, "R2": 3.3e3, "R3": 200.0, "R4": 800.0,
                             "C1": 1e-6, "C2": 10e-6, "C3": 100e-6})
    st = analyze(d, spec).nominal.transistors["J1"]
    assert st.ic == pytest.approx(2e-3, rel=1e-3)
    assert st.vgs == pytest.approx(-2.0, rel=1e-3)


def test_common_source_gain_closed_form():
    # -gm*RD/(1 + gm*RS1) with ro -> infinity (Sedra & Smith), RD = 3.3 kOhm, RS1 = 200 Ohm
    spec = _spec(f_low=1.0, f_high=1e3)
    d = jfet_cs.build(spec, {"R1": 1e6, "R2": 3.3e3, "R3": 200.0, "R4": 800.0,
                             "C1": 1e-3, "C2": 1e-3, "C3": 1e-1})
    a = analyze(d, spec)
    gm = 2 * 8e-3 / 4.0 * (1 - (-2.0) / (-4.0))  # 2 mS at VGS = -2 V
    expect = gm * 3.3e3 / (1 + gm * 200.0)
    assert abs(a.gain) == pytest.approx(expect, rel=3e-3)
    assert a.nominal.gain.real < 0  # the common source inverts


def test_divider_common_source_gain_and_point():
    # divider lifts the gate to VG = 4 V; RS = 3 kOhm: line VGS = 4 - 3k*ID; quadratic
    spec = _spec(f_low=1.0, f_high=1e3)
    d = jfet_cs_div.build(spec, {"R1": 4e6, "R2": 1e6, "R3": 1e6, "R4": 3.3e3, "R5": 330.0,
                                 "R6": 2.67e3, "C1": 1e-3, "C2": 1e-3, "C3": 1e-1})
    a = analyze(d, spec)
    i_d, _ = bias_point(8e-3, -4.0, 3e3, 4.0)
    st = a.nominal.transistors["J1"]
    assert st.ic == pytest.approx(float(i_d), rel=1e-3)
    gm = float(gm_at(8e-3, -4.0, i_d))
    assert abs(a.gain) == pytest.approx(gm * 3.3e3 / (1 + gm * 330.0), rel=3e-3)


def test_follower_gain_and_bootstrap():
    # source follower gain gm*R'/(1 + gm*R'), R' = RS || RL || RTH (Sedra & Smith); the
    # bootstrapped gate resistor looks like RG/(1 - A) (Horowitz & Hill)
    spec = _spec(rl=1e5, f_low=1.0, f_high=1e3)
    vals = {"R1": 3e6, "R2": 2e6, "R3": 10e6, "R4": 10e3, "C1": 1e-3, "C2": 1e-3, "C3": 1e-3}
    d = jfet_sf_boot.build(spec, vals)
    a = analyze(d, spec)
    st = a.nominal.transistors["J1"]
    gm = float(gm_at(8e-3, -4.0, st.ic))
    r_ac = 1.0 / (1 / 10e3 + 1 / 1e5 + 1 / 1.2e6)
    gain = gm * r_ac / (1 + gm * r_ac)
    assert abs(a.gain) == pytest.approx(gain, rel=3e-3)
    assert a.nominal.gain.real > 0  # a follower does not invert
    assert a.z_in == pytest.approx(10e6 / (1 - gain), rel=0.02)


def test_mixed_families_build_the_contract_parts():
    # the design file's parts: a jfet part (d, g, s) of device "J"; the bipolar stage a bjt
    # part of device "Q", the preset generic-npn without a companion (shared decisions)
    spec = _spec()
    for fam in (jfet_cs_ef, jfet_cascode):
        cut = fam.first_cut(spec)
        d = fam.build(spec, {k: float(v[0]) for k, v in cut.values.items()}
                      | {c: 1e-6 for c in fam.CAPACITORS})
        kinds = {p.ref: p.to_dict() for p in d.parts if p.kind in ("jfet", "bjt")}
        assert kinds["J1"]["kind"] == "jfet" and set(kinds["J1"]["nodes"]) == {"d", "g", "s"}
        assert kinds["Q1"]["kind"] == "bjt" and d.devices["Q"].name == "generic-npn"
        assert d.devices["J"] is IDEAL


def test_divider_line_narrows_the_spread():
    # Horowitz & Hill's argument for the steeper bias line: at the same nominal current the
    # divider line (VG = 3 V) holds the corner units' drain currents closer together than
    # plain self-bias does (a 5:1 IDSS spread, VP -0.8 ... -3 V)
    dev = replace(JFET_PRESETS["generic-njfet"], idss_min=2e-3, idss_max=10e-3, vp=(-0.8, -3.0))
    idss_n, vp_n = dev.unit(0.5)
    target = 0.3e-3
    vgs = vp_n * (1 - math.sqrt(target / idss_n))
    self_bias = spread_points(dev, (0.0, 85.0), -vgs / target, 0.0, 1e6)
    divider = spread_points(dev, (0.0, 85.0), (3.0 - vgs) / target, 3.0, 1e6)
    ratio_self = float(self_bias.id_high / self_bias.id_low)
    ratio_div = float(divider.id_high / divider.id_low)
    assert ratio_div < 0.5 * ratio_self
    # every corner unit on either line is where its own square law says (the crossing)
    for pts in (self_bias, divider):
        law = pts.idss * (1 - pts.vgs / pts.vp) ** 2
        assert np.allclose(pts.i_d, law, rtol=1e-9)


def test_gate_leakage_lifts_the_gate_at_the_hot_end():
    # i_gss doubles every 10 K and flows through RG: at 85 degC 10 pA * 2^6 = 640 pA, which
    # through 100 MOhm lifts the gate by 64 mV (contract: leakage out of the gate terminal)
    dev = replace(JFET_PRESETS["generic-njfet"], i_gss=10e-12)
    pts = spread_points(dev, (25.0, 85.0), 1e3, 0.0, 100e6)
    assert pts.vg[..., 1] == pytest.approx(np.full(2, 0.064), rel=1e-9)
    assert pts.vg[..., 0] == pytest.approx(np.full(2, 1e-3), rel=1e-9)
