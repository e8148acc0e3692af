"""Spec keys practitioners write: a supply range, z_in / z_out ranges, return loss,
IEC 60062 codes in design files, and warnings for implausible values.

Outside judges: scikit-rf's z2s (reflection coefficient of an impedance against a
reference, S11 = (Z − Z0)/(Z + Z0)) on the input impedance of the independent
reference model (tests/independent/refmodel.py, written from spec-format.md alone);
scipy's Kolmogorov–Smirnov test for the uniform supply draw; IEC 60062 for "4k7"
and "2n2"; the definition of a range (nominal = its middle, corners = its ends,
spec-format.md section 1).
"""

from __future__ import annotations

import copy
import json
import math
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel
from test_report import DESIGN, SPEC

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.contracts.spec import load_spec, spec_from_mapping, spec_to_toml
from stagesynth.engine.analysis import Environment, analyze, corner_conditions
from stagesynth.judging.montecarlo import sample_units
from stagesynth.judging.verdict import judge
from stagesynth.quantities.errors import StageError

REPO = Path(__file__).resolve().parents[1]

BASE = {
    "title": "Battery line receiver",
    "supply": {"voltage": ["6.6 V", "9.5 V"]},
    "source": {"resistance": "600 Ω"},
    "load": {"resistance": "10 kΩ"},
    "require": {"gain": "6 dB", "f_low": "30 Hz", "f_high": "20 kHz",
                "z_in": ["500 Ω", "720 Ω"], "z_out": ["50 Ω", "2 kΩ"],
                "return_loss": "15 dB"},
    "transistor": {"preset": "generic-npn"},
}


def _spec(**changes):
    data = copy.deepcopy(BASE)
    for path, value in changes.items():
        section, key = path.split("__")
        if value is None:
            data[section].pop(key, None)
        else:
            data[section][key] = value
    return spec_from_mapping(data, "line.toml")


def test_supply_range_nominal_is_the_middle_and_corners_the_ends():
    spec = _spec()
    assert spec.supply.voltage == pytest.approx((6.6 + 9.5) / 2, rel=1e-15)
    design = design_from_dict({**DESIGN, "supply": {"node": "vcc",
                                                    "voltage": spec.supply.voltage}}, "d.json")
    env = Environment(tuple(SPEC.require.ambient), spec.supply.tolerance, (20.0, 1e5))
    supplies = {c.supply for c in corner_conditions(design, env)[1:]}
    assert sorted(supplies) == pytest.approx([6.6, 9.5], rel=1e-12)
    again = spec_from_mapping(__import__("tomllib").loads(spec_to_toml(spec)), "again.toml")
    assert again.supply.range == pytest.approx((6.6, 9.5))
    assert again.require.z_in_max == pytest.approx(720.0)
    assert again.require.z_out_min == pytest.approx(50.0)
    assert again.require.return_loss == pytest.approx(15.0)


def test_monte_carlo_draws_the_supply_uniformly_over_the_range():
    from scipy.stats import kstest

    spec = _spec()
    design = design_from_dict({**DESIGN, "supply": {"node": "vcc",
                                                    "voltage": spec.supply.voltage}}, "d.json")
    sample = sample_units(design, spec, 4000, np.random.default_rng(3))
    v = sample.supply
    assert v.min() >= 6.6 - 1e-9 and v.max() <= 9.5 + 1e-9
    assert kstest(v, "uniform", args=(6.6, 2.9)).pvalue > 1e-3


@pytest.mark.parametrize("changes, key", [
    ({"supply__tolerance": "5 %"}, "supply.tolerance"),  # a range says it already
    ({"supply__voltage": ["9.5 V", "6.6 V"]}, "supply.voltage"),  # min above max
    ({"supply__voltage": ["6.6 V"]}, "supply.voltage"),
    ({"require__z_in": ["720 Ω", "500 Ω"]}, "require.z_in"),
    ({"require__return_loss": "-3 dB"}, "require.return_loss"),
    ({"source__resistance": None}, "require.return_loss"),  # nothing to match
])
def test_bad_ranges_are_refused_with_the_key(changes, key):
    with pytest.raises(StageError) as err:
        _spec(**changes)
    assert err.value.key == key


