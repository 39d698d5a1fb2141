"""``tovforge bench``: speed and accuracy measured on this machine."""

from __future__ import annotations

from enum import Enum
from typing import Annotated, Optional

import typer

from .._bench import SECTIONS
from ._common import run

__all__ = ["Section", "bench_cmd"]

#: The benchmark sections as choices (from :data:`tovforge._bench.SECTIONS`, in their order).
Section = Enum("Section", {name: name for name in SECTIONS}, type=str)


def bench_cmd(
    quick: Annotated[bool, typer.Option("--quick", help="Fewer repetitions (a smoke run).")] = False,
    only: Annotated[
        Optional[list[Section]], typer.Option("--only", help="A section to run (repeat for several; default: all).")
    ] = None,
):
    """Measure speed and accuracy on this machine (prints ratios measured side by side)."""
    from .._bench import run_benchmarks

    wanted = [s.value for s in only] if only else None
    run(lambda: run_benchmarks(quick=quick, only=wanted, echo=typer.echo))
