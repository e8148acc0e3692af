"""Noise analysis against the outside: Johnson–Nyquist, Nyquist's theorem, the textbook
two-generator model of a bipolar stage, and the noise-optimal current of the literature.

Sources: Johnson (1928) and Nyquist (1928), 4kTR with the CODATA 2018 Boltzmann constant;
Gray, Hurst, Lewis & Meyer, *Analysis and Design of Analog Integrated Circuits*, noise
chapter (equivalent input generators of a bipolar transistor, en² = 4kT(rx + 1/(2gm)),
in² = 2q·IB); Motchenbacher & Connelly, *Low-Noise Electronic System Design* (optimum
source resistance and noise-optimal collector current, from memory).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from conftest import TEST_NPN

from stagesynth.contracts.netlist import Design, Part
from stagesynth.engine.analysis import Environment, analyze, batch_values
from stagesynth.engine.circuit import compile_design
from stagesynth.engine.evaluate import Conditions, evaluate
from stagesynth.engine.noise import NoisePlan, spectrum

K_CODATA = 1.380649e-23  # J/K, CODATA 2018 (exact)
Q_CODATA = 1.602176634e-19  # C, CODATA 2018 (exact)
T0 = 290.0


def _r(ref, a, b, v):
    return Part(ref, "resistor", (a, b), v)


def _c(ref, a, b, v):
    return Part(ref, "capacitor", (a, b), v)


def _design(parts, *, rs, rl=1e12, cl=0.0, ambient=25.0, devices=None) -> Design:
    return Design(
        parts=tuple(parts), devices=devices or {}, supply_voltage=12.0,
        load_resistance=rl, source_resistance=rs, load_capacitance=cl, title="noise test",
        band=(10.0, 1e5),
        extra={"conditions": {"ambient": [ambient, ambient], "supply_tolerance": 0.0}},
    )


def _sweep(design: Design, freqs: np.ndarray, ambient: float | None = None):
    """Analysis at nominal and the spectrum of its first condition; with `ambient` that
    condition is the design at that ambient instead of the nominal 25 °C."""
    a = analyze(design)
    if ambient is None:
        fig = a.figures
    else:
        circuit = compile_design(design)
        r, c = batch_values(design, circuit)
        conds = Conditions(np.full((1, len(circuit.bjts)), 100.0), np.array([ambient]),
                           np.array([design.supply_voltage]))
        fig = evaluate(circuit, r, c, conds, source_resistance=design.source_resistance,
                       load_resistance=design.load_resistance,
                       load_capacitance=design.load_capacitance, band=(10.0, 1e5),
                       noise=NoisePlan())
    return a, spectrum(fig.nominal, fig.noise_sources.subset(np.array([0])), freqs[None, :])


def test_johnson_1k_at_290k_is_4nv():
    """1 kΩ at 290 K: sqrt(4kTR) = 4.0 nV/√Hz (Johnson–Nyquist, CODATA k)."""
    # a plain 1:1 path: the source resistance's own term, referred to the input
    d = _design([_r("R1", "in", "out", 1e-3)], rs=1e3, rl=1e9)
    _, sp = _sweep(d, np.array([1e3]))
    src = math.sqrt(sp.input_referred()[0, 0, -1])
    assert src == pytest.approx(4.0e-9, abs=0.005e-9)
    assert src == pytest.approx(math.sqrt(4 * K_CODATA * T0 * 1e3), rel=1e-6)
    # a stage resistor at an ambient of 290 K gives the same density, 4kTR of its own
    d = _design([_r("R1", "in", "out", 1e3)], rs=1e-6, rl=1e12)
    _, sp = _sweep(d, np.array([1e3]), ambient=T0 - 273.15)
    assert math.sqrt(sp.input_referred()[0, 0, 0]) == pytest.approx(
        math.sqrt(4 * K_CODATA * T0 * 1e3), rel=1e-6)


def test_resistive_network_output_noise_is_4kt_re_z():
    """Nyquist (1928): a passive RC network at one temperature shows 4kT·Re(Z) at a port.

    Every resistor (the source resistance included) at 290 K; the noiseless load of 1 TΩ
    leaves the port open. Z is worked out by hand with complex arithmetic of the ladder.
    """
    rs, r1, r2, r3, c1, c2 = 1.5e3, 2.2e3, 10e3, 4.7e3, 10e-9, 2.2e-9
    parts = [_r("R1", "in", "a", r1), _r("R2", "a", "0", r2), _c("C1", "a", "0", c1),
             _r("R3", "a", "out", r3), _c("C2", "out", "0", c2)]
    d = _design(parts, rs=rs, rl=1e12)
    freqs = np.geomspace(100.0, 1e6, 41)
    _, sp = _sweep(d, freqs, ambient=T0 - 273.15)
    s_out = sp.out_each[0].sum(axis=1)
    w = 2j * np.pi * freqs
    za = 1.0 / (1.0 / (rs + r1) + 1.0 / r2 + w * c1)
    z_port = 1.0 / (1.0 / (za + r3) + w * c2 + 1.0 / 1e12)
    assert np.allclose(s_out, 4 * K_CODATA * T0 * z_port.real, rtol=1e-6)


def _ce_bypassed(rs: float, device=TEST_NPN) -> Design:
    """CE on 30 V, emitter fully bypassed, IC about 100 µA, large collector resistor and a
    divider of about 4 MΩ (large against the source resistances of the checks)."""
    parts = [
        _r("R1", "vcc", "b1", 33e6), _r("R2", "b1", "0", 4.7e6), _r("R3", "vcc", "c1", 150e3),
        _r("R5", "e1", "0", 10e3), _c("C1", "in", "b1", 1e-3), _c("C2", "c1", "out", 1e-3),
        _c("C3", "e1", "0", 1.0), Part("Q1", "bjt", ("c1", "b1", "e1"), device="Q"),
    ]
    d = _design(parts, rs=rs, rl=100e3, devices={"Q": device})
    return replace(d, supply_voltage=30.0)


@pytest.mark.parametrize("rs", [1.0, 1e6])
def test_two_generator_model_at_extreme_source_resistances(rs):
    """Gray, Hurst, Lewis & Meyer: en² = 4kT(rx + 1/(2gm)), in² = 2q·IB; the transistor's
    input-referred density with a source Rs is en² + in²·Rs². At very low and very high
    Rs one generator dominates and the engine agrees within 1 %."""
    d = _ce_bypassed(rs)
    a, sp = _sweep(d, np.array([1e3]))
    q = a.nominal.transistors["Q1"]
    kt = K_CODATA * (q.tj + 273.15)
    gm = q.ic / (kt / Q_CODATA)
    en2 = 4 * kt * (TEST_NPN.r_bb + 1 / (2 * gm))
    in2 = 2 * Q_CODATA * q.ib
    mine = [i for i, o in enumerate(sp.owners) if o == "Q1"]
    exact = sp.input_referred()[0, 0, mine].sum()
    assert exact == pytest.approx(en2 + in2 * rs ** 2, rel=0.01)


def test_two_generator_model_differs_by_no_more_than_the_correlation_term():
    """In between, the textbook sum en² + in²·Rs² leaves out the correlation of en and in:
    the base shot noise flows through rx (part of en) and the collector shot noise appears
    in both. Its cross term 2·Rs·C, C = 2q·IB·(rx + 1/gm), is of order (1 + gm·rx)/√β of
    the total near the optimum (Gray, Hurst, Lewis & Meyer, noise chapter): the engine
    exceeds the textbook sum by no more than that term."""
    ratios, bounds = [], []
    for rs in np.geomspace(10.0, 3e4, 13):
        d = _ce_bypassed(float(rs))
        a, sp = _sweep(d, np.array([1e3]))
        q = a.nominal.transistors["Q1"]
        kt = K_CODATA * (q.tj + 273.15)
        gm = q.ic / (kt / Q_CODATA)
        rx = TEST_NPN.r_bb
        textbook = 4 * kt * (rx + 1 / (2 * gm)) + 2 * Q_CODATA * q.ib * rs ** 2
        correlation = 2 * rs * 2 * Q_CODATA * q.ib * (rx + 1 / gm)
        mine = [i for i, o in enumerate(sp.owners) if o == "Q1"]
        exact = sp.input_referred()[0, 0, mine].sum()
        ratios.append(exact / textbook - 1.0)
        bounds.append(correlation / textbook)
        # 2 %: the textbook's en also drops 2q·IB·rx² and the rx/rπ part of the collector
        # term, second-order pieces of the same simplification
        assert textbook * 0.99 <= exact <= (textbook + correlation) * 1.02
        beta = q.hfe
    assert max(bounds) <= (1 + gm * rx) / math.sqrt(beta)  # of order 1/√β
    assert max(ratios) >= 0.5 * max(bounds)  # and the correlation is really there


def test_figures_follow_the_contract_definitions():
    """noise = sqrt(S_amp)/|A|; NF = 10·log10(1 + S_amp/S_src); the source's own term
    referred to the input is 4k·T0·Rs (contract §2; Johnson–Nyquist)."""
    d = _ce_bypassed(600.0)
    a, sp = _sweep(d, np.array([a_f := 1e3]))
    env = Environment(band=(10.0, 1e5), noise_at=a_f)
    a = analyze(d, environment=env)
    ref = sp.input_referred()[0, 0]
    assert ref[-1] == pytest.approx(4 * K_CODATA * T0 * 600.0, rel=1e-9)
    assert a.noise == pytest.approx(math.sqrt(ref[:-1].sum()), rel=1e-9)
    assert a.noise_figure == pytest.approx(10 * math.log10(1 + ref[:-1].sum() / ref[-1]),
                                           rel=1e-9)


def test_band_rms_matches_dense_trapezoid():
    """noise_rms = sqrt(∫ S_amp df)/|A(f_mid)| over the band: the engine's Simpson grid
    against scipy's trapezoid on a grid a hundred times denser."""
    from scipy.integrate import trapezoid

    d = _ce_bypassed(600.0, replace(TEST_NPN, flicker_corner=2e3))
    d = d.with_values({"C1": 1e-6, "C3": 100e-6})  # corners inside the band
    env = Environment(band=(10.0, 1e5))
    a = analyze(d, environment=env)
    f = np.geomspace(10.0, 1e5, 20001)
    sp = spectrum(a.system, a.figures.noise_sources.subset(np.array([0])), f[None, :])
    g_mid = abs(a.gain)
    want = math.sqrt(trapezoid(sp.s_amp[0], f)) / g_mid
    assert a.noise_rms == pytest.approx(want, rel=1e-4)


