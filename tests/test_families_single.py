"""Single-stage families: emitter follower, bootstrapped follower, common base, and the
common emitter with collector-feedback bias.

First each circuit against textbook closed forms in the limits where those are exact
(Early voltage huge, r_bb = 0, coupling capacitors huge, device capacitances tiny, no
self-heating): the small-signal figures then follow from the solver's own IC and hFE.
Then designs the synthesizer makes for our own invented scenarios (cable driver,
piezo buffer, 50-ohm front end, pedal gain stage), in NPN and PNP, are re-analysed from
their design files and judged both by stagesynth and by the independent reference model
(tests/independent/refmodel.py, written from the contract text alone).
"""

from __future__ import annotations

import json
import math
import sys
from functools import cache
from pathlib import Path
from typing import Any

import pytest

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.contracts.spec import Spec, spec_from_mapping
from stagesynth.engine.analysis import analyze
from stagesynth.judging.verdict import judge
from stagesynth.synthesis.synth import SynthesisResult, _remedied
from stagesynth.synthesis.topologies import ce_feedback, common_base, ef_bootstrap, emitter_follower

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel as rm

# CODATA 2018 exact values: VT = k T / q at 25 degC
K_BOLTZMANN = 1.380649e-23
Q_ELECTRON = 1.602176634e-19
VT25 = K_BOLTZMANN * (25.0 + 273.15) / Q_ELECTRON
BIG = 1.0  # farad: coupling and bypass capacitors are short circuits at midband

# An invented transistor in the limits where the textbook forms are exact.
IDEAL: dict[str, Any] = {
    "hfe": [100, 300], "hfe_typ": 200, "vbe": "0.65 V", "ft": 1e15, "c_cb": 1e-18,
    "early_voltage": 1e9, "r_bb": 0, "vce_sat": "0.2 V",
}
# Invented part types with a tenfold hFE spread (no real part number).
WIDE_NPN: dict[str, Any] = {
    "polarity": "npn", "hfe": [50, 500], "vbe": "0.65 V", "ft": "250 MHz", "c_cb": "4 pF",
    "r_bb": "40 Ω", "vce_sat": "0.2 V",
}
WIDE_PNP: dict[str, Any] = {**WIDE_NPN, "polarity": "pnp", "vbe": "0.66 V", "c_cb": "5 pF",
                            "vce_sat": "0.25 V", "ft": "200 MHz"}


def par(*rs: float) -> float:
    """Resistors in parallel."""
    return 1.0 / sum(1.0 / r for r in rs)


def make_spec(transistor: dict[str, Any], *, vcc: float = 12.0, tol: str = "0 %",
              rs: float = 0.0, rl: float = 10e3, cl: float = 0.0, **require: Any) -> Spec:
    """A spec from plain values (section 1 of the contract)."""
    req: dict[str, Any] = {"gain": "0 dB", "f_low": "10 Hz", "f_high": "100 kHz"}
    req.update(require)
    return spec_from_mapping({
        "title": "family check", "supply": {"voltage": vcc, "tolerance": tol},
        "source": {"resistance": rs}, "load": {"resistance": rl, "capacitance": cl},
        "require": req, "transistor": transistor,
    })


def feedback_ic(beta: float, vcc: float, vbe: float, rf: float, rc: float, re: float) -> float:
    """Collector-to-base feedback bias (Sedra & Smith 7th ed., BJT biasing, "biasing using
    a collector-to-base feedback resistor", from memory): KVL from the supply through RC,
    RF, the base-emitter junction and RE, with RC and RE both carrying IE = (beta + 1) IB,
    gives IC = beta (VCC - VBE) / (RF + (beta + 1)(RC + RE))."""
    return beta * (vcc - vbe) / (rf + (beta + 1) * (rc + re))


def ideal(polarity: str) -> dict[str, Any]:
    return {**IDEAL, "polarity": polarity}


