"""Two-stage cascade families: loaded-stage gain products, and synthesized designs of our
own scenarios checked by the engine's verdict and by the independent reference model.

Scenarios (invented): a geophone preamp (46 dB, high input impedance, 10 Vpp on 24 V),
a studio line driver into 600 Ω (20 dB, low output impedance) and a piezo-disc
buffer-amplifier (inverting, 20 dB, 200 kΩ input impedance); NPN and the PNP mirror,
with the generic invented presets.
"""

from __future__ import annotations

import functools
import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.contracts.spec import Spec, spec_from_mapping
from stagesynth.engine.analysis import analyze
from stagesynth.judging.verdict import judge
from stagesynth.synthesis.synth import SynthesisResult, _synthesize_family
from stagesynth.synthesis.topologies import ce_ce, ce_ef, common_emitter, ef_ce

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel

# CODATA 2018 exact constants, for VT = k T / q
K_B = 1.380649e-23
Q_E = 1.602176634e-19

# Our scenarios in SI units (ambient in degC); the family expected to serve each.
SCENARIOS = {
    # f_low 100 Hz: lower corners need the first stage's emitter bypass as an electrolytic
    # whose leakage (common practice, 0.01·C·V) moves its small bias by more than 1 %, or
    # bias resistors above resistor_max's 1 MΩ (practical parts); the cascade is what
    # this scenario checks
    "geophone_preamp": {
        "family": ce_ce,
        "supply": (24.0, 0.05), "source": 1e3, "load": (10e3, 100e-12),
        "require": {"gain_db": 46.0, "gain_tolerance_db": 1.5, "f_low": 100.0, "f_high": 30e3,
                    "z_in": 22e3, "swing": 10.0, "ambient": [-10.0, 50.0]},
    },
    "line_driver": {
        "family": ce_ef,
        "supply": (15.0, 0.05), "source": 1e3, "load": (600.0, 1e-9),
        "require": {"gain_db": 20.0, "gain_tolerance_db": 1.0, "f_low": 20.0, "f_high": 100e3,
                    "z_in": 10e3, "z_out": 100.0, "swing": 4.0, "ambient": [0.0, 50.0]},
    },
    "piezo_buffer": {
        "family": ef_ce,
        "supply": (12.0, 0.05), "source": 10e3, "load": (10e3, 100e-12),
        "require": {"gain_db": 20.0, "gain_tolerance_db": 1.0, "f_low": 20.0, "f_high": 50e3,
                    "z_in": 200e3, "swing": 3.0, "ambient": [0.0, 50.0],
                    "inverting": "yes"},
    },
}


def make_spec(name: str, polarity: str, **override) -> Spec:
    """The stagesynth Spec of a scenario (section-1 keys), with requirement overrides."""
    sc = SCENARIOS[name]
    req = {**sc["require"], **override}
    require = {"gain": f"{req['gain_db']} dB", "gain_tolerance": f"{req['gain_tolerance_db']} dB",
               "f_low": req["f_low"], "f_high": req["f_high"], "z_in": req["z_in"],
               "swing": f"{req['swing']} Vpp",
               "ambient": [f"{t} °C" for t in req["ambient"]]}
    for key in ("z_out", "inverting"):
        if key in req:
            require[key] = req[key]
    return spec_from_mapping({
        "title": name.replace("_", " "),
        "supply": {"voltage": sc["supply"][0], "tolerance": sc["supply"][1]},
        "source": {"resistance": sc["source"]},
        "load": {"resistance": sc["load"][0], "capacitance": sc["load"][1]},
        "require": require,
        "transistor": {"preset": f"generic-{polarity}"},
    })


@functools.cache
def synthesized(name: str, polarity: str) -> SynthesisResult:
    """One synthesis per scenario and polarity, shared by the tests of this file."""
    return _synthesize_family(make_spec(name, polarity), SCENARIOS[name]["family"], "margin")


CASES = [(n, p) for n in SCENARIOS for p in ("npn", "pnp")]


