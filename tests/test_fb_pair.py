"""The feedback pair (two CE stages in one series–shunt loop) against the textbook feedback
analysis and the independent reference model (tests/independent/refmodel.py).

Sedra & Smith, feedback chapter (series–shunt, "voltage amplifier"), from memory:
β = RE'/(RE' + RF); the A circuit carries the feedback network's loading (RE' ∥ RF in Q1's
emitter, with the output port shorted; RF + RE' across the output, with the input port
opened); closed-loop gain Af = A/(1 + Aβ), so Af·β = T/(1 + T) with T = Aβ, and the gain
1/β = 1 + RF/RE' is approached within about 1/(1 + T). Gray & Meyer give the same form.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import pytest

from stagesynth.contracts.spec import spec_from_mapping
from stagesynth.report import schematic
from stagesynth.synthesis.synth import _synthesize_family
from stagesynth.synthesis.topologies import FAMILIES, fb_pair

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel
from test_schematic import unfaithful

BIG = 1.0  # farad: coupling and DC-blocking capacitors out of the way at midband

# invented values of a 40 dB pair on 15 V (NPN; the PNP mirror swaps the divider halves)
VALUES = {"R1": 150e3, "R2": 30e3, "R3": 10e3, "R4": 130.0, "R5": 1e3, "R6": 2.2e3,
          "R7": 1.1e3, "R8": 13e3, "C1": BIG, "C2": BIG, "C3": BIG, "C4": BIG}


def _spec(polarity: str, **require):
    req = {"gain": "40 dB", "gain_tolerance": "1 dB", "f_low": "20 Hz", "f_high": "50 kHz",
           "z_in": "10 kΩ", "swing": "4 Vpp", "ambient": ["0 °C", "50 °C"], **require}
    return spec_from_mapping({
        "title": f"geophone line amplifier ({polarity})",
        "supply": {"voltage": "15 V", "tolerance": "5 %"},
        "source": {"resistance": "0 Ω"},
        "load": {"resistance": "10 kΩ", "capacitance": "0 F"},
        "require": req,
        "transistor": {"preset": f"generic-{polarity}"}}, file="fb-pair")


def _design(polarity: str) -> dict:
    values = dict(VALUES)
    if polarity == "pnp":
        values["R1"], values["R2"] = values["R2"], values["R1"]
    return fb_pair.build(_spec(polarity), values).to_dict()


def _par(*rs: float) -> float:
    return 1.0 / sum(1.0 / r for r in rs)


def _textbook(op, rl: float) -> tuple[float, float]:
    """(A, β) of the series–shunt loop from the reference model's hybrid-pi values.

    Stage gains from the hybrid-pi base drive (Sedra & Smith, from memory): a CE stage
    with emitter resistance Re and collector load Rc has a = -β·Rc/(rx + rπ + (β+1)·Re),
    with ro in parallel with the load (boosted by 1 + gm·Re for Q1's degenerated stage);
    Q2's emitter is bypassed (C4), so Re = 0 there."""
    q1, q2 = op.transistors["Q1"], op.transistors["Q2"]
    re_ac = _par(VALUES["R4"], VALUES["R5"])
    rf = VALUES["R8"]
    beta_fb = re_ac / (re_ac + rf)
    re1 = _par(re_ac, rf)  # the feedback network at Q1's emitter, output port shorted
    rin2 = q2.rx + q2.rpi
    rc1 = _par(VALUES["R3"], rin2, q1.ro * (1.0 + q1.gm * re1))
    a1 = -q1.hfe * rc1 / (q1.rx + q1.rpi + (q1.hfe + 1.0) * re1)
    rc2 = _par(VALUES["R6"], rl, rf + re_ac, q2.ro)
    a2 = -q2.hfe * rc2 / (q2.rx + q2.rpi)
    return a1 * a2, beta_fb


@pytest.mark.parametrize("polarity", ["npn", "pnp"])
def test_closed_loop_gain_is_the_resistor_ratio_within_the_loop_gain_error(polarity):
    """Reference-model gain vs Af = A/(1 + T) of the textbook analysis (within 3 %: the A
    circuit neglects Cμ and the feedback network's forward path), and vs the ideal
    1 + RF/RE': below it by about 1/(1 + T), at most twice that."""
    design = _design(polarity)
    an = refmodel.analyze(design, (20.0, 50e3))
    assert all(t.active for t in an.nominal.transistors.values())
    a, beta = _textbook(an.nominal, 10e3)
    t = a * beta
    assert t > 10  # a loop worth the name at these values
    af = a / (1.0 + t)
    g = an.gain.real  # midband, non-inverting
    assert g > 0 and abs(an.gain.imag) < 0.02 * abs(an.gain)
    assert g == pytest.approx(af, rel=0.03)
    ideal = 1.0 / beta  # 1 + RF/RE'
    shortfall = 1.0 - g / ideal
    assert 0.0 < shortfall <= 2.0 / (1.0 + t)
    assert shortfall >= 0.5 / (1.0 + t)


def test_gain_nearly_independent_of_hfe_and_temperature():
    """Across hFE min/max and 0…50 °C (the reference model's corners) the gain moves by
    less than 1/(1 + T_min) relative, T_min the smallest textbook loop gain over them
    (a threefold hFE spread, where a single CE stage's gain follows hFE almost in
    proportion when undegenerated)."""
    design = _design("npn")
    cir = refmodel.circuit_from_design(design)
    fm = math.sqrt(20.0 * 50e3)
    gains, loops = [], []
    for cond in refmodel.corner_conditions(cir, (0.0, 50.0), 0.05):
        op = refmodel.solve_dc(cir, cond)
        gains.append(abs(complex(refmodel.gain(cir, op, [fm])[0])))
        a, beta = _textbook(op, 10e3)
        loops.append(a * beta)
    spread = max(gains) / min(gains) - 1.0
    assert spread < 1.0 / (1.0 + min(loops))
    # dB: the whole spread fits a ±1 dB window with room to spare for part tolerances
    assert 20 * math.log10(max(gains) / min(gains)) < 1.0


@pytest.mark.parametrize("polarity", ["npn", "pnp"])
def test_drawn_faithfully(polarity):
    """The schematic of either mirror reads back as its netlist (the checker of
    test_schematic.py: every terminal of every part on its own node, nothing else joined)."""
    d = fb_pair.build(_spec(polarity), VALUES)
    assert unfaithful(schematic.choose_layout(d, {}), d) == []


def test_registered_after_the_single_stages():
    order = list(FAMILIES)
    singles = [n for n, f in FAMILIES.items() if f.STAGES == 1]
    assert order.index("fb_pair") > max(order.index(n) for n in singles)
    assert fb_pair.precheck(_spec("npn", inverting="yes"))[0].name == "inverting"


@pytest.mark.parametrize("polarity", ["npn", "pnp"])
def test_synthesized_pair_meets_a_40_db_window_by_the_reference_model(polarity):
    """A 40 dB ± 1 dB line amplifier, synthesized with the pair: the written design meets
    its spec by the independent reference model, with no part beyond the spec's limits."""
    spec = _spec(polarity)
    res = _synthesize_family(spec, fb_pair, "margin")
    assert res.meets_spec, [(c.name, c.value) for c in res.verdict.failed]
    d = res.design.to_dict()
    ref_spec = {"supply": {"tolerance": 0.05},
                "require": {"gain_db": 40.0, "gain_tolerance_db": 1.0, "f_low": 20.0,
                            "f_high": 50e3, "z_in": 10e3, "swing": 4.0,
                            "ambient": [0.0, 50.0]}}
    _, ok, checks = refmodel.analyze_spec(d, ref_spec)
    assert ok, [c for c in checks if not c.ok]
    values = res.design.values()
    assert max(v for k, v in values.items() if k.startswith("R")) <= 1e6
    assert max(v for k, v in values.items() if k.startswith("C")) <= 470e-6
