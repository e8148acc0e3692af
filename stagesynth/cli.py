"""Command-line interface: a thin layer over spec -> synthesis -> analysis -> verdict -> report.

Exit codes (contract section 4): 0 the design meets the spec, 1 it does not (or
no design can), 2 the input cannot be read or is invalid. User errors print one
message on stderr and never a traceback. Engine modules are imported inside
the commands so that `stagesynth --help` starts fast.
"""

from __future__ import annotations

import functools
import json
import math
import sys
from pathlib import Path
from typing import Annotated

import typer

from .errors import StageError

app = typer.Typer(
    name="stagesynth",
    help="Design and verify discrete transistor gain stages from a requirements file.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)


def _fail(message: str, code: int = 2) -> None:
    typer.echo(f"stagesynth: {message}", err=True)
    raise typer.Exit(code)


def user_errors(func):
    """Turn StageError into one line on stderr and exit code 2."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except StageError as exc:
            _fail(f"error: {exc}", exc.exit_code)

    return wrapper


def _inputs(design_file: Path, spec: Path | None):
    """The design file and, when given, the spec file: both validated (exit 2 if not)."""
    from .netlist import load_design

    design = load_design(design_file)
    if spec is None:
        return design, None
    from .spec import load_spec

    return design, load_spec(spec)


@app.command()
@user_errors
def analyze(
    design_file: Annotated[Path, typer.Argument(metavar="DESIGN.json", help="Design file.")],
    spec: Annotated[
        Path | None, typer.Option("--spec", metavar="SPEC.toml", help="Judge against this spec.")
    ] = None,
    as_json: Annotated[
        bool, typer.Option("--json", help="Print one JSON object on stdout.")
    ] = False,
    units: Annotated[
        int | None,
        typer.Option("--yield", metavar="N", help="Monte Carlo over N built units (needs --spec)."),
    ] = None,
    seed: Annotated[int, typer.Option("--seed", help="Monte Carlo seed.")] = 20261201,
) -> None:
    """Analyse a design: gain, corners, impedances, swing at every corner, verdict.

    With --spec, every requirement is judged; a spec that asks for a yield gets a
    Monte Carlo of 10,000 units unless --yield N says otherwise.
    """
    from .analysis import analyze as run_analysis
    from .results import analysis_to_dict
    from .textout import analysis_table

    design, spec_obj = _inputs(design_file, spec)
    analysis = run_analysis(design, spec_obj)
    verdict = None
    extra: dict = {}
    if units is not None and spec_obj is None:
        raise StageError("the Monte Carlo needs the part tolerances of a spec", key="--yield",
                         accepted="--spec SPEC.toml together with --yield N")
    if units is not None and units < 1:
        raise StageError(f"{units} is not a number of units", key="--yield",
                         accepted="a positive whole number, e.g. 10000")
    if spec_obj is not None:
        from .verdict import judge, with_checks, yield_check

        verdict = judge(analysis, spec_obj)
        if units is None and spec_obj.require.yield_target is not None:
            units = 10_000
        if units is not None:
            est, recs = _run_monte_carlo(design, spec_obj, units, seed, quiet=as_json)
            extra["yield"] = est.to_dict()
            extra["tolerance_advice"] = recs
            if spec_obj.require.yield_target is not None:
                verdict = with_checks(
                    verdict, yield_check(est.estimate, est.interval,
                                         spec_obj.require.yield_target))
    if as_json:
        from .netlist import _clean_floats
        from .stability import robustness

        out = analysis_to_dict(analysis, verdict)
        out["robustness"] = robustness(analysis)
        out.update(extra)
        typer.echo(json.dumps(_clean_floats(out), indent=2))
    else:
        typer.echo(analysis_table(analysis, verdict))
        if "yield" in extra:
            y = extra["yield"]
            lo, hi = y["interval_95"]
            typer.echo(f"\nyield: {100 * y['estimate']:.2f} % of {y['units']} units "
                       f"(95 % interval {100 * lo:.2f} … {100 * hi:.2f} %, seed {y['seed']})")
            for name, count in sorted(y["failures"].items(), key=lambda kv: -kv[1]):
                typer.echo(f"  {count} units fail {name}")
            for line in extra["tolerance_advice"]:
                typer.echo(f"  tighter tolerance: {line}")
    if not analysis.converged:
        typer.echo("stagesynth: the DC operating point did not converge at some corner", err=True)
        raise typer.Exit(1)
    if verdict is not None and not verdict.meets_spec:
        raise typer.Exit(1)


@app.command()
@user_errors
def design(
    spec_file: Annotated[Path, typer.Argument(metavar="SPEC.toml", help="Requirements file.")],
    out: Annotated[Path, typer.Option("--out", metavar="DIR", help="Output folder.")] = Path(
        "stage-out"
    ),
    prefer: Annotated[
        str,
        typer.Option(
            "--prefer",
            help="margin: largest smallest-margin first; current: lowest supply current first.",
        ),
    ] = "margin",
    force: Annotated[
        bool, typer.Option("--force", help="Replace files in DIR that stagesynth did not write.")
    ] = False,
    no_report: Annotated[
        bool, typer.Option("--no-report", help="Write design.json only, no report files.")
    ] = False,
    circuit: Annotated[
        str | None,
        typer.Option("--circuit", metavar="NAME",
                     help="Force a circuit family (default: the simplest that meets the spec)."),
    ] = None,
) -> None:
    """Synthesize a stage that meets SPEC.toml; write design.json and the report to DIR."""
    from .fileio import OutputDir
    from .spec import load_spec
    from .synth import synthesize

    if prefer not in ("margin", "current"):
        raise StageError(f"--prefer {prefer!r} is not a choice", key="--prefer",
                         accepted="margin, current")
    spec = load_spec(spec_file)
    outdir = OutputDir(out, force=force)
    names = ["design.json"] + ([] if no_report else _report_names())
    outdir.check(names)  # refuse before any work is written
    if circuit is not None:
        from .topologies import FAMILIES

        if circuit not in FAMILIES:
            raise StageError(f"{circuit!r} is not a circuit family", key="--circuit",
                             accepted=", ".join(FAMILIES))
    result = synthesize(spec, prefer=prefer, circuit=circuit)
    from dataclasses import replace

    from .report.bom import capacitor_stress
    from .report.poles import pole_zero_map, poles_zeros_dict
    from .stability import robustness

    pz_map = pole_zero_map(result.analysis)
    pz = poles_zeros_dict(pz_map)
    caps_info = {p.ref: capacitor_stress(result.design, result.analysis, p)
                 for p in result.design.parts if p.kind == "capacitor"}
    final = replace(result.design, extra={**result.design.extra, "poles_zeros": pz,
                                          "capacitors": caps_info,
                                          "robustness": robustness(result.analysis)})
    outdir.write_text("design.json", final.to_json())
    written = [out / "design.json"]
    if not no_report:
        written += _write_report(outdir, final, result.analysis, result.verdict, spec,
                                 list(result.notes), pz_map)
    from .textout import analysis_table

    typer.echo(analysis_table(result.analysis, result.verdict))
    typer.echo("")
    if result.meets_spec:
        typer.echo(f"wrote {', '.join(str(p) for p in written)}")
        return
    typer.echo("No design meets every requirement. Conflicts:", err=True)
    for c in result.conflicts:
        typer.echo(f"  {c.name}: asked {c.limit}; best reached {c.best}.\n"
                   f"    what to relax: {c.advice}", err=True)
    if len(result.families) > 1:
        typer.echo("Each circuit family tried:", err=True)
        for f in result.families:
            if f.note:
                typer.echo(f"  {f.name}: not tried ({f.note})", err=True)
            else:
                typer.echo(f"  {f.name}: fails {', '.join(f.failed)} "
                           f"(smallest margin {100 * f.worst_margin:+.0f} %)", err=True)
    typer.echo(f"the closest design was written, marked \"meets_spec\": false: "
               f"{out / 'design.json'}", err=True)
    raise typer.Exit(1)


def _report_names() -> list[str]:
    try:
        from .report.bundle import BUNDLE_FILES
    except ImportError:  # report package not installed in this build
        return []
    return list(BUNDLE_FILES)


def _write_report(outdir, design, analysis, verdict, spec, notes, pz=None) -> list[Path]:
    try:
        from .report.bundle import write_bundle
    except ImportError:
        return []
    return list(write_bundle(outdir, design, analysis, verdict=verdict, spec=spec, notes=notes,
                             pz=pz))


@app.command()
@user_errors
def caps(
    design_file: Annotated[Path, typer.Argument(metavar="DESIGN.json", help="Design file.")],
    f_low: Annotated[
        str, typer.Option("--f-low", metavar="F", help='New low corner, e.g. "5 Hz".')
    ],
    spec: Annotated[
        Path | None, typer.Option("--spec", metavar="SPEC.toml", help="Judge against this spec.")
    ] = None,
    out: Annotated[
        Path | None,
        typer.Option("--out", metavar="FILE", help="Where to write (default: DESIGN.json)."),
    ] = None,
    force: Annotated[
        bool, typer.Option("--force", help="Overwrite a file stagesynth did not write.")
    ] = False,
) -> None:
    """Re-size the coupling and bypass capacitors of a design for a new low corner."""
    from dataclasses import replace

    from .analysis import Environment
    from .analysis import analyze as run_analysis
    from .capsizing import size_capacitors
    from .fileio import OutputDir
    from .results import predicted_block
    from .units import parse_quantity

    target = parse_quantity(f_low, "Hz", key="--f-low")
    if target <= 0:
        raise StageError("must be positive", key="--f-low", accepted='e.g. "5 Hz"')
    d, spec_obj = _inputs(design_file, spec)
    env = Environment.for_design(d, spec_obj)
    f_high = env.band[1] if env.band else run_analysis(d).f_high
    if not math.isfinite(f_high):
        # no upper corner (the gain never falls): judge well above the new low corner
        f_high = 1e4 * target
    if target >= f_high:
        raise StageError(f"{target:g} Hz is not below the high corner {f_high:g} Hz",
                         key="--f-low", accepted="a frequency below f_high")
    env = replace(env, band=(target, f_high))
    recorded = d.extra.get("synthesis", {}) if isinstance(d.extra.get("synthesis"), dict) else {}
    if spec_obj is not None:
        series, tol = spec_obj.parts.capacitors, spec_obj.parts.capacitor_tolerance
    else:  # what the design was made with, else the spec format's defaults
        series = recorded.get("capacitor_series", "E6")
        tol = float(recorded.get("capacitor_tolerance", 0.1))
    before = run_analysis(d, environment=env)
    sizing = size_capacitors(d, target, env=env, series=series, tolerance=tol,
                             z_out_max=spec_obj.require.z_out if spec_obj else None)
    new = replace(sizing.design, band=(target, f_high))
    after = run_analysis(new, environment=env)
    new = replace(new, predicted={**dict(d.predicted), **predicted_block(after)})
    target_path = out or design_file
    outdir = OutputDir(target_path.parent, force=force)
    outdir.write_text(target_path.name, new.to_json())
    from .textout import fmt

    for ref in sizing.share:
        typer.echo(f"{ref}: {fmt(d.part(ref).value, 'F')} -> {fmt(new.part(ref).value, 'F')}"
                   f"  (sees {fmt(sizing.shorted_resistance[ref], 'Ω')}, "
                   f"{100 * sizing.share[ref]:.0f} % of the corner)")
    typer.echo(f"f_low: {fmt(before.f_low, 'Hz')} -> {fmt(after.f_low, 'Hz')} "
               f"(worst case with every capacitor {100 * tol:.0f} % low: "
               f"{fmt(sizing.f_low_worst, 'Hz')}); wrote {target_path}")
    if spec_obj is not None:
        from .verdict import judge

        verdict = judge(run_analysis(new, spec_obj), spec_obj)
        if not verdict.meets_spec:
            failed = ", ".join(c.name for c in verdict.failed)
            typer.echo(f"the updated design does not meet {spec}: {failed}", err=True)
            raise typer.Exit(1)
    elif after.f_low > target:
        raise typer.Exit(1)


def _run_monte_carlo(design, spec, units: int, seed: int, *, quiet: bool):
    """Monte Carlo with a progress bar on stderr for long runs; advice from sensitivities."""
    from .montecarlo import monte_carlo
    from .sensitivity import recommendations, spreads

    if units >= 5000 and not quiet:
        with typer.progressbar(length=units, label="Monte Carlo", file=sys.stderr) as bar:
            est = monte_carlo(design, spec, units, seed=seed, progress=bar.update)
    else:
        est = monte_carlo(design, spec, units, seed=seed)
    recs = recommendations(spreads(design, spec), spec, tuple(est.failures))
    return est, recs


@app.command()
@user_errors
def report(
    design_file: Annotated[Path, typer.Argument(metavar="DESIGN.json", help="Design file.")],
    out: Annotated[Path, typer.Option("--out", metavar="DIR", help="Output folder.")],
    spec: Annotated[
        Path | None, typer.Option("--spec", metavar="SPEC.toml", help="Judge against this spec.")
    ] = None,
    force: Annotated[
        bool, typer.Option("--force", help="Replace files in DIR that stagesynth did not write.")
    ] = False,
) -> None:
    """Write the report, plots, schematic, parts list and Touchstone file for a design."""
    from .analysis import analyze as run_analysis
    from .fileio import OutputDir

    d, spec_obj = _inputs(design_file, spec)
    verdict = None
    analysis = run_analysis(d, spec_obj)
    if spec_obj is not None:
        from .verdict import judge

        verdict = judge(analysis, spec_obj)
    notes = list(d.extra.get("synthesis", {}).get("notes", [])) or None
    outdir = OutputDir(out, force=force)
    written = _write_report(outdir, d, analysis, verdict, spec_obj, notes)
    typer.echo(f"wrote {', '.join(str(p) for p in written)}")
    if verdict is not None and not verdict.meets_spec:
        raise typer.Exit(1)


@app.command()
@user_errors
def plot(
    design_file: Annotated[Path, typer.Argument(metavar="DESIGN.json", help="Design file.")],
    out: Annotated[
        Path | None,
        typer.Option("--out", metavar="DIR", help="Output folder (default: beside the design)."),
    ] = None,
    spec: Annotated[
        Path | None, typer.Option("--spec", metavar="SPEC.toml", help="Draw this spec's limits.")
    ] = None,
    force: Annotated[
        bool, typer.Option("--force", help="Replace files in DIR that stagesynth did not write.")
    ] = False,
) -> None:
    """Redraw the Bode and impedance plots of a design (after editing a value)."""
    from .analysis import analyze as run_analysis
    from .fileio import OutputDir
    from .report.bundle import write_plots

    d, spec_obj = _inputs(design_file, spec)
    analysis = run_analysis(d, spec_obj)
    outdir = OutputDir(out or design_file.parent, force=force)
    written = write_plots(outdir, d, analysis, spec_obj)
    typer.echo(f"wrote {', '.join(str(p) for p in written)}")


@app.command()
@user_errors
def new(
    path: Annotated[Path, typer.Argument(metavar="SPEC.toml", help="Where to write the template.")],
    force: Annotated[bool, typer.Option("--force", help="Overwrite an existing file.")] = False,
) -> None:
    """Write a commented spec template to start from."""
    from .spec import spec_template

    if path.exists() and not force:
        raise StageError("exists; not overwritten", file=str(path),
                         accepted="a new file name, or --force to replace it")
    from .fileio import write_text_atomic

    write_text_atomic(path, spec_template())
    typer.echo(f"wrote {path}: edit it, then run: stagesynth design {path} --out DIR")


def main() -> None:
    """Console entry point."""
    try:
        app()
    except KeyboardInterrupt:
        typer.echo("stagesynth: interrupted", err=True)
        sys.exit(130)
