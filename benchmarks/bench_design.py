"""End-to-end design time against the 2 s target, split by phase.

For every spec in specs/ (or those given): `synthesize` and the report bundle
(design.json + stagesynth.report.bundle.write_bundle), median of --runs runs each, with
the synthesis split from SynthesisResult.stats (first cut, standard values, capacitors,
verification, and any further phase the synthesizer reports); then the whole CLI
(`python -m stagesynth design`) end to end in a subprocess, start-up included.

    python benchmarks/bench_design.py [--runs 3] [--cli-runs 1] [specs/x.toml ...]

One warm-up design (imports, first plots) runs before the timings and is not counted.
Timings on a shared machine vary: read the medians, and the load average printed first.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from stagesynth.contracts.fileio import OutputDir  # noqa: E402
from stagesynth.contracts.spec import Spec, load_spec  # noqa: E402
from stagesynth.report.bundle import write_bundle  # noqa: E402
from stagesynth.synthesis.synth import synthesize  # noqa: E402

TARGET_S = 2.0
PHASES = ("first_cut_s", "standard_values_s", "capacitors_s", "verify_s")


def design_once(spec: Spec, folder: Path) -> dict[str, float]:
    """One synthesis plus report bundle; seconds by phase."""
    c0 = time.process_time()
    t0 = time.perf_counter()
    result = synthesize(spec)
    t1 = time.perf_counter()
    out = OutputDir(folder, force=True)
    out.write_text("design.json", result.design.to_json())
    write_bundle(out, result.design, result.analysis, verdict=result.verdict, spec=spec,
                 notes=list(result.notes))
    t2 = time.perf_counter()
    times = {k: float(v) for k, v in result.stats.items() if k.endswith("_s")}
    times.update({"synthesize_s": t1 - t0, "report_s": t2 - t1, "total_s": t2 - t0,
                  "cpu_s": time.process_time() - c0, "meets": float(result.meets_spec)})
    return times


def cli_once(spec_path: Path, folder: Path) -> tuple[float, float, int]:
    """`stagesynth design` end to end in a fresh interpreter; (wall s, CPU s, exit code)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "stagesynth", "design", str(spec_path),
                           "--out", str(folder), "--force"], cwd=ROOT, capture_output=True,
                          text=True)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu, proc.returncode


def median_of(runs: list[dict[str, float]]) -> dict[str, float]:
    keys = [k for k in runs[0] if all(k in r for r in runs)]
    return {k: statistics.median(r[k] for r in runs) for k in keys}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("specs", nargs="*", type=Path, help="spec files (default: specs/*.toml)")
    parser.add_argument("--runs", type=int, default=3, help="in-process runs per spec")
    parser.add_argument("--cli-runs", type=int, default=1, help="CLI runs per spec")
    args = parser.parse_args()
    paths = args.specs or sorted((ROOT / "specs").glob("*.toml"))
    print(f"stagesynth design benchmark: {len(paths)} specs, median of {args.runs} runs, "
          f"target {TARGET_S:g} s; load average {os.getloadavg()[0]:.1f} on "
          f"{os.cpu_count()} CPUs")
    specs = {p: load_spec(p) for p in paths}
    with tempfile.TemporaryDirectory() as tmp:
        design_once(specs[paths[0]], Path(tmp) / "warmup")
        results = {}
        for i, p in enumerate(paths):
            runs = [design_once(specs[p], Path(tmp) / f"s{i}r{k}") for k in range(args.runs)]
            results[p] = median_of(runs)
        extra = sorted({k for m in results.values() for k in m if k.endswith("_s")}
                       - set(PHASES) - {"synthesize_s", "report_s", "total_s", "cpu_s"})
        cols = [*PHASES, *extra, "synthesize_s", "report_s", "total_s", "cpu_s"]
        labels = [c.removesuffix("_s") for c in cols]
        widths = [max(8, len(label)) for label in labels]
        head = ["spec".ljust(26), "meets", *(lb.rjust(w) for lb, w in zip(labels, widths,
                                                                        strict=True)),
                "total/target"]
        print("\nin process, seconds (median; cpu = process CPU time of synthesis + report):")
        print(" ".join(head))
        for p, m in results.items():
            row = [p.stem[:26].ljust(26), ("yes" if m["meets"] else "no").rjust(5)]
            row += [f"{m.get(c, float('nan')):{w}.3f}" for c, w in zip(cols, widths,
                                                                       strict=True)]
            row.append(f"{m['total_s'] / TARGET_S:12.2f}")
            print(" ".join(row))
        totals = [m["total_s"] for m in results.values()]
        cpus = [m["cpu_s"] for m in results.values()]
        print(f"\nworst total {max(totals):.3f} s = {max(totals) / TARGET_S:.2f} x target; "
              f"mean {statistics.mean(totals):.3f} s (CPU: worst {max(cpus):.3f} s, "
              f"mean {statistics.mean(cpus):.3f} s)")

        if args.cli_runs > 0:
            print(f"\nCLI end to end (`stagesynth design`, median of {args.cli_runs}):")
            for i, p in enumerate(paths):
                timed = [cli_once(p, Path(tmp) / f"cli{i}") for _ in range(args.cli_runs)]
                secs = statistics.median(t for t, _, _ in timed)
                cpu = statistics.median(c for _, c, _ in timed)
                print(f"{p.stem[:26].ljust(26)} exit {timed[-1][2]}  {secs:7.3f} s wall "
                      f"({secs / TARGET_S:5.2f} x target), {cpu:7.3f} s CPU")


if __name__ == "__main__":
    main()
