"""The ``tovforge`` command line: a thin front over the library.

Every command parses its arguments, calls the library and prints.  Errors
caused by user input are printed as one line on stderr with exit code 2;
the library's progress messages (``logging``, logger ``tovforge``) are
printed as plain lines, and ``tovforge --quiet`` keeps only warnings.

Imports point down only: this package imports the command modules, each of
them imports :mod:`._common`, and the library is imported inside the
commands (so ``tovforge --help`` does not load SciPy, scikit-learn, h5py or
matplotlib).
"""

from __future__ import annotations

import sys
from typing import Annotated

import typer

from .. import __version__
from . import bench, demo, grid, model, solve, table
from ._common import OneLineErrors, configure_logging

__all__ = ["app", "main"]

_HELP = "Exact neutron-star structure, EOS-parameter grids, surrogates and exported evaluators."

# rich_markup_mode=None: help in plain text, because rich markup would swallow every "[...]" of a help text
# (the "[default: 32]" of options whose default depends on --quick, "tovforge[demo]") and show "<bool>" after
# flags (issue 16)
app = typer.Typer(help=_HELP, cls=OneLineErrors, no_args_is_help=True, add_completion=False,
                  pretty_exceptions_enable=False, rich_markup_mode=None)


def _version(value: bool):
    if value:
        typer.echo(f"tovforge {__version__}")
        raise typer.Exit()


@app.callback()
def _main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit.")
    ] = False,
    quiet: Annotated[
        bool, typer.Option("--quiet", "-q", help="Only results, warnings and errors: no progress bars or messages.")
    ] = False,
):
    """Exact neutron-star structure, EOS-parameter grids, surrogates and exported evaluators."""
    configure_logging(quiet)


app.command("families")(solve.families_cmd)
app.command("solve")(solve.solve_cmd)
grid.app.command("refine")(model.refine_cmd)  # refines a model with new grid points: listed with the grids
app.add_typer(grid.app, name="grid")
app.add_typer(table.app, name="table")
app.command("train")(model.train_cmd)
app.command("check")(model.check_cmd)
app.command("export")(model.export_cmd)
app.command("demo")(demo.demo_cmd)
app.command("bench")(bench.bench_cmd)


def main():
    """Entry point of the ``tovforge`` console script and of ``python -m tovforge``."""
    app()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
