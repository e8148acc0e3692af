"""`stagesynth analyze` as a user runs it: a subprocess, judged by spec-format.md section 4.

Section 4 fixes the JSON keys, the exit codes (0 meets, 1 does not, 2 bad input with
one clear message and no traceback); section 2 fixes which corners exist. JSON is
parsed strictly to RFC 8259 (no NaN or Infinity tokens).
"""

from __future__ import annotations

import itertools
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import FIXTURE_BUILDERS, npn_ce

from stagesynth.contracts.netlist import Design, Part

REPO = Path(__file__).resolve().parents[1]
HEAVY = ("scipy", "control", "skrf", "matplotlib", "schemdraw")

PASSING_SPEC = """\
title = "Hydrophone front end (test spec)"

[supply]
voltage = "12 V"
tolerance = "5%"

[source]
resistance = "1 kΩ"

[load]
resistance = "22 kΩ"
capacitance = "150 pF"

[require]
gain = "{gain}"
gain_tolerance = "1 dB"
f_low = "20 Hz"
f_high = "50 kHz"
z_in = "5 kΩ"
swing = "3 Vpp"
supply_current = "3 mA"
ambient = ["0 °C", "40 °C"]
inverting = "yes"

[transistor]
polarity = "npn"
hfe = [120, 360]
hfe_typ = 210
vbe = "0.66 V"
vbe_current = "1 mA"
early_voltage = "90 V"
ft = "300 MHz"
c_cb = "3.5 pF"
r_bb = "40 Ω"
vce_sat = "0.2 V"
theta_ja = "220 K/W"
"""