POLARITIES = ("npn", "pnp")


# --------------------------------------------------------------------------- closed forms


@pytest.mark.parametrize("polarity", POLARITIES)
def test_follower_gain_and_impedances(polarity: str) -> None:
    """Sedra & Smith, emitter follower (from memory), exact for this ideal device:
    Rib = rpi + (beta + 1) R'E, R'E = RE || RL; A = Rin/(Rin + Rs) (beta + 1) R'E / Rib with
    Rin = RTH || Rib; Rout = RE || (rpi + Rs || RTH)/(beta + 1)."""
    rs, rl = 1e3, 10e3
    spec = make_spec(ideal(polarity), rs=rs, rl=rl)
    r1, r2, re = 47e3, 56e3, 2.2e3
    an = analyze(emitter_follower.build(spec, {"R1": r1, "R2": r2, "R3": re,
                                               "C1": BIG, "C2": BIG}), spec)
    q = an.nominal.transistors["Q1"]
    beta = q.hfe
    rpi = beta * VT25 / q.ic
    rth, rep = par(r1, r2), par(re, rl)
    rib = rpi + (beta + 1) * rep
    rin = par(rth, rib)
    assert abs(an.gain) == pytest.approx(rin / (rin + rs) * (beta + 1) * rep / rib, rel=1e-3)
    assert abs(an.gain) < 1.0  # a follower's voltage gain is below unity
    assert not an.inverting
    assert an.z_in == pytest.approx(rin, rel=1e-3)
    assert an.z_out == pytest.approx(par(re, (rpi + par(rs, rth)) / (beta + 1)), rel=1e-3)


@pytest.mark.parametrize("polarity", POLARITIES)
def test_bootstrapped_input_impedance(polarity: str) -> None:
    """Horowitz & Hill, bootstrapping (from memory): a resistor whose far end is driven with
    the signal times A looks like R/(1 - A). Here R3 sits between base and the divider
    midpoint, which C3 ties to the emitter (base-to-emitter gain Ae), and RTH now loads the
    emitter: z_in = [R3/(1 - Ae)] || (rpi + (beta + 1) R'E), R'E = RE || RTH || RL
    (the neglected R3 current into the emitter is a rpi/((beta + 1) R3) ~ 2e-4 effect).
    The plain divider-biased follower with the same divider and RE sits far below."""
    rs, rl = 1e3, 10e3
    spec = make_spec(ideal(polarity), rs=rs, rl=rl)
    r1, r2, r3, re = 100e3, 100e3, 100e3, 4.7e3
    boot = analyze(ef_bootstrap.build(spec, {"R1": r1, "R2": r2, "R3": r3, "R4": re,
                                             "C1": BIG, "C2": BIG, "C3": BIG}), spec)
    q = boot.nominal.transistors["Q1"]
    beta = q.hfe
    rpi = beta * VT25 / q.ic
    rth = par(r1, r2)
    rep = par(re, rth, rl)
    rib = rpi + (beta + 1) * rep
    a_e = (beta + 1) * rep / rib
    assert boot.z_in == pytest.approx(par(r3 / (1 - a_e), rib), rel=2e-3)
    plain = analyze(emitter_follower.build(spec, {"R1": r1, "R2": r2, "R3": re,
                                                  "C1": BIG, "C2": BIG}), spec)
    assert plain.z_in < rth  # the divider caps the plain follower (z_in = RTH || Rib)
    assert boot.z_in > 10 * rth
    assert boot.z_in > 10 * plain.z_in


