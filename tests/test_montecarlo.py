"""Monte Carlo yield checked from outside: an independent plain loop, an analytic case, scipy.

The yield is defined by spec-format.md section 2. The independent loop uses
tests/independent/refmodel.py (a second implementation of the reference model
written from the contract alone) one unit at a time, on the very same sampled
units (same seed); the analytic case is a requirement that only one uniform
tolerance can violate, whose yield is a ratio of interval lengths.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.contracts.spec import spec_from_mapping
from stagesynth.engine.analysis import analyze
from stagesynth.engine.circuit import compile_design
from stagesynth.judging.montecarlo import monte_carlo, sample_units, wilson_interval
from tests.independent import designs, refmodel

BAND = (20.0, 100e3)


def _spec(require: dict, *, r_tol="5 %", c_tol="20 %", supply_tol="5 %", ambient=None):
    req = {"f_low": "20 Hz", "f_high": "100 kHz", **require}
    if ambient is not None:
        req["ambient"] = ambient
    return spec_from_mapping(
        {
            "title": "yield check",
            "supply": {"voltage": 12.0, "tolerance": supply_tol},
            "source": {"resistance": 600.0},
            "load": {"resistance": 10_000.0, "capacitance": 1e-10},
            "require": req,
            "transistor": {"preset": "generic-npn"},
            "parts": {"resistors": "E24", "resistor_tolerance": r_tol,
                      "capacitors": "E6", "capacitor_tolerance": c_tol},
        },
        "<test>",
    )


@pytest.fixture(scope="module")
def ce_design():
    return design_from_dict(copy.deepcopy(designs.DESIGNS["ce_npn"]), "<ce_npn>")


def _reference_unit_ok(design_dict, refs_r, refs_c, r, c, hfe, supply, ambients, spec) -> bool:
    """One unit judged by the independent model: every requirement at both ambients."""
    d = copy.deepcopy(design_dict)
    values = dict(zip(refs_r, r, strict=True)) | dict(zip(refs_c, c, strict=True))
    for p in d["parts"]:
        if p["ref"] in values:
            p["value"] = float(values[p["ref"]])
    cir = refmodel.circuit_from_design(d)
    fm = math.sqrt(BAND[0] * BAND[1])
    req = spec.require
    for amb in ambients:
        cond = refmodel.Conditions((("Q", float(hfe)),), float(amb), float(supply))
        op = refmodel.solve_dc(cir, cond)
        active = all(t.active for t in op.transistors.values())
        h = complex(refmodel.gain(cir, op, [fm])[0])
        f_lo, f_hi = refmodel.band_edges(cir, op, fm)
        swing = refmodel.swing_vpp(cir, op, fm) if active else 0.0
        ok = (
            abs(20 * math.log10(abs(h)) - req.gain_db) <= req.gain_tolerance_db
            and f_lo <= req.f_low
            and f_hi >= req.f_high
            and abs(refmodel.input_impedance(cir, op, fm)) >= req.z_in
            and active
            and swing >= req.swing_vpp
            and (req.supply_current is None or op.supply_current <= req.supply_current)
        )
        if not ok:
            return False
    return True


def test_yield_agrees_unit_by_unit_with_an_independent_plain_loop(ce_design):
    # A gain window narrow enough that resistor and hFE spread fail a share of units.
    nominal = analyze(ce_design).gain_db
    spec = _spec({"gain": f"{nominal + 0.1:.3f} dB", "gain_tolerance": "0.3 dB",
                  "z_in": "3 kΩ", "swing": "3 Vpp"}, ambient=["0 °C", "50 °C"])
    n = 40
    sample = sample_units(ce_design, spec, n, np.random.default_rng(7))
    ours = monte_carlo(ce_design, spec, sample=sample)
    circuit = compile_design(ce_design)
    refs_r = [ref for ref, _, _ in circuit.resistors]
    refs_c = [ref for ref, _, _ in circuit.capacitors]
    theirs = np.array([
        _reference_unit_ok(designs.DESIGNS["ce_npn"], refs_r, refs_c, sample.r[i],
                           sample.c[i], sample.hfe25[i, 0], sample.supply[i], (0.0, 50.0),
                           spec)
        for i in range(n)
    ])
    assert 0 < theirs.sum() < n  # the case is not trivial: some units pass, some fail
    assert np.array_equal(ours.ok, theirs)


def test_yield_of_a_requirement_only_one_tolerance_can_violate(ce_design):
    # With VA huge, z_out is RC in parallel with a huge ro: only RC's tolerance moves it.
    # RC uniform within +-5 % and a limit 2 % above nominal pass the units with
    # u <= 0.02 - a share (0.02 + 0.05) / 0.10 = 0.7 (ratio of interval lengths).
    data = copy.deepcopy(designs.DESIGNS["ce_npn"])
    data["devices"]["Q"]["early_voltage"] = 1e9
    design = design_from_dict(data, "<ce_npn, huge VA>")
    z0 = analyze(design).z_out
    rc = design.part("RC").value
    assert z0 == pytest.approx(rc, rel=2e-3)  # the premise: z_out is RC
    spec = _spec({"gain": "10 dB", "gain_tolerance": "30 dB", "z_out": z0 * 1.02,
                  "f_low": "100 Hz", "f_high": "10 kHz"}, supply_tol="0 %",
                 c_tol="1 %")
    n = 4000
    est = monte_carlo(design, spec, n, seed=11)
    expected = 0.7
    sigma = math.sqrt(expected * (1 - expected) / n)
    assert abs(est.estimate - expected) < 4 * sigma
    assert set(est.failures) == {"z_out"}


def test_wilson_interval_matches_scipy():
    # scipy.stats.binomtest(...).proportion_ci(method="wilson") is the outside reference.
    from scipy.stats import binomtest

    for k, n in ((990, 1000), (50, 100), (0, 30), (30, 30), (9944, 10_000)):
        lo, hi = wilson_interval(k, n)
        ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
        assert lo == pytest.approx(ci.low, abs=1e-9)
        assert hi == pytest.approx(ci.high, abs=1e-9)


def test_sampling_follows_the_contract(ce_design):
    # section 2: parts uniform within tolerance, hFE log-uniform over [min, max]
    spec = _spec({"gain": "20 dB"})
    s = sample_units(ce_design, spec, 20_000, np.random.default_rng(5))
    circuit = compile_design(ce_design)
    r0 = np.array([ce_design.part(ref).value for ref, _, _ in circuit.resistors])
    rel = s.r / r0 - 1
    assert rel.min() >= -0.05 and rel.max() <= 0.05
    assert np.std(rel) == pytest.approx(0.05 / math.sqrt(3), rel=0.03)  # uniform: a/sqrt(3)
    lo, hi = designs.DESIGNS["ce_npn"]["devices"]["Q"]["hfe"]  # the design file's spread
    lnh = np.log(s.hfe25[:, 0])
    assert lnh.min() >= math.log(lo) and lnh.max() <= math.log(hi)
    # log-uniform: ln hFE uniform, mean at the middle, sd (ln hi - ln lo)/sqrt(12)
    assert np.mean(lnh) == pytest.approx(0.5 * math.log(lo * hi), abs=0.01)
    assert np.std(lnh) == pytest.approx(math.log(hi / lo) / math.sqrt(12), rel=0.03)
    assert s.supply.min() >= 12 * 0.95 and s.supply.max() <= 12 * 1.05
