"""Engine throughput: AC sweeps, DC solves, analyze() and CLI start-up. Prints figures only.

- AC: frequency points per second of AcSystem.gain over 10,000 points for a 1- and a
  2-transistor stage, beside a bare numpy.linalg.solve on the same already-stamped
  matrices (the ratio is the engine's overhead over the linear algebra itself).
- DC: solve_dc for one condition and for 1,000 conditions in one batch.
- analyze(): whole-analysis wall time.
- peaking sweep and batched poles: time per member (every corner of every candidate).
- `stagesynth --help`: start-up time (median of 5 subprocess runs) and any heavy
  module (scipy, control, skrf, matplotlib, schemdraw) it imports - there should be none.

The stages are the hand-built fixtures of tests/conftest.py.
Run: python benchmarks/bench_engine.py
"""

from __future__ import annotations

import json
import math
import os
import statistics
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))

from conftest import ce_follower, npn_ce  # noqa: E402

from stagesynth.contracts.netlist import Design  # noqa: E402
from stagesynth.engine.analysis import analyze  # noqa: E402
from stagesynth.engine.circuit import compile_design  # noqa: E402
from stagesynth.engine.dc import solve_dc  # noqa: E402

POINTS = 10_000
BATCH = 1_000
HEAVY = ("scipy", "control", "skrf", "matplotlib", "schemdraw")
STAGES: dict[str, Callable[[], Design]] = {"1 transistor": npn_ce, "2 transistors": ce_follower}


