"""Benchmark section ``solver``: the fast solver against the SciPy baseline."""

from __future__ import annotations

import numpy as np

from .._bench import demo_box_points, timeit_median
from ..units import MSUN_KM

__all__ = ["bench_solver"]


def _max_rel(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.nanmax(np.abs(a / b - 1.0)))


def bench_solver(quick: bool = False, echo=print) -> None:
    """Median time per sequence (100 stars + M_max), ours vs solve_ivp, with errors."""
    from .. import eos
    from . import SequenceSettings, StepSettings, integrate_stars, solve_sequence, solve_sequences
    from ._baseline import baseline_star
    from ._maximum import cluster_nodes  # noqa: F401  (warm import)

    family = "piecewise-polytrope"
    fam = eos.get_family(family)
    n_eos = 2 if quick else 5
    n_base = 1 if quick else 3
    theta = demo_box_points(family, n_eos)
    eoses = [fam.from_array(t) for t in theta]
    repeat = 2 if quick else 5
    echo(f"{n_eos} EOS of the demo {family} box; sequences of 100 stars + M_max; one core")

    # -- ours, one EOS at a time ------------------------------------------------
    solve_sequence(eoses[0])  # warm caches
    t_ours = [timeit_median(lambda E=E: solve_sequence(E), repeat) for E in eoses]
    seqs = [solve_sequence(E) for E in eoses]

    # -- ours, many EOS per call ---------------------------------------------------
    n_batch = 16 if quick else 64
    theta_b = demo_box_points(family, n_batch, seed=7)
    batch = fam.build(theta_b)
    t_batch = timeit_median(lambda: solve_sequences(batch, n_stars=100), 1 if quick else 2) / n_batch

    # -- accuracy against a converged solve (8x the steps) at the same h_c --------
    fine = StepSettings().refined(8)
    conv_settings = SequenceSettings(steps=fine)
    errs_ours = {"M": [], "R": [], "Lambda": [], "M_max": []}
    refs = []
    for E, s in zip(eoses, seqs):
        h = s.branch.central_pseudo_enthalpy
        ref = integrate_stars(E.batch, np.zeros(h.size, int), h, fine)
        ref_max = solve_sequence(E, n_stars=8, settings=conv_settings).mass_max.mass_msun
        refs.append((h, ref, ref_max))
        errs_ours["M"].append(_max_rel(s.branch.mass_msun[:-1], ref.mass[:-1] / MSUN_KM))
        errs_ours["R"].append(_max_rel(s.branch.radius_km[:-1], ref.radius[:-1]))
        errs_ours["Lambda"].append(_max_rel(s.branch.tidal_deformability[:-1], ref.tidal_deformability[:-1]))
        errs_ours["M_max"].append(abs(s.mass_max.mass_msun / ref_max - 1.0))

    # -- SciPy baseline: solve_ivp in radius, one star at a time, M_max by Brent --
    rows = []
    for rtol in ((1e-8,) if quick else (1e-6, 1e-8, 1e-10)):
        times, e = [], {"M": [], "R": [], "Lambda": [], "M_max": []}
        for (E, s), (h, ref, ref_max) in list(zip(zip(eoses, seqs), refs))[:n_base]:
            import time

            from scipy.optimize import minimize_scalar

            t0 = time.perf_counter()
            stars = [baseline_star(E, float(hc), rtol=rtol) for hc in h[:-1]]
            hs = float(s.mass_max.star.central_pseudo_enthalpy[0])
            opt = minimize_scalar(lambda x: -baseline_star(E, x, rtol=rtol).mass_msun,
                                  bounds=(0.97 * hs, 1.03 * hs), method="bounded", options={"xatol": 1e-9})
            times.append(time.perf_counter() - t0)
            e["M"].append(_max_rel([b.mass_msun for b in stars], ref.mass[:-1] / MSUN_KM))
            e["R"].append(_max_rel([b.radius_km for b in stars], ref.radius[:-1]))
            e["Lambda"].append(_max_rel([b.tidal_deformability for b in stars], ref.tidal_deformability[:-1]))
            e["M_max"].append(abs(-opt.fun / ref_max - 1.0))
        rows.append((f"SciPy solve_ivp DOP853 rtol={rtol:g}", float(np.median(times)), {k: max(v) for k, v in e.items()}))

    ours_ms = float(np.median(t_ours)) * 1e3
    echo("")
    echo(f"{'method':<40}{'ms/EOS':>10}{'vs ours':>9}{'max err M':>11}{'R':>9}{'Lambda':>9}{'M_max':>9}")
    eo = {k: max(v) for k, v in errs_ours.items()}
    echo(f"{'tovforge, one EOS per call':<40}{ours_ms:>10.1f}{1.0:>9.1f}{eo['M']:>11.1e}{eo['R']:>9.1e}"
         f"{eo['Lambda']:>9.1e}{eo['M_max']:>9.1e}")
    echo(f"{f'tovforge, {n_batch} EOS per call':<40}{t_batch * 1e3:>10.1f}{ours_ms / (t_batch * 1e3):>9.1f}"
         f"{'  (same solver)':<15}")
    for name, t, e in rows:
        echo(f"{name:<40}{t * 1e3:>10.1f}{t * 1e3 / ours_ms:>9.1f}{e['M']:>11.1e}{e['R']:>9.1e}"
             f"{e['Lambda']:>9.1e}{e['M_max']:>9.1e}")
    echo("errors: largest relative error over the branch against the same solver with 8x the steps")
    echo("('vs ours': time ratio to tovforge one EOS per call; > 1 means tovforge is faster)")

    from ._bench_exact import bench_exact_rows

    bench_exact_rows(quick, echo, repeat, fine)