def test_zero_source_resistance_density_without_noise_figure():
    """With Rs = 0 the density is defined (rx and the shot noise remain: en of the two-
    generator model) and the noise figure is not (no source noise to compare with)."""
    d = _ce_bypassed(0.0)
    a = analyze(d, environment=Environment(band=(10.0, 1e5), noise_at=1e3))
    q = a.nominal.transistors["Q1"]
    kt = K_CODATA * (q.tj + 273.15)
    gm = q.ic / (kt / Q_CODATA)
    en2 = 4 * kt * (TEST_NPN.r_bb + 1 / (2 * gm))
    assert a.noise_figure is None
    assert a.noise ** 2 == pytest.approx(en2, rel=0.03)  # plus RC and the base shot in rx
    assert a.noise ** 2 >= en2


def test_flicker_corner_raises_base_noise_below_it():
    """Base shot noise 2q·IB·(1 + fc/f) (contract §2; Schottky's shot noise, CODATA q): at
    f = fc/9 the in² term is (1 + 9)/(1 + fc/100 kHz) times its value at 100 kHz, and at
    100 kHz it is 2q·IB·(1 + fc/f) referred through Rs = 1 MΩ."""
    fc = 900.0
    dev = replace(TEST_NPN, flicker_corner=fc)
    d = _ce_bypassed(1e6, dev)
    a, sp = _sweep(d, np.array([fc / 9, 1e5]))
    base = sp.labels.index("Q1 base shot")
    ref = sp.input_referred()[0, :, base]
    assert ref[0] / ref[1] == pytest.approx((1 + 9.0) / (1 + fc / 1e5), rel=1e-6)
    ib = a.nominal.transistors["Q1"].ib
    # referred to the source EMF: a current into the input node is an EMF of i·Rs
    # (Norton's theorem), so in²·Rs²; the generator sits behind rx = 40 Ω and a 1 mF
    # coupling capacitor, which moves that by about 1e-4
    assert ref[1] == pytest.approx(2 * Q_CODATA * ib * (1 + fc / 1e5) * 1e6 ** 2, rel=1e-3)
