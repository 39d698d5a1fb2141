"""``python -m tovforge``: the command line (same as ``tovforge``)."""

from __future__ import annotations

from .cli import main

__all__: list[str] = []

main()
