"""Command-line interface: a thin layer over spec -> synthesis -> analysis -> verdict -> report.

Exit codes (contract section 4): 0 the design meets the spec, 1 it does not (or
no design can), 2 the input cannot be read or is invalid. User errors print one
message on stderr and never a traceback. Engine modules are imported inside
the commands so that `stagesynth --help` starts fast.
"""

from __future__ import annotations

import functools
import json
import sys
from pathlib import Path
from typing import Annotated

import typer

from stagesynth.quantities.errors import StageError

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
    """Turn StageError into one line on stderr and exit code 2; Ctrl-C into exit 130.

    A circuit the solvers find singular despite the loader's checks is reported
    as bad input too (exit 2), never as a traceback.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        from stagesynth.contracts.fileio import COMMITTED

        done = len(COMMITTED)
        try:
            return func(*args, **kwargs)
        except StageError as exc:
            _fail(f"{'no design' if exc.exit_code == 1 else 'error'}: {exc}", exc.exit_code)
        except KeyboardInterrupt:
            changed = COMMITTED[done:]
            if changed:
                _fail("interrupted; these files were already written: "
                      + ", ".join(str(p) for p in changed), 130)
            _fail("interrupted, nothing changed", 130)
        except Exception as exc:
            if type(exc).__name__ != "LinAlgError":
                raise
            _fail("error: the circuit cannot be solved (its matrix is singular): a node or "
                  "part is not tied to ground or the supply in a way the model can resolve", 2)

    return wrapper


def _version(value: bool) -> None:
    if value:
        from stagesynth import __version__

        typer.echo(f"stagesynth {__version__}")
        raise typer.Exit(0)


@app.callback()
def _main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True,
                           help="Print the version and exit.")
    ] = False,
) -> None:
    """Design and verify discrete transistor gain stages from a requirements file."""


def _pulse_width(text: str | None) -> float | None:
    """--pulse-width as seconds (None: the default from the spec's f_low)."""
    if text is None:
        return None
    from stagesynth.quantities.units import parse_quantity

    width = parse_quantity(text, "s", key="--pulse-width")
    if not width > 0:
        raise StageError("must be positive", key="--pulse-width", accepted='e.g. "100 µs"')
    return width


PULSE_HELP = ('Width of the pulse whose tilt the report gives, e.g. "100 µs" '
              "(default: 1/(100·f_low)).")


def _warned(spec):
    """Print the spec's plausibility warnings (stderr, not errors) and hand it on."""
    for line in spec.warnings:
        typer.echo(f"warning: {spec.path}: {line}", err=True)
    return spec


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
    from stagesynth import api
    from stagesynth.judging.textout import analysis_table

    if units is not None and units < 1:
        raise StageError(f"{units} is not a number of units", key="--yield",
                         accepted="a positive whole number, e.g. 10000")
    design = api.load_design(design_file)
    spec_obj = _warned(api.load_spec(spec)) if spec is not None else None
    if units is not None and spec_obj is None:
        raise StageError("the Monte Carlo needs the part tolerances of a spec", key="--yield",
                         accepted="--spec SPEC.toml together with --yield N")
    n = units if units is not None else (
        api.YIELD_UNITS if spec_obj is not None and spec_obj.require.yield_target is not None
        else 0)
    if n >= 5000 and not as_json:
        with typer.progressbar(length=n, label="Monte Carlo", file=sys.stderr) as bar:
            result = api.analyze(design, spec_obj, units=n, seed=seed, progress=bar.update)
    else:
        result = api.analyze(design, spec_obj, units=n, seed=seed)
    if as_json:
        typer.echo(json.dumps(result.to_dict(), indent=2))
    else:
        typer.echo(analysis_table(result.analysis, result.verdict))
        y = result.yield_result
        if y is not None:
            lo, hi = y.interval
            typer.echo(f"\nyield: {100 * y.estimate:.2f} % of {y.units} units "
                       f"(95 % interval {100 * lo:.2f} … {100 * hi:.2f} %, seed {y.seed})")
            for name, count in sorted(y.failures.items(), key=lambda kv: -kv[1]):
                typer.echo(f"  {count} units fail {name}")
            for line in y.advice:
                typer.echo(f"  tighter tolerance: {line}")
    if not result.converged:
        typer.echo("stagesynth: the DC operating point did not converge at some corner", err=True)
        raise typer.Exit(1)
    if result.meets_spec is False:
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
    pulse_width: Annotated[
        str | None, typer.Option("--pulse-width", metavar="T", help=PULSE_HELP)
    ] = None,
) -> None:
    """Synthesize a stage that meets SPEC.toml; write design.json and the report to DIR."""
    from stagesynth import api
    from stagesynth.contracts.fileio import OutputDir, digest

    if prefer not in api.PREFER:
        raise StageError(f"{prefer!r} is not a choice", key="--prefer",
                         accepted=", ".join(api.PREFER))
    width = _pulse_width(pulse_width)
    spec = _warned(api.load_spec(spec_file))
    if circuit is not None:
        from stagesynth.synthesis.topologies import FAMILIES

        if circuit not in FAMILIES:
            raise StageError(f"{circuit!r} is not a circuit family", key="--circuit",
                             accepted=", ".join(FAMILIES))
    from stagesynth.synthesis.reach import unreachable

    bounds = unreachable(spec)
    if bounds:  # provably out of reach: say so at once, write nothing
        typer.echo("No design can meet every requirement (found before any search). "
                   "Conflicts:", err=True)
        for c in bounds:
            typer.echo(f"  {c.name}: asked {c.limit}; {c.best}.\n"
                       f"    what to relax: {c.advice}", err=True)
        raise typer.Exit(1)
    # one transaction: the folder is locked, every file staged, all moved in at the end
    with OutputDir(out, force=force) as outdir:
        outdir.check(["design.json"] + ([] if no_report else api.report_files()))
        result = api.synthesize(spec, circuit=circuit, prefer=prefer)
        outdir.spec = str(spec_file.resolve())
        outdir.source = digest(result.design.to_json().encode("utf-8"))
        written = api.write_report(result, outdir, pulse_width=width, report=not no_report)
        # files of an earlier run here that this run does not make again
        outdir.drop_stale([p.name for p in written], api.report_files())
    from stagesynth.judging.textout import analysis_table

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
            if f.note and f.failed == ("no candidate",):
                typer.echo(f"  {f.name}: no candidate ({f.note})", err=True)
            elif f.note:
                typer.echo(f"  {f.name}: not tried ({f.note})", err=True)
            else:
                typer.echo(f"  {f.name}: fails {', '.join(f.failed)} ({f.tightest})", err=True)
    typer.echo(f"the closest design was written, marked \"meets_spec\": false: "
               f"{out / 'design.json'}", err=True)
    raise typer.Exit(1)


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
    no_report: Annotated[
        bool, typer.Option("--no-report",
                           help="Leave the report files beside the design as they are "
                                "(they are listed as out of date).")
    ] = False,
) -> None:
    """Re-size the coupling and bypass capacitors of a design for a new low corner.

    The report, plots and parts list made from the old design in the same folder are
    made again from the new one (or, with --no-report, listed as out of date).
    """
    from stagesynth import api
    from stagesynth.contracts.fileio import OutputDir
    from stagesynth.judging.textout import fmt
    from stagesynth.quantities.units import parse_quantity

    target = parse_quantity(f_low, "Hz", key="--f-low")
    if target <= 0:
        raise StageError("must be positive", key="--f-low", accepted='e.g. "5 Hz"')
    d = api.load_design(design_file)
    spec_obj = _warned(api.load_spec(spec)) if spec is not None else None
    change = api.resize_capacitors(d, target, spec_obj)
    target_path = out or design_file
    with OutputDir(target_path.parent, force=force) as outdir:
        refreshed, stale = _write_caps_result(outdir, target_path.name, change.design, spec,
                                              spec_obj, no_report)
    for ref, old, new, r_seen, share in change.changes:
        typer.echo(f"{ref}: {fmt(old, 'F')} -> {fmt(new, 'F')}"
                   f"  (sees {fmt(r_seen, 'Ω')}, {100 * share:.0f} % of the corner)")
    typer.echo(f"f_low: {fmt(change.before.f_low, 'Hz')} -> {fmt(change.after.f_low, 'Hz')} "
               f"(worst case with every capacitor {100 * change.tolerance:.0f} % low: "
               f"{fmt(change.f_low_worst, 'Hz')}); wrote {target_path}")
    if refreshed:
        typer.echo(f"made again from the new design: {', '.join(refreshed)}")
    if stale:
        typer.echo(f"now out of date (made from the previous design): {', '.join(stale)}; "
                   f"refresh with: stagesynth report {target_path} --out {target_path.parent}",
                   err=True)
    if change.verdict is not None and not change.verdict.meets_spec:
        failed = ", ".join(c.name for c in change.verdict.failed)
        typer.echo(f"the updated design does not meet {spec}: {failed}", err=True)
        raise typer.Exit(1)
    if not change.meets:
        raise typer.Exit(1)


