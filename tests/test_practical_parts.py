"""Practical parts: the [parts] limits, electrolytic leakage, no-candidate messages, and a
property test of written designs (part limits held; meeting designs meet by the
independent reference model, tests/independent/refmodel.py)."""

from __future__ import annotations

import math
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from stagesynth.cli import app
from stagesynth.contracts.spec import load_spec, spec_from_mapping, spec_to_toml
from stagesynth.quantities.errors import StageError
from stagesynth.synthesis.leakage import (
    BIAS_SHIFT_MAX,
    FILM_MAX,
    capacitor_kinds,
    leakage_current,
    rated_voltage,
)
from stagesynth.synthesis.synth import synthesize
from stagesynth.synthesis.topologies import common_emitter

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel

ROOT = Path(__file__).resolve().parents[1]


def _mapping(**parts) -> dict:
    return {"title": "line stage", "supply": {"voltage": "12 V", "tolerance": "5 %"},
            "source": {"resistance": "600 Ω"},
            "load": {"resistance": "10 kΩ", "capacitance": "100 pF"},
            "require": {"gain": "20 dB", "f_low": "20 Hz", "f_high": "50 kHz",
                        "z_in": "5 kΩ", "swing": "2 Vpp", "ambient": ["0 °C", "50 °C"]},
            "transistor": {"preset": "generic-npn"}, "parts": parts}


# ------------------------------------------------------------------------ spec keys
def test_part_limits_default_parse_and_round_trip():
    """Defaults from the spec format (1 MΩ, 470 µF); values with SI prefixes and IEC 60062
    codes; spec_to_toml writes them back exactly."""
    spec = spec_from_mapping(_mapping())
    assert spec.parts.resistor_max == 1e6 and spec.parts.capacitor_max == 470e-6
    spec = spec_from_mapping(_mapping(resistor_max="220k", capacitor_max="100 µF"))
    assert spec.parts.resistor_max == 220e3 and spec.parts.capacitor_max == 100e-6
    again = spec_from_mapping(tomllib.loads(spec_to_toml(spec)))
    assert again.parts == spec.parts


@pytest.mark.parametrize(("key", "value", "said"), [
    ("resistor_max", "-5 kΩ", "greater than zero"),
    ("resistor_max", "10 Ω", "at least 1 kΩ"),
    ("capacitor_max", "1 pF", "at least 100 nF"),
    ("capacitor_max", "12 V", ""),
])
def test_part_limits_rejected_with_file_and_key(key, value, said):
    with pytest.raises(StageError) as err:
        spec_from_mapping(_mapping(**{key: value}), file="stage.toml")
    text = str(err.value)
    assert text.startswith(f"stage.toml: parts.{key}: ") and said in text


# ------------------------------------------------------------------------ leakage
def test_leakage_figure_is_the_common_practice_one():
    """Common practice: I ≈ 0.01·C·V µA (C in µF, V rated), at least 3 µA."""
    assert leakage_current(100e-6, 25.0) == pytest.approx(25e-6)
    assert leakage_current(1e-6, 6.3) == pytest.approx(3e-6)  # the floor
    assert float(rated_voltage(4.0)) == 10.0  # 2x the DC voltage, next catalogue step
    assert float(rated_voltage(0.1)) == 6.3


def _ce_dict(ce_bypass: float, rth_scale: float = 1.0) -> tuple[dict, object]:
    spec = spec_from_mapping(_mapping())
    values = {"R1": 68e3 * rth_scale, "R2": 12e3 * rth_scale, "R3": 4.7e3, "R4": 220.0,
              "R5": 1e3, "C1": 10e-6, "C2": 10e-6, "C3": ce_bypass}
    return common_emitter.build(spec, values), spec


@pytest.mark.parametrize("ref", ["C1", "C3"])
def test_bias_shift_matches_the_reference_model(ref):
    """The linear prediction of the collector-current shift a leakage current causes,
    against the independent reference model's DC solution with that current injected:
    a resistor from the supply (or to ground) carrying about the leakage current in
    parallel with the capacitor's place."""
    design, spec = _ce_dict(100e-6)
    kinds = capacitor_kinds(design, spec)
    k = kinds[ref]
    base = design.to_dict()
    cir = refmodel.circuit_from_design(base)
    ic0 = refmodel.solve_dc(cir, refmodel.nominal_conditions(cir)).transistors["Q1"].ic
    a, b = design.part(ref).nodes
    node = b if ref == "C1" else a  # the end away from the source / the rail
    v0 = refmodel.solve_dc(cir, refmodel.nominal_conditions(cir)).voltages[node]
    r_inject = (12.0 - v0) / k.leakage  # from the supply: about the leakage current
    inj = dict(base)
    inj["parts"] = [*base["parts"], {"ref": "RX", "kind": "resistor", "value": r_inject,
                                     "nodes": ["vcc", node]}]
    cir2 = refmodel.circuit_from_design(inj)
    ic1 = refmodel.solve_dc(cir2, refmodel.nominal_conditions(cir2)).transistors["Q1"].ic
    shift = abs(ic1 - ic0) / ic0
    assert shift == pytest.approx(k.bias_shift, rel=0.1)