# ---------------------------------------------------------------------------
# loaded-stage decomposition (closed forms solved with sympy)
# ---------------------------------------------------------------------------
@functools.cache
def _stage_forms():
    """Hybrid-pi stage driven at its external base, emitter impedance ZE and collector load
    ZC to AC ground: (collector gain, emitter gain, input resistance) as numeric functions.

    Nodal equations of the hybrid-pi model (Sedra & Smith; Gray & Meyer ch. 1, from memory):
    rx base spreading resistance, r_pi, gm*v_b'e, ro between collector and emitter.
    A follower is the same network with ZC -> 0.
    """
    import sympy as sp

    vb, vbi, ve, vc = sp.symbols("vb vbi ve vc")
    rx, rpi, gm, ro, ze, zc = sp.symbols("rx rpi gm ro ze zc", positive=True)
    i_x = (vb - vbi) / rx
    i_pi = (vbi - ve) / rpi
    i_gm = gm * (vbi - ve)
    i_o = (vc - ve) / ro
    eqs = [sp.Eq(i_x, i_pi), sp.Eq(i_pi + i_gm + i_o, ve / ze),
           sp.Eq(i_gm + i_o + vc / zc, 0)]
    sol = sp.solve(eqs, [vbi, ve, vc], dict=True)[0]
    args = (rx, rpi, gm, ro, ze, zc)
    a_c = sp.simplify(sol[vc] / vb)
    rin = sp.simplify(vb / i_x.subs(sol))
    # follower: collector at AC ground
    eqs_f = [sp.Eq(i_x, i_pi), sp.Eq(i_pi + i_gm + (0 - ve) / ro, ve / ze)]
    sol_f = sp.solve(eqs_f, [vbi, ve], dict=True)[0]
    a_e = sp.simplify(sol_f[ve] / vb)
    rin_f = sp.simplify(vb / i_x.subs(sol_f))
    args_f = (rx, rpi, gm, ro, ze)
    return (sp.lambdify(args, a_c), sp.lambdify(args, rin),
            sp.lambdify(args_f, a_e), sp.lambdify(args_f, rin_f))


def _par(*rs: float) -> float:
    return 1.0 / sum(1.0 / r for r in rs)


def _small_signal(analysis, ref: str, spec: Spec) -> tuple[float, float, float, float]:
    """(rx, r_pi, gm, ro) at the engine's nominal operating point, per the contract's
    hybrid-pi definitions (spec-format section 2): gm = IC/VT, r_pi = hFE/gm,
    ro = (VA + VCE)/IC with VT = k Tj / q (CODATA)."""
    t = analysis.nominal.transistors[ref]
    vt = K_B * (t.tj + 273.15) / Q_E
    gm = t.ic / vt
    dev = spec.transistor
    return dev.r_bb, t.hfe / gm, gm, (dev.early_voltage + t.vce) / t.ic


def _ce(analysis, ref, spec, ze, zc):
    a_c, rin, _, _ = _stage_forms()
    rx, rpi, gm, ro = _small_signal(analysis, ref, spec)
    return a_c(rx, rpi, gm, ro, ze, zc), rin(rx, rpi, gm, ro, ze, zc)


def _follower(analysis, ref, spec, ze):
    _, _, a_e, rin_f = _stage_forms()
    rx, rpi, gm, ro = _small_signal(analysis, ref, spec)
    return a_e(rx, rpi, gm, ro, ze), rin_f(rx, rpi, gm, ro, ze)


def _product(name: str, design, analysis, spec: Spec) -> float:
    """Kin * A(stage 1, loaded by stage 2's input) * A(stage 2): the textbook product
    (Sedra & Smith, multistage amplifiers: each stage's gain with the next stage's input
    resistance as its load, from memory)."""
    v = design.values()
    rl, rs = spec.load.resistance, spec.source.resistance
    if name == "line_driver":  # CE (Q1) -> follower (Q2)
        a2, rin2 = _follower(analysis, "Q2", spec, _par(v["R6"], rl))
        a1, rin1 = _ce(analysis, "Q1", spec, v.get("R4", 1e-9), _par(v["R3"], rin2))
        r_in = _par(v["R1"], v["R2"], rin1)
    elif name == "piezo_buffer":  # follower (Q1) -> CE (Q2)
        a2, rin2 = _ce(analysis, "Q2", spec, v.get("R5", 1e-9), _par(v["R4"], rl))
        a1, rin1 = _follower(analysis, "Q1", spec, _par(v["R3"], rin2))
        r_in = _par(v["R1"], v["R2"], rin1)
    else:  # CE (Q1) -> CE (Q2), capacitor-coupled
        a2, rin2 = _ce(analysis, "Q2", spec, v.get("R9", 1e-9), _par(v["R8"], rl))
        a1, rin1 = _ce(analysis, "Q1", spec, v.get("R4", 1e-9),
                       _par(v["R3"], v["R6"], v["R7"], rin2))
        r_in = _par(v["R1"], v["R2"], rin1)
    return r_in / (r_in + rs) * a1 * a2


