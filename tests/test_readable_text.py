"""What a reader sees: engineering notation, margins in the requirement's own unit,
transistors outside the active region, and the infeasible summary.

Outside judges: the SI prefix rules of the BIPM SI Brochure (9th ed., 3.1 and table 7)
and IEC 60027-1 / ISO 80000-1 (a space between number and unit symbol, none between
prefix and unit, one prefix only, powers of ten written "× 10ⁿ"); the arithmetic of
each requirement's definition (spec-format.md section 2) done here on the JSON values;
Ohm's law for the saturated stage.
"""

from __future__ import annotations

import copy
import json
import math
import re
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from test_report import DESIGN, SPEC

from stagesynth.contracts.netlist import design_from_dict
from stagesynth.engine.analysis import analyze
from stagesynth.judging.textout import analysis_table, fmt, margin_text
from stagesynth.judging.verdict import judge
from stagesynth.quantities.units import format_number, format_quantity
from stagesynth.report.document import report_markdown

REPO = Path(__file__).resolve().parents[1]
# BIPM SI Brochure table 7, the prefixes a small-signal stage can need (µ is U+00B5)
SI_PREFIX = {"p": -12, "n": -9, "µ": -6, "m": -3, "": 0, "k": 3, "M": 6, "G": 9, "T": 12}
EXPONENT = re.compile(r"\d(?:\.\d+)?[eE][+-]?\d")


@pytest.mark.parametrize("value, unit, text", [
    (5.869e6, "Ω", "5.87 MΩ"),     # the issue's own example
    (2.5e8, "Hz", "250 MHz"),
    (1e-7, "F", "100 nF"),
    (4.7e-4, "A", "470 µA"),        # micro sign, not "u"
    (999.96, "Ω", "1 kΩ"),          # rounding carries into the next prefix
    (0.0, "V", "0 V"),
    (-0.0123, "V", "-12.3 mV"),
])
def test_engineering_notation_examples(value, unit, text):
    assert format_quantity(value, unit) == text


@pytest.mark.parametrize("exp10", range(-12, 13))
def test_engineering_notation_follows_si_rules(exp10):
    """One prefix, mantissa in [1, 1000), a space before the symbol, none inside it, and
    the text reads back to the value within the rounding to three digits."""
    for mant in (1.0, 2.2, 4.7, 9.99):
        value = mant * 10.0 ** exp10
        text = format_quantity(value, "Ω")
        number, symbol = text.split(" ")
        assert symbol.endswith("Ω") and symbol[:-1] in SI_PREFIX, text
        assert 1 <= float(number) < 1000, text
        back = float(number) * 10.0 ** SI_PREFIX[symbol[:-1]]
        assert math.isclose(back, value, rel_tol=5e-3), text
        assert not EXPONENT.search(text)


def test_plain_numbers_use_powers_of_ten_not_e_notation():
    # ISO 80000-1 7.3: "1.23 × 10⁸"; plain decimals in the readable range
    assert format_number(-0.00103) == "-0.00103"
    assert format_number(1520) == "1520"
    assert format_number(1.23e8) == "1.23 × 10⁸"
    assert format_number(6.71e-4) == "6.71 × 10⁻⁴"


@pytest.fixture(scope="module")
def judged():
    design = design_from_dict(DESIGN, "hydrophone.json")
    analysis = analyze(design, SPEC)
    return design, analysis, judge(analysis, SPEC)


def test_margins_are_in_the_requirements_own_unit(judged):
    _, analysis, verdict = judged
    r = SPEC.require
    gain = verdict.check("gain")
    # window distance in dB: the gain tolerance minus the distance from the target
    target = 20 * math.log10(r.gain)
    assert gain.headroom_unit == "dB"
    assert math.isclose(gain.headroom, r.gain_tolerance_db - abs(gain.value - target),
                        rel_tol=1e-9)
    f_high = verdict.check("f_high")  # a corner is judged as a frequency ratio
    assert f_high.headroom_unit == "×"
    assert math.isclose(f_high.headroom, f_high.value / r.f_high, rel_tol=1e-9)
    f_low = verdict.check("f_low")
    assert math.isclose(f_low.headroom, r.f_low / f_low.value, rel_tol=1e-9)
    z_in = verdict.check("z_in")
    assert z_in.headroom_unit == "Ω" and math.isclose(z_in.headroom, z_in.value - r.z_in)
    swing = verdict.check("swing")
    assert swing.headroom_unit == "Vpp"
    assert math.isclose(swing.headroom, swing.value - r.swing_vpp)
    current = verdict.check("supply_current")
    assert math.isclose(current.headroom, r.supply_current - current.value)
    # "active" is shown as the smallest VCE above VCE(sat) over every condition
    vce_sat = SPEC.transistor.vce_sat
    smallest = min(s.vce for p in (analysis.nominal, *analysis.corners)
                   for s in p.transistors.values()) - vce_sat
    assert math.isclose(verdict.check("active").headroom, smallest, rel_tol=1e-9)


