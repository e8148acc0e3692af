"""The engine on junction-FET designs against the independent reference (tests/independent/
refjfet*.py, written from the contract alone): every figure at nominal and at every corner.

Two of the hand-written scenarios: a piezo preamp (common source, split self-bias, 1 nF
capacitive source, ambient 0 … 85 °C, self-heating) and a hydrophone front end that mixes
a JFET with a bipolar follower (gate returned by 1 GΩ, so gate leakage sets the bias).
"""

from __future__ import annotations

import copy
import math
import sys
import tomllib
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from independent import jfetdesigns as jd
from independent import refjfetac as ra

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.contracts.spec import spec_from_mapping
from stagesynth.engine.analysis import analyze

REL = 1e-4  # both solve the same equations to far better; this leaves room for root finders


@pytest.mark.parametrize("name", ["cs_piezo", "cs_ef"])
def test_every_condition_agrees_with_the_reference(name: str) -> None:
    design, spec = jd.DESIGNS[name], jd.SPECS[name]
    ref = ra.analyze(design, spec)
    ours = analyze(design_from_dict(copy.deepcopy(design), f"{name}.json"),
                   spec_from_mapping(tomllib.loads(jd.spec_toml(spec)), f"{name}.toml"))
    pairs = list(zip((ours.nominal, *ours.corners), (ref.nominal, *ref.corners), strict=True))
    for p, r in pairs:
        where = p.condition.label
        assert p.active == r.active, where
        assert p.supply_current == pytest.approx(r.supply_current, rel=REL), where
        assert p.gain_db == pytest.approx(r.gain_db, abs=1e-3), where
        assert p.z_in == pytest.approx(r.z_in, rel=REL), where
        assert p.z_out == pytest.approx(r.z_out, rel=REL), where
        assert p.f_low == pytest.approx(r.f_low, rel=1e-3), where
        assert p.f_high == pytest.approx(r.f_high, rel=1e-3), where
        assert p.swing_vpp == pytest.approx(r.swing_vpp, rel=1e-3), where
        assert p.noise == pytest.approx(r.noise, rel=1e-3), where
        assert p.supply_rejection == pytest.approx(r.supply_rejection, abs=1e-2), where
        assert math.isfinite(p.noise_rms) and p.noise_rms == pytest.approx(r.noise_rms, rel=1e-2)


def test_distortion_agrees_with_the_reference() -> None:
    # the follower with a bootstrapped gate behind a 1 nF sensor: THD at 2 Vpp by both
    from independent.refjfet import circuit_from_design, nominal_conditions, solve_dc
    from independent.refjfetthd import distortion

    from stagesynth.engine.analysis import Environment

    design = jd.DESIGNS["sf_boot"]
    cir = circuit_from_design(design)
    ref = distortion(cir, solve_dc(cir, nominal_conditions(cir)), 2.0, 1e3)
    env = Environment(band=(30.0, 2e4), thd_level=2.0, thd_at=1e3)
    ours = analyze(design_from_dict(copy.deepcopy(design), "sf.json"), environment=env)
    assert ours.nominal.thd == pytest.approx(ref.thd, rel=1e-3)