def _write_caps_result(outdir, name: str, new, spec_path, spec_obj, no_report: bool):
    """Write the re-sized design; refresh the report files made from its previous version.

    Returns (refreshed names, names left out of date). The manifest says which design
    each file was made from and which spec it was judged against.
    """
    from stagesynth import api
    from stagesynth.contracts.fileio import digest

    text = new.to_json()
    old = outdir.root / name
    old_source = digest(old.read_bytes()) if old.is_file() else None
    outdir.source = digest(text.encode("utf-8"))
    outdir.write_text(name, text)
    bundle = api.report_files()
    stale = [n for n in outdir.stale(outdir.source)
             if n in bundle and outdir.made_from(n) == old_source]
    if not stale or no_report:
        return [], stale
    if spec_obj is None and outdir.spec and Path(outdir.spec).is_file():
        try:  # the spec the files were judged against, when it still reads
            spec_obj = api.load_spec(outdir.spec)
        except StageError:
            spec_obj = None
    elif spec_path is not None:
        outdir.spec = str(Path(spec_path).resolve())
    written = api.write_report(api.analyze(new, spec_obj, units=0), outdir)
    outdir.drop_stale([p.name for p in written], bundle)
    return [p.name for p in written], []


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
    pulse_width: Annotated[
        str | None, typer.Option("--pulse-width", metavar="T", help=PULSE_HELP)
    ] = None,
) -> None:
    """Write the report, plots, schematic, parts list and Touchstone file for a design."""
    from stagesynth import api

    width = _pulse_width(pulse_width)
    d = api.load_design(design_file)
    spec_obj = _warned(api.load_spec(spec)) if spec is not None else None
    result = api.analyze(d, spec_obj, units=0)
    from stagesynth.contracts.fileio import OutputDir, digest

    with OutputDir(out, force=force) as outdir:
        outdir.source = digest(design_file.read_bytes())
        if spec is not None:
            outdir.spec = str(spec.resolve())
        written = api.write_report(result, outdir, pulse_width=width)
        outdir.drop_stale([p.name for p in written], api.report_files())
    typer.echo(f"wrote {', '.join(str(p) for p in written)}")
    if result.meets_spec is False:
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
    from stagesynth import api
    from stagesynth.contracts.fileio import OutputDir
    from stagesynth.report.bundle import write_plots

    d = api.load_design(design_file)
    spec_obj = _warned(api.load_spec(spec)) if spec is not None else None
    result = api.analyze(d, spec_obj, units=0)
    from stagesynth.contracts.fileio import digest

    with OutputDir(out or design_file.parent, force=force) as outdir:
        outdir.source = digest(design_file.read_bytes())
        written = write_plots(outdir, d, result.analysis, spec_obj)
    typer.echo(f"wrote {', '.join(str(p) for p in written)}")


