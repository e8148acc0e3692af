"""`stagesynth design` and `stagesynth new` from the outside (subprocess), per the contract.

Section 3 (design file keys), section 4 (exit codes 0 / 1 / 2, conflicts named with what to
relax, one clear message for bad input, no traceback), and the README's data-safety promise:
stagesynth never overwrites a file it did not write, or one edited since, without --force.
The runs are started in parallel phases to keep the file fast.
"""

from __future__ import annotations

import hashlib
import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

from stagesynth.contracts.spec import load_spec

sys.path.insert(0, str(Path(__file__).parent))
from independent import refmodel as rm

ROOT = Path(__file__).resolve().parents[1]
SPECS = ROOT / "specs"
GOOD = ("hydrophone-front-end", "tape-head-preamp")

# Contract section 3: every key of the design file, nested where it is nested.
TOP_KEYS = ("format", "title", "topology", "ground", "supply", "input", "output", "source",
            "load", "parts", "devices", "predicted")
DEVICE_KEYS = ("polarity", "hfe", "hfe_typ", "vbe", "vbe_current", "early_voltage", "ft",
               "c_cb", "r_bb", "vce_sat", "vbe_tempco", "hfe_tempco")
PREDICTED_KEYS = ("gain_db", "f_low", "f_high", "z_in", "swing_vpp", "supply_current")

FOREIGN = "my own notes, not stagesynth's\n"

# Bad spec files: name -> (text, words stderr must hold: the key path and a hint)
_HYDRO = (SPECS / "hydrophone-front-end.toml").read_text(encoding="utf-8")
BAD_SPECS: dict[str, tuple[str, tuple[str, ...]]] = {
    "syntax": ('title = "Broken"\n[supply\nvoltage = "12 V"\n', ("line 2",)),
    "unknown_key": (_HYDRO.replace('gain = "20 dB"', 'gian = "20 dB"'),
                    ("require.gian", "did you mean", "gain")),
    "missing_key": (_HYDRO.replace('resistance = "10 kΩ"', ""), ("load.resistance", "missing")),
    "bad_unit": (_HYDRO.replace('f_high = "50 kHz"', 'f_high = "50 kV"'),
                 ("require.f_high", "Hz")),
}


def _cmd(*args: str) -> list[str]:
    return [sys.executable, "-m", "stagesynth", *args]


