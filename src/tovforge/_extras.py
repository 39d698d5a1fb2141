"""Optional dependencies (internal): importing them with a one-line error that names the extra to install.

The core of tovforge needs numpy, scipy, scikit-learn, joblib, typer and
h5py.  Everything else is an extra of the package (``pyproject.toml``):
``cluster`` (dask.distributed), ``plots`` (matplotlib), ``demo`` (emcee,
matplotlib, threadpoolctl) and ``array-api`` (array-api-compat).
"""

from __future__ import annotations

import importlib

from .errors import MissingExtra

__all__ = ["pyplot", "require"]


def require(module: str, extra: str, purpose: str):
    """Import ``module``, or raise :class:`~tovforge.errors.MissingExtra` naming the extra to install.

    Parameters
    ----------
    module : str
        The module to import (``"dask.distributed"``).
    extra : str
        The tovforge extra that installs it (``"cluster"``).
    purpose : str
        What needs it, for the message (``"running on a Dask scheduler"``).
    """
    try:
        return importlib.import_module(module)
    except ImportError:
        package = module.split(".")[0]
        raise MissingExtra(f"{purpose} needs {package}, which is not installed; install the extra with "
                           f"pip install 'tovforge[{extra}]'.") from None


def pyplot(purpose: str):
    """``matplotlib.pyplot`` on the Agg backend (files only, no display); needs the ``plots`` extra."""
    matplotlib = require("matplotlib", "plots", purpose)
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt
