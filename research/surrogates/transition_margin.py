"""A smooth margin of the near/far discontinuity of the transition family, from scans of M(h_c) above the jump.

``transition_sides.py`` found the discontinuity of M_max in the ``<base>-transition`` families to be the boundary
between EOS whose first maximum lies at or just above the transition ("near": a cusp above Seidov's limit, or a
small hump before a twin branch below it) and EOS whose connected hybrid branch rises far ("far").  A sign-changing
quantity that is continuous across that boundary is needed so that an exported file, which cannot solve, can pick
the side by an emulated margin.  Candidate measured here::

    g = min dM/dz over the stars centred between p_t and 10^NEAR p_t,   z = (h_c - h_t)^(3/2),

(NEAR = 0.3 decades, the threshold of the near side; no solved first maximum lies between 0.05 and 0.5 decades
above p_t in the training or held-out sets).  ``z = dh^(3/2)``: the mass of a star with a small core of
the dense phase moves as the core's volume, with a coefficient that changes sign at Seidov's limit (Seidov 1971;
the power from memory: the core radius grows as dh^(1/2) near the centre), so dM/dz stays finite at the
transition; it is negative there above Seidov's limit (a cusp).  Below the limit g < 0 when M falls between a hump and a twin branch, and g > 0
when the branch rises through the whole window (far side); at the fold where the hump disappears and at
Seidov's limit next to a far branch, g passes through zero continuously.  The script scans each EOS of the grids
(stars at ``h_t + dh``, dh geometric from 1e-5 to 1 times the window), emulates ``asinh(g / G0)`` by an
r^5 + quadratic RBF on the training rows and reports how often the emulated sign picks the wrong side of held-out EOS; last, the two-stage
side (Seidov margin, then g below the limit) with a band from each margin's leave-one-out error model.

    python research/surrogates/transition_margin.py
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from tovforge.eos import get_family
from tovforge.grid import read_grid
from tovforge.solve import StepSettings
from tovforge.solve._surface import integrate
from tovforge.surrogate import read_training_data
from tovforge.units import MSUN_KM

HERE = Path(__file__).resolve().parent
#: Where the scan puts stars, as fractions of the window of NEAR decades of pressure above the jump.
FRACTION = np.geomspace(1e-5, 1.0, 100)
NEAR = 0.3  # decades of pressure, as transition_sides.py


def near_window(b) -> np.ndarray:
    """dh = h_c - h_t at which the pressure above the jump reaches NEAR decades above p_t (closed form in h)."""
    s = b.cs2
    dw = (1.0 + s) * (10.0**NEAR - 1.0) * b.p_t / s  # w - w_+ there, from p = p_t + s (w - w_+) / (1 + s)
    return s / (1.0 + s) * np.log1p(dw / b.w_plus)


def scan_margin(family_name: str, theta: np.ndarray, chunk: int = 64) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The margin g (Msun per unit z) of each EOS row (see the module docstring; NaN where the scan fails), the
    first local maximum of M on the scan (M_t for a cusp) and the depth of the dip after it (0 if none), in Msun."""
    fam = get_family(family_name)
    out = []
    for s in range(0, len(theta), chunk):
        b = fam.build(theta[s : s + chunk])
        n = b.n_eos
        dh = near_window(b)[:, None] * FRACTION[None, :]  # (n, k)
        idx = np.repeat(np.arange(n), FRACTION.size + 1)
        h_c = np.concatenate([b.h_t[:, None] * (1.0 - 1e-9), b.h_t[:, None] + dh], axis=1).ravel()
        sv, _ = integrate(b, idx, h_c, StepSettings())
        M = sv["mass"].reshape(n, -1) / MSUN_KM
        z = np.concatenate([np.zeros((n, 1)), dh**1.5], axis=1)
        slope = np.diff(M, axis=1) / np.diff(z, axis=1)
        g = np.min(slope, axis=1)  # NaN if a star failed
        first, depth = np.full(n, np.nan), np.zeros(n)
        for i in range(n):
            m = M[i]
            down = np.flatnonzero(np.diff(m) < 0)
            if down.size:  # the first local maximum on the scan, and how far M falls before it rises again
                k = int(down[0])
                first[i] = m[k]
                up = np.flatnonzero(np.diff(m[k:]) > 0)
                depth[i] = m[k] - (m[k + int(up[0])] if up.size else m[-1])
            else:
                first[i] = np.max(m)
        out.append((g, first, depth))
    return tuple(np.concatenate([o[q] for o in out]) for q in range(3))


