"""``tovforge train``, ``check``, ``export`` and ``grid refine``: surrogate models and their files."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from ..errors import InputError
from ._common import WRITE_FLAGS, AllowMismatchOpt, Kind, Namespace, OverwriteOpt, run

__all__ = ["check_cmd", "export_cmd", "refine_cmd", "train_cmd"]


def train_cmd(
    grid: Annotated[Path, typer.Argument(help="Grid file written by `tovforge grid run`.", dir_okay=False)],
    out: Annotated[Path, typer.Option("--out", help="Model folder to write (JSON + .npz).", file_okay=False)],
    kind: Annotated[Kind, typer.Option("--kind", help="spline (tensor splines on a regular grid, one r^5 "
                                                      "RBF per side of the transition on <base>-transition "
                                                      "families, r^5 RBF otherwise, local r^5 splines above "
                                                      "8,192 points; the default: it reaches the accuracy "
                                                      "every model must reach on the demo, sound-speed and "
                                                      "spectral boxes), "
                                                      "Gaussian process, or local (r^5 interpolants on cells, "
                                                      "for grids of more than about 8,000 points).")] = Kind.spline,
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
        bool, typer.Option("--warp/--no-warp", help="Parameters the family marks (adiabatic indices, squared "
                                                    "sound speeds) enter as ln(value - offset).")
    ] = True,
    isotropic: Annotated[
        bool, typer.Option("--isotropic", help="Spline (RBF) and local: no per-parameter stretch of the inputs.")
    ] = False,
    overwrite: OverwriteOpt = False,
    allow_mismatch: AllowMismatchOpt = False,
):
    """Train a surrogate on a grid and save it."""
    from .._files import check_output
    from ..surrogate import GPSettings, LocalSettings, SplineSettings, train

    def work():
        check_output(out, "model folder", overwrite, folder=True)  # before the training, not after it
        settings = {"gp": GPSettings(n_subset=subset, n_restarts=restarts, curve_groups=curve_groups,
                                     share_curve_kernels=share_kernels, warp_inputs=warp),
                    "spline": SplineSettings(warp_inputs=warp, anisotropic=not isotropic),
                    "local": LocalSettings(warp_inputs=warp, anisotropic=not isotropic)}.get(kind.value)
        model = train(grid, kind.value, settings, allow_mismatch=allow_mismatch)
        model.save(out, overwrite=overwrite)
        return model

    model = run(work, WRITE_FLAGS)
    label = model.kind if model.method == model.kind else f"{model.kind} ({model.method})"
    typer.echo(f"trained {label} on {model.n_train} points in {model.meta.training.seconds:.1f} s; saved to {out}")


def check_cmd(
    model: Annotated[Path, typer.Argument(help="Model folder written by `tovforge train`.", file_okay=False)],
    holdout: Annotated[Path, typer.Option("--holdout", help="Grid of held-out exact solves.", dir_okay=False)],
    report: Annotated[
        Optional[Path], typer.Option("--report", help="Folder for report.json, report.md and PNG figures "
                                                      "(figures need tovforge[plots]).")
    ] = None,
    overwrite: OverwriteOpt = False,
    allow_mismatch: AllowMismatchOpt = False,
):
    """Compare a surrogate with held-out exact solves; print the error table."""
    from ..surrogate import check, load

    res = run(lambda: check(load(model, allow_mismatch), holdout, report, overwrite=overwrite,
                            allow_mismatch=allow_mismatch), WRITE_FLAGS)
    typer.echo(res.table())
    if report is not None:
        typer.echo(f"report written to {report}/report.md")


def refine_cmd(
    model: Annotated[Path, typer.Argument(help="Model folder written by `tovforge train` (a GP, or any model with "
                                          "an error model).", file_okay=False)],
    budget: Annotated[int, typer.Option("--budget", min=1, help="Exact solves to add.")],
    out: Annotated[
        Optional[Path], typer.Option("--out", help="Folder of the retrained model (default: MODEL-refined).")
    ] = None,
    holdout: Annotated[
        Optional[Path], typer.Option("--holdout", help="Held-out grid: print error against training size.")
    ] = None,
    errors_from: Annotated[
        Optional[Path], typer.Option("--errors-from", help="Grid of exact solves (not the training or held-out "
                                     "grid) whose measured errors also steer the choice.")
    ] = None,
    candidates: Annotated[int, typer.Option("--candidates", min=16, help="Sobol candidates to score.")] = 8192,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the candidate design.")] = 0,
    workers: Annotated[Optional[int], typer.Option("--workers", min=1, help="Parallel workers.")] = None,
    oversubscribe: Annotated[
        bool, typer.Option("--oversubscribe", help="Allow more --workers than this machine has cores.")
    ] = False,
    overwrite: OverwriteOpt = False,
    allow_mismatch: AllowMismatchOpt = False,
):
    """Add exact solves where the model's sigma (its error model's, if any) is largest; retrain; print the errors."""
    from ..surrogate import load
    from ..workflows.refine import refine

    target = out if out is not None else model.with_name(model.name + "-refined")

    def work():
        if model.resolve().is_relative_to(target.resolve()):
            raise InputError(f"--out {target}: the retrained model would replace the model being refined "
                             f"({model}); choose another folder.")
        return refine(load(model, allow_mismatch), budget, target, holdout=holdout, errors_from=errors_from,
                      n_candidates=candidates, seed=seed, workers=workers, overwrite=overwrite,
                      allow_mismatch=allow_mismatch, oversubscribe=oversubscribe)

    res = run(work, WRITE_FLAGS)
    typer.echo(f"added {len(res.added)} exact solves ({res.points_path}); retrained model in {target}")
    if res.learning_curve:
        typer.echo(f"{'training points':>16}{'M_max p95 [Msun]':>18}{'R p95 [m]':>11}{'Lambda p95':>12}")
        for row in res.learning_curve:
            typer.echo(f"{row.n_train:>16}{row.mass_max_p95:>18.4g}{row.radius_p95_km * 1000:>11.2f}"
                       f"{row.lambda_rel_p95:>12.3%}")


def _namespaces(text: str) -> tuple[str, ...]:
    """``"numpy,torch"`` -> the namespaces, each checked against :class:`Namespace`."""
    out = []
    for name in (n.strip() for n in text.split(",")):
        if not name:
            continue
        try:
            out.append(Namespace(name).value)
        except ValueError:
            raise InputError(f"--namespaces: unknown namespace {name!r}; choose from "
                             f"{', '.join(n.value for n in Namespace)}.") from None
    return tuple(out)


def export_cmd(
    model: Annotated[Path, typer.Argument(help="Model folder written by `tovforge train`.", file_okay=False)],
    out: Annotated[Path, typer.Option("--out", help="The .py file to write (its stem is the module name).",
                                      dir_okay=False)],
    report: Annotated[
        Optional[Path],
        typer.Option("--report", help="report.json of `tovforge check` for this model (or its folder): "
                                      "the error table goes into the header."),
    ] = None,
    namespaces: Annotated[
        str, typer.Option("--namespaces", help="Comma-separated array namespaces (numpy, torch, jax) to run the new "
                                               "file under before keeping it (numpy always; the others when "
                                               "installed).")
    ] = "numpy,torch,jax",
    store_weights: Annotated[
        bool, typer.Option("--store-weights", help="Local splines: store the cells' weights (the library's own "
                                                   "weights, no solves at import, about 4 times larger) instead "
                                                   "of solving the cells again at import.")
    ] = False,
    overwrite: OverwriteOpt = False,
):
    """Write MODEL as one Python file that needs NumPy only, with its provenance and error table."""
    from ..export import export_model

    res = run(lambda: export_model(model, out, report, namespaces=_namespaces(namespaces), overwrite=overwrite,
                                   store_weights=store_weights), ("--overwrite",))
    typer.echo(f"wrote {res.path} ({res.size_bytes / 1e6:.2f} MB, payload sha256 {res.payload_sha256[:16]}...)")
    for ns, verdict in res.namespaces.items():
        typer.echo(f"  {ns}: {verdict}")