@pytest.mark.parametrize("polarity", POLARITIES)
def test_common_base_input_and_gain(polarity: str) -> None:
    """Sedra & Smith, common-base amplifier (from memory), exact for this ideal device:
    Rin = RE || re with re = alpha/gm = rpi/(beta + 1); the source drives Rin, the share
    RE/(RE + re) of its current enters the emitter and alpha of that reaches Rac:
    A = alpha Rac RE / ((RE + re)(Rs + RE || re)), non-inverting. For RE >> re this is the
    familiar alpha Rac / (Rs + RE || re)."""
    rs, rl = 50.0, 10e3
    spec = make_spec(ideal(polarity), rs=rs, rl=rl, f_low="1 kHz", f_high="1 MHz")
    r1, r2, rc, re = 47e3, 15e3, 4.7e3, 2.2e3
    an = analyze(common_base.build(spec, {"R1": r1, "R2": r2, "R3": rc, "R4": re,
                                          "C1": BIG, "C2": BIG, "C3": BIG}), spec)
    q = an.nominal.transistors["Q1"]
    beta = q.hfe
    alpha = beta / (beta + 1)
    re_small = beta * VT25 / q.ic / (beta + 1)
    rac = par(rc, rl)
    exact = alpha * rac * re / ((re + re_small) * (rs + par(re, re_small)))
    assert an.z_in == pytest.approx(par(re, re_small), rel=1e-3)
    assert abs(an.gain) == pytest.approx(exact, rel=1e-3)
    assert abs(an.gain) == pytest.approx(alpha * rac / (rs + par(re, re_small)),
                                         rel=2 * re_small / re)
    assert not an.inverting


@pytest.mark.parametrize("polarity", POLARITIES)
def test_collector_feedback_bias_point(polarity: str) -> None:
    """Sedra & Smith, collector-to-base feedback bias (from memory): with RF from collector
    to base and RC, RE both carrying IE = (beta + 1) IB,
    IC = beta (VCC - VBE) / (RF + (beta + 1)(RC + RE)), exact at every corner with the
    solver's own VBE and hFE. With RF's midpoint decoupled the midband gain is the plain
    degenerated CE's (Sedra & Smith): A = -Rin/(Rin + Rs) beta Rac / (rpi + (beta+1) RE1),
    Rac = RC || RL || R1, Rin = R2 || (rpi + (beta + 1) RE1)."""
    rs, rl = 1e3, 47e3
    spec = make_spec(ideal(polarity), rs=rs, rl=rl, tol="10 %", ambient=["0 °C", "50 °C"])
    vals = {"R1": 100e3, "R2": 120e3, "R3": 4.7e3, "R4": 100.0, "R5": 1e3,
            "C1": BIG, "C2": BIG, "C3": BIG, "C4": BIG}
    an = analyze(ce_feedback.build(spec, vals), spec)
    rf = vals["R1"] + vals["R2"]
    r_e = vals["R4"] + vals["R5"]
    assert len(an.corners) == 8
    for point in (an.nominal, *an.corners):
        q = point.transistors["Q1"]
        expect = feedback_ic(q.hfe, point.condition.supply, q.vbe, rf, vals["R3"], r_e)
        assert q.ic == pytest.approx(float(expect), rel=1e-5)
    q = an.nominal.transistors["Q1"]
    beta = q.hfe
    rpi = beta * VT25 / q.ic
    rin = par(vals["R2"], rpi + (beta + 1) * vals["R4"])
    rac = par(vals["R3"], rl, vals["R1"])
    gain = rin / (rin + rs) * beta * rac / (rpi + (beta + 1) * vals["R4"])
    assert abs(an.gain) == pytest.approx(gain, rel=1e-3)
    assert an.inverting


# --------------------------------------------------------------------------- prechecks


@pytest.mark.parametrize("family", [emitter_follower, ef_bootstrap])
def test_follower_precheck(family) -> None:
    """A follower's gain is below unity and it never inverts (Sedra & Smith, from memory):
    +3 dB and inverting = "yes" are refused outright, -1 dB is left to the search."""
    up = family.precheck(make_spec(ideal("npn"), gain="3 dB", inverting="yes"))
    names = {c.name: c for c in up}
    assert set(names) == {"gain", "inverting"}
    assert "a follower's voltage gain is below unity" in names["gain"].best
    assert family.precheck(make_spec(ideal("npn"), gain="-1 dB", inverting="no")) == []


