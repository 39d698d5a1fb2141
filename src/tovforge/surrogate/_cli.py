"""``tovforge train``, ``tovforge check`` and ``tovforge grid refine``."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer


def _run(fn):
    from ..cli import _run as run

    return run(fn)


def train_cmd(
    grid: Annotated[Path, typer.Argument(help="Grid file written by `tovforge grid run`.", dir_okay=False)],
    out: Annotated[Path, typer.Option("--out", help="Model folder to write (JSON + .npz).", file_okay=False)],
    kind: Annotated[str, typer.Option("--kind", help="gp (Gaussian process) or spline (tensor splines on a "
                                                     "regular grid, r^5 RBF otherwise).")] = "gp",
    subset: Annotated[int, typer.Option("--subset", min=16, help="GP: points used to optimise hyperparameters.")] = 512,
    restarts: Annotated[int, typer.Option("--restarts", min=0, help="GP: extra optimiser starts.")] = 1,
    curve_groups: Annotated[
        int, typer.Option("--curve-groups", min=1, max=24, help="GP: kernels per curve (blocks of u nodes).")
    ] = 2,
    share_kernels: Annotated[
        bool, typer.Option("--share-kernels", help="GP: the same u-block of every curve shares one kernel "
                                                   "(faster whole-curve queries, somewhat larger errors).")
    ] = False,
    warp: Annotated[
        bool, typer.Option("--warp/--no-warp", help="Parameters the family marks (adiabatic indices) enter "
                                                    "as ln(value - offset).")
    ] = True,
    isotropic: Annotated[
        bool, typer.Option("--isotropic", help="Spline (RBF): no per-parameter stretch of the inputs.")
    ] = False,
):
    """Train a surrogate on a grid and save it."""
    import warnings

    from . import GPSettings, SplineSettings, train

    def work():
        settings = {"gp": GPSettings(n_subset=subset, n_restarts=restarts, curve_groups=curve_groups,
                                     share_curve_kernels=share_kernels, warp_inputs=warp),
                    "spline": SplineSettings(warp_inputs=warp, anisotropic=not isotropic)}.get(kind)
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message="GP kernel")  # printed below, once, without a traceback
            model = train(grid, kind, settings, log=typer.echo)
        model.save(out)
        return model

    model = _run(work)
    for msg in getattr(model.meta.fit, "degenerate_kernels", ()):
        typer.echo(f"WARNING: GP {msg}", err=True)
    label = model.kind if model.method == model.kind else f"{model.kind} ({model.method})"
    typer.echo(f"trained {label} on {model.n_train} points in {model.meta.training.seconds:.1f} s; saved to {out}")


def check_cmd(
    model: Annotated[Path, typer.Argument(help="Model folder written by `tovforge train`.", file_okay=False)],
    holdout: Annotated[Path, typer.Option("--holdout", help="Grid of held-out exact solves.", dir_okay=False)],
    report: Annotated[
        Optional[Path], typer.Option("--report", help="Folder for report.json, report.md and PNG figures.")
    ] = None,
):
    """Compare a surrogate with held-out exact solves; print the error table."""
    from . import check, load

    res = _run(lambda: check(load(model), holdout, report))
    typer.echo(res.table())
    if report is not None:
        typer.echo(f"report written to {report}/report.md")


def refine_cmd(
    model: Annotated[Path, typer.Argument(help="GP model folder written by `tovforge train`.", file_okay=False)],
    budget: Annotated[int, typer.Option("--budget", min=1, help="Exact solves to add.")],
    out: Annotated[
        Optional[Path], typer.Option("--out", help="Folder of the retrained model (default: MODEL-refined).")
    ] = None,
    holdout: Annotated[
        Optional[Path], typer.Option("--holdout", help="Held-out grid: print error against training size.")
    ] = None,
    candidates: Annotated[int, typer.Option("--candidates", min=16, help="Sobol candidates to score.")] = 8192,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the candidate design.")] = 0,
    workers: Annotated[Optional[int], typer.Option("--workers", min=1, help="Parallel workers.")] = None,
):
    """Add exact solves where the GP's sigma is largest, retrain, and print the learning curve."""
    from . import load
    from ._refine import refine

    target = out if out is not None else model.with_name(model.name + "-refined")
    res = _run(lambda: refine(load(model), budget, target, holdout=holdout, n_candidates=candidates, seed=seed,
                              workers=workers, log=typer.echo))
    typer.echo(f"added {len(res.added)} exact solves ({res.points_path}); retrained model in {target}")
    if res.learning_curve:
        typer.echo(f"{'training points':>16}{'M_max p95 [Msun]':>18}{'R p95 [m]':>11}{'Lambda p95':>12}")
        for row in res.learning_curve:
            typer.echo(f"{row.n_train:>16}{row.mass_max_p95:>18.4g}{row.radius_p95_km * 1000:>11.2f}"
                       f"{row.lambda_rel_p95:>12.3%}")