def run_all(jobs: dict[str, list[str]], cwd: Path) -> dict[str, subprocess.CompletedProcess]:
    """Run `python ARGS...` for every job at once (start-up dominates; the runs overlap)."""
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    procs = {
        name: subprocess.Popen(
            [sys.executable, *args],
            cwd=cwd,
            env=env,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for name, args in jobs.items()
    }
    done = {}
    for name, proc in procs.items():
        out, err = proc.communicate(timeout=300)
        done[name] = subprocess.CompletedProcess(proc.args, proc.returncode, out, err)
    return done


def strict_json(text: str) -> dict:
    """RFC 8259: NaN and Infinity are not JSON."""

    def refuse(token: str) -> None:
        raise ValueError(f"{token} is not valid JSON")

    return json.loads(text, parse_constant=refuse)


def _is_num(x: object) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


def check_section4_keys(out: dict, transistors: set[str]) -> None:
    """Section 4: the keys `analyze --json` must hold, with their types."""
    for key in ("gain_db", "f_low", "f_high", "z_in", "z_out", "supply_current", "swing_vpp"):
        assert _is_num(out[key]), key
    assert isinstance(out["inverting"], bool)
    assert isinstance(out["corners"], list) and out["corners"]
    for corner in out["corners"]:
        assert isinstance(corner["conditions"], dict) and corner["conditions"]
        assert _is_num(corner["swing_vpp"]) and corner["swing_vpp"] >= 0
        assert isinstance(corner["active"], bool)
        assert set(corner["transistors"]) == transistors
        for state in corner["transistors"].values():
            assert _is_num(state["ic"]) and _is_num(state["vce"])
    # section 4: swing_vpp is the smallest over the corners
    assert out["swing_vpp"] == pytest.approx(min(c["swing_vpp"] for c in out["corners"]))


# ----------------------------------------------------------------------------- runs
def _edited(design: Design, key: str, value: object) -> str:
    data = json.loads(design.to_json())
    data[key] = value
    return json.dumps(data)


def _unknown_device() -> str:
    data = json.loads(npn_ce().to_json())
    for part in data["parts"]:
        if part["ref"] == "Q1":
            part["device"] = "QX"
    return json.dumps(data)


_PASSIVE = Design(
    parts=(
        Part("C1", "capacitor", ("in", "out"), 100e-9),
        Part("R1", "resistor", ("vcc", "out"), 47e3),
        Part("R2", "resistor", ("out", "0"), 22e3),
    ),
    devices={},
    supply_voltage=12.0,
    load_resistance=100e3,
    source_resistance=1e3,
)

# spec edits: (text in the passing spec, replacement, key the message must name)
_SPEC_EDITS = {
    "spec-gain-text": ('gain = "26 dB"', 'gain = "loud"', "gain"),
    "spec-negative-load": ('resistance = "22 kΩ"', 'resistance = "-22 kΩ"', "resistance"),
    "spec-polarity": ('polarity = "npn"', 'polarity = "nnp"', "polarity"),
    "spec-misspelt-key": ('f_high = "50 kHz"', 'f_hihg = "50 kHz"', "f_hihg"),
}

# bad input: case -> words the one stderr line must hold (file name and key)
BAD_INPUT = {
    "missing-design": ("absent.json",),
    "design-not-json": ("design-not-json.json", "JSON"),
    "design-unknown-device": ("design-unknown-device.json", "Q1", "device"),
    "design-predicted-list": ("design-predicted-list.json", "predicted"),
    "design-conditions-text": ("design-conditions-text.json", "conditions"),
    "design-conditions-list": ("design-conditions-list.json", "conditions"),
    "missing-spec": ("absent.toml",),
    "spec-not-toml": ("spec-not-toml.toml",),
    **{name: (f"{name}.toml", key) for name, (_, _, key) in _SPEC_EDITS.items()},
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, subprocess.CompletedProcess]:
    """Every `stagesynth analyze` run of this module, started together."""
    d = tmp_path_factory.mktemp("cli")
    files = {f"{name}.json": b().to_json() for name, b in FIXTURE_BUILDERS.items()}
    files["passive.json"] = _PASSIVE.to_json()
    files["design-not-json.json"] = '{"format": "stagesynth-design-1", "parts": ['
    files["design-unknown-device.json"] = _unknown_device()
    files["design-predicted-list.json"] = _edited(npn_ce(), "predicted", [1, 2])
    files["design-conditions-text.json"] = _edited(npn_ce(), "conditions", {"ambient": "hot"})
    files["design-conditions-list.json"] = _edited(npn_ce(), "conditions", [1])
    files["spec.toml"] = PASSING_SPEC.format(gain="26 dB")
    files["spec-missed.toml"] = PASSING_SPEC.format(gain="40 dB")
    files["spec-far.toml"] = PASSING_SPEC.format(gain="60 dB")
    files["spec-not-toml.toml"] = '[supply\nvoltage = "12 V"\n'
    for name, (old, new, _) in _SPEC_EDITS.items():
        assert old in files["spec.toml"]
        files[f"{name}.toml"] = files["spec.toml"].replace(old, new, 1)
    for name, text in files.items():
        (d / name).write_text(text, encoding="utf-8")
    a = ["-m", "stagesynth", "analyze"]
    jobs = {f"json-{name}": [*a, f"{name}.json", "--json"] for name in FIXTURE_BUILDERS}
    jobs |= {
        "spec-met": [*a, "npn_ce.json", "--spec", "spec.toml", "--json"],
        "spec-missed": [*a, "npn_ce.json", "--spec", "spec-missed.toml", "--json"],
        "text-good": [*a, "ce_follower.json"],
        "text-missed": [*a, "ce_follower.json", "--spec", "spec-far.toml"],
        "passive": [*a, "passive.json", "--json"],
        "missing-design": [*a, "absent.json"],
        "missing-spec": [*a, "npn_ce.json", "--spec", "absent.toml", "--json"],
        "spec-not-toml": [*a, "npn_ce.json", "--spec", "spec-not-toml.toml"],
    }
    for name in BAD_INPUT:
        if name.startswith("design-"):
            jobs[name] = [*a, f"{name}.json", "--json"]
        elif name in _SPEC_EDITS:
            jobs[name] = [*a, "npn_ce.json", "--spec", f"{name}.toml", "--json"]
    return run_all(jobs, d)


# ----------------------------------------------------------------------------- success paths
@pytest.mark.parametrize("name", sorted(FIXTURE_BUILDERS))
def test_json_output_has_section4_keys(runs, name):
    design = FIXTURE_BUILDERS[name]()
    res = runs[f"json-{name}"]
    assert res.returncode == 0, res.stderr
    out = strict_json(res.stdout)
    check_section4_keys(out, {p.ref for p in design.bjts})
    assert "meets_spec" not in out  # only with a spec
    # section 2: without a spec or recorded conditions, the corners are hFE min and max
    assert sorted(c["conditions"]["hfe"] for c in out["corners"]) == ["max", "min"]


def test_spec_that_is_met_exits_0(runs):
    res = runs["spec-met"]
    assert res.returncode == 0, res.stderr
    out = strict_json(res.stdout)
    check_section4_keys(out, {"Q1"})
    assert out["meets_spec"] is True
    checks = {c["name"]: c for c in out["checks"]}
    for c in out["checks"]:
        assert set(c) >= {"name", "value", "limit", "ok"} and c["ok"] is True
    # section 1 meanings, re-judged from the printed values
    lo, hi = checks["gain"]["limit"]
    assert (lo, hi) == pytest.approx((25.0, 27.0))
    # second release: every requirement at nominal and every corner; the row holds the
    # condition farthest from target (section 2), re-derived from the printed corners
    every = [out, *out["corners"]]
    far = max((p["gain_db"] for p in every), key=lambda g: abs(g - 26.0))
    assert checks["gain"]["value"] == pytest.approx(far)
    assert lo <= checks["gain"]["value"] <= hi
    assert checks["f_low"]["value"] == pytest.approx(max(p["f_low"] for p in every))
    assert checks["f_high"]["value"] == pytest.approx(min(p["f_high"] for p in every))
    assert checks["z_in"]["value"] == pytest.approx(min(p["z_in"] for p in every))
    assert checks["f_low"]["value"] <= checks["f_low"]["limit"] == pytest.approx(20.0)
    assert checks["f_high"]["value"] >= checks["f_high"]["limit"] == pytest.approx(50e3)
    assert checks["z_in"]["value"] >= checks["z_in"]["limit"] == pytest.approx(5e3)
    assert checks["swing"]["value"] >= checks["swing"]["limit"] == pytest.approx(3.0)
    assert checks["supply_current"]["limit"] == pytest.approx(3e-3)
    # section 2: every combination of hFE min/max, ambient min/max, supply +-tolerance
    seen = {
        (c["conditions"]["hfe"], round(c["conditions"]["ambient_c"], 6),
         round(c["conditions"]["supply_v"], 6))
        for c in out["corners"]
    }  # fmt: skip
    assert seen == set(itertools.product(("min", "max"), (0.0, 40.0), (11.4, 12.6)))
    worst = max(c["supply_current"] for c in out["corners"])
    assert worst == pytest.approx(checks["supply_current"]["value"])


def test_spec_that_is_missed_exits_1(runs):
    res = runs["spec-missed"]
    assert res.returncode == 1
    assert "Traceback" not in res.stderr
    out = strict_json(res.stdout)
    assert out["meets_spec"] is False
    gain = next(c for c in out["checks"] if c["name"] == "gain")
    assert gain["ok"] is False
    assert gain["limit"] == pytest.approx([39.0, 41.0])


def test_text_output_exit_codes(runs):
    good, missed = runs["text-good"], runs["text-missed"]
    assert good.returncode == 0 and "Traceback" not in good.stderr
    assert "gain" in good.stdout
    assert missed.returncode == 1 and "Traceback" not in missed.stderr


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("name", sorted(BAD_INPUT))
def test_bad_input_exits_2_with_one_line(runs, name):
    """Section 4: exit 2, one clear line on stderr naming the file and key, no traceback."""
    res = runs[name]
    assert "Traceback" not in res.stderr, res.stderr
    assert res.returncode == 2, (res.returncode, res.stderr)
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, res.stderr
    for word in BAD_INPUT[name]:
        assert word in lines[0]
    assert res.stdout == ""


def test_design_without_a_transistor_never_crashes(runs):
    """A passive network passes the file checks; analyze must then either analyse it
    (exit 0) or refuse it with one message (exit 2), never crash."""
    res = runs["passive"]
    assert "Traceback" not in res.stderr, res.stderr
    assert res.returncode in (0, 2)
    if res.returncode == 2:
        assert len([ln for ln in res.stderr.splitlines() if ln.strip()]) == 1
        assert "passive.json" in res.stderr
    else:
        strict_json(res.stdout)


# ----------------------------------------------------------------------------- start-up
_PROBE = """
import json, runpy, sys
sys.argv = ["stagesynth", *sys.argv[1:]]
try:
    runpy.run_module("stagesynth", run_name="__main__")
except SystemExit as exc:
    code = exc.code
print(json.dumps({"code": code, "modules": sorted(sys.modules)}), file=sys.stderr)
"""


@pytest.fixture(scope="module")
def help_runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, subprocess.CompletedProcess]:
    d = tmp_path_factory.mktemp("help")
    return run_all(
        {
            "top": ["-c", _PROBE, "--help"],
            "analyze": ["-c", _PROBE, "analyze", "--help"],
            "importtime": ["-X", "importtime", "-m", "stagesynth", "--help"],
        },
        d,
    )


@pytest.mark.parametrize("name", ["top", "analyze"])
def test_help_does_not_import_heavy_modules(help_runs, name):
    res = help_runs[name]
    report = json.loads(res.stderr.strip().splitlines()[-1])
    assert report["code"] in (0, None)
    assert "analyze" in res.stdout or "DESIGN.json" in res.stdout
    heavy = sorted({m.split(".")[0] for m in report["modules"]} & set(HEAVY))
    assert heavy == []


def test_help_import_trace_lists_no_heavy_modules(help_runs):
    """Python's own import trace (-X importtime) of `python -m stagesynth --help`."""
    res = help_runs["importtime"]
    assert res.returncode == 0
    names = [
        line.split("|")[-1].strip()
        for line in res.stderr.splitlines()
        if line.startswith("import time:") and "|" in line
    ]
    assert any(n.startswith("stagesynth") for n in names)
    assert sorted({n.split(".")[0] for n in names} & set(HEAVY)) == []
