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

_SEQUENCE_COLUMNS = [
    ("mass_msun", "M [Msun]", "{:.6f}"),
    ("radius_km", "R [km]", "{:.5f}"),
    ("compactness", "C", "{:.5f}"),
    ("k2", "k2", "{:.6f}"),
    ("tidal_deformability", "Lambda", "{:.6g}"),
    ("moment_of_inertia_1e45_g_cm2", "I [1e45 g cm^2]", "{:.6g}"),
    ("baryon_mass_msun", "M_b [Msun]", "{:.6f}"),
    ("central_pressure_dyn_cm2", "p_c [dyn/cm^2]", "{:.6e}"),
    ("central_energy_density_g_cm3", "e_c/c^2 [g/cm^3]", "{:.6e}"),
    ("central_rest_mass_density_g_cm3", "rho_c [g/cm^3]", "{:.6e}"),
    ("central_sound_speed_sq", "c_s^2(centre)", "{:.5f}"),
]


def _aligned(heads, rows) -> str:
    """Right-aligned text columns under their headings."""
    widths = [max([len(h)] + [len(r[j]) for r in rows]) for j, h in enumerate(heads)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(heads, widths))]
    lines += ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in rows]
    return "\n".join(lines)


def _format_table(stars, columns=_SEQUENCE_COLUMNS) -> str:
    rows = [[fmt.format(float(getattr(stars, key)[i])) for key, _, fmt in columns] for i in range(len(stars))]
    return _aligned([h for _, h, _ in columns], rows)


def write_stars_csv(path: Path, stars, comment: str, columns=_SEQUENCE_COLUMNS) -> None:
    """Write stars as CSV with a commented provenance line and unit-bearing header."""
    with open(path, "w") as fh:
        fh.write(f"# {comment}\n")
        fh.write(",".join(h for _, h, _ in columns) + "\n")
        for i in range(len(stars)):
            fh.write(",".join(repr(float(getattr(stars, k)[i])) for k, _, _ in columns) + "\n")


_JSON_STAR_KEYS = ("mass_msun", "radius_km", "tidal_deformability", "k2", "moment_of_inertia_1e45_g_cm2",
                   "baryon_mass_msun")


def sequence_json(seq) -> dict:
    """The JSON object printed by ``tovforge solve --json``."""
    mm = seq.mass_max
    out = {
        "family": seq.family,
        "parameters": seq.parameters,
        "status": seq.status,
        "message": seq.message,
        "mass_max": {
            "mass_msun": mm.mass_msun if mm else None,
            "radius_km": mm.radius_km if mm else None,
            "central_pressure_dyn_cm2": mm.central_pressure_dyn_cm2 if mm else None,
            "max_sound_speed_sq": mm.max_sound_speed_sq if mm else None,
        },
        "at_mass": [],
        "sequence": {k: getattr(seq.branch, k) for k in _JSON_STAR_KEYS + ("central_pressure_dyn_cm2",)},
    }
    if seq.at_mass is not None:
        out["at_mass"] = [{k: float(getattr(seq.at_mass, k)[i]) for k in _JSON_STAR_KEYS}
                          for i in range(len(seq.at_mass))]
    return _jsonable(out)


@app.command("solve")
def solve_cmd(
    family: FamilyArg,
    parameters: ParametersArg = None,
    masses: Annotated[
        Optional[str], typer.Option("--masses", help="Comma-separated masses in Msun to solve exactly.")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object instead of text.")] = False,
    table: Annotated[
        Optional[Path], typer.Option("--table", help="Write the sequence to this CSV file.", dir_okay=False)
    ] = None,
    profile: Annotated[
        Optional[float], typer.Option("--profile", help="Also print the interior profile of the star of this mass.")
    ] = None,
    stars: Annotated[int, typer.Option("--stars", min=8, max=2000, help="Stars along the stable branch.")] = 100,
):
    """Solve the stable branch of one EOS: M_max, the M-R-Lambda-I sequence, stars at given masses."""
    from . import solve

    def work():
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
        pars = " ".join(f"{k}={v}" for k, v in seq.parameters.items())
        write_stars_csv(table, seq.branch, f"tovforge {__version__} solve {seq.family} {pars}: stable branch")
    if as_json:
        out = sequence_json(seq)
        if prof is not None:
            out["profile"] = _jsonable(_profile_dict(prof))
        typer.echo(json.dumps(out))
        raise typer.Exit(code=0 if seq.success else 1)
    typer.echo(_summary_text(seq))
    if prof is not None:
        typer.echo("")
        typer.echo(f"interior of the {profile:g} Msun star (centre to surface):")
        typer.echo(_profile_text(prof))
    if not seq.success:
        raise typer.Exit(code=1)


def _profile_dict(prof) -> dict:
    return {
        "radius_km": prof.radius_km,
        "mass_msun": prof.mass_msun,
        "pressure_dyn_cm2": prof.pressure_dyn_cm2,
        "energy_density_g_cm3": prof.energy_density_g_cm3,
        "rest_mass_density_g_cm3": prof.rest_mass_density_g_cm3,
        "alpha": prof.alpha,
        "y": prof.y,
    }


def _profile_text(prof) -> str:
    heads = ["r [km]", "m [Msun]", "p [dyn/cm^2]", "e/c^2 [g/cm^3]", "rho [g/cm^3]", "alpha", "y"]
    cols = [prof.radius_km, prof.mass_msun, prof.pressure_dyn_cm2, prof.energy_density_g_cm3,
            prof.rest_mass_density_g_cm3, prof.alpha, prof.y]
    fmts = ["{:.5f}", "{:.6f}", "{:.5e}", "{:.5e}", "{:.5e}", "{:.6f}", "{:.6f}"]
    rows = [[f.format(float(c[i])) for f, c in zip(fmts, cols)] for i in range(len(prof.radius_km))]
    return _aligned(heads, rows)


def _summary_text(seq) -> str:
    pars = "  ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in seq.parameters.items())
    lines = [f"EOS      {seq.family}  {pars}", f"status   {seq.message}"]
    if seq.success:
        mm = seq.mass_max
        causal = "acausal below M_max" if mm.acausal else "causal"
        lines.append(
            f"M_max    {mm.mass_msun:.6f} Msun   R = {mm.radius_km:.4f} km   "
            f"p_c = {mm.central_pressure_dyn_cm2:.4e} dyn/cm^2   max c_s^2 = {mm.max_sound_speed_sq:.4f} ({causal})"
        )
        if np.isfinite(seq.twin_mass_max_msun):
            lines.append(f"twins    a second stable branch reaches {seq.twin_mass_max_msun:.3f} Msun (scan resolution)")
        if seq.at_mass is not None:
            for i in range(len(seq.at_mass)):
                a = seq.at_mass
                if not np.isfinite(a.radius_km[i]):
                    continue
                lines.append(
                    f"M = {a.mass_msun[i]:.4f} Msun   R = {a.radius_km[i]:.4f} km   Lambda = {a.tidal_deformability[i]:.5g}"
                    f"   k2 = {a.k2[i]:.5f}   I = {a.moment_of_inertia_1e45_g_cm2[i]:.5g}e45 g cm^2"
                    f"   M_b = {a.baryon_mass_msun[i]:.5f} Msun"
                )
        lines.append("")
        lines.append(f"stable branch ({len(seq.branch)} stars, increasing central pressure):")
        lines.append(_format_table(seq.branch))
    return "\n".join(lines)


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
