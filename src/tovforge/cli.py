"""The ``tovforge`` command line: a thin front over the library.

Every command parses its arguments, calls the library and prints.  Errors
caused by user input are printed as one line on stderr with exit code 2.
"""

from __future__ import annotations

import json
import math
import sys
import warnings
from pathlib import Path
from typing import Annotated, Optional

import numpy as np
import typer

from . import __version__
from ._cliargs import FamilyArg, ParametersArg
from .errors import InputError

app = typer.Typer(
    help="Exact neutron-star structure, EOS-parameter grids, surrogates and exported evaluators.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


def _register_subcommands() -> None:
    """Attach the command groups of the stages (each lives next to its stage)."""
    from .grid._cli import grid_app
    from .surrogate._cli import check_cmd, refine_cmd, train_cmd
    from .export._cli import export_cmd
    from .tables._cli import table_app
    from .demo._cli import demo_cmd

    grid_app.command("refine")(refine_cmd)
    app.add_typer(grid_app, name="grid")
    app.add_typer(table_app, name="table")
    app.command("train")(train_cmd)
    app.command("check")(check_cmd)
    app.command("export")(export_cmd)
    app.command("demo")(demo_cmd)


def _fail(message: str) -> None:
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(code=2)


def _version(value: bool):
    if value:
        typer.echo(f"tovforge {__version__}")
        raise typer.Exit()


@app.callback()
def _main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit.")
    ] = False,
):
    """Exact neutron-star structure, EOS-parameter grids, surrogates and exported evaluators."""


# ---------------------------------------------------------------------------
# helpers shared by commands
# ---------------------------------------------------------------------------


def parse_assignments(items: list[str], what: str = "parameter") -> dict[str, str]:
    """Turn ``["a=1", "b=2"]`` into ``{"a": "1", "b": "2"}`` with clear errors."""
    out: dict[str, str] = {}
    for item in items:
        if "=" not in item:
            raise InputError(f"expected {what} as NAME=VALUE, got {item!r}.")
        name, value = item.split("=", 1)
        name = name.strip()
        if not name:
            raise InputError(f"expected {what} as NAME=VALUE, got {item!r}.")
        if name in out:
            raise InputError(f"{what} {name!r} is given twice.")
        out[name] = value.strip()
    return out


def parse_float_list(text: str, option: str) -> list[float]:
    """Parse ``"1.4,2.0"``; names the option in errors."""
    vals = []
    for tok in text.split(","):
        tok = tok.strip()
        if not tok:
            continue
        try:
            v = float(tok)
        except ValueError:
            raise InputError(f"{option} expects comma-separated numbers, got {tok!r}.") from None
        if not math.isfinite(v):
            raise InputError(f"{option} values must be finite numbers, got {tok!r}.")
        vals.append(v)
    if not vals:
        raise InputError(f"{option} needs at least one number.")
    return vals


def make_eos(family: str, assignments: list[str]):
    """Build an EOS from a family name and NAME=VALUE strings."""
    from . import eos

    fam = eos.get_family(family)
    values = parse_assignments(assignments)
    if fam.numeric:
        parsed = {}
        for name, raw in values.items():
            try:
                parsed[name] = float(raw)
            except ValueError:
                if name in fam.parameter_names:
                    p = fam.parameter(name)
                    raise InputError(
                        f"The {name!r} parameter of {fam.name} must be a number in {p.range_text()}. Got {raw!r}."
                    ) from None
                parsed[name] = raw  # let the family report the unknown name
        return fam(**parsed)
    return fam(**values)


def _jsonable(x):
    if isinstance(x, dict):
        return {k: _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return [_jsonable(v) for v in x.tolist()]
    if isinstance(x, (np.floating, float)):
        x = float(x)
        return x if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    return x


def _run(fn):
    """Call ``fn`` and turn input errors into one line and exit code 2."""
    try:
        return fn()
    except InputError as exc:
        _fail(str(exc))


# ---------------------------------------------------------------------------
# families
# ---------------------------------------------------------------------------


@app.command("families")
def families_cmd():
    """List the EOS families with their parameters, units and default box."""
    from . import eos

    for fam in eos.families().values():
        typer.echo(f"{fam.name}: {fam.description}")
        typer.echo(f"    reference: {fam.reference}")
        if not fam.numeric:
            typer.echo("    parameters: path=FILE (required), columns=NAMES, units=UNITS")
            continue
        for p in fam.parameters:
            unit = "" if p.unit == "1" else f" [{p.unit}]"
            typer.echo(
                f"    {p.name:<16}{unit:<22} allowed {p.range_text():<14} demo box [{p.box[0]:g}, {p.box[1]:g}]"
                f"  {p.description}"
            )


# ---------------------------------------------------------------------------
# solve
# ---------------------------------------------------------------------------


@app.command("solve")
def solve_cmd(
    family: FamilyArg,
    parameters: ParametersArg = None,
    masses: Annotated[
        Optional[str], typer.Option("--masses", help="Comma-separated masses in Msun to solve exactly.")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object instead of text.")] = False,
    table: Annotated[
        Optional[Path], typer.Option("--table", help="Write the stable branch to this table (.csv, .h5 or .npz; the "
                                                     "format of `tovforge table sequence`).", dir_okay=False)
    ] = None,
    profile: Annotated[
        Optional[float], typer.Option("--profile", help="Also print the interior profile of the star of this mass.")
    ] = None,
    stars: Annotated[int, typer.Option("--stars", min=8, max=2000, help="Stars along the stable branch.")] = 100,
):
    """Solve the stable branch of one EOS: M_max, the M-R-Lambda-I sequence, stars at given masses."""
    from . import solve, tables

    def work():
        if table is not None:
            tables.table_format(table)
        eos_obj = make_eos(family, parameters or [])
        qm = parse_float_list(masses, "--masses") if masses else None
        if qm is not None and any(m <= 0 for m in qm):
            raise InputError("--masses must be positive (Msun).")
        if profile is not None and not (profile > 0 and math.isfinite(profile)):
            raise InputError(f"--profile must be a positive mass in Msun. Got {profile}.")
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            seq = solve.solve_sequence(eos_obj, n_stars=stars, masses=qm)
        for w in caught:
            typer.echo(f"warning: {w.message}", err=True)
        prof = None
        if profile is not None and seq.success:
            if profile > seq.mass_max.mass_msun:
                typer.echo(
                    f"warning: --profile {profile:g} Msun exceeds M_max = {seq.mass_max.mass_msun:.4f} Msun; "
                    "no profile.",
                    err=True,
                )
            else:
                prof = solve.solve_star(eos_obj, mass_msun=profile)
        return eos_obj, seq, prof

    eos_obj, seq, prof = _run(work)
    if table is not None:
        meta = tables.sequence_meta(seq, solve.SequenceSettings(), "branch")
        _run(lambda: tables.star_table(table, seq.branch, meta))
    if as_json:
        out = tables.sequence_json(seq)
        if prof is not None:
            out["profile"] = tables.profile_json(prof)
        typer.echo(json.dumps(_jsonable(out)))
        raise typer.Exit(code=0 if seq.success else 1)
    typer.echo(tables.sequence_text(seq))
    if prof is not None:
        typer.echo("")
        typer.echo(f"interior of the {profile:g} Msun star (centre to surface):")
        typer.echo(tables.profile_text(prof))
    if not seq.success:
        raise typer.Exit(code=1)


@app.command("bench")
def bench_cmd(
    quick: Annotated[bool, typer.Option("--quick", help="Fewer repetitions (a smoke run).")] = False,
    only: Annotated[
        Optional[str], typer.Option("--only", help="Comma-separated sections to run (default: all).")
    ] = None,
):
    """Measure speed and accuracy on this machine (prints ratios measured side by side)."""
    from ._bench import run_benchmarks

    _run(lambda: run_benchmarks(quick=quick, only=only.split(",") if only else None, echo=typer.echo))


_register_subcommands()


def main():  # entry point of the console script
    app()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
