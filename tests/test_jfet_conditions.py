"""The corners of a junction-FET design name the unit they take. Outside source: the
spec-format contract (docs/spec-format.md, §2 "Junction FET"), which
pairs idss min with the vp nearest zero and idss max with the vp farthest from zero, and
takes the geometric mean of each spread as nominal."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "capacitive-sensor-follower"


def test_corner_conditions_carry_the_paired_unit() -> None:
    design = json.loads((EXAMPLE / "design.json").read_text())
    (dev_name, dev), = ((k, v) for k, v in design["devices"].items() if v["kind"] == "jfet")
    idss_lo, idss_hi = sorted(dev["idss"])
    vp_near, vp_far = sorted(dev["vp"], key=abs)
    out = subprocess.run([sys.executable, "-m", "stagesynth", "analyze",
                          str(EXAMPLE / "design.json"), "--json"],
                         capture_output=True, text=True, check=False)
    data = json.loads(out.stdout)
    units = [c["conditions"]["jfet_units"][dev_name] for c in data["corners"]]
    pairs = {(u["idss"], u["vp"]) for u in units}
    # contract §2: exactly the two paired corner units, low with low
    assert pairs == {(idss_lo, vp_near), (idss_hi, vp_far)}
    assert all(u["u"] in (0.0, 1.0) for u in units)
    for u in units:
        want = (idss_lo, vp_near) if u["u"] == 0.0 else (idss_hi, vp_far)
        assert math.isclose(u["idss"], want[0], rel_tol=1e-12)
        assert math.isclose(u["vp"], want[1], rel_tol=1e-12)
