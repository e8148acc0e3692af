"""The second-release transistor model against outside sources.

- Cpi and fT against IC: the charge-control relation fT = gm / (2 pi (Cpi + Cmu)) with
  Cpi = gm*tauF + Cje (Gray, Hurst, Lewis & Meyer, device-model chapter; Sedra & Smith),
  measured on the engine's own small-signal network as the frequency where the
  short-circuit current gain falls to one.
- A saturated stage: VCE(sat) from the Ebers-Moll equations (Ebers & Moll, 1954; the
  closed form VCE(sat) = VT ln[(1 + (beta_forced + 1)/beta_R) / (1 - beta_forced/beta_F)],
  Sedra & Smith, BJT chapter, from memory) within 1 %.
- A cut-off stage (IC < 100 nA) is reported not active, with its real voltages.
- Worst-case judging: a gain window met at nominal but not at a corner fails, by the
  engine and by the independent reference (tests/independent/refmodel.py).
- A source capacitance in series with the EMF: engine against the independent reference.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np
import pytest
from independent import refmodel as rm

from stagesynth.contracts.device import Device, thermal_voltage
from stagesynth.contracts.netlist import Design, Part
from stagesynth.contracts.spec import Load, Requirements, Source, Spec, Supply
from stagesynth.engine.analysis import analyze
from stagesynth.judging.verdict import judge

# An invented transistor type with the charge-control data (no real part number).
FT_NPN = Device(
    name="cc-npn", polarity="npn", hfe_min=100.0, hfe_max=300.0, hfe_typ=180.0, vbe=0.65,
    ft=300e6, c_cb=3e-12, r_bb=0.0, early_voltage=1e9, ft_current=10e-3, c_je=8e-12,
)


def _r(ref: str, a: str, b: str, value: float) -> Part:
    return Part(ref, "resistor", (a, b), value)


def _fixed_bias(dev: Device, rb: float, rc: float, vcc: float = 12.0) -> Design:
    """Emitter grounded, base fed from the supply through RB, collector load RC."""
    return Design(
        parts=(
            _r("RB", "vcc", "b", rb),
            _r("RC", "vcc", "c", rc),
            Part("C1", "capacitor", ("in", "b"), 1e-6),
            Part("C2", "capacitor", ("c", "out"), 1e-6),
            Part("Q1", "bjt", ("c", "b", "0"), device="Q"),
        ),
        devices={"Q": dev},
        supply_voltage=vcc,
        load_resistance=1e6,
        source_resistance=1e3,
        band=(100.0, 10e3),
    )


# ----------------------------------------------------------------------------- fT against IC
def an_hfe(_ic: float) -> float:
    """hFE at 25 degC of the type (no self-heating: theta_ja is not given)."""
    return FT_NPN.hfe_typ
def _measured_ft(ic_target: float) -> tuple[float, float]:
    """(IC, frequency where |ic/ib| = 1) of a stage driven by a current source.

    The collector sits on 1 mOhm to the supply (AC ground: a short for the h21 of the
    definition) and is the output, so ic = -v_out / 1 mOhm; a 1 GOhm source makes the
    EMF a base current of v / 1 GOhm.
    """
    from scipy.optimize import brentq

    rb = (12.0 - 0.65) / (ic_target / FT_NPN.hfe_typ)
    d = Design(
        parts=(_r("RB", "vcc", "in", rb), _r("RC", "vcc", "out", 1e-3),
               Part("Q1", "bjt", ("out", "in", "0"), device="Q")),
        devices={"Q": FT_NPN}, supply_voltage=12.0, load_resistance=1e12,
        source_resistance=1e9, band=(1e3, 1e4),
    )
    an = analyze(d)
    ic = an.nominal.transistors["Q1"].ic

    def log_h21(lf: float) -> float:
        h = abs(complex(an.system.gain(np.array([10.0**lf]))[0, 0])) * 1e9 / 1e-3
        return math.log(h)

    return ic, 10.0 ** brentq(log_h21, 5.0, 10.5, xtol=1e-10)


@pytest.mark.parametrize("ic", [20e-6, 200e-6, 2e-3, 10e-3])
def test_ft_against_collector_current_follows_charge_control(ic: float) -> None:
    # Gray, Hurst, Lewis & Meyer (device models): 1/(2 pi fT) = tauF + (Cje + Cmu) VT / IC,
    # i.e. fT = gm / (2 pi (Cpi + Cmu)) with Cpi = gm tauF + Cje; tauF from fT at ft_current.
    ic_real, ft_measured = _measured_ft(ic)
    vt = float(thermal_voltage(25.0))
    tau_f = 1.0 / (2 * math.pi * FT_NPN.ft) - (FT_NPN.c_je + FT_NPN.c_cb) * vt / 10e-3
    gm = ic_real / vt
    c_total = gm * tau_f + FT_NPN.c_je + FT_NPN.c_cb
    ft_formula = gm / (2 * math.pi * c_total)
    # the hybrid-pi short-circuit current gain exactly (Gray & Meyer):
    # h21 = (gm - s Cmu) / (g_pi + s (Cpi + Cmu)), |h21| = 1 where
    # w^2 = (gm^2 - g_pi^2) / ((Cpi + Cmu)^2 - Cmu^2)
    g_pi = gm / an_hfe(ic_real)
    ft_exact = math.sqrt((gm**2 - g_pi**2) / (c_total**2 - FT_NPN.c_cb**2)) / (2 * math.pi)
    assert ft_measured == pytest.approx(ft_exact, rel=2e-3)
    # and the textbook approximation fT = gm / (2 pi (Cpi + Cmu)) (beta >> 1, Cmu << Cpi)
    assert ft_measured == pytest.approx(ft_formula, rel=0.05)
    if ic == 10e-3:
        # at the stated current the stated fT comes back
        assert ft_measured == pytest.approx(FT_NPN.ft, rel=0.03)
    if ic == 20e-6:
        # at low current the junction capacitance dominates: fT far below the stated one
        assert ft_measured < 0.15 * FT_NPN.ft


def test_cpi_agrees_with_the_independent_reference() -> None:
    # Contract section 2 (second release), written twice: stagesynth.contracts.device and refmodel.
    from stagesynth.contracts.device import c_pi_of

    ref_dev = rm.device_from_dict(FT_NPN.to_design_dict())
    for ic in (1e-6, 40e-6, 1e-3, 30e-3):
        gm = ic / float(thermal_voltage(25.0))
        assert float(c_pi_of(FT_NPN, gm)) == pytest.approx(rm.c_pi(ref_dev, gm), rel=1e-12)
    plain = replace(FT_NPN, ft_current=None)  # without ft_current: fT constant, as before
    gm = 4e-3 / float(thermal_voltage(25.0))
    assert float(c_pi_of(plain, gm)) == pytest.approx(gm / (2 * math.pi * 300e6) - 3e-12)


# ----------------------------------------------------------------------------- saturation
@pytest.mark.parametrize("beta_r", [1.0, 5.0])
def test_saturated_stage_matches_ebers_moll_closed_form(beta_r: float) -> None:
    dev = replace(FT_NPN, hfe_reverse=beta_r, theta_ja=None)
    d = _fixed_bias(dev, rb=22e3, rc=4.7e3)  # IB ~ 0.5 mA: about 50x what RC can take
    an = analyze(d)
    q = an.nominal.transistors["Q1"]
    v = an.nominal.node_voltages
    ib = (12.0 - v["b"]) / 22e3  # Kirchhoff at the base and collector nodes
    ic = (12.0 - v["c"]) / 4.7e3  # C2 is open at DC: RC carries IC alone
    forced = ic / ib
    beta_f = dev.hfe_typ
    vt = float(thermal_voltage(q.tj))
    # Ebers & Moll (1954), transport form: VCE(sat) closed form (Sedra & Smith, from memory)
    vce_sat = vt * math.log((1 + (forced + 1) / beta_r) / (1 - forced / beta_f))
    assert q.vce == pytest.approx(vce_sat, rel=0.01)
    assert q.ic == pytest.approx((12.0 - vce_sat) / 4.7e3, rel=0.01)
    assert 0.0 < q.vce < dev.vce_sat  # a physical saturated state, below VCE(sat) rating
    assert q.region == "saturated" and not q.active and q.power >= 0.0


def test_saturated_and_cut_off_stages_fail_through_the_cli(tmp_path) -> None:
    import subprocess
    import sys

    spec_text = """title = "check"