def fine_dip(family_name: str, theta_row: np.ndarray) -> tuple[float, float, float]:
    """First local maximum of M above the jump, the depth of the dip after it (Msun) and its dh, on a fine scan."""
    b = get_family(family_name).build(theta_row[None, :])
    dh = np.geomspace(1e-6, 0.5, 2000)
    sv, _ = integrate(b, np.zeros(dh.size, dtype=np.intp), b.h_t + dh, StepSettings())
    m = sv["mass"] / MSUN_KM
    down = np.flatnonzero(np.diff(m) < 0)
    if not down.size:
        return float("nan"), 0.0, float("nan")
    k = int(down[0])
    up = np.flatnonzero(np.diff(m[k:]) > 0)
    return float(m[k]), float(m[k] - m[k + int(up[0])]) if up.size else float("nan"), float(dh[k])


def loo_rbf(x, y, x_query, k=12):
    """r^5 + quadratic RBF of y at x_query, and the sigma of an error model on its leave-one-out residuals.

    The residuals by Rippa's closed form (Rippa 1999, Adv. Comput. Math. 11, 193) on the saddle-point system; the
    sigma at a query: the inverse-square-distance weighted root mean square of the k nearest training points'
    residuals (weights 1 / (d_j + d_1)^2), as the library's error model, without its calibration factor.
    """
    from itertools import combinations_with_replacement

    n, d = x.shape
    terms = [()] + [(i,) for i in range(d)] + list(combinations_with_replacement(range(d), 2))
    P = np.stack([np.prod(x[:, list(t)], axis=1) if t else np.ones(n) for t in terms], axis=1)
    r = np.sqrt(((x[:, None, :] - x[None, :, :]) ** 2).sum(-1))
    A = np.zeros((n + len(terms),) * 2)
    A[:n, :n], A[:n, n:], A[n:, :n] = r**5, P, P.T
    inv = np.linalg.inv(A)
    sol = inv @ np.concatenate([y, np.zeros(len(terms))])
    loo = sol[:n] / np.diag(inv)[:n]
    rq = np.sqrt(((x_query[:, None, :] - x[None, :, :]) ** 2).sum(-1))
    Pq = np.stack([np.prod(x_query[:, list(t)], axis=1) if t else np.ones(len(x_query)) for t in terms], axis=1)
    f = rq**5 @ sol[:n] + Pq @ sol[n:]
    nn = np.argsort(rq, axis=1)[:, :k]
    dist = np.take_along_axis(rq, nn, axis=1)
    w = 1.0 / (dist + dist[:, :1] + 1e-12) ** 2
    sigma = np.sqrt((w * loo[nn] ** 2).sum(1) / w.sum(1))
    return f, sigma, loo


