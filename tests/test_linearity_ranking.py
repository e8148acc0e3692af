"""What the report names as the limit of a design's distortion.

Each transistor's share of HD2 is the first term of the power series (Gray, Hurst, Lewis
& Meyer, 5th ed., the nonlinear-analysis chapter; from memory): its second-order current
at 2f (exponential: IC·x²/4 with x = v̂be/VT; square law: ID·(v̂gs/VOV)²/2, Sedra & Smith,
the FET chapter) carried to the load through the linear network. At the stage's own THD
level those shares must sum close to the HD2 harmonic balance gives, and in a JFET-bipolar
cascode the common base, which only passes the JFET's drain current on, is not the limit.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from stagesynth.contracts.netlist import load_design
from stagesynth.contracts.spec import load_spec
from stagesynth.engine.analysis import analyze
from stagesynth.synthesis.linearity import linearity, mechanism

ROOT = Path(__file__).resolve().parents[1]


def _lin(name: str):
    spec = load_spec(ROOT / "specs" / f"{name}.toml")
    design = load_design(ROOT / "examples" / name / "design.json")
    return linearity(analyze(design, spec))


@pytest.mark.parametrize("name", ["hydrophone-front-end", "piezo-accelerometer-preamp",
                                  "capacitive-sensor-follower"])
def test_shares_sum_to_the_harmonic_balance_hd2(name: str) -> None:
    lin = _lin(name)
    total = sum(c.hd2_share for c in lin.contributions)
    # first term only: higher-order mixing and the Early effect make up the rest
    assert total == pytest.approx(lin.hd2, rel=0.15)


def test_cascode_limit_is_the_jfet_not_the_common_base() -> None:
    lin = _lin("piezo-accelerometer-preamp")
    assert lin.limiting.ref == "J1"
    assert "J1's square law" in mechanism(lin)
