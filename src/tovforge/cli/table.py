"""``tovforge table ...``: sequence, box, samples, binary and info.

Thin front: parse, call :mod:`tovforge.tables`, print.  Errors caused by user
input are one line on stderr with exit code 2 (:func:`tovforge.cli._common.run`).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..errors import InputError
from ._common import (WRITE_FLAGS, AllowMismatchOpt, FamilyArg, OverwriteOpt, ParametersArg, aligned, command_line,
                      make_eos, parse_assignments, parse_float_list, parse_number, run, show_progress)

__all__ = ["app", "parse_axis", "parse_fixed", "parse_range"]

app = typer.Typer(
    help="Lookup tables: one EOS's stable branch, observables over a parameter box, posterior samples, "
         "binary Lambda-tilde.  Formats by extension: .csv (units in the header), .h5, .npz.",
    no_args_is_help=True,
    rich_markup_mode=None,
)

_OUT_HELP = "Table file: .csv, .h5 or .npz (chosen by the extension)."


def parse_axis(item: str):
    """``NAME=LO:HI:N`` -> :class:`tovforge.tables.Axis`."""
    from ..tables import Axis

    name, sep, rest = item.partition("=")
    parts = rest.split(":")
    if not sep or not name.strip() or len(parts) != 3:
        raise InputError(f"--axis expects NAME=LO:HI:N (e.g. gamma1=2:4:50); got {item!r}.")
    lo, hi = (parse_number(p, f"--axis {item}") for p in parts[:2])
    try:
        n = int(parts[2])
    except ValueError:
        raise InputError(f"--axis {item}: N must be a whole number of points; got {parts[2]!r}.") from None
    if n > 10_000_000:
        raise InputError(f"--axis {item}: at most 10^7 points per axis.")
    return Axis(name.strip(), lo, hi, n)


def parse_fixed(items: list[str]) -> dict:
    """``["NAME=VALUE", ...]`` -> ``{name: value}``."""
    return {k: parse_number(v, f"--fix {k}") for k, v in parse_assignments(items, "--fix").items()}


def parse_range(text: str, option: str, lo: float, hi: float, open_lo: bool = True):
    """``V`` or ``LO:HI:N`` -> array of values, checked against ``(lo, hi]``."""
    import numpy as np

    parts = text.split(":")
    if len(parts) == 1:
        values = np.array([parse_number(parts[0], option)])
    elif len(parts) == 3:
        a, b = (parse_number(p, option) for p in parts[:2])
        try:
            n = int(parts[2])
        except ValueError:
            raise InputError(f"{option} expects VALUE or LO:HI:N; N = {parts[2]!r} is not a whole number.") from None
        if n < 1 or not a <= b:
            raise InputError(f"{option} {text}: need LO <= HI and N >= 1.")
        if n > 10_000_000:
            raise InputError(f"{option} {text}: at most 10^7 values.")
        values = np.linspace(a, b, n)
    else:
        raise InputError(f"{option} expects VALUE or LO:HI:N; got {text!r}.")
    bad = (values <= lo) if open_lo else (values < lo)
    bad |= values > hi
    if bad.any():
        raise InputError(f"{option} {text}: values must be in {'(' if open_lo else '['}{lo:g}, {hi:g}].")
    return values


def _finish(summary) -> None:
    """Print the summary; bad input found on the way (rows left out) is exit 2, after the rest was written."""
    for note in summary.notes:
        typer.echo(note)
    typer.echo(f"wrote {summary.n_rows} rows x {len(summary.columns)} columns to {summary.path} "
               f"in {summary.seconds:.1f} s")
    if summary.error:
        typer.echo(f"error: {summary.error}", err=True)
        raise typer.Exit(code=2)


# ---------------------------------------------------------------------------
# sequence
# ---------------------------------------------------------------------------


@app.command("sequence")
def sequence_cmd(
    family: FamilyArg,
    parameters: ParametersArg = None,
    out: Annotated[Path, typer.Option("--out", help=_OUT_HELP, dir_okay=False)] = ...,
    points: Annotated[
        Optional[int], typer.Option("--points", min=2, max=100_000,
                                    help="Stars at central pressures evenly spaced in ln p_c, from the lightest star "
                                         "to the maximum-mass star (default 100).")
    ] = None,
    masses: Annotated[
        Optional[str], typer.Option("--masses", help="Comma-separated masses in Msun instead: one exact star each.")
    ] = None,
    min_mass: Annotated[float, typer.Option("--min-mass", help="Lightest star of --points (Msun).")] = 0.3,
    overwrite: OverwriteOpt = False,
):
    """The stable branch of one EOS: a column per star quantity (M, R, C, Lambda, k2, I, M_b, central values)."""
    from ..tables import sequence_table

    def work():
        if points is not None and masses is not None:
            raise InputError("give --points or --masses, not both.")
        eos_obj = make_eos(family, parameters or [])
        qm = parse_float_list(masses, "--masses") if masses is not None else None
        return sequence_table(out, eos_obj, points=100 if points is None else points, masses=qm,
                              min_mass_msun=min_mass, command=command_line(), overwrite=overwrite)

    _finish(run(work, ("--overwrite",)))


# ---------------------------------------------------------------------------
# box
# ---------------------------------------------------------------------------


@app.command("box")
def box_cmd(
    model: Annotated[
        Optional[Path], typer.Argument(help="Model folder written by `tovforge train` (or use --exact).")
    ] = None,
    axis: Annotated[
        Optional[list[str]], typer.Option("--axis", help="A varied parameter, NAME=LO:HI:N (repeat; the first "
                                                         "varies slowest).")
    ] = None,
    fix: Annotated[Optional[list[str]], typer.Option("--fix", help="A fixed parameter, NAME=VALUE (repeat).")] = None,
    quantities: Annotated[
        str, typer.Option("--quantities", help="Comma-separated: mass_max, radius_at_mass_max, pressure_at_mass_max, "
                                               "max_sound_speed_sq, causality_margin, mass_max_margin; per mass: "
                                               "radius, lambda, inertia, k2.")
    ] = "mass_max,radius,lambda,causality_margin",
    masses: Annotated[str, typer.Option("--masses", help="Masses (Msun) of the per-mass quantities.")] = "1.4",
    out: Annotated[Path, typer.Option("--out", help=_OUT_HELP, dir_okay=False)] = ...,
    exact: Annotated[
        Optional[str], typer.Option("--exact", help="Solve exactly with this EOS family instead of a model "
                                                    "(parallel, resumable grid run).")
    ] = None,
    no_sigma: Annotated[bool, typer.Option("--no-sigma", help="Leave out the sigma columns (models with a sigma).")] = False,
    workers: Annotated[Optional[int], typer.Option("--workers", min=1, help="--exact: worker processes.")] = None,
    scheduler: Annotated[
        Optional[str], typer.Option("--scheduler", help="--exact: address of a dask.distributed scheduler.")
    ] = None,
    mass_floor: Annotated[
        float, typer.Option("--mass-floor", help="--exact: floor of mass_max_margin (Msun); a model has its own.")
    ] = 1.0,
    keep_grid: Annotated[bool, typer.Option("--keep-grid", help="--exact: keep the work grid OUT.grid.h5.")] = False,
    oversubscribe: Annotated[
        bool, typer.Option("--oversubscribe", help="--exact: allow more --workers than this machine has cores.")
    ] = False,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
    overwrite: OverwriteOpt = False,
    allow_mismatch: AllowMismatchOpt = False,
):
    """Observables over a regular slice or full grid of EOS parameters, from a model or exact solves."""
    from ..tables import box_table, exact_box_table, parse_quantities

    def work():
        if (model is None) == (exact is None):
            raise InputError("give a MODEL folder or --exact FAMILY (one of them).")
        if model is not None and not model.exists():
            from .. import eos

            if str(model) in eos.families():
                raise InputError(f"{model}: no such model folder; for exact solves write --exact {model}.")
        if exact is None and (workers is not None or scheduler is not None or keep_grid or oversubscribe):
            raise InputError("--workers, --scheduler, --keep-grid and --oversubscribe apply to --exact only.")
        axes = [parse_axis(a) for a in axis or []]
        fixed = parse_fixed(fix or [])
        qs = parse_quantities(quantities)
        ms = parse_float_list(masses, "--masses")
        if exact is not None:
            return exact_box_table(out, exact, axes, fixed, qs, ms, mass_floor_msun=mass_floor, workers=workers,
                                   scheduler=scheduler, progress=show_progress(quiet), command=command_line(),
                                   keep_grid=keep_grid, overwrite=overwrite, oversubscribe=oversubscribe)
        return box_table(out, model, axes, fixed, qs, ms, sigma=not no_sigma, progress=show_progress(quiet),
                         command=command_line(), overwrite=overwrite, allow_mismatch=allow_mismatch)

    try:
        summary = run(work, WRITE_FLAGS)
    except KeyboardInterrupt:
        if exact is None:
            raise
        typer.echo(f"\ninterrupted: finished chunks are kept in {out}.grid.h5.parts; rerun the same command "
                   "to resume.", err=True)
        raise typer.Exit(code=130) from None
    _finish(summary)


# ---------------------------------------------------------------------------
# samples
# ---------------------------------------------------------------------------


@app.command("samples")
def samples_cmd(
    model: Annotated[Path, typer.Argument(help="Model folder written by `tovforge train`.")],
    samples: Annotated[
        Path, typer.Option("--samples", help="Parameter samples: CSV with a header of parameter names, or .npy "
                                             "holding a structured array with one field per parameter.",
                           dir_okay=False)
    ],
    out: Annotated[Path, typer.Option("--out", help=_OUT_HELP, dir_okay=False)],
    masses: Annotated[str, typer.Option("--masses", help="Masses (Msun) of the per-mass quantities and the band.")]
    = "1.0,1.2,1.4,1.6,1.8,2.0",
    quantities: Annotated[
        str, typer.Option("--quantities", help="Comma-separated (see `tovforge table box --help`).")
    ] = "mass_max,radius,lambda,inertia",
    band: Annotated[
        Optional[Path], typer.Option("--band", help="Median and 90 % band per mass (default: OUT with .band "
                                                    "before the extension).", dir_okay=False)
    ] = None,
    plot: Annotated[Optional[Path], typer.Option("--plot", help="PNG of the M-R band.", dir_okay=False)] = None,
    ignore: Annotated[
        Optional[str], typer.Option("--ignore", help="Comma-separated columns of the samples file to skip "
                                                     "(weights, likelihoods).")
    ] = None,
    no_sigma: Annotated[bool, typer.Option("--no-sigma", help="Leave out the sigma columns (models with a sigma).")] = False,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
    overwrite: OverwriteOpt = False,
    allow_mismatch: AllowMismatchOpt = False,
):
    """Observables for every row of a samples file, and their median and 90 % band per mass.

    Rows with NaN or missing values, or outside the model's box, are left out
    and reported by number (exit code 2); the other rows are written.
    """
    from ..tables import parse_quantities, samples_table

    def work():
        qs = parse_quantities(quantities)
        ms = parse_float_list(masses, "--masses")
        skip = [s.strip() for s in ignore.split(",") if s.strip()] if ignore else []
        return samples_table(out, model, samples, qs, ms, band=band, plot=plot, ignore=skip, sigma=not no_sigma,
                             progress=show_progress(quiet), command=command_line(), overwrite=overwrite,
                             allow_mismatch=allow_mismatch)

    _finish(run(work, WRITE_FLAGS))


# ---------------------------------------------------------------------------
# binary
# ---------------------------------------------------------------------------


def _lambda_source(source: str, parameters: list[str], allow_mismatch: bool = False):
    """``(Lambda(M), metadata)`` from a model folder, a table file or an EOS family name."""
    import numpy as np

    from ..tables import lambda_from_eos, lambda_from_model, lambda_from_table, read_table

    path = Path(source)
    if path.is_dir():
        from ..surrogate import load

        model = load(path, allow_mismatch)
        values = parse_assignments(parameters)
        names = model.parameter_names
        unknown = [k for k in values if k not in names]
        missing = [k for k in names if k not in values]
        if unknown or missing:
            raise InputError(f"the model takes {' '.join(f'{n}=VALUE' for n in names)}; "
                             + (f"{unknown[0]!r} is not one of them." if unknown else f"{missing[0]} is missing."))
        theta = np.array([parse_number(values[n], n) for n in names])
        for n, v, (lo, hi) in zip(names, theta, model.bounds):
            if not lo <= v <= hi:
                raise InputError(f"{n}={v:g} is outside the model's box: {n} must be in [{lo:g}, {hi:g}].")
        return lambda_from_model(model, theta), dict(source="model", model=str(path), model_kind=model.kind,
                                                     family=model.family,
                                                     parameters_json=json.dumps(dict(zip(names, theta.tolist()))))
    if path.is_file():
        if parameters:
            raise InputError(f"{source} is a table: it takes no NAME=VALUE parameters.")
        return lambda_from_table(read_table(path)), dict(source="table", table=str(path))
    try:
        eos_obj = make_eos(source, parameters)
    except InputError as exc:
        if "Unknown EOS family" in str(exc):
            raise InputError(f"SOURCE {source!r} is neither a model folder, a table file nor an EOS family "
                             f"({exc})") from None
        raise
    return lambda_from_eos(eos_obj), dict(source="exact", family=eos_obj.family.name,
                                          parameters_json=json.dumps(dict(eos_obj.parameters)))


@app.command("binary")
def binary_cmd(
    source: Annotated[
        str, typer.Argument(help="Where Lambda(M) comes from: a model folder, a sequence table file, or an EOS "
                                 "family (exact solves).")
    ],
    parameters: Annotated[
        Optional[list[str]], typer.Argument(help="NAME=VALUE parameters of the model or the EOS.")
    ] = None,
    m1: Annotated[Optional[str], typer.Option("--m1", help="Comma-separated masses of star 1 (Msun).")] = None,
    m2: Annotated[Optional[str], typer.Option("--m2", help="Comma-separated masses of star 2 (Msun), pairwise "
                                                            "with --m1.")] = None,
    chirp: Annotated[
        Optional[str], typer.Option("--chirp-mass", help="Chirp mass in Msun: VALUE or LO:HI:N.")
    ] = None,
    ratio: Annotated[
        Optional[str], typer.Option("--mass-ratio", help="q = m2/m1 in (0, 1]: VALUE or LO:HI:N (every pair with "
                                                         "--chirp-mass).")
    ] = None,
    out: Annotated[
        Optional[Path], typer.Option("--out", help=_OUT_HELP + " Without it, the table is printed.", dir_okay=False)
    ] = None,
    overwrite: OverwriteOpt = False,
    allow_mismatch: AllowMismatchOpt = False,
):
    """Binary tidal deformability Lambda-tilde for component masses, or over chirp mass and mass ratio."""
    import numpy as np

    from ..tables import binary_deformability, binary_table, check_table_output, chirp_grid

    def work():
        if out is not None:
            check_table_output(out, overwrite)
        by_masses = m1 is not None or m2 is not None
        by_chirp = chirp is not None or ratio is not None
        if by_masses == by_chirp:
            raise InputError("give either --m1 and --m2, or --chirp-mass and --mass-ratio.")
        if by_masses:
            if m1 is None or m2 is None:
                raise InputError("--m1 and --m2 go together.")
            a, b = np.array(parse_float_list(m1, "--m1")), np.array(parse_float_list(m2, "--m2"))
            if a.size != b.size and 1 not in (a.size, b.size):
                raise InputError(f"--m1 has {a.size} masses and --m2 {b.size}; give equal counts (pairs) or one.")
        else:
            if chirp is None or ratio is None:
                raise InputError("--chirp-mass and --mass-ratio go together.")
            mc = parse_range(chirp, "--chirp-mass", 0.0, 10.0)
            q = parse_range(ratio, "--mass-ratio", 0.0, 1.0)
            a, b = chirp_grid(mc, q)
        lam, meta = _lambda_source(source, parameters or [], allow_mismatch)
        res = binary_deformability(lam, a, b)
        if out is not None:
            return binary_table(out, res, command=command_line(), overwrite=overwrite, **meta)
        return res

    res = run(work, WRITE_FLAGS)
    if out is not None:
        _finish(res)
        return
    heads = ["m1 [Msun]", "m2 [Msun]", "Mc [Msun]", "q", "Lambda1", "Lambda2", "Lambda_tilde"]
    cols = [res.m1_msun, res.m2_msun, res.chirp_mass_msun, res.mass_ratio, res.lambda1, res.lambda2,
            res.lambda_tilde]
    fmts = ["{:.5f}", "{:.5f}", "{:.6f}", "{:.5f}", "{:.6g}", "{:.6g}", "{:.6g}"]
    rows = [[f.format(float(c[i])) for f, c in zip(fmts, cols)] for i in range(len(res.m1_msun))]
    typer.echo(aligned(heads, rows))


# ---------------------------------------------------------------------------
# info
# ---------------------------------------------------------------------------


@app.command("info")
def info_cmd(path: Annotated[Path, typer.Argument(help="A table file (.csv, .h5, .npz).", dir_okay=False)]):
    """Rows, columns with units, and the provenance of a table file."""
    from ..tables import read_table

    t = run(lambda: read_table(path))
    typer.echo(f"{path}: {t.meta.get('kind', '?')} table, {len(t)} rows, {len(t.columns)} columns")
    width = max(len(n) for n in t.columns) if t.columns else 0
    for n in t.columns:
        typer.echo(f"  {n:<{width}}  [{t.units[n]}]  {t.descriptions[n]}")
    for k, v in t.meta.items():
        typer.echo(f"  {k} = {v}")
