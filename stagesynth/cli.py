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
) -> None:
    """Analyse a design: gain, corners, impedances, swing at every corner, verdict."""
    from .analysis import analyze as run_analysis
    from .netlist import load_design
    from .results import analysis_to_dict
    from .textout import analysis_table

    design = load_design(design_file)
    spec_obj = None
    if spec is not None:
        from .spec import load_spec

        spec_obj = load_spec(spec)
    analysis = run_analysis(design, spec_obj)
    verdict = None
    if spec_obj is not None:
        from .verdict import judge

        verdict = judge(analysis, spec_obj)
    if as_json:
        from .netlist import _clean_floats

        typer.echo(json.dumps(_clean_floats(analysis_to_dict(analysis, verdict)), indent=2))
    else:
        typer.echo(analysis_table(analysis, verdict))
    if not analysis.converged:
        typer.echo("stagesynth: the DC operating point did not converge at some corner", err=True)
        raise typer.Exit(1)
    if verdict is not None and not verdict.meets_spec:
        raise typer.Exit(1)


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
