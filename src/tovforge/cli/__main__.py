"""``python -m tovforge.cli``: the command line (same as ``tovforge``)."""

from __future__ import annotations

from . import main

__all__: list[str] = []

main()
