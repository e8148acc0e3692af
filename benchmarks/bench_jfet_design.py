"""Junction-FET synthesis speed: which family wins each sensor spec, its margin, the time.

    python benchmarks/bench_jfet_design.py [specs/x.toml ...]

Default: the two junction-FET examples in specs/. For each spec the whole family choice
runs (every family the spec's devices can build), then each family alone, so the cost of
each family's search shows. Targets (a 2-core machine, lightly loaded): a single-stage
family under 5 s, a two-stage family under 20 s. Timings on a shared machine vary: read
them together with the load average printed.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from stagesynth.contracts.spec import load_spec  # noqa: E402
from stagesynth.quantities.errors import NoDesignError  # noqa: E402
from stagesynth.synthesis.devices import family_spec  # noqa: E402
from stagesynth.synthesis.family_search import _synthesize_family  # noqa: E402
from stagesynth.synthesis.synth import synthesize  # noqa: E402
from stagesynth.synthesis.topologies import FAMILIES  # noqa: E402

DEFAULT = ("specs/capacitive-sensor-follower.toml", "specs/piezo-accelerometer-preamp.toml")
TARGET_S = {1: 5.0, 2: 20.0}


def main(paths: list[str]) -> None:
    print(f"load average {os.getloadavg()[0]:.1f}")
    for path in paths or DEFAULT:
        spec = load_spec(ROOT / path if not Path(path).is_absolute() else path)
        t = time.perf_counter()
        res = synthesize(spec)
        total = time.perf_counter() - t
        worst = min((c.margin for c in res.verdict.checks), default=float("nan"))
        print(f"\n{path}: {res.design.topology}, meets {res.meets_spec}, smallest margin "
              f"{worst:+.3f}, whole choice {total:.1f} s")
        for name, family in FAMILIES.items():
            fspec = family_spec(spec, family)
            if fspec is None or family.precheck(fspec):
                continue
            t = time.perf_counter()
            try:
                one = _synthesize_family(fspec, family, "margin")
                state = "meets" if one.meets_spec else "fails " + ", ".join(
                    c.name for c in one.verdict.failed)
            except NoDesignError:
                state = "no candidate"
            dt = time.perf_counter() - t
            flag = "" if dt <= TARGET_S[family.STAGES] else "  (over target)"
            print(f"  {name:14s} {dt:6.1f} s  {state}{flag}")


if __name__ == "__main__":
    main(sys.argv[1:])