def best_of(fn: Callable[[], object], repeat: int = 7) -> float:
    """Fastest wall time of `repeat` calls, seconds (the least disturbed by other load)."""
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def stamped(design: Design, freqs: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Y(jw) with source and load attached, right-hand side, output index: the same
    system AcSystem.gain solves, stamped once outside the timed region."""
    system = analyze(design).system
    circuit = system.circuit
    w = 2.0 * math.pi * freqs
    y = system.G[0][None, :, :] + 1j * w[:, None, None] * system.C[0][None, :, :]
    o, i = circuit.output, circuit.input
    y[:, o, o] += 1.0 / system.load_resistance[0] + 1j * w * system.load_capacitance[0]
    gs = 1.0 / system.source_resistance[0]
    y[:, i, i] += gs
    rhs = np.zeros((freqs.size, circuit.n, 1), dtype=complex)
    rhs[:, i, 0] = gs
    return y, rhs, o


def bench_ac() -> None:
    print(f"AC sweep, {POINTS:,} frequency points (best of 7)")
    print(f"  {'stage':14s} {'nodes':>5s} {'gain() pts/s':>14s} {'raw solve pts/s':>16s} "
          f"{'overhead':>9s}")  # fmt: skip
    freqs = np.logspace(0, 9, POINTS)
    for label, build in STAGES.items():
        design = build()
        system = analyze(design).system
        t_gain = best_of(lambda s=system: s.gain(freqs[None, :]))
        y, rhs, o = stamped(design, freqs)
        t_raw = best_of(lambda y=y, rhs=rhs: np.linalg.solve(y, rhs))
        # same numbers either way: the raw solve is of the system the engine solves
        check = np.linalg.solve(y, rhs)[:, o, 0]
        err = float(np.max(np.abs(check / system.gain(freqs[None, :])[0] - 1.0)))
        print(
            f"  {label:14s} {system.circuit.n:5d} {POINTS / t_gain:14,.0f} "
            f"{POINTS / t_raw:16,.0f} {t_gain / t_raw:8.2f}x   (max rel. diff {err:.1e})"
        )


def dc_inputs(design: Design, count: int, rng: np.random.Generator):
    circuit = compile_design(design)
    vals = design.values()
    r = np.tile([vals[ref] for ref, _, _ in circuit.resistors], (count, 1))
    lo = np.array([q.device.hfe_min for q in circuit.bjts])
    hi = np.array([q.device.hfe_max for q in circuit.bjts])
    hfe = np.exp(rng.uniform(np.log(lo), np.log(hi), size=(count, lo.size)))
    supply = design.supply_voltage * rng.uniform(0.9, 1.1, size=count)
    ambient = rng.uniform(-40.0, 85.0, size=count)
    return circuit, r, supply, hfe, ambient


def bench_dc() -> None:
    print(f"DC operating point, cold start (best of 7); batch = {BATCH:,} random conditions")
    print(f"  {'stage':14s} {'single (ms)':>12s} {'batch (ms)':>11s} {'per cond. (us)':>15s} "
          f"{'converged':>10s}")  # fmt: skip
    rng = np.random.default_rng(20261201)
    for label, build in STAGES.items():
        design = build()
        args = {}
        for n in (1, BATCH):
            circuit, r, supply, hfe, ambient = dc_inputs(design, n, rng)
            args[n] = (circuit, r, supply, hfe, ambient)

        def run(n: int, a=args, d=design):
            circuit, r, supply, hfe, ambient = a[n]
            return solve_dc(circuit, r, supply, hfe, ambient, d.source_resistance,
                            d.load_resistance)  # fmt: skip

        t1 = best_of(lambda: run(1))
        tb = best_of(lambda: run(BATCH))
        ok = int(np.sum(run(BATCH).converged))
        print(f"  {label:14s} {t1 * 1e3:12.2f} {tb * 1e3:11.1f} {tb / BATCH * 1e6:15.1f} "
              f"{ok:>5d}/{BATCH}")  # fmt: skip


def bench_analyze() -> None:
    print("analyze(design), nominal + corners (best of 7)")
    for label, build in STAGES.items():
        design = build()
        t = best_of(lambda d=design: analyze(d))
        print(f"  {label:14s} {t * 1e3:8.1f} ms")


_PROBE = (
    "import json, runpy, sys\n"
    "sys.argv = ['stagesynth', '--help']\n"
    "try:\n"
    "    runpy.run_module('stagesynth', run_name='__main__')\n"
    "except SystemExit:\n"
    "    pass\n"
    "print(json.dumps(sorted(sys.modules)), file=sys.stderr)\n"
)


def bench_startup() -> None:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    times = []
    for _ in range(5):
        t = time.perf_counter()
        subprocess.run([sys.executable, "-m", "stagesynth", "--help"], env=env,
                       capture_output=True, check=True)  # fmt: skip
        times.append(time.perf_counter() - t)
    bare = []
    for _ in range(5):
        t = time.perf_counter()
        subprocess.run([sys.executable, "-c", "pass"], env=env, capture_output=True, check=True)
        bare.append(time.perf_counter() - t)
    res = subprocess.run([sys.executable, "-c", _PROBE], env=env, capture_output=True,
                         text=True)  # fmt: skip
    modules = json.loads(res.stderr.strip().splitlines()[-1])
    heavy = sorted({m.split(".")[0] for m in modules} & set(HEAVY))
    print("stagesynth --help start-up (median of 5)")
    print(f"  {statistics.median(times) * 1e3:8.1f} ms   (bare interpreter "
          f"{statistics.median(bare) * 1e3:.1f} ms; {len(modules)} modules loaded)")  # fmt: skip
    print(f"  heavy modules imported: {', '.join(heavy) if heavy else 'none'}")


def bench_response() -> None:
    """Peaking sweep and batched poles per member (synthesis judges both at every corner)."""
    from stagesynth.engine.peaking import peaking, stability

    print(f"peaking sweep and stability, {BATCH:,} members (best of 3)")
    for label, build in STAGES.items():
        system = analyze(build()).system.subset(np.zeros(BATCH, dtype=int))
        fm = np.full(BATCH, 1e3)
        tp = best_of(lambda s=system, f=fm: peaking(s, f), repeat=3)
        ts = best_of(lambda s=system, f=fm: stability(s, f), repeat=3)
        print(f"  {label:14s} peaking {tp / BATCH * 1e6:8.1f} us/member   "
              f"poles {ts / BATCH * 1e6:8.1f} us/member")


def main() -> int:
    print(f"numpy {np.__version__}, python {sys.version.split()[0]}, "
          f"{os.cpu_count()} CPU(s)\n")  # fmt: skip
    bench_ac()
    print()
    bench_dc()
    print()
    bench_analyze()
    print()
    bench_response()
    print()
    bench_startup()
    return 0


if __name__ == "__main__":
    sys.exit(main())
