"""tovforge: exact neutron-star structure, EOS-parameter grids, surrogates and exported evaluators."""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__"]
