"""The public Python API: light import, what-if edits, the worked example end to end.

Outside judges: IEC 60062 (the "4k7" code is 4.7 kΩ), the JSON standard library
(every to_dict() is plain JSON), Python's import system (heavy libraries stay
unloaded until used), the degenerated common-emitter gain Av ≈ −RC‖RL/(re + RE1)
(Sedra & Smith, from memory) for the direction and size of an edit's effect, and the
example script run as a user would run it.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))
import conftest as fixtures

import stagesynth as ss

ROOT = Path(__file__).resolve().parent.parent
HEAVY = ("scipy", "control", "skrf", "matplotlib", "schemdraw")


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["MPLBACKEND"] = "Agg"
    return env


def test_import_is_light_and_names_resolve():
    """`import stagesynth` loads no heavy library; the public names load on first use."""
    code = ("import sys, stagesynth as s\n"
            f"print(sorted(m for m in {HEAVY!r} if m in sys.modules))\n"
            "print(callable(s.synthesize), callable(s.to_lti), s.Design.__name__)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=_env(), check=True, timeout=60).stdout.splitlines()
    assert out == ["[]", "True True Design"]
    assert set(ss.__all__) <= set(dir(ss))
    with pytest.raises(AttributeError):
        ss.no_such_name  # noqa: B018


def test_with_value_reads_iec60062_codes_and_units():
    """'4k7' (IEC 60062), '4.7 kΩ' and 4700 are the same resistor; stale figures dropped."""
    d = fixtures.npn_ce()
    d = type(d)(**{**d.__dict__, "predicted": {"gain_db": 1.0},
                   "extra": {"poles_zeros": {}, "roles": {"R3": "collector"}}})
    a, b, c = d.with_value("R3", "4k7"), d.with_value("R3", "4.7 kΩ"), d.with_value("R3", 4700)
    assert a.part("R3").value == b.part("R3").value == c.part("R3").value == 4700.0
    assert d.with_value("C2", "4n7").part("C2").value == pytest.approx(4.7e-9)
    assert a.predicted == {} and "poles_zeros" not in a.extra and a.extra["roles"]
    for ref, value in (("R3", "4.7 nF"), ("Q1", 1.0), ("R99", 1.0), ("R3", -5)):
        with pytest.raises(ss.StageError):
            d.with_value(ref, value)


def test_edit_moves_the_gain_as_the_textbook_says():
    """Halving RC of a degenerated CE: new/old gain ≈ ratio of RC‖RL (Sedra & Smith, from
    memory: Av ≈ −(RC‖RL)/(re + RE1), re = VT/IC; IC is set by the divider, not by RC)."""
    d = fixtures.npn_ce()
    before = ss.analyze(d)
    after = ss.analyze(d.with_value("R3", "2.35 kΩ"))
    par = lambda x, y: x * y / (x + y)  # noqa: E731
    expected = par(2.35e3, d.load_resistance) / par(4.7e3, d.load_resistance)
    ratio = abs(after.analysis.gain) / abs(before.analysis.gain)
    assert ratio == pytest.approx(expected, rel=0.03)
    assert before.meets_spec is None and before.verdict is None


def test_dict_spec_and_to_dict_are_plain_json(tmp_path):
    """load_spec takes a dict; Assessment/YieldResult/PulseResponse dicts survive json.dumps."""
    spec = ss.load_spec({
        "title": "Tape-head preamp (test)",
        "supply": {"voltage": "12 V"}, "source": {"resistance": "1 kΩ"},
        "load": {"resistance": "22 kΩ", "capacitance": "150 pF"},
        "require": {"gain": "26 dB", "gain_tolerance": "3 dB", "f_low": "20 Hz",
                    "f_high": "50 kHz", "swing": "2 Vpp"},
        "transistor": {"preset": "generic-npn"},
    })
    from dataclasses import replace

    again = ss.load_spec(json.loads(json.dumps(spec.to_dict())))  # the TOML dict, round trip
    assert replace(again, path="") == replace(spec, path="")
    d = fixtures.npn_ce()
    check = ss.analyze(d, spec, units=200, seed=3)
    data = json.loads(json.dumps(check.to_dict()))
    for key in ("gain_db", "f_low", "f_high", "z_in", "z_out", "corners", "checks", "yield"):
        assert key in data
    assert data["meets_spec"] == check.meets_spec
    assert 0.0 <= data["yield"]["estimate"] <= 1.0 and data["yield"]["units"] == 200
    pulse = json.loads(json.dumps(ss.pulse_response(d, 1e-3).to_dict()))
    assert pulse["width"] == 1e-3 and pulse["tilt"] > 0
    with pytest.raises(ss.StageError):
        ss.load_spec({"supply": {"voltage": "12 V"}})


def test_report_from_a_design(tmp_path):
    """write_report on an edited design writes the report files, refusing foreign files."""
    from stagesynth.quantities.errors import OutputExistsError

    d = fixtures.npn_ce().with_value("R4", "220")
    (tmp_path / "report.md").write_text("mine")
    with pytest.raises(OutputExistsError):
        ss.write_report(d, tmp_path)
    assert (tmp_path / "report.md").read_text() == "mine"
    for width in (0.0, -1e-3, math.inf):
        with pytest.raises(ss.StageError):
            ss.write_report(d, tmp_path / "w", pulse_width=width)
    assert not (tmp_path / "w").exists()
    paths = ss.write_report(d, tmp_path / "r", pulse_width=2e-3)
    names = {p.name for p in paths}
    assert {"report.html", "report.md", "pulse.svg", "stage.s2p"} <= names
    assert "design.json" not in names
    assert "tilt of a 2 ms pulse" in (tmp_path / "r" / "report.md").read_text()


def test_worked_example_runs_end_to_end(tmp_path):
    """examples/python-api.py as a user runs it: exit 0, its files written where asked."""
    proc = subprocess.run([sys.executable, str(ROOT / "examples" / "python-api.py"),
                           str(tmp_path)], capture_output=True, text=True, env=_env(),
                          timeout=300, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "bode-python-control.png").stat().st_size > 10_000
    design = json.loads((tmp_path / "report" / "design.json").read_text())
    assert design["format"] == "stagesynth-design-1"
    lines = proc.stdout.splitlines()
    assert any(line.startswith("yield ") for line in lines)
    edit = next(line for line in lines if "-> 4.7 kΩ" in line)
    gains = [float(x) for x in edit.replace("(was", "").split("gain ")[1].split(" dB")[:2]]
    assert math.isfinite(gains[0]) and gains[0] != gains[1]


def test_cli_report_takes_a_pulse_width(tmp_path):
    """`stagesynth report --pulse-width "2 ms"` shows that pulse; "2 kHz" is refused with
    exit code 2 and one line naming the option (contract section 4)."""
    from typer.testing import CliRunner

    from stagesynth.cli import app

    design = tmp_path / "design.json"
    design.write_text(fixtures.npn_ce().to_json(), encoding="utf-8")
    runner = CliRunner()
    ok = runner.invoke(app, ["report", str(design), "--out", str(tmp_path / "r"),
                             "--pulse-width", "2 ms"])
    assert ok.exit_code == 0, ok.output
    assert "tilt of a 2 ms pulse" in (tmp_path / "r" / "report.md").read_text()
    bad = runner.invoke(app, ["report", str(design), "--out", str(tmp_path / "s"),
                              "--pulse-width", "2 kHz"])
    assert bad.exit_code == 2
    assert "--pulse-width" in bad.output and "Traceback" not in bad.output
    assert not (tmp_path / "s").exists()