[supply]
voltage = "12 V"
[source]
resistance = "1 kΩ"
[load]
resistance = "1 MΩ"
[require]
gain = "20 dB"
f_low = "100 Hz"
f_high = "10 kHz"
[transistor]
preset = "generic-npn"
"""
    (tmp_path / "s.toml").write_text(spec_text, encoding="utf-8")
    sat = _fixed_bias(FT_NPN, rb=22e3, rc=4.7e3)
    # a divider holding the base near 0.38 V: IC ~ 1 mA * exp((0.38 - 0.65)/VT) ~ 30 nA
    cut = replace(sat, parts=(_r("RB", "vcc", "b", 10e6), _r("RB2", "b", "0", 330e3),
                              *sat.parts[1:]))
    cases = {"sat": sat, "cut": cut}
    for name, design in cases.items():
        path = tmp_path / f"{name}.json"
        path.write_text(design.to_json(), encoding="utf-8")
        res = subprocess.run([sys.executable, "-m", "stagesynth", "analyze", str(path),
                              "--spec", str(tmp_path / "s.toml"), "--json"],
                             capture_output=True, text=True, timeout=120)
        assert res.returncode == 1, res.stderr
        out = json.loads(res.stdout)
        assert out["meets_spec"] is False
        for point in (out["nominal"], *out["corners"]):
            t = point["transistors"]["Q1"]
            assert t["active"] is False and point["active"] is False
            assert t["power"] >= 0.0
            if name == "sat":  # real voltages: 0 < VCE < vce_sat, IC about VCC / RC
                assert t["region"] == "saturated"
                assert 0.0 < t["vce"] < 0.2 and 2.0e-3 < t["ic"] < 2.6e-3
            else:  # contract: below IC = 100 nA a transistor counts as cut off
                assert t["region"] == "cut off"
                assert 0.0 <= t["ic"] < 100e-9 and t["vce"] > 11.9
        active = next(c for c in out["checks"] if c["name"] == "active")
        assert active["ok"] is False


# ----------------------------------------------------------------------------- worst case
def _window_spec(target_db: float, tol_db: float) -> Spec:
    return Spec(
        supply=Supply(12.0, 0.1),
        source=Source(1e3),
        load=Load(1e6),
        require=Requirements(gain=10 ** (target_db / 20), f_low=100.0, f_high=10e3,
                             gain_tolerance_db=tol_db, ambient=(-20.0, 70.0)),
        transistor=FT_NPN,
    )


def test_gain_met_at_nominal_but_not_at_a_corner_fails() -> None:
    # Contract section 2, second release: the gain window holds at nominal AND every corner.
    from conftest import npn_ce

    design = replace(npn_ce(), band=(100.0, 10e3))
    ref = rm.analyze(json.loads(design.to_json()), (100.0, 10e3), (-20.0, 70.0), 0.1)
    spread = max(abs(c.gain_db - ref.gain_db) for c in ref.corners)
    assert spread > 0.05  # hFE, temperature and supply move the gain
    spec = _window_spec(ref.gain_db, 0.5 * spread)  # nominal dead centre, a corner outside
    ok, checks = rm.judge(ref, {"gain_db": ref.gain_db, "gain_tolerance_db": 0.5 * spread})
    assert not ok and not next(c for c in checks if c.name == "gain").ok
    verdict = judge(analyze(design, spec), spec)
    gain = verdict.check("gain")
    assert not gain.ok and not verdict.meets_spec
    assert gain.condition != "nominal" and gain.condition  # a corner decided it
    assert abs(gain.value - ref.gain_db) == pytest.approx(spread, abs=0.05)
    wide = _window_spec(ref.gain_db, 1.5 * spread)
    assert judge(analyze(design, wide), wide).check("gain").ok


# ----------------------------------------------------------------------------- source capacitance
def test_source_capacitance_against_the_reference() -> None:
    # Contract section 2 (second release): Cs in series with the EMF in the gain and z_out,
    # and no DC path through the source. Judged against the independent reference.
    from conftest import npn_ce

    base = replace(npn_ce(), band=(100.0, 10e3))
    parts = tuple(p for p in base.parts if p.ref != "C1")  # the source feeds the base directly
    parts = tuple(replace(p, nodes=("in", "0")) if p.ref == "R2" else p for p in parts)
    parts = tuple(replace(p, nodes=("vcc", "in")) if p.ref == "R1" else p for p in parts)
    parts = tuple(replace(p, nodes=("c1", "in", "e1")) if p.ref == "Q1" else p for p in parts)
    design = replace(base, parts=parts, source_capacitance=100e-9, source_resistance=2e3)
    data = json.loads(design.to_json())
    assert data["source"]["capacitance"] == pytest.approx(100e-9)
    ref = rm.analyze(data, (100.0, 10e3))
    an = analyze(design)
    assert an.gain_db == pytest.approx(ref.gain_db, abs=0.01)
    assert an.f_low == pytest.approx(ref.f_low, rel=0.01)
    assert an.z_out == pytest.approx(ref.z_out, rel=0.01)
    # DC: the capacitor blocks the source, so the bias is the divider's own
    no_cap = analyze(replace(design, source_capacitance=0.0))
    assert an.nominal.node_voltages["in"] > no_cap.nominal.node_voltages["in"] + 0.1
    assert an.nominal.node_voltages["in"] == pytest.approx(
        ref.nominal.voltages["in"], abs=1e-6)
    # the low corner moves up: 2 kOhm + 100 nF against the input resistance
    assert an.f_low > no_cap.f_low
