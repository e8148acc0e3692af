"""The physical floor behind refusals: no design gets below it, and a spec below it is
refused with exit 1, the floor, its cause and what to relax.

The floor is the two-generator model minimised over the collector current (Gray, Hurst,
Lewis & Meyer, 5th ed., noise chapter, bipolar equivalent input generators; Motchenbacher
& Connelly, optimum source resistance; both from memory), derived here rather than taken
from the product: en² = 4kT(rx + 1/(2gm)), in² = 2q·IC·(1 + fc/f)/β in series with
Rs + rx give S(IC) = 4kT·rx + 2kT·VT/IC + 2q·IC·(1 + fc/f)·(Rs + rx)²/β, least at
IC = VT·√(β/(1 + fc/f))/(Rs + rx), where S = 4kT·[rx + (Rs + rx)·√((1 + fc/f)/β)].
"""

from __future__ import annotations

import math
import subprocess
import sys
from dataclasses import replace

import pytest
from conftest import TEST_NPN, npn_ce

from stagesynth.contracts.spec import spec_template
from stagesynth.engine.analysis import Environment, analyze

K_CODATA = 1.380649e-23  # J/K, CODATA 2018 (exact)


def floor_density2(rx: float, fc: float, rs: float, beta: float, f: float, tj: float) -> float:
    """The least density² of the module docstring (V²/Hz), at junction temperature tj °C."""
    kt = K_CODATA * (tj + 273.15)
    return 4 * kt * (rx + (rs + rx) * math.sqrt((1 + fc / f) / beta))


@pytest.mark.parametrize("rs", [50.0, 1e3, 10e3])
@pytest.mark.parametrize("fc", [0.0, 500.0])
def test_no_design_gets_below_the_floor(rs, fc):
    """The engine's density (resistors and all) at every condition is at or above the
    floor for that condition's β and temperature."""
    dev = replace(TEST_NPN, flicker_corner=fc)
    d = replace(npn_ce(dev), source_resistance=rs)
    d = replace(d, devices={"Q": dev})
    a = analyze(d, environment=Environment(ambient=(0.0, 50.0), supply_tolerance=0.05,
                                           band=(20.0, 50e3), noise_at=300.0))
    for p in (a.nominal, *a.corners):
        q = p.transistors["Q1"]
        floor = math.sqrt(floor_density2(dev.r_bb, fc, rs, q.hfe, 300.0, q.tj))
        assert p.noise >= floor


def test_spec_below_the_floor_exits_1_naming_floor_and_cause(tmp_path):
    text = spec_template().replace('# noise = "5 nV/√Hz"', 'noise = "0.3 nV/√Hz"')
    assert 'noise = "0.3 nV/√Hz"' in text
    path = tmp_path / "too-quiet.toml"
    path.write_text(text, encoding="utf-8")
    proc = subprocess.run([sys.executable, "-m", "stagesynth", "design", str(path), "--out",
                           str(tmp_path / "out"), "--no-report"], capture_output=True,
                          text=True, timeout=600)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 1, out
    assert "Traceback" not in out
    assert "floor" in out and "noise" in out
    assert "rx" in out  # the cause or the advice names the base spreading resistance
    assert "relax noise" in out