def main():
    from transition_sides import fit_margin, pct

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--train", default="/work/data/trans/train.h5")
    ap.add_argument("--holdout", default="/work/data/trans/holdout.h5")
    ap.add_argument("--out", default=str(HERE / "data" / "transition_margin.npz"))
    a = ap.parse_args()
    data = read_training_data(a.train)
    g = read_grid(a.holdout)
    ok = g.status == 0
    th, tt = np.asarray(g.parameters, float)[ok], np.asarray(data.theta, float)
    near_t = data.scalars["log10_central_pressure_at_mass_max"] - tt[:, 4] < NEAR
    near_h = np.log10(g.scalars["central_pressure_at_mass_max_dyn_cm2"][ok]) - th[:, 4] < NEAR
    t0 = time.perf_counter()
    (gt, ft, dt), (gh, fh, dh) = scan_margin(data.family, tt), scan_margin(data.family, th)
    print(f"scans: {time.perf_counter() - t0:.0f} s; NaN margins train {int(np.isnan(gt).sum())}, held-out "
          f"{int(np.isnan(gh).sum())}")
    np.savez(a.out, gt=gt, gh=gh, near_t=near_t, near_h=near_h, ft=ft, fh=fh, dt=dt, dh=dh)
    mm_t = data.scalars["mass_max_msun"]
    mm_h = g.scalars["mass_max_msun"][ok]
    for name, gg, nn, first, depth, mm in (("training", gt, near_t, ft, dt, mm_t), ("held-out", gh, near_h, fh, dh, mm_h)):
        agree = (gg < 0) == nn
        missed = (first < mm - 1e-2) & (depth > 0)  # coarser than the scan's resolution near far maxima
        print(f"{name}: sign of g agrees with the solved side for {int(agree.sum())} of {len(gg)}; disagreeing: "
              f"g = {np.round(gg[~agree], 4).tolist()[:12]}, near = {nn[~agree].tolist()[:12]}")
        print(f"  the scan finds a first maximum below the grid's M_max (a dip the solver's scan missed) in "
              f"{int(missed.sum())} EOS; dip depths {np.round(depth[missed] * 1e6, 1).tolist()[:20]} x 1e-6 Msun; "
              f"of the disagreeing EOS {int((missed & ~agree).sum())}")
        if name == "held-out":
            for i in np.flatnonzero(~agree):
                first_max, dip, at = fine_dip(data.family, th[i])
                print(f"  held-out EOS {i} {np.round(th[i], 3).tolist()}: grid M_max {mm[i]:.6f}; fine scan: first "
                      f"maximum {first_max:.6f} Msun at h_c - h_t = {at:.2e}, then a dip {dip:.2e} Msun deep")
    G0 = float(np.nanmedian(np.abs(gt)))
    lo, hi = data.bounds[:, 0], data.bounds[:, 1]
    fin = np.isfinite(gt)
    f = fit_margin((tt[fin] - lo) / (hi - lo), np.arcsinh(gt[fin] / G0), (th - lo) / (hi - lo))
    truth = np.arcsinh(gh / G0)
    err = np.abs(f - truth)
    wrong = (f < 0) != near_h
    print(f"emulated asinh(g / {G0:.3g}): |error| p50/p95/p99/max {' / '.join(f'{v:.3g}' for v in pct(err))}; "
          f"wrong side {int(wrong.sum())} of {len(f)}")
    for band in (0.05, 0.1, 0.2, 0.3, 0.5):
        inside = np.abs(f) < band
        print(f"  |emulated| < {band}: {inside.mean():.1%} of held-out EOS inside, wrong side outside "
              f"{int((wrong & ~inside).sum())}")
    print(json.dumps({"G0": G0, "wrong": int(wrong.sum()), "err": pct(err)}))
    # the two-stage side (sign of the emulated Seidov margin, then of asinh(g / 10) learned on the s < 0 rows)
    # with a band from each margin's own leave-one-out error model: |margin| < k sigma
    from transition_sides import exact_sides

    s_t, s_h = exact_sides(data.family, tt).margin, exact_sides(data.family, th).margin
    xt_, xh_ = (tt - lo) / (hi - lo), (th - lo) / (hi - lo)
    s_hat, s_sig, _ = loo_rbf(xt_, s_t, xh_)
    neg = s_t < 0
    q_hat, q_sig, _ = loo_rbf(xt_[neg], np.arcsinh(gt[neg] / 10.0), xh_)
    near = (s_hat > 0) | (q_hat < 0)
    wrong = near != near_h
    print(f"two stages, each margin with its LOO error model: wrong side {int(wrong.sum())} of {len(near)}; "
          f"sigma of s p50 {np.median(s_sig):.2g}, of asinh(g / 10) p50 {np.median(q_sig):.2g}")
    for k in (1.0, 2.0, 3.0):
        unsure = (np.abs(s_hat) < k * s_sig) | ((s_hat <= 0) & (np.abs(q_hat) < k * q_sig))
        print(f"  band |margin| < {k:g} sigma: {unsure.mean():.1%} of held-out EOS inside, wrong side outside "
              f"{int((wrong & ~unsure).sum())}, wrong side inside {int((wrong & unsure).sum())}")


if __name__ == "__main__":
    main()
