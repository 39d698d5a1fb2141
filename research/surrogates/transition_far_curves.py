"""Far side of the transition family: does a curve coordinate with a node at the transition mass remove the kink?

On the far side (the connected hybrid branch rises far above the jump; ``transition_sides.py``) R(M) kinks at
the transition mass M_t (the star centred at p_t), and the kink moves along ``u = sqrt(1 - M / M_max)``.  Here
each far EOS is solved exactly at masses of a coordinate ``t`` that puts M_t at t = 1/2::

    t in [0, 1/2]:  M = M_lo + 2 t (M_t - M_lo),              M_lo = min(0.9, M_t - 0.1) Msun (base stars)
    t in [1/2, 1):  M = M_max - (M_max - M_t) (2 - 2 t)^2     (hybrid stars; u-like crowding at M_max)

and the node radii and ln Lambda (with M_t, M_max) are emulated by the library's spline (input warp, learned
stretch; the t nodes stand in for the curves and M_t for a scalar: research only) and by a plain SciPy r^5 +
quadratic RBF, against the same on the grid's own u nodes; each interpolates in its coordinate by cubic splines
(t: one per segment).  Held-out errors at the grid's masses, 1.0 <= M <= M_max - 0.02: far EOS, then all EOS with
the near side's own model on u nodes (the exact side).  Results in research/surrogates/LOG.md.

    python research/surrogates/transition_far_curves.py
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline, RBFInterpolator

from tovforge.eos import get_family
from tovforge.grid import read_grid
from tovforge.solve import StepSettings, solve_sequences
from tovforge.solve._surface import integrate
from tovforge.surrogate import read_training_data
from tovforge.units import MSUN_KM

HERE = Path(__file__).resolve().parent
NEAR = 0.3
T_LOW = np.linspace(0.0, 0.5, 9)
T_HIGH = 0.5 + 0.47 * np.linspace(0.0, 1.0, 13)[1:]  # main() may set other nodes


def transition_mass(family, theta):
    """Mass [Msun], radius [km] and ln Lambda of the star centred just below the jump (the transition mass M_t)."""
    b = family.build(theta)
    sv, _ = integrate(b, np.arange(b.n_eos), b.h_t * (1.0 - 1e-9), StepSettings())
    return sv["mass"] / MSUN_KM, np.stack([sv["radius"], np.log(sv["tidal_deformability"])], axis=-1)


def t_masses(m_t, m_max):
    m_lo = np.minimum(0.9, m_t - 0.1)
    low = m_lo[:, None] + 2.0 * T_LOW[None, :] * (m_t - m_lo)[:, None]
    high = m_max[:, None] - (m_max - m_t)[:, None] * (2.0 - 2.0 * T_HIGH[None, :]) ** 2
    return np.concatenate([low, high], axis=1), m_lo


def at_t_masses(nodes, m_t, m_max, masses):
    """Node values (n, k) at the t nodes to values at ``masses`` (q,): a cubic spline per segment, NaN above M_max."""
    nl = T_LOW.size
    out = np.full((len(nodes), masses.size), np.nan)
    for i in range(len(nodes)):
        m_nodes, _ = t_masses(np.array([m_t[i]]), np.array([m_max[i]]))
        low = CubicSpline(m_nodes[0, :nl], nodes[i, :nl])
        high = CubicSpline(np.concatenate([[0.5], T_HIGH]), np.concatenate([[nodes[i, nl - 1]], nodes[i, nl:]]))
        tq = 1.0 - 0.5 * np.sqrt(np.clip((m_max[i] - masses) / (m_max[i] - m_t[i]), 0.0, None))
        out[i] = np.where(masses <= m_t[i], low(masses), np.where(masses <= m_max[i], high(tq), np.nan))
    return out


def t_model_curves(m, y, masses):
    """R [km] and Lambda at ``masses`` from a library model trained on t nodes (M_t in a scalar's slot)."""
    col = {q[1]: q[5] for q in m.outputs}
    m_t, m_max = y[:, col["max_sound_speed_sq"]], y[:, col["mass_max_msun"]]
    out = []
    for query in ("radius", "tidal_deformability"):
        o = next(o for o in m.outputs if o[2] == "star" and o[4] == query)
        out.append(at_t_masses(y[:, o[5] : o[6]], m_t, m_max, masses))
    return out[0], np.exp(out[1])


def solve_radii(family, theta, masses, m_t, r_t, chunk=64):
    """Exact radii [km] and ln Lambda at the t nodes, (n, k, 2).  The node t = 1/2 is the star at p_t itself; when M_t < 1 Msun the base
    segment (never asked at the held-out masses >= 1 Msun) may lie below the branch's lightest star: its NaN nodes
    are filled with R(M_t)."""
    out = []
    for s in range(0, len(theta), chunk):
        seq = solve_sequences(family.build(theta[s : s + chunk]), n_stars=0, masses=masses[s : s + chunk])
        out.append(np.stack([np.asarray(seq.at_mass.radius_km, float),
                             np.log(np.asarray(seq.at_mass.tidal_deformability, float))], axis=-1))
    R = np.concatenate(out)
    nl = T_LOW.size
    R[:, nl - 1] = r_t
    low = R[:, :nl]
    R[:, :nl] = np.where(np.isnan(low) & (m_t < 1.0)[:, None, None], r_t[:, None, :], low)
    return R


def main():
    import argparse

    global T_HIGH
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--high-nodes", type=int, default=12, help="nodes on the hybrid segment, t in (1/2, 0.97]")
    ap.add_argument("--power", type=float, default=1.0, help="> 1 crowds them towards M_t")
    a = ap.parse_args()
    T_HIGH = 0.5 + 0.47 * np.linspace(0.0, 1.0, a.high_nodes + 1)[1:] ** a.power
    fam = get_family("piecewise-polytrope-transition")
    data = read_training_data("/work/data/trans/train.h5")
    g = read_grid("/work/data/trans/holdout.h5")
    ok = g.status == 0
    th = np.asarray(g.parameters, float)[ok]
    far_t = ~(data.scalars["log10_central_pressure_at_mass_max"] - data.theta[:, 4] < NEAR)
    far_h = ~(np.log10(g.scalars["central_pressure_at_mass_max_dyn_cm2"][ok]) - th[:, 4] < NEAR)
    far_t &= data.scalars["mass_max_msun"] >= 1.0  # below-floor rows carry no stars at the held-out masses
    tt, th = np.asarray(data.theta, float)[far_t], th[far_h]
    mm_t, mm_h = data.scalars["mass_max_msun"][far_t], g.scalars["mass_max_msun"][ok][far_h]
    t0 = time.perf_counter()
    (mt_t, rt_t), (mt_h, _) = transition_mass(fam, tt), transition_mass(fam, th)
    masses_t, _ = t_masses(mt_t, mm_t)
    R_t = solve_radii(fam, tt, masses_t, mt_t, rt_t)
    L_t, R_t = R_t[:, :, 1], R_t[:, :, 0]
    keep = np.all(np.isfinite(R_t) & np.isfinite(L_t), axis=1)
    print(f"far rows: training {len(tt)}, held-out {len(th)}; exact stars at the t nodes {time.perf_counter() - t0:.0f} s;"
          f" training rows with a NaN node (dropped for the t nodes) {int((~keep).sum())}")
    lo, hi = data.bounds[:, 0], data.bounds[:, 1]
    xt, xh = (tt - lo) / (hi - lo), (th - lo) / (hi - lo)
    masses = np.asarray(g.masses_msun, float)
    R_exact = g.at_mass["radius_km"][ok][far_h]
    sel = (masses[None, :] >= 1.0 - 1e-9) & (masses[None, :] <= mm_h[:, None] - 0.02) & np.isfinite(R_exact)
    # (a) the grid's u nodes
    Yu = np.concatenate([data.curves["radius_km"][far_t], mm_t[:, None]], axis=1)
    fu = RBFInterpolator(xt, Yu, kernel="quintic", degree=2)(xh)
    un = np.asarray(data.u_nodes, float)
    Ru = np.full(sel.shape, np.nan)
    for i in range(len(th)):
        u = np.sqrt(np.clip(1.0 - masses / fu[i, -1], 0.0, None))
        Ru[i] = np.where(masses <= fu[i, -1], CubicSpline(un, fu[i, :-1])(u), np.nan)
    # (b) the t nodes with M_t at t = 1/2
    Yt = np.concatenate([R_t, mt_t[:, None], mm_t[:, None]], axis=1)[keep]
    ft = RBFInterpolator(xt[keep], Yt, kernel="quintic", degree=2)(xh)
    Rt = at_t_masses(ft[:, :-2], ft[:, -2], ft[:, -1], masses)
    # (c), (d): the library's spline (input warp and learned stretch) on the same two representations; the t nodes
    # go in as the curves (R and ln Lambda; R again for I) and M_t in a scalar's slot (research only)
    import dataclasses

    from tovforge.surrogate import train_on
    from tovforge.surrogate import _runtime as rt

    from transition_sides import subset as sub
    lib_u = train_on(sub(data, far_t), "spline")._model
    yu = rt.outputs(np, lib_u, th)[0]
    Rlu = rt.curve_at_mass(np, lib_u, yu, None, None, masses, "radius")[0]
    dt = sub(data, far_t)
    dt = dataclasses.replace(dt, u_nodes=np.linspace(0.0, 0.85, R_t.shape[1]),
                             curves={"radius_km": R_t, "log_tidal_deformability": L_t, "log_moment_of_inertia": R_t},
                             scalars={**dt.scalars, "max_sound_speed_sq": mt_t})
    lib_t = train_on(sub(dt, keep), "spline")._model
    yt = rt.outputs(np, lib_t, th)[0]
    Rlt, Llt = t_model_curves(lib_t, yt, masses)
    L_exact = g.at_mass["tidal_deformability"][ok][far_h]
    Llu = rt.curve_at_mass(np, lib_u, yu, None, None, masses, "tidal_deformability")[0]
    for name, L in (("library spline on the grid's u nodes", Llu), ("library spline on t nodes", Llt)):
        e = np.abs(L / L_exact - 1.0)[sel] * 100.0
        p = np.nanpercentile(e, [50, 95, 99])
        print(f"{name}: Lambda [%] p50/p95/p99/max {p[0]:.3g} / {p[1]:.3g} / {p[2]:.3g} / {np.nanmax(e):.3g}")
    eLt = np.abs(Llt / L_exact - 1.0) * 100.0
    eRt = np.abs(Rlt - R_exact) * 1000.0
    for label, dist in (("M - M_t", masses[None, :] - mt_h[:, None]), ("M_max - M", mm_h[:, None] - masses[None, :])):
        for lo_, hi_ in ((-9.0, -0.1), (-0.1, 0.0), (0.0, 0.1), (0.1, 0.3), (0.3, 9.0)):
            c = sel & (dist >= lo_) & (dist < hi_)
            if c.any():
                print(f"  t nodes, {label} in [{lo_:g}, {hi_:g}): {int(c.sum())} stars, p95 R {np.nanpercentile(eRt[c], 95):.3g}"
                      f" m, Lambda {np.nanpercentile(eLt[c], 95):.3g} %")
    for name, y, m in (("u nodes", yu, lib_u), ("t nodes", yt, lib_t)):
        e = np.abs(y[:, m.i_mass_max] - mm_h)
        print(f"library spline on {name}: M_max [Msun] p50/p95/p99/max "
              + " / ".join(f"{v:.2g}" for v in [*np.percentile(e, [50, 95, 99]), e.max()]))
    # the whole held-out set: the near side's library spline on the grid's u nodes (its training rows: near,
    # status 0 or 2) beside the far side's on t nodes, picked by the exact side or by the emulated margins of
    # transition_sides.py (sign of the Seidov margin, then of the scanned margin asinh(g / 10) on its s < 0 rows)
    from transition_sides import exact_sides, fit_margin

    near_rows = data.scalars["log10_central_pressure_at_mass_max"] - data.theta[:, 4] < NEAR
    lib_n = train_on(sub(data, near_rows), "spline")._model
    tha = np.asarray(g.parameters, float)[ok]
    mm_a = g.scalars["mass_max_msun"][ok]
    R_x, L_x = g.at_mass["radius_km"][ok], g.at_mass["tidal_deformability"][ok]
    sel_a = (masses[None, :] >= 1.0 - 1e-9) & (masses[None, :] <= mm_a[:, None] - 0.02) & np.isfinite(R_x)
    yn, yf = rt.outputs(np, lib_n, tha)[0], rt.outputs(np, lib_t, tha)[0]
    near_pred = {"M": yn[:, lib_n.i_mass_max], "R": rt.curve_at_mass(np, lib_n, yn, None, None, masses, "radius")[0],
                 "L": rt.curve_at_mass(np, lib_n, yn, None, None, masses, "tidal_deformability")[0]}
    Rf, Lf = t_model_curves(lib_t, yf, masses)
    far_pred = {"M": yf[:, lib_t.i_mass_max], "R": Rf, "L": Lf}
    sides_t, sides_h = exact_sides(data.family, np.asarray(data.theta, float)), exact_sides(data.family, tha)
    xa = (tha - lo) / (hi - lo)
    xall = (np.asarray(data.theta, float) - lo) / (hi - lo)
    s_hat = fit_margin(xall, sides_t.margin, xa)
    neg = sides_t.margin < 0
    g_hat = fit_margin(xall[neg], np.arcsinh(np.load(HERE / "data" / "transition_margin.npz")["gt"][neg] / 10.0), xa)
    e_s = np.abs(s_hat - sides_h.margin)
    score = np.where(s_hat > 0, np.abs(s_hat) / (3.0 * np.percentile(e_s, 99)), np.abs(g_hat))
    band = score < np.quantile(score, 0.10)
    f = lambda e, fmt: " / ".join(format(v, fmt) for v in [*np.nanpercentile(e, [50, 95, 99]), np.nanmax(e)])  # noqa: E731
    for name, pick in (("exact side", ~far_h), ("emulated side", (s_hat > 0) | (g_hat < 0))):
        for rows_name, rows in (("all", np.ones(len(tha), bool)), ("outside the 10 % band", ~band)):
            P = {k: np.where(pick[:, None] if near_pred[k].ndim == 2 else pick, near_pred[k], far_pred[k])
                 for k in near_pred}
            c = sel_a & rows[:, None]
            eM = np.abs(P["M"] - mm_a)[rows]
            eR = np.abs(P["R"] - R_x)[c] * 1000.0
            eL = np.abs(P["L"] / L_x - 1.0)[c] * 100.0
            print(f"{name}, {rows_name}: {int(rows.sum())} EOS ({c.sum()} stars; wrong side "
                  f"{int((pick != ~far_h)[rows].sum())}), near on u nodes + far on t nodes (library spline): "
                  f"M_max {f(eM, '.2g')} Msun; R {f(eR, '.3g')} m; Lambda {f(eL, '.3g')} %; NaN stars "
                  f"{int(np.isnan(eR).sum())}")
    for name, R in (("RBF on the grid's u nodes", Ru), ("RBF on t nodes (M_t at t = 1/2)", Rt),
                    ("library spline on the grid's u nodes", Rlu), ("library spline on t nodes", Rlt)):
        e = np.abs(R - R_exact)[sel] * 1000.0
        p = np.nanpercentile(e, [50, 95, 99])
        print(f"{name}: R [m] p50/p95/p99/max {p[0]:.3g} / {p[1]:.3g} / {p[2]:.3g} / {np.nanmax(e):.3g} "
              f"({int(np.isnan(e).sum())} NaN of {e.size})")
    e_mt = np.abs(ft[:, -2] - mt_h)
    print(f"emulated M_t: |error| p50/p95/max {np.percentile(e_mt, 50):.2g} / {np.percentile(e_mt, 95):.2g} / "
          f"{e_mt.max():.2g} Msun")


if __name__ == "__main__":
    main()
