"""``tovforge export``: a trained surrogate as one standalone NumPy-only Python file."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer


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
        str, typer.Option("--namespaces", help="Comma-separated array namespaces to run the new file under "
                                                "before keeping it (numpy always; torch and jax when installed).")
    ] = "numpy,torch,jax",
):
    """Write MODEL as one Python file that needs NumPy only, with its provenance and error table."""
    from ..cli import _run
    from ..errors import InputError
    from . import NAMESPACES, export_model

    def work():
        wanted = tuple(n.strip() for n in namespaces.split(",") if n.strip())
        unknown = [n for n in wanted if n not in NAMESPACES]
        if unknown:
            raise InputError(f"--namespaces: unknown namespace {unknown[0]!r}; choose from {', '.join(NAMESPACES)}.")
        return export_model(model, out, report, namespaces=wanted)

    res = _run(work)
    typer.echo(f"wrote {res.path} ({res.size_bytes / 1e6:.2f} MB, payload sha256 {res.payload_sha256[:16]}...)")
    for ns, verdict in res.namespaces.items():
        typer.echo(f"  {ns}: {verdict}")
