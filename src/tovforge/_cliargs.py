"""Command-line arguments shared by several commands (one definition, one help text)."""

from __future__ import annotations

from typing import Annotated, Optional

import typer

#: The EOS family named on the command line.
FamilyArg = Annotated[str, typer.Argument(help="EOS family (see `tovforge families`).")]
#: The EOS parameters as NAME=VALUE words.
ParametersArg = Annotated[
    Optional[list[str]], typer.Argument(help="Parameters as NAME=VALUE (for tables: path=FILE).")
]
