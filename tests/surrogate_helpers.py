"""Synthetic training data with known smooth answers, for surrogate tests."""

from __future__ import annotations

import numpy as np
from scipy.stats import qmc

from tovforge.grid import chebyshev_lobatto_nodes
from tovforge.surrogate import TrainingData

BOX = np.array([[34.0, 35.0], [2.0, 4.0], [1.5, 4.0], [1.5, 4.0]])
U = chebyshev_lobatto_nodes(12, 0.85)


def truth(theta, u=None):
    """Smooth made-up outputs: scalars (n,) and curves (n, n_u) (at ``u`` (n, k) instead of the nodes U if given)."""
    x = (theta - BOX[:, 0]) / (BOX[:, 1] - BOX[:, 0])
    mmax = 1.6 + 0.8 * x[:, 0] + 0.3 * np.sin(2.0 * x[:, 1]) + 0.1 * x[:, 2] * x[:, 3]
    lp = 35.5 + 0.4 * x[:, 1] - 0.2 * x[:, 0] ** 2
    cs2 = 0.5 + 0.3 * np.cos(1.5 * x[:, 2]) * x[:, 0]
    u = U[None, :] if u is None else u
    radius = 11.0 + 2.0 * x[:, :1] + 1.5 * u**2 + 0.3 * np.sin(3.0 * u + x[:, 1:2])
    lnlam = 2.0 + 6.0 * u + 0.5 * x[:, 3:4] - 0.4 * u * x[:, 0:1]
    lni = 0.5 + 0.4 * x[:, 2:3] - 1.2 * u**2
    return {"mass_max_msun": mmax, "log10_central_pressure_at_mass_max": lp, "max_sound_speed_sq": cs2}, {
        "radius_km": radius, "log_tidal_deformability": lnlam, "log_moment_of_inertia": lni}


def synthetic(n, seed=1, regular_shape=None):
    if regular_shape is not None:
        axes = [np.linspace(lo, hi, k) for (lo, hi), k in zip(BOX, regular_shape)]
        theta = np.stack(np.meshgrid(*axes, indexing="ij"), -1).reshape(-1, len(BOX))
    else:
        theta = qmc.scale(qmc.Sobol(4, seed=seed).random_base2(int(np.ceil(np.log2(n))))[:n], BOX[:, 0], BOX[:, 1])
    scalars, curves = truth(theta)
    return TrainingData(family="piecewise-polytrope", parameter_names=("log_p1", "gamma1", "gamma2", "gamma3"),
                        parameter_units=("log10(dyn/cm^2)", "1", "1", "1"), bounds=BOX, theta=theta,
                        scalars=scalars, u_nodes=U, curves=curves, mass_floor_msun=1.0,
                        regular_shape=tuple(regular_shape) if regular_shape is not None else None)
