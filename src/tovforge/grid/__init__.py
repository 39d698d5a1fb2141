"""Grids of exact solves over EOS parameter boxes (being built; see issue on grids)."""

from __future__ import annotations

__all__: list[str] = []