def test_common_base_input_bound_orders_but_never_refuses() -> None:
    """A common-base input is about RE || re, re = VT/IC (Sedra & Smith, from memory). The
    bound at the smallest bias the family tries must lie above what that bias really gives
    (checked with the engine at IC ~ IC_MIN); it depends on the search's own IC_MIN, not on
    the model, so it only moves the family back in the search (`unlikely`) and the
    precheck refuses nothing for it."""
    spec = make_spec(ideal("npn"), rs=50.0, rl=10e3)
    bound = common_base.input_resistance_bound(spec)
    assert bound >= VT25 / common_base.IC_MIN
    vb = 12.0 * 15e3 / (47e3 + 15e3)
    re = (vb - 0.6) / common_base.IC_MIN  # about IC_MIN through RE
    an = analyze(common_base.build(spec, {"R1": 47e3, "R2": 15e3, "R3": 100e3, "R4": re,
                                          "C1": BIG, "C2": BIG, "C3": BIG}), spec)
    assert an.nominal.transistors["Q1"].ic == pytest.approx(common_base.IC_MIN, rel=0.2)
    assert an.z_in < bound
    high = make_spec(ideal("npn"), rs=50.0, z_in="5 kΩ")
    assert [c.name for c in common_base.unlikely(high)] == ["z_in"]
    assert common_base.precheck(high) == []
    assert common_base.unlikely(make_spec(ideal("npn"), rs=50.0, z_in="40 Ω")) == []


def test_common_base_precheck_gain_and_sign() -> None:
    """Current gain alpha < 1 into Rac < RL: |A| < RL/Rs (here 46 dB); and never inverting."""
    blocked = common_base.precheck(make_spec(ideal("npn"), rs=50.0, rl=10e3, gain="50 dB",
                                             inverting="yes"))
    assert {c.name for c in blocked} == {"gain", "inverting"}


def test_feedback_ce_precheck() -> None:
    """A common-emitter stage always inverts (Sedra & Smith, from memory)."""
    blocked = ce_feedback.precheck(make_spec(ideal("npn"), gain="20 dB", inverting="no"))
    assert [c.name for c in blocked] == ["inverting"]


# --------------------------------------------------------------------------- synthesis

def _cable(polarity: str) -> dict[str, Any]:
    """Non-inverting cable driver: 12 V, 600-ohm source, 10 kOhm || 1 nF at the far end."""
    return {"supply": {"voltage": "12 V", "tolerance": "5 %"},
            "source": {"resistance": "600 Ω"},
            "load": {"resistance": "10 kΩ", "capacitance": "1 nF"},
            "require": {"gain": "-1 dB", "f_low": "20 Hz", "f_high": "200 kHz",
                        "z_out": "50 Ω", "swing": "4 Vpp", "inverting": "no",
                        "ambient": ["0 °C", "50 °C"]},
            "transistor": {"preset": f"generic-{polarity}"}}


def _piezo(polarity: str) -> dict[str, Any]:
    """Piezo-disc buffer needing 470 kOhm with a part type whose hFE spreads tenfold (judged
    at every corner since the second release: at hFE min, beta*(RE || RL) caps it near
    0.8 MOhm, so 1 MOhm is out of reach of any follower into this load)."""
    return {"supply": {"voltage": "12 V", "tolerance": "5 %"},
            "source": {"resistance": "10 kΩ"},
            "load": {"resistance": "22 kΩ", "capacitance": "100 pF"},
            "require": {"gain": "-1 dB", "f_low": "10 Hz", "f_high": "50 kHz",
                        "z_in": "470 kΩ", "swing": "4 Vpp", "inverting": "no",
                        "ambient": ["0 °C", "50 °C"]},
            "transistor": WIDE_NPN if polarity == "npn" else WIDE_PNP}


