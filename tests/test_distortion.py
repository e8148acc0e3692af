"""Harmonic balance and the power-series estimate against textbook closed forms.

Sources: Gray, Hurst, Lewis & Meyer, *Analysis and Design of Analog Integrated
Circuits*, the chapter on nonlinear analysis (from memory): for a bipolar stage driven
by v̂·cos ωt across its base-emitter junction, HD2 = v̂/(4·VT) and HD3 = v̂²/(24·VT²) to
leading order, and local feedback of loop gain T = gm·RE divides HD2 at a given output
current amplitude by (1 + T). The coefficients 1/4 and 1/24 are re-derived here with
sympy (series expansion of the exponential), not taken on trust.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from conftest import ce_follower, npn_ce, pnp_ce

from stagesynth.contracts.device import Device, thermal_voltage
from stagesynth.contracts.netlist import Design, Part
from stagesynth.engine.analysis import analyze, batch_values
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.distortion import _dc_subset
from stagesynth.engine.harmonic import LargeSignal, solve_periodic
from stagesynth.engine.volterra import harmonics

# An idealized invented transistor: no base resistance, negligible Early effect and
# capacitances, large hFE, so the stage is the bare exponential of the closed forms.
IDEAL = Device(polarity="npn", hfe_min=1000.0, hfe_max=1000.0, hfe_typ=1000.0, vbe=0.65,
               ft=1e13, c_cb=1e-18, early_voltage=1e7, r_bb=0.0, name="ideal-test")


def _series_coefficients() -> tuple[sp.Expr, sp.Expr]:
    """HD2 and HD3 of exp(a·cos t) as series in a (a = v̂/VT), by sympy.

    cos t = (z + 1/z)/2; the k-th harmonic's amplitude is twice the z^k coefficient.
    """
    a, z = sp.symbols("a z", positive=True)
    f = sp.expand(sum((a * (z + 1 / z) / 2) ** n / sp.factorial(n) for n in range(8)))
    c = [2 * f.coeff(z, k) for k in (1, 2, 3)]
    hd2 = sp.series(c[1] / c[0], a, 0, 4).removeO()
    hd3 = sp.series(c[2] / c[0], a, 0, 4).removeO()
    return sp.expand(hd2), sp.expand(hd3)


def test_series_coefficients_by_sympy() -> None:
    """The textbook leading terms: HD2 = a/4, HD3 = a²/24 (next terms are O(a³), O(a⁴))."""
    a = sp.symbols("a", positive=True)
    hd2, hd3 = _series_coefficients()
    assert hd2.coeff(a, 1) == sp.Rational(1, 4) and hd2.coeff(a, 2) == 0
    assert hd3.coeff(a, 2) == sp.Rational(1, 24) and hd3.coeff(a, 1) == 0


def _ce(re1: float, re2: float) -> Design:
    """Common emitter with a stiff base drive (ideal source through 1 F), RE1 unbypassed."""
    parts = (
        Part("R1", "resistor", ("vcc", "b1"), 47e3),
        Part("R2", "resistor", ("b1", "0"), 10e3),
        Part("RC", "resistor", ("vcc", "c1"), 4.7e3),
        Part("RE1", "resistor", ("e1", "x1"), re1),
        Part("RE2", "resistor", ("x1", "0"), re2),
        Part("C1", "capacitor", ("in", "b1"), 1.0),
        Part("C2", "capacitor", ("c1", "out"), 1.0),
        Part("CE", "capacitor", ("x1", "0"), 1.0),
        Part("Q1", "bjt", ("c1", "b1", "e1"), device="Q"),
    )
    return Design(parts=parts, devices={"Q": IDEAL}, supply_voltage=12.0,
                  load_resistance=1e6, source_resistance=0.0, band=(100.0, 1e4))


def _nominal_model(design: Design) -> tuple[LargeSignal, object]:
    a = analyze(design)
    circuit = compile_design(design)
    r, c = batch_values(design, circuit)
    dc = _dc_subset(a.figures.dc, np.array([0]))
    model = LargeSignal(circuit, dc, r, c, design.source_resistance, design.load_resistance,
                        design.load_capacitance)
    return model, a


def test_undegenerated_stage_matches_power_series() -> None:
    """HD2 = v̂/(4VT), HD3 = v̂²/(24VT²) (Gray & Meyer, checked by sympy above) at v̂ = 0.5 mV."""
    model, a = _nominal_model(_ce(0.0 + 1e-6, 1.2e3))
    vt = float(thermal_voltage(a.nominal.transistors["Q1"].tj))
    vhat = 0.5e-3
    sol = solve_periodic(model, 1e3, emf=vhat)
    x = vhat / vt
    hd2_series, hd3_series = _series_coefficients()
    s = sp.symbols("a", positive=True)
    assert sol.converged[0]
    assert sol.hd2[0] == pytest.approx(x / 4, rel=5e-3)
    assert sol.hd3[0] == pytest.approx(x * x / 24, rel=5e-3)
    # with the next series terms the agreement is closer still
    assert sol.hd2[0] == pytest.approx(float(hd2_series.subs(s, x)), rel=2e-3)
    assert sol.hd3[0] == pytest.approx(float(hd3_series.subs(s, x)), rel=2e-3)


def test_local_feedback_divides_hd2_by_one_plus_gm_re() -> None:
    """Same collector-current amplitude: HD2 falls by (1 + gm·RE1) (Gray & Meyer, from memory)."""
    plain, a0 = _nominal_model(_ce(1e-6, 1.2e3))
    degen, a1 = _nominal_model(_ce(220.0, 1.2e3 - 220.0))
    level = 0.05  # V peak at the load: the same îc through the same RC‖RL
    h0 = solve_periodic(plain, 1e3, level=level)
    h1 = solve_periodic(degen, 1e3, level=level)
    t = a1.nominal.transistors["Q1"]
    vt = float(thermal_voltage(t.tj))
    alpha = t.hfe / (t.hfe + 1.0)
    loop = t.ic / vt * 220.0 / alpha  # gm·RE1 through the emitter current
    # bias is the same within the degenerated stage's extra VBE drop; compare at each IC
    ratio = (h0.hd2[0] / a0.nominal.transistors["Q1"].ic) / (h1.hd2[0] / t.ic)
    assert ratio == pytest.approx(1.0 + loop, rel=0.02)
    # the power-series estimate sees the same feedback
    e1 = harmonics(analyze(_ce(220.0, 980.0)).system, _dc_subset(a1.figures.dc, np.array([0])),
                   1e3, level)
    assert e1[0][0] == pytest.approx(h1.hd2[0], rel=0.01)


@pytest.mark.parametrize("builder", [npn_ce, pnp_ce, ce_follower])
def test_harmonic_count_convergence(builder) -> None:
    """Near the swing limit the result no longer moves when the harmonic count doubles."""
    model, a = _nominal_model(builder())
    level = 0.45 * a.figures.swing_vpp[0, 0]
    auto = solve_periodic(model, a.midband, level=level)
    fine = solve_periodic(model, a.midband, level=level, harmonics=64)
    assert auto.converged[0] and fine.converged[0]
    assert auto.thd[0] == pytest.approx(fine.thd[0], rel=1e-4)
    assert auto.hd3[0] == pytest.approx(fine.hd3[0], rel=1e-3)
    # the fundamental at the load is the requested level (secant search)
    assert auto.amplitude[0] == pytest.approx(level, rel=1e-6)


@pytest.mark.parametrize("builder", [npn_ce, pnp_ce, ce_follower])
def test_estimate_within_one_db_while_hd2_below_one_percent(builder) -> None:
    """The screening estimate agrees with harmonic balance within 1 dB (HD2 < 1 %)."""
    design = builder()
    model, a = _nominal_model(design)
    dc = _dc_subset(a.figures.dc, np.array([0]))
    for share in (0.02, 0.1, 0.3, 0.5):
        level = share * a.figures.swing_vpp[0, 0] / 2
        hb = solve_periodic(model, a.midband, level=level)
        if hb.hd2[0] >= 0.01:
            continue
        hd2, hd3, _, _ = harmonics(a.system, dc, a.midband, level)
        assert abs(20 * np.log10(hd2[0] / hb.hd2[0])) < 1.0
        assert abs(20 * np.log10(hd3[0] / hb.hd3[0])) < 1.0
