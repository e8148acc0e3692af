"""The stage as a python-control system and its pulse response, against outside judges.

Judges: python-control's own poles, zeros and `frequency_response` of the system we
return, compared with the AC analysis (ac.py) and the pole/zero map; the textbook
first-order forms (any control or circuits text, e.g. Sedra & Smith, "single-time-constant
networks", quoted from memory): a low-pass step settles to its DC gain with
10–90 % rise time ln(9)·τ ≈ 2.2·τ and 1 % settling ln(100)·τ ≈ 4.6·τ, no overshoot; a
high-pass passes a pulse of width T with tilt 1 − exp(−T/τ); and scikit-rf's S→Y
conversion of the two-port, terminated by the source and load by hand.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel as rm
from test_poles import DESIGNS, _match

import stagesynth as ss
from stagesynth.contracts.netlist import Design, Part
from stagesynth.engine.analysis import analyze
from stagesynth.engine.polezero import pole_zero_map

NAMES = sorted(DESIGNS)


@pytest.fixture(scope="module")
def cases():
    out = {}
    for name in NAMES:
        a = analyze(DESIGNS[name])
        out[name] = (a, ss.to_lti(a), pole_zero_map(a))
    return out


@pytest.mark.parametrize("name", NAMES)
def test_frequency_response_is_the_analysis_gain(name, cases):
    """python-control's frequency_response of to_lti = the AC analysis' gain, 1e-6 relative."""
    import control

    a, sys_, _ = cases[name]
    f = np.logspace(-1, 9, 71)
    theirs = np.asarray(control.frequency_response(sys_, 2 * math.pi * f).complex).ravel()
    ours = a.system.gain(f)[0]
    assert np.max(np.abs(theirs - ours) / np.abs(ours)) < 1e-6


def _clusters(roots: np.ndarray, rel: float = 1e-3) -> list[np.ndarray]:
    """Roots grouped where they lie within `rel` of each other (multiple roots)."""
    roots = roots[np.lexsort((roots.imag, np.abs(roots)))]
    groups: list[list[complex]] = []
    for r in roots:
        if groups and abs(r - groups[-1][-1]) <= rel * max(abs(r), 1e-300):
            groups[-1].append(r)
        else:
            groups.append([r])
    return [np.array(g) for g in groups]


@pytest.mark.parametrize("name", NAMES)
def test_poles_and_zeros_are_the_analysis_roots(name, cases):
    """python-control's poles and zeros of to_lti = the generalized eigenvalues, 1e-6.

    A k-fold (or nearly k-fold) root is ill-conditioned: numerically it spreads by about
    eps^(1/k) in any algorithm (Wilkinson, from memory), while the mean of the cluster
    stays well-conditioned. So zeros are compared cluster by cluster: the same count
    and the same mean; zeros at the origin (one per series coupling capacitor) by count.
    """
    import control

    a, sys_, pz = cases[name]
    poles = np.array([p.freq for p in pz.poles])
    assert _match(poles, control.poles(sys_) / (2 * math.pi), 1e-9 * a.midband) < 1e-6
    zeros = np.array([z.freq for z in pz.zeros])
    theirs = control.zeros(sys_) / (2 * math.pi)
    tiny = 1e-2 * min(p.magnitude for p in pz.poles)
    assert np.sum(np.abs(theirs) < tiny) == np.sum(np.abs(zeros) < tiny)
    big = 1e3 * max(p.magnitude for p in pz.poles)  # roots near infinity are ill-posed
    keep = lambda z: z[(np.abs(z) >= tiny) & (np.abs(z) < big)]  # noqa: E731
    ours_c, theirs_c = _clusters(keep(zeros)), _clusters(keep(theirs))
    assert [len(c) for c in ours_c] == [len(c) for c in theirs_c]
    for o, t in zip(ours_c, theirs_c, strict=True):
        assert abs(o.mean() - t.mean()) < 1e-6 * abs(o.mean())


def _single_pole() -> tuple[Design, float, float]:
    """A resistive divider into a capacitive load: one real pole (our own scenario)."""
    r1, rl, cl = 1e3, 9e3, 1e-9
    d = Design(parts=(Part("R1", "resistor", ("in", "out"), r1),), devices={},
               supply_voltage=5.0, load_resistance=rl, load_capacitance=cl)
    return d, rl / (r1 + rl), cl * r1 * rl / (r1 + rl)


def test_single_pole_step_matches_the_textbook():
    """Step of k/(1 + sτ): final value k, 10–90 % rise ln 9·τ (≈ 2.2τ), no overshoot."""
    import control

    d, k, tau = _single_pole()
    sys_ = ss.to_lti(d)
    t = np.linspace(0.0, 12 * tau, 24001)
    y = np.asarray(control.step_response(sys_, T=t).outputs).ravel()
    assert y[-1] == pytest.approx(k * (1 - math.exp(-12)), rel=1e-9)
    info = control.step_info(sys_, T=t, SettlingTimeThreshold=0.01,
                             RiseTimeLimits=(0.1, 0.9))
    assert info["RiseTime"] == pytest.approx(math.log(9) * tau, rel=1e-3)
    assert info["RiseTime"] == pytest.approx(2.2 * tau, rel=2e-3)  # the textbook's rounding
    p = ss.pulse_response(d)
    assert p.flat_top == pytest.approx(k, rel=1e-9)
    assert p.rise_time == pytest.approx(math.log(9) * tau, rel=1e-3)
    assert p.settling_time == pytest.approx(math.log(100) * tau, rel=1e-2)
    assert p.overshoot == 0.0
    assert p.tilt == pytest.approx(0.0, abs=1e-12)  # DC coupled: no droop


def test_high_pass_tilt_matches_the_textbook():
    """A coupling capacitor into a resistive load: tilt of a T pulse = 1 − exp(−T/τ)."""
    rs, c, rl = 1e3, 1e-6, 1e4
    d = Design(parts=(Part("C1", "capacitor", ("in", "out"), c),), devices={},
               supply_voltage=5.0, load_resistance=rl, source_resistance=rs,
               load_capacitance=1e-12)
    tau = c * (rs + rl)
    for width in (1e-4, 1e-3, 5e-3):
        p = ss.pulse_response(d, width)
        assert p.tilt == pytest.approx(1 - math.exp(-width / tau), rel=1e-4)
        assert p.flat_top == pytest.approx(rl / (rs + rl), rel=1e-5)


def test_two_port_terminated_by_hand_gives_the_same_gain(cases):
    """scikit-rf's Y of to_network, closed by the source and load: the to_lti gain.

    Two-port with source conductance Gs and load admittance YL (standard network
    algebra): v2/vs = −Gs·y21 / ((y11 + Gs)(y22 + YL) − y12·y21).
    """
    import control

    a, sys_, _ = cases["npn_ce"]
    d = a.design
    net = ss.to_network(a, f_start=10.0, f_stop=1e7, points=61)
    y = net.y  # scikit-rf's S -> Y conversion at its 50 ohm reference
    w = 2 * math.pi * net.f
    gs = 1.0 / d.source_resistance
    yl = 1.0 / d.load_resistance + 1j * w * d.load_capacitance
    av = -gs * y[:, 1, 0] / ((y[:, 0, 0] + gs) * (y[:, 1, 1] + yl) - y[:, 0, 1] * y[:, 1, 0])
    ref = np.asarray(control.frequency_response(sys_, w).complex).ravel()
    assert np.max(np.abs(av - ref) / np.abs(ref)) < 1e-6


def test_corner_condition_moves_the_gain(cases):
    """to_lti at a corner is that corner's linearized stage: python-control's response of
    it at midband is the gain the independent reference model (tests/independent/
    refmodel.py, written from the contract) finds at that corner's hFE, ambient and
    supply, within 0.01 dB; and the corners' gains differ (hFE moves IC and gm)."""
    import control

    a, _, _ = cases["npn_ce"]
    w = np.array([2 * math.pi * a.midband])
    cir = rm.circuit_from_design(json.loads(a.design.to_json()))
    gains = []
    for c in (a.nominal, *a.corners):
        cond = c.condition
        label = "nominal" if c is a.nominal else cond.label
        ours = complex(control.frequency_response(ss.to_lti(a, condition=label), w)
                       .complex.ravel()[0])
        ref_cond = rm.Conditions(tuple(sorted(cond.hfe.items())), cond.ambient, cond.supply)
        op = rm.solve_dc(cir, ref_cond)
        theirs = complex(rm.gain(cir, op, [a.midband])[0])
        assert abs(20 * math.log10(abs(ours) / abs(theirs))) < 0.01, label
        gains.append(abs(ours))
    assert len(set(gains)) == len(gains)
    with pytest.raises(ss.StageError):
        ss.to_lti(a, condition="no such corner")


@pytest.mark.parametrize("name", ["npn_ce", "ce_follower", "pnp_ce"])
def test_short_pulse_tilt_is_the_sum_of_the_low_roots(name, cases):
    """For a pulse short against every low time constant, tilt ≈ T·(Σ|p| − Σ|z|) over the
    low-frequency poles and zeros (rad/s): the tilts of the coupling and bypass networks
    add (Millman & Halkias, *Integrated Electronics*, pulse response of an RC-coupled
    stage, from memory; it is the initial slope lim s·(H(s) − 1) of a step's top)."""
    a, _, pz = cases[name]
    lows_p = [p.magnitude for p in pz.low_poles()]
    lows_z = [z.magnitude for z in pz.zeros if z.magnitude < pz.midband]
    rate = 2 * math.pi * (sum(lows_p) - sum(lows_z))
    width = 1e-3 / (2 * math.pi * max(lows_p))
    p = ss.pulse_response(a, width)
    assert p.tilt == pytest.approx(rate * width, rel=2e-3)  # second-order term ~ T·p/2
