"""``tovforge grid run|info``: a thin front over :mod:`tovforge.grid` (``grid refine`` lives in :mod:`.model`)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from ._common import run, show_progress

__all__ = ["app", "info_cmd", "run_cmd"]

app = typer.Typer(help="Build, resume and inspect grids of exact solves over an EOS parameter box.",
                  no_args_is_help=True, rich_markup_mode=None)


@app.command("run")
def run_cmd(
    spec: Annotated[Path, typer.Argument(help="Grid spec (TOML; see grids/*.toml).", dir_okay=False)],
    out: Annotated[Path, typer.Option("--out", help="HDF5 file to write (finished chunks go to OUT.parts/).",
                                      dir_okay=False)],
    workers: Annotated[
        Optional[int], typer.Option("--workers", min=1, help="Parallel workers (default: all cores).")
    ] = None,
    scheduler: Annotated[
        Optional[str],
        typer.Option("--scheduler", help="dask.distributed scheduler address (e.g. tcp://host:8786): run on "
                                         "that cluster; chunks lost with a worker run again (needs "
                                         "tovforge[cluster])."),
    ] = None,
    overwrite: Annotated[
        bool, typer.Option("--overwrite", help="Replace an output, and discard unfinished chunks, made from another "
                                     "spec (those of the same spec are kept: the run resumes).")
    ] = False,
    oversubscribe: Annotated[
        bool, typer.Option("--oversubscribe", help="Allow more --workers than this machine has cores.")
    ] = False,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
):
    """Solve every point of SPEC and write one HDF5 grid; rerun the same command to resume after a crash.

    OUT.lock exists while a run writes OUT: a second run on the same output is refused (a lock left by a
    killed run is taken over).
    """
    from ..grid import load_spec, parts_folder, run_grid

    def work():
        s = load_spec(spec)
        return run_grid(s, out, workers=workers, scheduler=scheduler, overwrite=overwrite,
                        progress=show_progress(quiet), oversubscribe=oversubscribe)

    try:
        summary = run(work, ("--overwrite",))
    except KeyboardInterrupt:
        typer.echo(f"\ninterrupted: finished chunks are kept in {parts_folder(out)}; rerun the same command "
                   "to resume.", err=True)
        raise typer.Exit(code=130) from None
    typer.echo(summary.text())


@app.command("info")
def info_cmd(path: Annotated[Path, typer.Argument(help="Grid file written by `tovforge grid run`.", dir_okay=False)]):
    """Counts by status, parameter coverage, output ranges and provenance of a grid file.

    Exit code 2 when the datasets no longer match the recorded content hash (MISMATCH).
    """
    from ..grid import describe_grid, verify_grid

    typer.echo(run(lambda: describe_grid(path)))
    if path.exists():  # (a run in progress has no file yet)
        run(lambda: verify_grid(path))
