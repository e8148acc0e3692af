"""The Monte Carlo counts the noise requirements (contract §2: "Yield counts noise,
noise_figure, noise_rms ... like the other requirements"), each unit's noise checked
against the independent noise computation (tests/independent/refnoise.py)."""

from __future__ import annotations

import copy
import math

import numpy as np

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.contracts.spec import spec_from_mapping
from stagesynth.engine.analysis import analyze
from stagesynth.engine.circuit import compile_design
from stagesynth.judging.montecarlo import monte_carlo, sample_units
from tests.independent import designs, refmodel, refnoise

SEED = 4242
AMBIENTS = (0.0, 50.0)


def _spec(noise: float):
    return spec_from_mapping({
        "title": "noise yield check",
        "supply": {"voltage": 12.0, "tolerance": "5 %"},
        "source": {"resistance": 600.0},
        "load": {"resistance": 10_000.0, "capacitance": 1e-10},
        "require": {"gain": "20 dB", "gain_tolerance": "20 dB", "f_low": "20 Hz",
                    "f_high": "100 kHz", "ambient": ["0 °C", "50 °C"], "noise": noise,
                    "noise_at": "1 kHz"},
        "transistor": {"preset": "generic-npn"},
    }, "<test>")


def test_monte_carlo_counts_noise_unit_by_unit():
    data = copy.deepcopy(designs.DESIGNS["ce_npn"])
    data["source"]["resistance"] = 600.0
    design = design_from_dict(data, "<ce_npn>")
    # a limit in the middle of the units' spread: hFE moves the base shot noise
    nominal = analyze(design, _spec(1.0)).noise
    spec = _spec(nominal * 1.01)
    n = 60
    est = monte_carlo(design, spec, n, seed=SEED)
    assert 0 < est.failures.get("noise", 0) < n
    worst = est.metrics["noise"]
    assert np.all(worst[~est.ok] > 0)
    # units from the same seeded draw, judged by the independent computation
    sample = sample_units(design, spec, n, np.random.default_rng(SEED))
    circuit = compile_design(design)
    refs_r = [ref for ref, _, _ in circuit.resistors]
    refs_c = [ref for ref, _, _ in circuit.capacitors]
    for i in range(0, n, 12):
        d = copy.deepcopy(data)
        values = dict(zip(refs_r, sample.r[i], strict=True)) | dict(
            zip(refs_c, sample.c[i], strict=True))
        for p in d["parts"]:
            if p["ref"] in values:
                p["value"] = float(values[p["ref"]])
        cir = refmodel.circuit_from_design(d)
        ref = 0.0
        for amb in AMBIENTS:
            cond = refmodel.Conditions((("Q", float(sample.hfe25[i, 0])),), amb,
                                       float(sample.supply[i]))
            op = refmodel.solve_dc(cir, cond)
            density, _, _ = refnoise.noise_at(cir, op, {}, 1e3, (20.0, 1e5))
            ref = max(ref, density)
        assert abs(20 * math.log10(worst[i] / ref)) <= 0.2
        assert bool(worst[i] <= spec.require.noise) == bool(ref <= spec.require.noise) or (
            abs(ref / spec.require.noise - 1) < 0.02)