def test_margin_column_reads_as_units_not_percent(judged):
    design, analysis, verdict = judged
    table = analysis_table(analysis, verdict)
    rows = {line.split()[0]: line for line in table.splitlines() if line.strip()}
    assert "+100 %" not in table and "%" not in rows["active"]
    assert "VCE ≥ VCE(sat) +" in rows["active"]
    assert margin_text(verdict.check("gain")) == "+" + fmt(verdict.check("gain").headroom, "dB")
    assert re.search(r"×\d", rows["f_high"])
    assert "ok" in rows["swing"] and "Vpp" in rows["swing"]
    md = report_markdown(design, analysis, verdict, SPEC)
    assert "| status |" in md and "contract" not in md.lower()
    assert not EXPONENT.search(md), EXPONENT.search(md)


def test_failing_row_says_how_far_short(judged):
    analysis = judged[1]
    spec = replace(SPEC, require=replace(SPEC.require, swing_vpp=40.0))
    verdict = judge(analysis, spec)
    swing = verdict.check("swing")
    assert not swing.ok
    short = 40.0 - swing.value
    table = analysis_table(analysis, verdict)
    line = [x for x in table.splitlines() if x.startswith("swing ")][-1]
    assert f"short by {fmt(short, 'Vpp')}" in line, line


def test_saturated_transistor_shows_real_voltages_and_no_negative_power():
    """R3 = 22 kΩ asks about 1.7 mA × 22 kΩ ≈ 37 V of a 12 V supply (Ohm's law): Q1 must
    saturate, and the tables show its VCE marked as such and no negative dissipation."""
    data = copy.deepcopy(DESIGN)
    for part in data["parts"]:
        if part["ref"] == "R3":
            part["value"] = 22000.0
    design = design_from_dict(data, "saturated.json")
    analysis = analyze(design, SPEC)
    assert not analysis.nominal.active
    text = analysis_table(analysis, judge(analysis, SPEC))
    md = report_markdown(design, analysis, judge(analysis, SPEC), SPEC)
    assert "(saturated)" in text and "(saturated)" in md
    assert "(not active)" in md
    assert not re.search(r"-\d[\d.]* [µmn]?W", md), "a negative dissipation is printed"
    assert not EXPONENT.search(md + text)


def test_infeasible_summary_agrees_with_the_design_it_wrote(tmp_path):
    """The "best reached" figure of the summary is the swing of the closest design
    written, as `analyze --json` reads it back from that file."""
    env = {"PYTHONPATH": str(REPO), "PATH": "/usr/bin:/bin"}
    run = subprocess.run([sys.executable, "-m", "stagesynth", "design",
                          str(REPO / "specs" / "overreach-preamp.toml"), "--out",
                          str(tmp_path / "o")], capture_output=True, text=True, env=env)
    assert run.returncode == 1, run.stderr
    out = run.stdout + run.stderr
    assert "Traceback" not in out and not EXPONENT.search(out)
    m = re.search(r"swing: asked 20 Vpp; best reached ([\d.]+ [mµ]?V)pp in the closest "
                  r"design written", out)
    assert m, out
    back = subprocess.run([sys.executable, "-m", "stagesynth", "analyze",
                           str(tmp_path / "o" / "design.json"), "--json"],
                          capture_output=True, text=True, env=env)
    swing = json.loads(back.stdout)["swing_vpp"]
    assert m.group(1) == format_quantity(swing, "V")


def test_json_checks_carry_the_readable_margin(judged):
    """analyze --json: each check has its headroom in its own unit and the status words,
    "ok" exactly where it passes (spec-format.md section 4: `ok` per check)."""
    from stagesynth.judging.results import analysis_to_dict

    _, analysis, verdict = judged
    out = analysis_to_dict(analysis, verdict)
    for c in out["checks"]:
        assert (c["status"] == "ok") == c["ok"], c
        assert c["margin_text"] and "%" not in c["margin_text"].replace("% points", "")
    swing = next(c for c in out["checks"] if c["name"] == "swing")
    assert swing["headroom"] == pytest.approx(swing["value"] - swing["limit"])
    assert swing["headroom_unit"] == "Vpp"