def _start(*args: str) -> subprocess.Popen:
    return subprocess.Popen(_cmd(*args), cwd=ROOT, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def _finish(procs: dict[str, subprocess.Popen]) -> dict[str, subprocess.CompletedProcess]:
    out = {}
    for key, p in procs.items():
        stdout, stderr = p.communicate(timeout=300)
        out[key] = subprocess.CompletedProcess(p.args, p.returncode, stdout, stderr)
    return out


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """Every CLI run of this file, in parallel phases; paths and results by name.

    The report bundle is the slow part, so only the folder that tests data safety (a
    foreign report.md, then --force, then a second run, then a user edit) gets it.
    """
    tmp = tmp_path_factory.mktemp("design_cli")
    d: dict = {"tmp": tmp}
    # phase 1: fresh designs, the infeasible spec, bad specs, a foreign file in the way
    for name in GOOD:
        d[name] = tmp / name
    d["overreach"] = tmp / "overreach"
    d["foreign"] = tmp / "foreign"
    d["foreign"].mkdir()
    (d["foreign"] / "report.md").write_text(FOREIGN, encoding="utf-8")
    safety_spec = str(SPECS / "tape-head-preamp.toml")
    procs = {name: _start("design", str(SPECS / f"{name}.toml"), "--out", str(d[name]),
                          "--no-report") for name in GOOD}
    procs["overreach"] = _start("design", str(SPECS / "overreach-preamp.toml"), "--out",
                                str(d["overreach"]), "--no-report")
    procs["foreign"] = _start("design", safety_spec, "--out", str(d["foreign"]))
    for name, (text, _) in BAD_SPECS.items():
        path = tmp / f"bad_{name}.toml"
        path.write_text(text, encoding="utf-8")
        procs[f"bad_{name}"] = _start("design", str(path), "--out", str(tmp / f"out_{name}"))
    d["template"] = tmp / "geophone.toml"
    procs["template_first"] = _start("new", str(d["template"]))
    d["phase1"] = _finish(procs)
    d["foreign_after_refusal"] = (d["foreign"] / "report.md").read_text(encoding="utf-8")
    d["foreign_design_written"] = (d["foreign"] / "design.json").exists()
    d["template_text"] = d["template"].read_text(encoding="utf-8")
    # phase 2: analyze the written designs, --force over the foreign file, `new` again
    procs = {}
    for name in GOOD:
        procs[f"analyze_{name}"] = _start("analyze", str(d[name] / "design.json"), "--spec",
                                          str(SPECS / f"{name}.toml"), "--json")
    procs["force"] = _start("design", safety_spec, "--out", str(d["foreign"]), "--force")
    procs["template_again"] = _start("new", str(d["template"]))
    d["phase2"] = _finish(procs)
    d["report_after_force"] = (d["foreign"] / "report.md").read_text(encoding="utf-8")
    # phase 3: a second run into the same folder (every file there is stagesynth's now)
    d["second_run"] = subprocess.run(_cmd("design", safety_spec, "--out", str(d["foreign"])),
                                     cwd=ROOT, capture_output=True, text=True)
    # phase 4: the user edits design.json after stagesynth wrote it; a new run must refuse
    target = d["foreign"] / "design.json"
    edited = json.loads(target.read_text(encoding="utf-8"))
    edited["parts"][0]["value"] *= 1.1
    target.write_text(json.dumps(edited, indent=1), encoding="utf-8")
    d["edited_digest"] = _digest(target)
    d["edited_run"] = subprocess.run(_cmd("design", safety_spec, "--out", str(d["foreign"])),
                                     cwd=ROOT, capture_output=True, text=True)
    return d


def _one_line_error(result: subprocess.CompletedProcess) -> str:
    """Contract section 4, exit 2: one clear line on stderr, no traceback."""
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr + result.stdout
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    return lines[0]


@pytest.mark.parametrize("name", GOOD)
def test_design_writes_every_contract_key_and_meets(runs: dict, name: str) -> None:
    result = runs["phase1"][name]
    assert result.returncode == 0, result.stderr  # section 4: exit 0 = meets the spec
    assert "Traceback" not in result.stderr
    design = json.loads((runs[name] / "design.json").read_text(encoding="utf-8"))
    for key in TOP_KEYS:  # section 3
        assert key in design, key
    assert design["format"] == "stagesynth-design-1"
    assert design["ground"] == "0"
    assert set(design["supply"]) >= {"node", "voltage"}
    assert "resistance" in design["source"]
    assert set(design["load"]) >= {"resistance", "capacitance"}
    spec = load_spec(SPECS / f"{name}.toml")
    assert design["supply"]["voltage"] == spec.supply.voltage
    assert design["load"]["resistance"] == spec.load.resistance
    for part in design["parts"]:
        assert {"ref", "kind", "nodes"} <= set(part), part
        if part["kind"] == "bjt":
            assert set(part["nodes"]) == {"c", "b", "e"} and part["device"] in design["devices"]
        else:
            assert part["kind"] in ("resistor", "capacitor") and part["value"] > 0
            assert len(part["nodes"]) == 2
    for dev in design["devices"].values():
        for key in DEVICE_KEYS:
            assert key in dev, key
    for key in PREDICTED_KEYS:
        assert isinstance(design["predicted"][key], float), key
    assert design["meets_spec"] is True


@pytest.mark.parametrize("name", GOOD)
def test_predicted_agrees_with_the_independent_model(runs: dict, name: str) -> None:
    """design.json `predicted` against the independent reference model of the contract
    (tests/independent/refmodel.py) at the brief's tolerances: 0.05 dB on gain, 1 % on
    corners, input impedance and supply current, 3 % on swing; and `analyze --spec` on the
    written file exits 0 (section 4)."""
    result = runs["phase2"][f"analyze_{name}"]
    assert result.returncode == 0, result.stderr
    assert json.loads(result.stdout)["meets_spec"] is True
    design = json.loads((runs[name] / "design.json").read_text(encoding="utf-8"))
    predicted = design["predicted"]
    r = load_spec(SPECS / f"{name}.toml")
    ref = rm.analyze(design, (r.require.f_low, r.require.f_high), ambient=r.require.ambient,
                     supply_tolerance=r.supply.tolerance)
    assert abs(predicted["gain_db"] - ref.gain_db) <= 0.05
    for key in ("f_low", "f_high", "z_in", "supply_current"):
        assert math.isclose(predicted[key], getattr(ref, key), rel_tol=0.01), key
    assert math.isclose(predicted["swing_vpp"], ref.swing_vpp, rel_tol=0.03)


def test_infeasible_spec_names_the_conflict_and_writes_the_closest_design(runs: dict) -> None:
    result = runs["phase1"]["overreach"]
    assert result.returncode == 1, result.stderr  # section 4: no design meets it
    assert "Traceback" not in result.stderr
    err = result.stderr.lower()
    # 20 Vpp from a 12 V supply is beyond any class-A stage (physics): swing is named,
    # with the best value reached and what to relax
    assert "swing" in err and "relax" in err and "best" in err, result.stderr
    design = json.loads((runs["overreach"] / "design.json").read_text(encoding="utf-8"))
    assert design["meets_spec"] is False


@pytest.mark.parametrize("name", sorted(BAD_SPECS))
def test_bad_spec_is_one_clear_line(runs: dict, name: str) -> None:
    line = _one_line_error(runs["phase1"][f"bad_{name}"])
    assert f"bad_{name}.toml" in line  # names the file
    for word in BAD_SPECS[name][1]:
        assert word in line, (word, line)
    assert not (runs["tmp"] / f"out_{name}" / "design.json").exists()


def test_foreign_file_is_refused_and_left_untouched(runs: dict) -> None:
    line = _one_line_error(runs["phase1"]["foreign"])
    assert "report.md" in line and "--force" in line
    assert runs["foreign_after_refusal"] == FOREIGN
    assert not runs["foreign_design_written"]  # refused before any work was written


def test_force_overwrites_the_foreign_file(runs: dict) -> None:
    result = runs["phase2"]["force"]
    assert result.returncode == 0, result.stderr
    assert runs["report_after_force"] != FOREIGN
    assert runs["report_after_force"].startswith("#")  # the README's report.md (Markdown)


def test_second_run_into_the_same_folder_replaces_its_own_files(runs: dict) -> None:
    result = runs["second_run"]
    assert result.returncode == 0, result.stderr
    assert "Traceback" not in result.stderr


def test_design_json_edited_by_the_user_is_not_overwritten(runs: dict) -> None:
    line = _one_line_error(runs["edited_run"])
    assert "design.json" in line
    assert _digest(runs["foreign"] / "design.json") == runs["edited_digest"]


def test_new_writes_a_template_that_loads_and_refuses_to_overwrite(runs: dict) -> None:
    first = runs["phase1"]["template_first"]
    assert first.returncode == 0, first.stderr
    spec = load_spec(runs["template"])  # the template is a valid spec as written
    assert spec.supply.voltage > 0 and spec.require.gain > 0
    again = runs["phase2"]["template_again"]
    line = _one_line_error(again)
    assert "geophone.toml" in line
    assert runs["template"].read_text(encoding="utf-8") == runs["template_text"]
