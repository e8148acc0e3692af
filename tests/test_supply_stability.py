"""Supply rejection, peaking and stability against closed forms and python-control.

Sources: the first-order RC low-pass (any circuits textbook); the divider-biased common
emitter's small-signal hand analysis (Sedra & Smith, from memory); the emitter follower's
output impedance Zout = (Rs' + z_pi)/(beta(jw) + 1) (Gray, Hurst, Lewis & Meyer, and
Sedra & Smith, from memory) and the standard second-order peak Q/sqrt(1 - 1/(4Q^2));
python-control for the poles of an unstable two-stage loop.
"""

from __future__ import annotations

import math
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from conftest import TEST_NPN
from test_poles import state_space

from stagesynth.contracts.device import thermal_voltage
from stagesynth.contracts.netlist import Design, Part
from stagesynth.engine.analysis import analyze
from stagesynth.engine.polezero import pole_zero_map

# an ideal-ish transistor: no Early effect (ro -> infinity), no base resistance
IDEAL = replace(TEST_NPN, early_voltage=1e9, r_bb=0.0, hfe_min=150.0, hfe_max=150.0,
                hfe_typ=150.0, c_cb=1e-16, theta_ja=None)


def _r(ref, a, b, v):
    return Part(ref, "resistor", (a, b), v)


def _c(ref, a, b, v):
    return Part(ref, "capacitor", (a, b), v)


def _q(ref, c, b, e):
    return Part(ref, "bjt", (c, b, e), device="Q")


def test_rc_supply_filter_first_order():
    # First-order RC low-pass (any circuits textbook): |H| = 1/sqrt(1 + (wRC)^2).
    # A rail filter alone: R from the supply to the output, C to ground; the load is
    # 1 TOhm so it does not divide; the input only has a resistor to ground.
    r, c = 100.0, 470e-6
    d = Design(parts=(_r("R1", "vcc", "out", r), _c("C1", "out", "0", c),
                      _r("R2", "in", "0", 1e3)),
               devices={}, supply_voltage=12.0, load_resistance=1e12, source_resistance=50.0,
               band=(20.0, 20e3))
    a = analyze(d)
    f = np.array([1.0, 3.39, 50.0, 100.0, 120.0, 1e3])
    ours = np.abs(a.system.supply_gain(f[None, :])[0])
    hand = 1.0 / np.sqrt(1.0 + (2 * math.pi * f * r * c) ** 2)
    np.testing.assert_allclose(ours, hand, rtol=1e-6)
    assert math.isclose(a.nominal.supply_rejection,
                        10 * math.log10(1 + (2 * math.pi * 100.0 * r * c) ** 2), rel_tol=1e-6)


def test_divider_biased_ce_ripple_hand_formula():
    # Sedra & Smith small-signal analysis (from memory), ro -> infinity, capacitors
    # short at 100 Hz: the rail reaches the base through R1 against R2 || Rs, the stage
    # amplifies it (beta i_b into RC || RL), and the collector load passes the rail
    # straight to the output, divided by RC and RL:
    #   v_out/v_s = RL/(RC + RL) - beta * v_th / (R_th + r_pi + (beta+1) RE1) * (RC || RL)
    rs, r1, r2, rc, re1, re2, rl = 600.0, 47e3, 10e3, 3.9e3, 220.0, 680.0, 10e3
    parts = (_r("R1", "vcc", "b1", r1), _r("R2", "b1", "0", r2), _r("R3", "vcc", "c1", rc),
             _r("R4", "e1", "x1", re1), _r("R5", "x1", "0", re2),
             _c("C1", "in", "b1", 1.0), _c("C2", "c1", "out", 1.0), _c("C3", "x1", "0", 10.0),
             _q("Q1", "c1", "b1", "e1"))
    d = Design(parts=parts, devices={"Q": IDEAL}, supply_voltage=12.0, load_resistance=rl,
               source_resistance=rs, band=(20.0, 20e3))
    a = analyze(d)
    op = a.nominal.transistors["Q1"]
    vt = float(thermal_voltage(op.tj))
    beta = op.hfe
    rpi = beta * vt / op.ic
    rb_low = r2 * rs / (r2 + rs)
    k_div = rb_low / (r1 + rb_low)
    r_th = r1 * rb_low / (r1 + rb_low)
    i_c = beta * k_div / (r_th + rpi + (beta + 1) * re1)
    hand = rl / (rc + rl) - i_c * rc * rl / (rc + rl)
    ours = complex(a.system.supply_gain(np.array([[100.0]]))[0, 0])
    assert abs(ours.imag) < 0.01 * abs(ours.real)
    assert math.isclose(ours.real, hand, rel_tol=0.01), (ours, hand)
    assert math.isclose(a.nominal.supply_rejection, -20 * math.log10(abs(hand)), abs_tol=0.1)


def _follower(rs: float, cl: float, rl: float = 10e3) -> Design:
    """A divider-biased NPN follower with huge coupling capacitors into RL || CL."""
    parts = (_r("R1", "vcc", "b1", 220e3), _r("R2", "b1", "0", 220e3),
             _r("R3", "e1", "0", 4.7e3), _c("C1", "in", "b1", 1.0),
             _c("C2", "e1", "out", 1.0), _q("Q1", "vcc", "b1", "e1"))
    return Design(parts=parts, devices={"Q": IDEAL}, supply_voltage=12.0,
                  load_resistance=rl, source_resistance=rs, load_capacitance=cl,
                  band=(100.0, 100e3))