@pytest.mark.parametrize(("name", "polarity"), CASES)
def test_cascade_gain_is_product_of_loaded_stage_gains(name, polarity):
    """Engine gain of the whole cascade vs the product of the stages' loaded gains computed
    separately from the hybrid-pi closed forms at the engine's operating points."""
    res = synthesized(name, polarity)
    spec = res.spec
    # coupling and bypass capacitors made huge and read at 1 Hz: a purely resistive
    # midband, where the decomposition is exact (no C_mu couples back; each later stage
    # loads the earlier one only through its input resistance, taken with its own load)
    big = {ref: 1e3 for ref in res.design.values() if ref.startswith("C")}
    design = res.design.with_values(big)
    an = analyze(design, spec)
    engine = complex(an.system.gain(np.array([1.0]))[0, 0])
    product = _product(name, design, an, spec)
    assert abs(engine) == pytest.approx(abs(product), rel=1e-4)
    assert math.copysign(1.0, engine.real) == math.copysign(1.0, product)
    # at the spec's midband with the sized capacitors, the textbook midband estimate
    # (capacitors shorted, device capacitances open) holds within a few %
    assert abs(res.analysis.gain) == pytest.approx(abs(product), rel=0.03)
    # inversion: CE + follower and follower + CE invert, CE + CE does not (Sedra & Smith)
    assert (product < 0) == (name != "geophone_preamp")


# ---------------------------------------------------------------------------
# synthesized designs meet their specs, by the engine and by the reference model
# ---------------------------------------------------------------------------
@pytest.mark.parametrize(("name", "polarity"), CASES)
def test_synthesized_cascade_meets_spec(name, polarity):
    res = synthesized(name, polarity)
    spec = res.spec
    family = SCENARIOS[name]["family"]
    assert res.meets_spec, [(c.name, c.value, c.limit) for c in res.verdict.failed]
    assert res.design.topology == f"{family.NAME}-{polarity}"
    # the design file read back and re-analysed by the engine
    data = json.loads(res.design.to_json())
    again = judge(analyze(design_from_dict(data), spec), spec)
    assert again.meets_spec, [(c.name, c.value, c.limit) for c in again.failed]
    # the independent reference model of the contract (tests/independent/refmodel.py)
    req = SCENARIOS[name]["require"]
    an = refmodel.analyze(data, (req["f_low"], req["f_high"]), ambient=req["ambient"],
                          supply_tolerance=SCENARIOS[name]["supply"][1])
    ok, checks = refmodel.judge(an, req)
    assert ok, [c for c in checks if not c.ok]


def test_single_common_emitter_cannot_serve_the_preamp():
    """46 dB with z_in >= 47 kΩ: one degenerated CE would need Rac >= gain * z_in/(hFE + 1)
    (Sedra & Smith gain and input-resistance forms, from memory), far above the 10 kΩ load."""
    spec = make_spec("geophone_preamp", "npn")
    res = _synthesize_family(spec, common_emitter, "margin")
    assert not res.meets_spec
    assert {c.name for c in res.verdict.failed} & {"gain", "z_in", "swing"}


# ---------------------------------------------------------------------------
# prechecks: the phase of each cascade (two CE inversions cancel; a follower adds none)
# ---------------------------------------------------------------------------
@pytest.mark.parametrize(("family", "asked", "blocked"), [
    (ce_ce, "yes", True), (ce_ce, "no", False),
    (ce_ef, "no", True), (ce_ef, "yes", False),
    (ef_ce, "no", True), (ef_ce, "yes", False),
])
def test_precheck_phase(family, asked, blocked):
    # Sedra & Smith: a CE stage inverts, a follower does not (from memory)
    spec = make_spec("piezo_buffer", "npn", inverting=asked)
    names = [c.name for c in family.precheck(spec)]
    assert ("inverting" in names) == blocked
