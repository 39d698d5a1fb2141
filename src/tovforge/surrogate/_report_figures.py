"""The figures of a surrogate check (matplotlib, Agg backend): parity, error histograms, worst branches."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._extras import pyplot

__all__ = ["figures"]


def _theta_title(model, theta) -> str:
    """``name = value`` of each parameter, two to a line."""
    parts = [f"{n} = {v:.4g}" for n, v in zip(model.parameter_names, theta)]
    return "\n".join(", ".join(parts[i:i + 2]) for i in range(0, len(parts), 2))


def _exact_branch(family: str, theta):
    """``(R [km], M [Msun])`` of the exact stable branch of the EOS at ``theta`` (200 stars), or None."""
    from .. import eos
    from ..errors import InputError
    from ..solve import solve_sequence

    try:  # parameters the family refuses: the panel keeps the grid nodes only
        seq = solve_sequence(eos.get_family(family).from_array(np.asarray(theta, float)), n_stars=200)
    except InputError:
        return None
    if not seq.success:  # solver failures come back as a status
        return None
    return np.asarray(seq.branch.radius_km), np.asarray(seq.branch.mass_msun)


def figures(model, g, ok, th, mm, mm_exact, q, finite, worst, out: Path) -> list[str]:
    """Write the PNG figures of a check into ``out``; returns their file names.

    ``g`` the held-out grid, ``ok`` its rows used, ``th`` their parameters,
    ``mm`` / ``mm_exact`` emulated and exact M_max, ``q`` per quantity name
    ``(value, std, exact)`` at the held-out masses, ``finite`` the compared
    stars, ``worst`` the rows of the largest radius errors.
    """
    plt = pyplot("the figures of a check report")
    files = []

    def save(fig, name):
        fig.tight_layout()
        fig.savefig(out / name, dpi=110)
        plt.close(fig)
        files.append(name)

    R, _, Rx = q["radius_km"]
    L, _, Lx = q["tidal_deformability"]
    fig, ax = plt.subplots(1, 3, figsize=(13, 4.2))
    ax[0].plot(mm_exact, mm, ".", ms=3)
    ax[0].set(xlabel="exact M_max [Msun]", ylabel="emulated M_max [Msun]", title="maximum mass")
    ax[1].plot(Rx[finite], R[finite], ".", ms=2)
    ax[1].set(xlabel="exact R(M) [km]", ylabel="emulated R(M) [km]", title="radius at fixed masses")
    ax[2].loglog(Lx[finite], L[finite], ".", ms=2)
    ax[2].set(xlabel="exact Lambda(M)", ylabel="emulated Lambda(M)", title="tidal deformability")
    for a in ax:
        lim = [min(a.get_xlim()[0], a.get_ylim()[0]), max(a.get_xlim()[1], a.get_ylim()[1])]
        a.plot(lim, lim, "k-", lw=0.6)
    save(fig, "parity.png")

    dR = (R - Rx)[finite] * 1000.0
    dL = (L / Lx - 1.0)[finite] * 100.0
    fig, ax = plt.subplots(1, 3, figsize=(13, 4))
    ax[0].hist((mm - mm_exact) * 1000.0, bins=60)
    ax[0].set(xlabel="M_max error [1e-3 Msun]", ylabel="points")
    ax[1].hist(np.clip(dR, -200, 200), bins=80)
    ax[1].set(xlabel="R(M) error [m] (clipped at 200 m)", ylabel="stars")
    ax[2].hist(np.clip(dL, -5, 5), bins=80)
    ax[2].set(xlabel="Lambda(M) error [%] (clipped at 5 %)", ylabel="stars")
    save(fig, "error_histograms.png")

    d = th.shape[1]
    fig, ax = plt.subplots(2, d, figsize=(3.4 * d, 6.2), squeeze=False)
    worst_r = np.where(finite, np.abs(R - Rx), np.nan)
    worst_r = np.nanmax(np.where(np.isfinite(worst_r), worst_r, -1), axis=1) * 1000.0
    for i, name in enumerate(model.parameter_names):
        ax[0, i].semilogy(th[:, i], np.maximum(worst_r, 1e-3), ".", ms=3)
        ax[0, i].set(xlabel=name, ylabel="largest R(M) error [m]" if i == 0 else None)
        ax[1, i].semilogy(th[:, i], np.maximum(np.abs(mm - mm_exact), 1e-7), ".", ms=3)
        ax[1, i].set(xlabel=name, ylabel="M_max error [Msun]" if i == 0 else None)
    save(fig, "error_vs_parameters.png")

    k = min(4, len(worst))
    fig, ax = plt.subplots(1, max(k, 1), figsize=(4 * max(k, 1), 4.4), squeeze=False)
    ok_idx = np.flatnonzero(ok)
    for j, i in enumerate(worst[:k]):
        gi = ok_idx[i]
        a = ax[0, j]
        exact = _exact_branch(model.family, th[i])
        if exact is not None:  # the exact branch at plotting resolution, not a polyline through the nodes
            a.plot(exact[0], exact[1], "k-", lw=1.0, label="exact (solver)")
        a.plot(g.curves["radius_km"][gi], g.curves["mass_msun"][gi], "k.", ms=4, label="exact (grid nodes)")
        c = model.curve(th[i], n=120)
        a.plot(c.radius_km, c.masses_msun, "r-", lw=1.2, label="emulated")
        a.set(xlabel="R [km]", ylabel="M [Msun]",
              title=f"largest R(M) error {worst_r[i]:.0f} m\n" + _theta_title(model, th[i]))
        a.title.set_fontsize(8)
        a.legend(fontsize=7)
    save(fig, "worst_mass_radius.png")

    with_std = [(name, v, s, x) for name, (v, s, x) in q.items()
                if s is not None and np.isfinite(np.asarray(s, float)[finite]).any()]
    if with_std:  # calibration: errors in units of the predicted sigma against the unit normal
        fig, ax = plt.subplots(1, len(with_std), figsize=(4.2 * len(with_std), 3.8), squeeze=False)
        grid_z = np.linspace(-6.0, 6.0, 241)
        for a, (name, v, s, x) in zip(ax[0], with_std):
            z = ((np.asarray(v) - np.asarray(x)) / np.asarray(s))[finite]
            z = z[np.isfinite(z)]
            beyond = 100.0 * float(np.mean(np.abs(z) > 3.0)) if z.size else float("nan")
            a.hist(np.clip(z, -6, 6), bins=48, range=(-6, 6), density=True,
                   label=f"held-out stars ({z.size}); |z| > 3: {beyond:.2f} %")
            a.plot(grid_z, np.exp(-0.5 * grid_z**2) / np.sqrt(2 * np.pi), "k-", lw=1, label="unit normal")
            a.set(xlabel="(emulated - exact) / sigma (clipped at 6)", ylabel="density", yscale="log",
                  ylim=(1e-5, 1.0), title=f"calibration of sigma: {name}")
            a.legend(fontsize=7)
        save(fig, "calibration.png")
    return files
