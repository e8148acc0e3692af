"""Noise speed figures: one design's noise over 200 frequencies (target < 20 ms), and
synthesis of a spec with noise requirements against the same spec without them
(target: no slower than 1.5x).

    python benchmarks/bench_noise.py [--runs 5] [specs/x.toml]

The spec (default specs/geophone-low-noise-preamp.toml) is synthesized with its noise
requirements and again with them removed; the noise sweep times the engine's
`noise.nominal_spectrum` (every generator, one adjoint solve per frequency) on the
designed stage. Timings on a shared machine vary: read the medians and the load.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from stagesynth.contracts.spec import load_spec  # noqa: E402
from stagesynth.engine.analysis import analyze  # noqa: E402
from stagesynth.engine.noise import nominal_spectrum  # noqa: E402
from stagesynth.synthesis.synth import synthesize  # noqa: E402

SWEEP_TARGET_S = 0.020
SYNTH_RATIO_TARGET = 1.5


def _median(fn, runs: int) -> float:
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("spec", nargs="?", default=str(ROOT / "specs/geophone-low-noise-preamp.toml"))
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args()
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    spec = load_spec(args.spec)
    quiet = dataclasses.replace(spec, require=dataclasses.replace(
        spec.require, noise=None, noise_figure_db=None, noise_rms=None, noise_at=None))

    result = synthesize(spec)  # warm-up, and the design the sweep uses
    analysis = analyze(result.design, spec)
    freqs = np.geomspace(1.0, 1e7, 200)
    nominal_spectrum(analysis, freqs)
    t_sweep = _median(lambda: nominal_spectrum(analysis, freqs), max(args.runs * 4, 20))
    t_analyze = _median(lambda: analyze(result.design, spec), args.runs)
    print(f"noise of one design over 200 frequencies: {t_sweep * 1e3:.2f} ms "
          f"(target < {SWEEP_TARGET_S * 1e3:.0f} ms); analyze with noise at every corner "
          f"{t_analyze * 1e3:.1f} ms")

    synth_runs = max(1, args.runs // 2)
    t_noise = _median(lambda: synthesize(spec), synth_runs)
    t_quiet = _median(lambda: synthesize(quiet), synth_runs)
    with_noise = synthesize(spec)
    without = synthesize(quiet)
    ic = {name: next(iter(r.analysis.nominal.transistors.values())).ic
          for name, r in (("with", with_noise), ("without", without))}
    print(f"synthesis with noise requirements {t_noise:.2f} s, without {t_quiet:.2f} s: "
          f"ratio {t_noise / t_quiet:.2f} (target <= {SYNTH_RATIO_TARGET})")
    print(f"input transistor current: {ic['with'] * 1e6:.0f} µA with the noise requirements "
          f"({with_noise.design.topology}), {ic['without'] * 1e6:.0f} µA without "
          f"({without.design.topology})")


if __name__ == "__main__":
    main()
