"""Monte Carlo throughput: units per second for single-stage designs (target: 10,000 < 2 s).

Prints, per bundled spec, the time for 10,000 units (median of 3), the units per
second, the ratio to the 2 s target, and the peak memory of one run. Designs are
synthesized first (not timed). Run: python benchmarks/bench_montecarlo.py
"""

from __future__ import annotations

import statistics
import sys
import time
import tracemalloc
from pathlib import Path

from stagesynth.contracts.spec import load_spec
from stagesynth.judging.montecarlo import monte_carlo
from stagesynth.synthesis.synth import synthesize

ROOT = Path(__file__).resolve().parent.parent
UNITS = 10_000
TARGET_S = 2.0


def main() -> int:
    specs = sorted((ROOT / "specs").glob("*.toml"))
    print(f"{'spec':32s} {'10k units (s)':>14s} {'units/s':>10s} {'vs 2 s':>8s} {'peak MB':>8s}")
    for path in specs:
        spec = load_spec(path)
        result = synthesize(spec)
        if not result.meets_spec:
            continue
        times = []
        for _ in range(3):
            t = time.perf_counter()
            monte_carlo(result.design, spec, UNITS)
            times.append(time.perf_counter() - t)
        tracemalloc.start()
        monte_carlo(result.design, spec, UNITS)
        peak = tracemalloc.get_traced_memory()[1] / 1e6
        tracemalloc.stop()
        med = statistics.median(times)
        print(f"{path.stem:32s} {med:14.3f} {UNITS / med:10.0f} {med / TARGET_S:8.2f} "
              f"{peak:8.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
