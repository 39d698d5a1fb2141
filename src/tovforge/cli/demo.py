"""``tovforge demo``: the whole pipeline on the demo box, ending in a fit to invented data."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from ._common import Kind, OverwriteOpt, run, show_progress

__all__ = ["demo_cmd"]


def demo_cmd(
    out: Annotated[Path, typer.Option("--out", help="Output folder (figures, tables, models, summary.md).",
                                      file_okay=False)] = Path("demo-output"),
    quick: Annotated[bool, typer.Option("--quick", help="A smoke run of about a minute: 512 training points, "
                                                        "a short chain, 100 exact re-solves.")] = False,
    data: Annotated[Optional[Path], typer.Option("--data", help="Observations file (TOML; default: the invented "
                                                                "demo data shipped with tovforge).",
                                                 dir_okay=False)] = None,
    train_spec: Annotated[Path, typer.Option("--train-spec", help="Training grid spec; its .h5 is reused or built.",
                                             dir_okay=False)] = Path("grids/demo-train.toml"),
    holdout_spec: Annotated[Path, typer.Option("--holdout-spec", help="Held-out grid spec; its .h5 is reused or "
                                                                      "built.", dir_okay=False)]
    = Path("grids/demo-holdout.toml"),
    sampler: Annotated[Kind, typer.Option("--sampler", help="Exported evaluator the sampler calls.")] = Kind.spline,
    walkers: Annotated[Optional[int], typer.Option("--walkers", min=4, help="Ensemble walkers [default: 32].")] = None,
    steps: Annotated[Optional[int], typer.Option("--steps", min=2, help="Steps per walker [default: 1500; "
                                                                        "--quick 400].")] = None,
    burn: Annotated[Optional[int], typer.Option("--burn", min=0, help="Burn-in steps discarded [default: 500; "
                                                                      "--quick 150].")] = None,
    cross_check: Annotated[Optional[int], typer.Option("--cross-check", min=2, help="Posterior samples re-solved "
                                                       "exactly [default: 300; --quick 100].")] = None,
    gp_subset: Annotated[Optional[int], typer.Option("--gp-subset", min=16, help="GP: points used to fit the "
                                                     "hyperparameters [default: 512; --quick 128].")] = None,
    gp_restarts: Annotated[int, typer.Option("--gp-restarts", min=0, help="GP: extra optimiser starts.")] = 0,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the sampler and of the sample choices.")] = 20260301,
    workers: Annotated[Optional[int], typer.Option("--workers", min=1, help="Processes for building grids "
                                                                           "[default: all cores].")] = None,
    overwrite: OverwriteOpt = False,
):
    """Run the demo: grids, GP and spline surrogates, check, export, and a fit to INVENTED data.

    Needs the demo extra: pip install 'tovforge[demo]'.
    """
    import dataclasses

    from ..workflows.demo import DemoSettings, run_demo

    def work():
        base = DemoSettings.quick() if quick else DemoSettings()
        gp = dataclasses.replace(base.gp, n_restarts=gp_restarts,
                                 **({"n_subset": gp_subset} if gp_subset is not None else {}))
        changes = dict(train_spec=train_spec, holdout_spec=holdout_spec, sampler_model=sampler.value, data=data,
                       seed=seed, workers=workers, gp=gp, progress=show_progress())
        for key, value in (("n_walkers", walkers), ("n_steps", steps), ("n_burn", burn),
                           ("n_cross_check", cross_check)):
            if value is not None:
                changes[key] = value
        return run_demo(out, dataclasses.replace(base, **changes), overwrite=overwrite)

    result = run(work, ("--overwrite",))
    if result.failures:
        raise typer.Exit(code=1)
