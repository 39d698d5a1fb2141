"""Workflows: the top library layer, which strings the stages together.

:mod:`tovforge.workflows.refine` adds exact solves where a GP model is least
certain and retrains it (grid + solve + surrogate); :mod:`tovforge.workflows.demo`
runs the whole pipeline from grids to a Bayesian fit with an exported file.
A workflow may import every stage; no stage imports a workflow, and the
command line (:mod:`tovforge.cli`) imports them inside its commands.  This
package imports nothing at import time, so that each workflow loads only the
stages it needs.
"""

from __future__ import annotations

__all__ = ["demo", "refine"]
