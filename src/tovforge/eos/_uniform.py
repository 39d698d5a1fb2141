"""Uniform-density (incompressible) stars: the Schwarzschild interior solution."""

from __future__ import annotations

import numpy as np

from ..units import DENSITY_CGS_TO_GEOM
from ._base import EOSFamily, Parameter, register_family
from ._batch import UniformDensityBatch

__all__ = ["UniformDensity"]


class UniformDensity(EOSFamily):
    """Constant energy density ``e0``: ``p = e0 (exp(h) - 1)``.

    The rest-mass density is taken equal to ``e0`` (no internal energy), so the
    baryon mass is defined.  A validation family: its stars follow the
    Schwarzschild (1916) interior solution and approach the Buchdahl (1959)
    bound ``C < 4/9``; the surface density jump enters the Love number.
    """

    name = "uniform-density"
    description = "Constant energy density (Schwarzschild interior solution); validation family"
    reference = "Schwarzschild 1916; Buchdahl 1959, Phys. Rev. 116, 1027"
    parameters = (
        Parameter("energy_density", "g/cm^3", "energy density / c^2", (0.0, 1e20), (5e14, 2e15), (True, False)),
    )

    def _build(self, theta):
        theta = np.atleast_2d(theta)
        return UniformDensityBatch(theta[:, 0] * DENSITY_CGS_TO_GEOM)


register_family(UniformDensity())
