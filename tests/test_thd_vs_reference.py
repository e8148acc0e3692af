"""The CLI's distortion figures against the independent reference (tests/independent/refthd.py).

The reference is written from the contract alone (time-domain collocation on the whole
netlist, operating point from refmodel.py); the engine uses harmonic balance reduced to
the transistor terminals. Agreement is required within 0.5 dB for THD, HD2 and HD3 at
nominal and at the corner the CLI names as the worst, and the verdict row must take the
worst of nominal and every corner.

Outside source: docs/spec-format.md §2 "Distortion" (the contract), implemented
independently in tests/independent/refthd.py; THD = sqrt(sum V_k^2, k = 2..10)/V_1 is the
standard definition (IEC 60268-3 style, from memory).
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
from independent import designs as ds
from independent import refmodel as rm
from independent import refthd

ROOT = Path(__file__).resolve().parents[1]
CASES = {  # spec name -> (thd limit, level, frequency) written into [require]
    "ce_npn_ok": ('"1 %"', '"3 Vpp"', '"1 kHz"'),
    "ce_pnp_ok": ('"-40 dB"', '"2 Vpp"', '"300 Hz"'),
    "ce_ef_ok": ('"5000 ppm"', '"4 Vpp"', '"10 kHz"'),
    "ce_ce_ok": ('"0.5 %"', '"2 Vpp"', '"1 kHz"'),
}


def _spec_text(name: str) -> str:
    thd, level, at = CASES[name]
    text = ds.spec_toml(ds.SPECS[name])
    return text.replace("[require]\n", f"[require]\nthd = {thd}\nthd_level = {level}\n"
                                      f"thd_at = {at}\n", 1)


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, dict]:
    """`analyze --json` once per case, all processes in parallel."""
    tmp = tmp_path_factory.mktemp("thd_vs_reference")
    procs = {}
    for name in CASES:
        design = ds.DESIGNS[ds.SPECS[name]["design"]]
        dpath, spath = tmp / f"{name}.json", tmp / f"{name}.toml"
        dpath.write_text(json.dumps(design), encoding="utf-8")
        spath.write_text(_spec_text(name), encoding="utf-8")
        cmd = [sys.executable, "-m", "stagesynth", "analyze", str(dpath), "--spec", str(spath),
               "--json"]
        procs[name] = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.PIPE,
                                       stderr=subprocess.PIPE, text=True)
    out = {}
    for name, p in procs.items():
        stdout, stderr = p.communicate(timeout=600)
        assert p.returncode in (0, 1), stderr
        out[name] = json.loads(stdout)
    return out


def _db(a: float, b: float) -> float:
    return 20.0 * math.log10(a / b)


@pytest.mark.parametrize("name", list(CASES))
def test_cli_distortion_matches_reference(runs: dict[str, dict], name: str) -> None:
    data = runs[name]
    design = ds.DESIGNS[ds.SPECS[name]["design"]]
    cir = rm.circuit_from_design(design)
    level = data["thd_level_vpp"]
    freq = data["thd_at"]
    ref = refthd.distortion(design, rm.nominal_conditions(cir), level, freq)
    for key in ("thd", "hd2", "hd3"):
        assert abs(_db(data[key], getattr(ref, key))) < 0.5, key
    worst = max(data["corners"], key=lambda c: c["thd"])
    cond = worst["conditions"]
    ref_c = refthd.distortion(
        design, rm.Conditions(tuple(sorted(cond["hfe_values"].items())), cond["ambient_c"],
                              cond["supply_v"]), level, freq)
    for key in ("thd", "hd2", "hd3"):
        assert abs(_db(worst[key], getattr(ref_c, key))) < 0.5, key
    # the verdict row: the worst of nominal and every corner, against the limit
    row = next(c for c in data["checks"] if c["name"] == "thd")
    assert row["value"] == pytest.approx(max(data["thd"], worst["thd"]), rel=1e-12)
    assert row["ok"] == (row["value"] <= row["limit"])