@app.command()
@user_errors
def presets() -> None:
    """List the built-in generic transistors and their data (use: preset = "NAME")."""
    from stagesynth.contracts.device import PRESETS
    from stagesynth.quantities.units import format_quantity as q

    def hfe(d):
        return f"{d.hfe_min:g} / {d.hfe_nominal:g} / {d.hfe_max:g}"

    fields = [
        ("polarity", lambda d: d.polarity.upper()),
        ("hfe min/typ/max", hfe),
        ("vbe", lambda d: f"{q(d.vbe, 'V')} at {q(d.vbe_current, 'A')}"),
        ("ft", lambda d: q(d.ft, "Hz")),
        ("c_cb", lambda d: q(d.c_cb, "F")),
        ("r_bb", lambda d: q(d.r_bb, "Ω")),
        ("early_voltage", lambda d: q(d.early_voltage, "V")),
        ("vce_sat", lambda d: q(d.vce_sat, "V")),
        ("ic_max", lambda d: q(d.ic_max, "A") if d.ic_max else "-"),
        ("vce_max", lambda d: q(d.vce_max, "V") if d.vce_max else "-"),
        ("p_max", lambda d: q(d.p_max, "W") if d.p_max else "-"),
        ("theta_ja", lambda d: q(d.theta_ja, "K/W") if d.theta_ja else "-"),
        ("vbe_tempco", lambda d: q(d.vbe_tempco, "V/K")),
        ("hfe_tempco", lambda d: q(d.hfe_tempco, "%/K")),
    ]
    _table(PRESETS, fields)
    from stagesynth.contracts.jfet import JFET_PRESETS

    def pair(lo: float, hi: float, unit: str) -> str:
        return f"{q(lo, unit)} / {q(hi, unit)}"

    jfields = [
        ("channel", lambda d: d.polarity.upper()),
        ("idss min/max", lambda d: pair(d.idss_min, d.idss_max, "A")),
        ("vp (with idss min/max)", lambda d: pair(d.sign * -d.vp_near, d.sign * -d.vp_far, "V")),
        ("c_gs", lambda d: q(d.c_gs, "F")),
        ("c_gd", lambda d: q(d.c_gd, "F")),
        ("early_voltage", lambda d: q(d.early_voltage, "V")),
        ("i_gss", lambda d: q(d.i_gss, "A")),
        ("flicker_corner", lambda d: q(d.flicker_corner, "Hz")),
        ("vds_max", lambda d: q(d.vds_max, "V") if d.vds_max else "-"),
        ("p_max", lambda d: q(d.p_max, "W") if d.p_max else "-"),
        ("theta_ja", lambda d: q(d.theta_ja, "K/W") if d.theta_ja else "-"),
    ]
    typer.echo("\nJunction FETs (kind = \"jfet\"):")
    _table(JFET_PRESETS, jfields)
    typer.echo("\nGeneric, invented types (no manufacturer's part). In a spec: "
               '[transistor] preset = "NAME"; any key above overrides the preset\'s value.')


def _table(presets: dict, fields: list) -> None:
    """One column per preset, one row per field."""
    names = list(presets)
    rows = [["", *names]] + [[label, *(f(presets[n]) for n in names)] for label, f in fields]
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for r in rows:
        typer.echo("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())


@app.command()
@user_errors
def new(
    path: Annotated[Path, typer.Argument(metavar="SPEC.toml", help="Where to write the template.")],
    force: Annotated[bool, typer.Option("--force", help="Overwrite an existing file.")] = False,
) -> None:
    """Write a commented spec template to start from."""
    from stagesynth.contracts.spec import spec_template

    if path.exists() and not force:
        raise StageError("exists; not overwritten", file=str(path),
                         accepted="a new file name, or --force to replace it")
    from stagesynth.contracts.fileio import write_text_atomic

    write_text_atomic(path, spec_template())
    typer.echo(f"wrote {path}: edit it, then run: stagesynth design {path} --out DIR")


def main() -> None:
    """Console entry point."""
    try:
        app()
    except KeyboardInterrupt:  # outside a command (while starting up): nothing was written
        typer.echo("stagesynth: interrupted, nothing changed", err=True)
        sys.exit(130)
