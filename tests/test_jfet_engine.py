"""The engine on junction-FET stages: bias point, gains, swing, noise and distortion.

Outside sources (each check names its own): the self-bias quadratic solved by sympy;
the common-source and source-follower gains, gm = 2·IDSS/|VP|·(1 − VGS/VP) (Sedra &
Smith, Microelectronic Circuits, FET chapter; Horowitz & Hill, The Art of Electronics,
FET chapter — from memory); channel noise 4kT·(2/3)·gm (van der Ziel, Noise in Solid
State Devices and Circuits, from memory) and shot noise 2qI (Schottky; CODATA q);
the square law's second harmonic v̂gs/(4·(VGS − VP)) (textbook power series, e.g.
Sedra & Smith, from memory). The device is the textbook one: no Early effect, no
capacitances, no tempcos, no leakage, unless a check says otherwise.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy as sp

from stagesynth.contracts.device import BOLTZMANN, ELEMENTARY_CHARGE
from stagesynth.contracts.jfet import Jfet
from stagesynth.contracts.netlist import design_from_dict
from stagesynth.engine.analysis import Environment, analyze
from stagesynth.engine.noise import spectrum
from stagesynth.engine.volterra import harmonics

IDSS, VP = 8e-3, -2.0
IDEAL = Jfet(polarity="n", idss_min=IDSS, idss_max=IDSS, vp=(VP, VP), c_gs=0.0, c_gd=0.0,
             early_voltage=1e15, i_gss=0.0, vp_tempco=0.0, idss_tempco=0.0)
ENV = Environment(band=(100.0, 1e4))
BIG = 1.0  # F: coupling and bypass capacitors that are shorts at midband


def _design(parts: list[dict], device: Jfet = IDEAL, *, rl: float = 1e6, rs: float = 0.0
            ) -> object:
    return design_from_dict({
        "format": "stagesynth-design-1", "title": "t", "ground": "0",
        "supply": {"node": "vdd", "voltage": 15.0}, "input": "in", "output": "out",
        "source": {"resistance": rs}, "load": {"resistance": rl},
        "parts": parts, "devices": {"J": device.to_design_dict()}}, "t.json")


def _r(ref, a, b, v):
    return {"ref": ref, "kind": "resistor", "value": v, "nodes": [a, b]}


def _c(ref, a, b, v=BIG):
    return {"ref": ref, "kind": "capacitor", "value": v, "nodes": [a, b]}


def _j(d, g, s):
    return {"ref": "J1", "kind": "jfet", "device": "J", "nodes": {"d": d, "g": g, "s": s}}


def common_source(rd=2200.0, rs1=100.0, rs2=900.0, polarity="n", device=IDEAL, **kw):
    """Self-biased common source: RG to ground, RS1 unbypassed, RS2 bypassed; a P channel
    is the mirror image (source and gate return toward the supply)."""
    top, bot = ("vdd", "0") if polarity == "n" else ("0", "vdd")
    parts = [_c("C1", "in", "g"), _r("RG", "g", bot, 1e6), _r("RD", top, "d", rd),
             _r("RS2", "s2", bot, rs2), _c("CS", "s2", bot), _c("C2", "d", "out"),
             _j("d", "g", "s")]
    parts.append(_r("RS1", "s", "s2", rs1) if rs1 > 0 else _r("RS1", "s", "s2", 1e-3))
    return _design(parts, device, **kw)


def _self_bias_id(rs: float) -> float:
    """ID = IDSS (1 + ID RS / VP)^2 with VGS = -ID RS, the root in saturation (sympy)."""
    i = sp.symbols("i", positive=True)
    roots = sp.solve(sp.Eq(i, IDSS * (1 + i * rs / VP) ** 2), i)
    good = [float(r) for r in roots if -float(r) * rs > VP]  # VGS above pinch-off
    assert len(good) == 1
    return good[0]


def test_self_bias_point_matches_the_quadratic() -> None:
    # Sedra & Smith / Horowitz & Hill (from memory): the self-bias line VGS = -ID RS
    # crosses the square law where ID = IDSS (1 + ID RS/VP)^2; solved by sympy
    a = analyze(common_source(rs1=100.0, rs2=900.0), environment=ENV)
    st = a.nominal.transistors["J1"]
    expect = _self_bias_id(1000.0)
    assert st.ic == pytest.approx(expect, rel=1e-3)
    assert st.vgs == pytest.approx(-expect * 1000.0, rel=1e-3)
    assert st.kind == "jfet" and st.region == "active" and a.all_active


def test_common_source_gain_with_unbypassed_source_resistor() -> None:
    # Sedra & Smith (from memory): A = -gm RD' / (1 + gm RS1), RD' = RD || RL, ro -> inf
    rd, rl, rs1 = 2200.0, 1e6, 100.0
    a = analyze(common_source(rd=rd, rs1=rs1, rl=rl), environment=ENV)
    i_d = _self_bias_id(1000.0)
    gm = 2.0 * math.sqrt(IDSS * i_d) / abs(VP)
    rdl = rd * rl / (rd + rl)
    assert abs(a.gain) == pytest.approx(gm * rdl / (1.0 + gm * rs1), rel=1e-3)
    assert a.inverting


def test_source_follower_gain() -> None:
    # Sedra & Smith (from memory): A = gm RS' / (1 + gm RS'), RS' = RS || RL
    rs, rl = 2200.0, 1e6
    d = _design([_c("C1", "in", "g"), _r("RG", "g", "0", 1e7), _r("RS", "s", "0", rs),
                 _c("C2", "s", "out"), _j("vdd", "g", "s")], rl=rl)
    a = analyze(d, environment=ENV)
    i_d = _self_bias_id(rs)
    gm = 2.0 * math.sqrt(IDSS * i_d) / abs(VP)
    rsl = rs * rl / (rs + rl)
    assert a.nominal.transistors["J1"].ic == pytest.approx(i_d, rel=1e-3)
    assert abs(a.gain) == pytest.approx(gm * rsl / (1 + gm * rsl), rel=1e-3)
    assert not a.inverting


def test_p_channel_is_the_mirror_image() -> None:
    # contract: P channel = mirror image; same magnitudes, same gain
    p_dev = Jfet(polarity="p", idss_min=IDSS, idss_max=IDSS, vp=(-VP, -VP), c_gs=0.0,
                 c_gd=0.0, early_voltage=1e15, i_gss=0.0, vp_tempco=0.0, idss_tempco=0.0)
    n = analyze(common_source(), environment=ENV)
    p = analyze(common_source(polarity="p", device=p_dev), environment=ENV)
    sn, spp = n.nominal.transistors["J1"], p.nominal.transistors["J1"]
    # (1e-4: the solver's 1 pS from every node to ground differs between the mirrors)
    assert spp.ic == pytest.approx(sn.ic, rel=1e-4)
    assert spp.vce == pytest.approx(sn.vce, rel=1e-4) and spp.vce > 0
    assert spp.vp == pytest.approx(-VP) and sn.vp == pytest.approx(VP)
    assert p.gain == pytest.approx(n.gain, rel=1e-4)


def test_swing_limits_cutoff_and_triode_edge_by_hand() -> None:
    # by hand from the small-signal model (Sedra & Smith load-line reasoning, from memory):
    # per volt at the load, |id| = 1/RD', and VDS - (VGS - VP) moves by
    # |v_ds - v_gs| = (1 + gm RS1 + gm RD')/(gm RD'); the swing is twice the smaller reach
    rd, rl, rs1 = 2200.0, 1e6, 100.0
    a = analyze(common_source(rd=rd, rs1=rs1, rl=rl), environment=ENV)
    st = a.nominal.transistors["J1"]
    gm = 2.0 * math.sqrt(IDSS * st.ic) / abs(VP)
    rdl = rd * rl / (rd + rl)
    cut = st.ic * rdl
    tri = (st.vce - (st.vgs - VP)) * gm * rdl / (1 + gm * rs1 + gm * rdl)
    assert a.nominal.swing_vpp == pytest.approx(2 * min(cut, tri), rel=1e-3)


def test_channel_and_gate_noise_generators() -> None:
    # van der Ziel (from memory): channel thermal noise 4kT (2/3) gm between drain and source;
    # with the source bypassed it reaches the load through RD' as 4kT (2/3) gm RD'^2.
    # Gate leakage: shot noise 2 q IG (Schottky), IG = i_gss at Tj
    dev = Jfet(polarity="n", idss_min=IDSS, idss_max=IDSS, vp=(VP, VP), c_gs=0.0, c_gd=0.0,
               early_voltage=1e15, i_gss=50e-12, vp_tempco=0.0, idss_tempco=0.0)
    rd, rl = 2200.0, 1e6
    a = analyze(common_source(rd=rd, rs1=0.0, device=dev, rl=rl), environment=ENV)
    fig = a.figures
    sp_ = spectrum(fig.system, fig.noise_sources, np.array([1e3]))
    labels = list(sp_.labels)
    st = a.nominal.transistors["J1"]
    gm = 2.0 * math.sqrt(IDSS * st.ic) / abs(VP)
    t = 25.0 + 273.15
    rdl = rd * rl / (rd + rl)
    channel = sp_.out_each[0, 0, labels.index("J1 channel")]
    assert channel == pytest.approx(4 * BOLTZMANN * t * (2 / 3) * gm * rdl**2, rel=1e-3)
    gate = fig.noise_sources.white[0, labels.index("J1 gate shot")]
    assert gate == pytest.approx(2 * ELEMENTARY_CHARGE * 50e-12, rel=1e-9)


def test_second_harmonic_of_the_square_law() -> None:
    # power series of ID = K (vov + vgs)^2 (textbook, e.g. Sedra & Smith, from memory):
    # HD2 = v̂gs / (4 vov) exactly, and no third harmonic, with the source grounded (a bias
    # that does not shift under drive), a resistive load and ro -> inf
    rd, rl = 1000.0, 1e6
    level = 2.0  # Vpp at the load
    env = Environment(band=(100.0, 1e4), thd_level=level, thd_at=1e3)
    d = _design([_c("C1", "in", "g"), _r("RG", "g", "0", 1e6), _r("RD", "vdd", "d", rd),
                 _c("C2", "d", "out"), _j("d", "g", "0")], rl=rl)
    a = analyze(d, environment=env)
    st = a.nominal.transistors["J1"]
    vgs_peak = (level / 2) / abs(a.gain)
    expect = vgs_peak / (4.0 * (st.vgs - VP))
    assert a.nominal.hd2 == pytest.approx(expect, rel=1e-3)
    assert a.nominal.hd3 < 1e-6 * a.nominal.hd2 + 1e-9
    fig = a.figures
    h2, h3, _, _ = harmonics(fig.system, fig.dc, 1e3, level / 2)  # the screening estimate
    assert float(h2[0]) == pytest.approx(expect, rel=1e-3)
    assert float(h3[0]) < 1e-6 * float(h2[0]) + 1e-9


def test_bias_stability_of_the_self_biased_fet() -> None:
    # differentiating the self-bias equation ID = IDSS (1 - ID RS/|VP|)^2 (Sedra & Smith,
    # from memory) by hand: S_IDSS = (dID/ID)/(dIDSS/IDSS) = 1/(1 + gm RS) and
    # dID/d|VP| = gm ID RS / (|VP| (1 + gm RS))
    from stagesynth.judging.jfet_stability import jfet_stability

    rs = 1000.0
    (f,) = jfet_stability(common_source(rs1=100.0, rs2=900.0), ENV)
    i_d = _self_bias_id(rs)
    gm = 2.0 * math.sqrt(IDSS * i_d) / abs(VP)
    assert f.id == pytest.approx(i_d, rel=1e-3)
    assert f.s_idss == pytest.approx(1.0 / (1.0 + gm * rs), rel=1e-3)
    assert f.s_vp == pytest.approx(gm * i_d * rs / (abs(VP) * (1.0 + gm * rs)), rel=1e-3)
    assert f.s_t == pytest.approx(0.0, abs=1e-12)  # the textbook device has no tempcos


def test_analyze_json_on_a_jfet_design_file(tmp_path) -> None:
    # the CLI end to end: contract §4 keys, per-transistor records with kind, and the
    # common-source gain -gm RD'/(1 + gm RS1) (Sedra & Smith, from memory)
    import json

    from typer.testing import CliRunner

    from stagesynth.cli import app

    rd, rl, rs1 = 2200.0, 1e6, 100.0
    path = tmp_path / "cs.json"
    data = json.loads(common_source(rd=rd, rs1=rs1, rl=rl).to_json())
    data["band"] = {"f_low": 100.0, "f_high": 1e4}
    path.write_text(json.dumps(data), encoding="utf-8")
    res = CliRunner().invoke(app, ["analyze", str(path), "--json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.output)
    i_d = _self_bias_id(1000.0)
    gm = 2.0 * math.sqrt(IDSS * i_d) / abs(VP)
    rdl = rd * rl / (rd + rl)
    assert 10 ** (out["gain_db"] / 20) == pytest.approx(gm * rdl / (1 + gm * rs1), rel=1e-3)
    rec = out["corners"][0]["transistors"]["J1"]
    assert rec["kind"] == "jfet" and rec["ic"] == pytest.approx(i_d, rel=1e-3)
    assert rec["vgs"] == pytest.approx(-i_d * 1000.0, rel=1e-3) and rec["active"]
    assert rec["vce"] == pytest.approx(15.0 - i_d * (rd + 1000.0), rel=1e-3)