def test_implausible_values_warn_with_the_likely_meaning(tmp_path):
    spec = _spec(require__z_in="2 mΩ", require__z_out=None, require__return_loss=None)
    assert any("require.z_in = 2 mΩ" in w and "did you mean 2 MΩ?" in w
               for w in spec.warnings), spec.warnings
    assert not _spec().warnings  # the plain spec raises none
    path = tmp_path / "odd.toml"
    path.write_text(spec_to_toml(spec), encoding="utf-8")
    design = tmp_path / "d.json"
    design.write_text(json.dumps(DESIGN), encoding="utf-8")
    run = subprocess.run([sys.executable, "-m", "stagesynth", "analyze", str(design),
                          "--spec", str(path)], capture_output=True, text=True,
                         env={"PYTHONPATH": str(REPO), "PATH": "/usr/bin:/bin"})
    assert run.returncode in (0, 1)  # a warning, not an error
    assert "warning:" in run.stderr and "did you mean 2 MΩ?" in run.stderr


def _reference_return_loss(design: dict, band: tuple[float, float]) -> float:
    """Smallest return loss over the band at nominal: refmodel's Zin, scikit-rf's S11."""
    from skrf.network import z2s

    cir = refmodel.circuit_from_design(design)
    op = refmodel.solve_dc(cir, refmodel.nominal_conditions(cir))
    f = np.logspace(math.log10(band[0]), math.log10(band[1]), 1201)
    z = np.array([refmodel.input_impedance(cir, op, x) for x in f])
    rs = design["source"]["resistance"]
    s11 = z2s(z.reshape(-1, 1, 1), z0=rs)[:, 0, 0]
    return float(np.min(-20.0 * np.log10(np.abs(s11))))


def test_return_loss_matches_scikit_rf_on_the_reference_model():
    design = design_from_dict(DESIGN, "hydrophone.json")
    spec = replace(SPEC, require=replace(SPEC.require, return_loss=1.0))
    analysis = analyze(design, spec)
    check = judge(analysis, spec).check("return_loss")
    from stagesynth.judging.results import analysis_to_dict

    nominal = analysis_to_dict(analysis)["return_loss"]
    band = (spec.require.f_low, spec.require.f_high)
    ref = _reference_return_loss(DESIGN, band)
    assert nominal == pytest.approx(ref, abs=0.02)
    # judged at nominal and every corner: the verdict's value is the worst of them
    corners = [c["return_loss"] for c in analysis_to_dict(analysis)["corners"]]
    assert check.value == pytest.approx(min([nominal, *corners]), abs=1e-9)
    assert check.ok == (check.value >= 1.0)


def test_ranges_are_judged_on_both_edges():
    design = design_from_dict(DESIGN, "hydrophone.json")
    from stagesynth.judging.results import analysis_to_dict

    analysis = analyze(design, SPEC)
    out = analysis_to_dict(analysis)
    zs = [out["z_in"], *(c["z_in"] for c in out["corners"])]  # nominal and every corner
    z_lo, z_hi = min(zs), max(zs)
    for lo, hi, ok in ((0.5 * z_lo, 2 * z_hi, True), (0.5 * z_lo, 0.9 * z_hi, False)):
        spec = replace(SPEC, require=replace(SPEC.require, z_in=lo, z_in_max=hi))
        verdict = judge(analysis, spec)
        assert verdict.check("z_in").ok and verdict.check("z_in_max").ok == ok
        # the upper edge is decided by the largest z_in of all the judged conditions
        assert verdict.check("z_in_max").headroom == pytest.approx(hi - z_hi, rel=1e-6)
        assert verdict.check("z_in").headroom == pytest.approx(z_lo - lo, rel=1e-6)


def test_design_file_values_may_be_iec_60062_codes(tmp_path):
    data = copy.deepcopy(DESIGN)
    for part in data["parts"]:
        if part["ref"] == "R1":
            part["value"] = "47k"
        if part["ref"] == "R3":
            part["value"] = "3k9"      # IEC 60062: 3.9 kΩ
        if part["ref"] == "C1":
            part["value"] = "10 µF"
    design = design_from_dict(data, "codes.json")
    values = design.values()
    assert values["R1"] == 47000.0 and values["R3"] == 3900.0 and values["C1"] == 1e-5
    data["parts"][0]["value"] = "4,7k"
    with pytest.raises(StageError) as err:
        design_from_dict(data, "codes.json")
    assert err.value.key.endswith(".value") and "comma" in str(err.value)


def test_spec_file_round_trip_through_load_spec(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(spec_to_toml(_spec()), encoding="utf-8")
    spec = load_spec(path)
    assert spec.supply.range == pytest.approx((6.6, 9.5))
    assert "tolerance" not in path.read_text(encoding="utf-8").split("[source]")[0]