def test_divider_side_electrolytic_refused_where_leakage_matters():
    """A 10 µF electrolytic into a 57 kΩ divider (x5 the stage's own) moves IC by more than
    1 %: film or ceramic required; the 100 µF emitter bypass at about 1 mA may be an
    electrolytic; and the parts list says so."""
    from stagesynth.engine.analysis import analyze
    from stagesynth.report.bom import bom_rows

    design, spec = _ce_dict(100e-6, rth_scale=5.0)
    kinds = capacitor_kinds(design, spec)
    assert kinds["C1"].kind == "film or ceramic required"
    assert kinds["C1"].bias_shift > BIAS_SHIFT_MAX
    assert kinds["C3"].kind == "electrolytic allowed"
    rows = {r["ref"]: r for r in bom_rows(design, analyze(design, spec), spec)}
    assert rows["C1"]["type"].startswith("film or ceramic required")
    assert rows["C3"]["type"].startswith("electrolytic")


# ------------------------------------------------------------------------ no candidate
def _cli(args: list[str]):
    return CliRunner().invoke(app, args)


def test_common_base_forced_on_a_high_impedance_spec_names_requirement_and_family(tmp_path):
    result = _cli(["design", str(ROOT / "specs" / "hydrophone-front-end.toml"),
                   "--circuit", "cb", "--out", str(tmp_path / "out")])
    assert result.exit_code == 1
    assert ("Traceback" not in result.output and result.exception is None) or isinstance(
        result.exception, SystemExit)
    last = result.output.strip().splitlines()[-1]
    assert "cb" in last and "z_in" in last


def test_transistor_slower_than_the_band_ends_without_a_traceback(tmp_path):
    """ft below f_high: a valid spec these circuits cannot meet; exit 1 with a reason
    (the automatic choice runs the same family searches, each guarded the same way)."""
    spec = tmp_path / "slow.toml"
    spec.write_text(
        'title = "slow part"\n[supply]\nvoltage = "12 V"\n[load]\nresistance = "10 kΩ"\n'
        '[require]\ngain = "20 dB"\nf_low = "10 Hz"\nf_high = "50 kHz"\nswing = "2 Vpp"\n'
        '[transistor]\npreset = "generic-npn"\nft = "20 kHz"\n', encoding="utf-8")
    for circuit in (["--circuit", "cb"], ["--circuit", "fb_pair"]):
        result = _cli(["design", str(spec), "--out", str(tmp_path / "o"), "--no-report",
                       "--force", *circuit])
        assert result.exit_code == 1, (circuit, result.output)
        assert isinstance(result.exception, SystemExit), (circuit, result.exception)


# ------------------------------------------------------------------------ property test
@st.composite
def stage_specs(draw):
    """Single-stage line and sensor specs of our own, with random part limits."""
    gain = draw(st.sampled_from([6.0, 12.0, 20.0]))
    rl = draw(st.sampled_from([4.7e3, 10e3, 47e3]))
    return {
        "title": "random stage", "supply": {"voltage": draw(st.sampled_from([9.0, 12.0, 15.0])),
                                            "tolerance": "5 %"},
        "source": {"resistance": draw(st.sampled_from([50.0, 600.0, 2.2e3]))},
        "load": {"resistance": rl, "capacitance": "100 pF"},
        "require": {"gain": f"{gain} dB", "gain_tolerance": "1.5 dB",
                    "f_low": draw(st.sampled_from([5.0, 20.0, 100.0])), "f_high": 50e3,
                    "z_in": draw(st.sampled_from([1e3, 10e3])), "swing": "2 Vpp",
                    "ambient": ["0 °C", "50 °C"]},
        "transistor": {"preset": draw(st.sampled_from(["generic-npn", "generic-pnp"]))},
        "parts": {"resistor_max": draw(st.sampled_from([100e3, 330e3, 1e6])),
                  "capacitor_max": draw(st.sampled_from([47e-6, 220e-6, 470e-6]))},
    }


@settings(max_examples=4, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(stage_specs())
def test_written_designs_respect_part_limits_and_meet_by_the_reference_model(data):
    spec = spec_from_mapping(data, file="random")
    res = synthesize(spec)
    values = res.design.values()
    rmax, cmax = spec.parts.resistor_max, spec.parts.capacitor_max
    assert all(v <= rmax * (1 + 1e-9) for k, v in values.items() if k.startswith("R"))
    assert all(v <= cmax * (1 + 1e-9) for k, v in values.items() if k.startswith("C"))
    kinds = res.design.extra["synthesis"].get("capacitor_kinds", {})
    for ref, kind in kinds.items():  # no electrolytic where its leakage matters
        assert kind["electrolytic_ok"] or kind["value"] <= FILM_MAX * (1 + 1e-9), ref
    if res.meets_spec:
        r = spec.require
        ref_spec = {"supply": {"tolerance": spec.supply.tolerance},
                    "require": {"gain_db": r.gain_db, "gain_tolerance_db": r.gain_tolerance_db,
                                "f_low": r.f_low, "f_high": r.f_high, "z_in": r.z_in,
                                "swing": r.swing_vpp, "ambient": list(r.ambient)}}
        _, ok, checks = refmodel.analyze_spec(res.design.to_dict(), ref_spec)
        assert ok, [c for c in checks if not c.ok]


def test_specs_shipped_respect_default_limits():
    """Every shipped spec parses with the default limits (its [parts] block leaves them)."""
    for path in sorted((ROOT / "specs").glob("*.toml")):
        spec = load_spec(path)
        assert math.isfinite(spec.parts.resistor_max) and spec.parts.capacitor_max > 0
        assert np.isclose(spec.parts.resistor_max, 1e6) or "resistor_max" in path.read_text(
            encoding="utf-8")
