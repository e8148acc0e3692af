"""Noise of whole stages against textbook closed forms.

- Noise-optimal collector current and minimum noise figure of a bipolar input stage
  (Motchenbacher & Connelly, *Low-Noise Electronic System Design*, bipolar transistor
  chapter, from memory): with rx = 0 and white noise, IC_opt = VT·√β/Rs and
  F_min = 1 + 1/√β. The model's own correlation of en and in adds 1/β to F (the same
  collector shot noise appears in both generators), independent of IC.
- Cascade of two isolated stages (Friis, 1944): F = F1 + (F2 − 1)/G_a1, with F2 taken
  for a source equal to the first stage's output resistance and G_a1 the first stage's
  available power gain.
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

K = 1.380649e-23  # CODATA 2018
Q = 1.602176634e-19
T0 = 290.0
TA = T0 - 273.15  # every part at 290 K, so the noise figure's reference and the parts agree


def _r(ref, a, b, v):
    return Part(ref, "resistor", (a, b), v)


def _c(ref, a, b, v):
    return Part(ref, "capacitor", (a, b), v)


def _stage(tag: str, inp: str, out: str, values: dict[str, float]) -> list[Part]:
    """A common emitter with its emitter fully bypassed, between nodes inp and out."""
    b, c, e = f"b{tag}", f"c{tag}", f"e{tag}"
    return [
        _r(f"R1{tag}", "vcc", b, values["R1"]), _r(f"R2{tag}", b, "0", values["R2"]),
        _r(f"R3{tag}", "vcc", c, values["R3"]), _r(f"R5{tag}", e, "0", values["R5"]),
        _c(f"C1{tag}", inp, b, 1e-2), _c(f"C2{tag}", c, out, 1e-2), _c(f"C3{tag}", e, "0", 10.0),
        Part(f"Q{tag}", "bjt", (c, b, e), device="Q"),
    ]


def _design(parts, rs, rl, device) -> Design:
    return Design(parts=tuple(parts), devices={"Q": device}, supply_voltage=30.0,
                  load_resistance=rl, source_resistance=rs, load_capacitance=0.0,
                  title="noise closed forms", band=(10.0, 1e5),
                  extra={"conditions": {"ambient": [TA, TA], "supply_tolerance": 0.0}})


def _at_290k(design: Design, r_sets: np.ndarray, f: float):
    """Figures and the spectrum at f of K value sets of `design`, at an ambient of 290 K."""
    circuit = compile_design(design)
    _, c = batch_values(design, circuit)
    k = r_sets.shape[0]
    hfe = design.devices["Q"].hfe_nominal
    conds = Conditions(np.full((1, len(circuit.bjts)), hfe), np.array([TA]),
                       np.array([design.supply_voltage]))
    fig = evaluate(circuit, r_sets, np.repeat(c, k, axis=0), conds,
                   source_resistance=design.source_resistance,
                   load_resistance=design.load_resistance,
                   load_capacitance=design.load_capacitance, band=(10.0, 1e5),
                   noise=NoisePlan(at=f))
    return circuit, fig, spectrum(fig.nominal, fig.noise_sources, np.array([f]))


def test_noise_optimal_current_and_minimum_figure():
    """Sweep IC by the bypassed emitter resistor; the transistor's own noise figure is
    least at VT·√β/Rs (±10 %) and there equals 1 + 1/√β (+ the 1/β correlation term)."""
    ideal = replace(TEST_NPN, r_bb=0.0, theta_ja=None, ft=50e9, c_cb=1e-15,
                    early_voltage=1e4, flicker_corner=0.0)
    rs = 1e3
    d = _design(_stage("1", "in", "out", {"R1": 2e6, "R2": 220e3, "R3": 10e3, "R5": 5e3}),
                rs, 1e6, ideal)
    circuit = compile_design(d)
    refs = [ref for ref, _, _ in circuit.resistors]
    r0, _ = batch_values(d, circuit)
    ic_target = np.geomspace(50e-6, 3e-3, 121)
    r_sets = np.repeat(r0, ic_target.size, axis=0)
    r_sets[:, refs.index("R51")] = 1.9 / ic_target
    r_sets[:, refs.index("R31")] = 10.0 / ic_target
    _, fig, sp = _at_290k(d, r_sets, 1e3)
    mine = [i for i, o in enumerate(sp.owners) if o == "Q1"]
    s_q = sp.input_referred()[:, 0, mine].sum(axis=1)
    nf = 10 * np.log10(1 + s_q / (4 * K * T0 * rs))
    ic = fig.dc.ic[:, 0]
    beta = float(np.median(fig.dc.hfe[:, 0]))
    best = int(np.argmin(nf))
    assert 0 < best < ic.size - 1  # a true interior minimum
    vt = K * T0 / Q
    assert ic[best] == pytest.approx(vt * math.sqrt(beta) / rs, rel=0.10)
    textbook = 10 * math.log10(1 + 1 / math.sqrt(beta))
    with_correlation = 10 * math.log10(1 + 1 / math.sqrt(beta) + 1 / beta)
    assert textbook - 0.01 <= nf[best] <= with_correlation + 0.01


def test_two_isolated_stages_follow_friis():
    """F = F1 + (F2 − 1)/G_a1 (Friis, 1944) within 0.2 dB for two bypassed CE stages in
    cascade, each with its own divider, at 1 kHz and 290 K (the first stage of low gain,
    so that the second stage's noise shows)."""
    dev = replace(TEST_NPN, theta_ja=None)
    rs, rl, f = 600.0, 10e3, 1e3
    v1 = {"R1": 270e3, "R2": 39e3, "R3": 1e3, "R5": 30e3}  # IC ≈ 100 µA, a low gain
    v2 = {"R1": 150e3, "R2": 22e3, "R3": 6.8e3, "R5": 1.5e3}
    whole = _design(_stage("1", "in", "m", v1) + _stage("2", "m", "out", v2), rs, rl, dev)
    first = _design(_stage("1", "in", "out", v1), rs, 1e12, dev)  # open: its EMF Voc
    env = Environment(ambient=(TA, TA), band=(10.0, 1e5), noise_at=f)

    def nf_of(design: Design) -> tuple[float, object]:
        circuit = compile_design(design)
        r, _ = batch_values(design, circuit)
        _, fig, sp = _at_290k(design, r, f)
        s = sp.out_each[0, 0]
        return 10 * math.log10(1 + s[:-1].sum() / s[-1]), fig

    nf_total, _ = nf_of(whole)
    nf1, fig1 = nf_of(first)
    a1 = analyze(first, environment=env)  # the nominal 25 °C system only gives Z_out here
    z_out1 = complex(fig1.nominal.z_out(np.array([f]))[0, 0])
    voc = complex(fig1.nominal.gain(np.array([f]))[0, 0])
    g_a1 = abs(voc) ** 2 * rs / z_out1.real  # available power gain: (|Voc|²/4R_out)/(E²/4Rs)
    second = _design(_stage("2", "in", "out", v2), z_out1.real, rl, dev)
    nf2, _ = nf_of(second)
    f1, f2 = 10 ** (nf1 / 10), 10 ** (nf2 / 10)
    friis = 10 * math.log10(f1 + (f2 - 1) / g_a1)
    assert a1.noise is not None
    assert friis - nf1 > 0.05  # the second stage does count (about 0.1 dB here)
    assert nf_total == pytest.approx(friis, abs=0.2)