def _follower_model(a, rs: float):
    """(Rs', r_pi, C_pi, beta0) of the follower at its nominal point."""
    op = a.nominal.transistors["Q1"]
    vt = float(thermal_voltage(op.tj))
    gm = op.ic / vt
    beta0 = op.hfe
    rpi = beta0 / gm
    cpi = gm / (2 * math.pi * IDEAL.ft) - IDEAL.c_cb
    r_div = 110e3
    return rs * r_div / (rs + r_div), rpi, cpi, beta0


def test_follower_output_impedance_is_inductive():
    # Gray, Hurst, Lewis & Meyer; Sedra & Smith (from memory): a follower's output
    # impedance Zout = (Rs' + z_pi) / (beta(jw) + 1), z_pi = r_pi || C_pi,
    # beta(jw) = gm z_pi; it rises with frequency like an inductance toward Rs'.
    rs = 2e3
    a = analyze(_follower(rs, 0.0))
    rsp, rpi, cpi, beta0 = _follower_model(a, rs)
    gm = beta0 / rpi
    f = np.logspace(3, 7.5, 10)
    s = 2j * math.pi * f
    zpi = rpi / (1 + s * rpi * cpi)
    z_book = (rsp + zpi) / (gm * zpi + 1)
    z_book = z_book * 4.7e3 / (z_book + 4.7e3)  # the bias resistor RE in parallel
    ours = a.system.z_out(f[None, :])[0]
    np.testing.assert_allclose(np.abs(ours), np.abs(z_book), rtol=0.02)
    assert np.all(np.diff(np.abs(ours)[3:]) > 0)  # rising: inductive above the beta corner


def test_follower_peaking_into_capacitance_second_order():
    # The follower into CL: H = k / (1 + Zout(s) * Y_L(s)), exactly second order for
    # the hybrid-pi model; its poles give w0 and Q, and the standard second-order peak
    # |H|max/|H(0)| = Q / sqrt(1 - 1/(4 Q^2)) (any control textbook) must match the
    # engine's peaking within a few %.
    rs, cl, rl = 3e3, 100e-12, 1e6
    a = analyze(_follower(rs, cl, rl))
    rsp, rpi, cpi, beta0 = _follower_model(a, rs)
    gl = 1 / rl + 1 / 4.7e3
    # denominator (beta0 + 1 + s rpi Cpi) + (Rs' + rpi + s Rs' rpi Cpi)(G_L + s CL)
    num = np.polyadd(np.polymul([rsp * rpi * cpi, rsp + rpi], [cl, gl]), [rpi * cpi, beta0 + 1])
    poles = np.roots(num)
    p = poles[np.argmax(poles.imag)]
    q = abs(p) / (2 * abs(p.real))
    assert q > 1.0  # a real resonance in this case
    peak_book = 20 * math.log10(q / math.sqrt(1 - 1 / (4 * q * q)))
    # with huge coupling capacitors the midband gain is the second-order section's DC gain
    assert math.isclose(a.nominal.peaking_db, peak_book, rel_tol=0.03), (
        a.nominal.peaking_db, peak_book, q)
    f_book = abs(p) / (2 * math.pi) * math.sqrt(1 - 1 / (2 * q * q))
    assert math.isclose(a.nominal.peak_freq, f_book, rel_tol=0.05)
    # the engine's own pole table flags the same pair
    pz = pole_zero_map(a)
    ours = [r for r in pz.poles if r.freq.imag > 0 and r.q > 0.7]
    assert len(ours) == 1 and math.isclose(ours[0].q, q, rel_tol=0.03)


def _unstable_pair() -> Design:
    """Two common-emitter stages (each inverting): the second's collector fed back to the
    first's base through a capacitor closes a loop of gain ~ +100 (positive feedback)."""
    parts = (
        _r("R1", "vcc", "b1", 100e3), _r("R2", "b1", "0", 22e3), _r("R3", "vcc", "c1", 4.7e3),
        _r("R4", "e1", "0", 1e3), _c("C3", "e1", "0", 100e-6),
        _r("R5", "vcc", "b2", 100e3), _r("R6", "b2", "0", 22e3), _r("R7", "vcc", "out", 4.7e3),
        _r("R8", "e2", "0", 1e3), _c("C4", "e2", "0", 100e-6),
        _c("C1", "in", "b1", 1e-6), _c("C2", "c1", "b2", 1e-6),
        _r("R9", "out", "fb", 10e3), _c("C5", "fb", "b1", 10e-9),
        _q("Q1", "c1", "b1", "e1"), _q("Q2", "out", "b2", "e2"),
    )
    return Design(parts=parts, devices={"Q": TEST_NPN}, supply_voltage=12.0,
                  load_resistance=100e3, source_resistance=1e3, band=(100.0, 10e3))


def test_positive_feedback_is_unstable_and_python_control_agrees():
    # A loop with gain above one at a frequency where its phase is zero must have
    # right-half-plane poles; python-control's poles of the same state-space model
    # (built in test_poles.state_space from the nodal matrices) must agree.
    import control

    a = analyze(_unstable_pair())
    assert a.nominal.stable is False
    assert not any(c.stable for c in a.corners)
    ours = np.array([r.s for r in pole_zero_map(a).poles])
    rhp = ours[ours.real > 0]
    assert rhp.size >= 1
    theirs = np.asarray(control.poles(state_space(a)))
    theirs_rhp = theirs[theirs.real > 0]
    assert theirs_rhp.size == rhp.size
    for p in rhp:
        assert np.min(np.abs(theirs_rhp - p)) < 1e-4 * abs(p), (p, theirs_rhp)
    # the batched stability check agrees with the pole table
    from stagesynth.engine.peaking import stability

    st = stability(a.system, np.array([a.midband]))
    assert not bool(st.stable[0])
    found = st.poles_hz[0][st.rhp[0]] * 2 * math.pi
    for p in rhp:
        assert np.min(np.abs(found - p)) < 1e-6 * abs(p)
