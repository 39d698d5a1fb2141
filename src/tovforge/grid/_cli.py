"""``tovforge grid ...`` commands."""

from __future__ import annotations

import typer

grid_app = typer.Typer(help="Build, resume and inspect grids of exact solves over an EOS parameter box.",
                       no_args_is_help=True)