def _front_end(polarity: str) -> dict[str, Any]:
    """50-ohm front end of a pulse receiver: common base, z_in at least 35 Ohm (judged at
    every corner since the second release: re = VT/IC moves with the ambient and the supply,
    and 40 Ohm at the coldest, highest-current corner leaves too little current for 1 Vpp)."""
    return {"supply": {"voltage": "12 V", "tolerance": "5 %"},
            "source": {"resistance": "50 Ω"},
            "load": {"resistance": "10 kΩ", "capacitance": "10 pF"},
            # swing judged at f_high too (contract §2, second release): 10 pF at 5 MHz
            # nearly halves the load there, and z_in caps the current near 1 mA
            "require": {"gain": "20 dB", "f_low": "1 kHz", "f_high": "5 MHz",
                        "z_in": "35 Ω", "swing": "0.9 Vpp", "inverting": "no",
                        "ambient": ["0 °C", "50 °C"]},
            "transistor": {"preset": f"generic-{polarity}"}}


def _pedal(polarity: str) -> dict[str, Any]:
    """Battery pedal gain stage: 9 V +-10 %, 20 dB over the audio band."""
    return {"supply": {"voltage": "9 V", "tolerance": "10 %"},
            "source": {"resistance": "1 kΩ"},
            "load": {"resistance": "47 kΩ", "capacitance": "220 pF"},
            "require": {"gain": "20 dB", "f_low": "20 Hz", "f_high": "20 kHz",
                        "z_in": "10 kΩ", "swing": "2 Vpp", "ambient": ["0 °C", "50 °C"]},
            "transistor": {"preset": f"generic-{polarity}"}}


SCENARIOS = {
    "cable": (_cable, emitter_follower),
    "piezo": (_piezo, ef_bootstrap),
    "front_end": (_front_end, common_base),
    "pedal": (_pedal, ce_feedback),
}
CASES = [(name, pol) for name in SCENARIOS for pol in POLARITIES]


@cache
def synthesized(name: str, polarity: str) -> tuple[Spec, SynthesisResult]:
    make, family = SCENARIOS[name]
    spec = spec_from_mapping({"title": f"{name} ({polarity})", **make(polarity)})
    return spec, _remedied(spec, family, "margin")


def _reference_require(spec: Spec) -> dict[str, Any]:
    """The spec's requirements in the reference model's plain-dict form."""
    r = spec.require
    req: dict[str, Any] = {"gain_db": r.gain_db, "gain_tolerance_db": r.gain_tolerance_db,
                           "f_low": r.f_low, "f_high": r.f_high, "z_in": r.z_in,
                           "swing": r.swing_vpp, "inverting": r.inverting}
    if r.z_out is not None:
        req["z_out"] = r.z_out
    if r.supply_current is not None:
        req["supply_current"] = r.supply_current
    return req


@pytest.mark.parametrize(("name", "polarity"), CASES)
def test_synthesized_design_meets_its_spec(name: str, polarity: str) -> None:
    """The written design file, read back and analysed again, meets the spec by stagesynth's
    verdict and by the independent reference model (contract section 2)."""
    spec, res = synthesized(name, polarity)
    family = SCENARIOS[name][1]
    assert res.meets_spec, [(c.name, c.value) for c in res.verdict.failed]
    assert res.design.topology == f"{family.NAME}-{polarity}"
    design = design_from_dict(json.loads(res.design.to_json()))
    verdict = judge(analyze(design, spec), spec)
    assert verdict.meets_spec, [(c.name, c.value) for c in verdict.failed]
    r = spec.require
    ref = rm.analyze(design.to_dict(), (r.f_low, r.f_high), r.ambient, spec.supply.tolerance)
    ok, checks = rm.judge(ref, _reference_require(spec))
    assert ok, [c for c in checks if not c.ok]
    assert ref.gain_db == pytest.approx(res.analysis.gain_db, abs=0.05)


