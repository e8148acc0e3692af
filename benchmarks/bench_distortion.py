"""Distortion speed against the issue's targets (prints figures; no assertions).

    python benchmarks/bench_distortion.py [--runs 5]

1. THD of one single-stage design by harmonic balance: nominal alone, and nominal with
   every corner in one batch (target < 50 ms);
2. the THD-against-level curve of the report, 20 levels (target < 0.5 s);
3. synthesis of a spec with a `thd` requirement against the same spec without it
   (target: at most 2x).
Both wall-clock and CPU time are printed (minimum of --runs): on a shared machine the CPU
figure is the one to compare with the targets.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from stagesynth.contracts.netlist import load_design  # noqa: E402
from stagesynth.contracts.spec import spec_from_mapping  # noqa: E402
from stagesynth.engine.analysis import analyze, batch_values  # noqa: E402
from stagesynth.engine.circuit import compile_design  # noqa: E402
from stagesynth.engine.distortion import _dc_subset  # noqa: E402
from stagesynth.engine.harmonic import LargeSignal, solve_periodic  # noqa: E402
from stagesynth.engine.thdsweep import distortion_views  # noqa: E402
from stagesynth.synthesis.synth import synthesize  # noqa: E402

LINE_STAGE = {
    "title": "Studio line stage (benchmark)",
    "supply": {"voltage": "15 V", "tolerance": "5 %"},
    "source": {"resistance": "600 Ω"},
    "load": {"resistance": "10 kΩ", "capacitance": "220 pF"},
    "require": {"gain": "14 dB", "f_low": "20 Hz", "f_high": "40 kHz", "z_in": "10 kΩ",
                "swing": "4 Vpp", "ambient": ["10 °C", "40 °C"]},
    "transistor": {"preset": "generic-npn"},
}


def timed(fn, runs: int) -> tuple[float, float]:
    """(min wall s, min CPU s) over runs."""
    wall, cpu = [], []
    for _ in range(runs):
        w, c = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - w)
        cpu.append(time.process_time() - c)
    return min(wall), min(cpu)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--design", default=str(ROOT / "examples/hydrophone-front-end/design.json"))
    args = ap.parse_args()
    print(f"load average {os.getloadavg()[0]:.1f}; min of {args.runs} runs (wall / CPU)")
    design = load_design(args.design)
    a = analyze(design)
    circuit = compile_design(design)
    r, c = batch_values(design, circuit)
    level = a.thd_level / 2.0

    def hb(members: np.ndarray) -> None:
        m = members.size
        model = LargeSignal(circuit, _dc_subset(a.figures.dc, members), np.repeat(r, m, 0),
                            np.repeat(c, m, 0), design.source_resistance,
                            design.load_resistance, design.load_capacitance)
        solve_periodic(model, a.thd_at, level=level)

    nominal = np.array([0])
    every = np.arange(a.figures.dc.v.shape[0])
    w, cpu = timed(lambda: hb(nominal), args.runs)
    print(f"THD by harmonic balance, nominal:            {1e3 * w:7.1f} ms / {1e3 * cpu:7.1f} ms"
          "  (target 50 ms)")
    w, cpu = timed(lambda: hb(every), args.runs)
    print(f"THD by harmonic balance, nominal+{every.size - 1} corners: {1e3 * w:7.1f} ms / "
          f"{1e3 * cpu:7.1f} ms")
    w, cpu = timed(lambda: distortion_views(a), args.runs)
    print(f"THD against level, 20 levels (+ spectrum):   {1e3 * w:7.1f} ms / {1e3 * cpu:7.1f} ms"
          "  (target 500 ms)")

    plain = spec_from_mapping(LINE_STAGE)
    with_thd = dataclasses.replace(plain, require=dataclasses.replace(
        plain.require, thd=0.003, thd_level=3.0, thd_at=1000.0))
    synthesize(plain)  # warm-up
    runs = max(1, args.runs // 2)
    w0, c0 = timed(lambda: synthesize(plain), runs)
    w1, c1 = timed(lambda: synthesize(with_thd), runs)
    print(f"synthesis without thd:                       {w0:7.2f} s  / {c0:7.2f} s")
    print(f"synthesis with thd = 0.3 % at 3 Vpp:         {w1:7.2f} s  / {c1:7.2f} s"
          f"  (ratio {c1 / c0:.2f} CPU, target <= 2)")


if __name__ == "__main__":
    main()