@pytest.mark.parametrize("polarity", POLARITIES)
def test_cable_driver_is_a_low_impedance_buffer(polarity: str) -> None:
    """Follower output impedance RE || (re + (Rs || RTH + r_bb)/(beta + 1)) (Sedra & Smith,
    from memory) in series with the output capacitor's reactance 1/(2 pi f C2) at midband:
    the synthesized driver's z_out is that at its own operating point, within 5 %."""
    spec, res = synthesized("cable", polarity)
    v = res.design.values()
    q = res.analysis.nominal.transistors["Q1"]
    dev = spec.transistor
    beta = q.hfe
    re_small = VT25 / q.ic * beta / (beta + 1)
    rth = par(v["R1"], v["R2"])
    side = (par(spec.source.resistance, rth) + dev.r_bb) / (beta + 1)
    emitter = par(v["R3"], re_small + side)
    cap = 1.0 / (2 * math.pi * res.analysis.midband * v["C2"])
    iso = sum(x for ref, x in v.items() if ref.startswith("RO"))  # isolating resistor
    assert res.analysis.z_out == pytest.approx(abs(complex(emitter + iso, -cap)), rel=0.05)
    assert res.analysis.z_out <= 50.0
    assert -2.0 <= res.analysis.gain_db < 0.0
    assert not res.analysis.inverting


@pytest.mark.parametrize("polarity", POLARITIES)
def test_piezo_buffer_is_bootstrapped_far_above_its_divider(polarity: str) -> None:
    """The bootstrap (Horowitz & Hill, from memory) lifts z_in far above RTH: here the
    synthesized buffer's z_in is at least three times its own divider's resistance
    (without the bootstrap it would lie below RTH, which is in parallel with the base)."""
    _, res = synthesized("piezo", polarity)
    v = res.design.values()
    assert res.analysis.z_in >= 1e6
    assert res.analysis.z_in > 3 * par(v["R1"], v["R2"])


@pytest.mark.parametrize("polarity", POLARITIES)
def test_front_end_input_follows_re(polarity: str) -> None:
    """Common-base input RE || re' with re' = re + r_bb/(beta + 1) (Sedra & Smith, from
    memory): the synthesized front end's z_in matches at its operating point within 5 %."""
    spec, res = synthesized("front_end", polarity)
    q = res.analysis.nominal.transistors["Q1"]
    beta = q.hfe
    re_small = VT25 / q.ic * beta / (beta + 1) + spec.transistor.r_bb / (beta + 1)
    assert res.analysis.z_in == pytest.approx(par(res.design.values()["R4"], re_small),
                                              rel=0.05)
    assert res.analysis.z_in >= 40.0
    assert not res.analysis.inverting


@pytest.mark.parametrize("polarity", POLARITIES)
def test_pedal_bias_follows_feedback_closed_form(polarity: str) -> None:
    """Collector-feedback bias (Sedra & Smith, from memory), r_bb in series with RF since
    it carries the same IB: IC = beta (VCC - VBE)/(RF + r_bb + (beta + 1)(RC + RE)) at every
    corner of the synthesized stage, with the solver's VBE, hFE(Tj) and supply."""
    spec, res = synthesized("pedal", polarity)
    v = res.design.values()
    rf = v["R1"] + v["R2"] + spec.transistor.r_bb
    r_e = v.get("R4", 0.0) + v["R5"]
    for point in (res.analysis.nominal, *res.analysis.corners):
        q = point.transistors["Q1"]
        expect = feedback_ic(q.hfe, point.condition.supply, q.vbe, rf, v["R3"], r_e)
        assert q.ic == pytest.approx(float(expect), rel=1e-4)
    assert res.analysis.inverting
    assert math.isclose(res.analysis.gain_db, 20.0, abs_tol=1.0)
