"""The library's two-sided spline (method ``sided``) on the transition family's held-out set, by side and band.

Loads a model trained by ``tovforge train`` (defaults) on a transition grid and measures, on the held-out grid's
EOS of status 0: the emulated side against the solved one (first maximum within ``NEAR_DECADES`` of p_t), the
share of EOS in the band (a margin within 3 sigma of zero: sigma raised, not trusted), wrong sides inside and
outside it, and p50/p95/p99/max of M_max [Msun], R(M) [m], Lambda(M) [%] (1.0 <= M <= M_max(exact) - 0.02 at the
grid's masses, as ``harness.py``) for all EOS and for those outside the band; and the share of stars and M_max
not trusted.  Results: research/surrogates/LOG.md.

    python research/surrogates/transition_sided.py --model /work/data/sided/m_sided \
        --holdout /work/data/sided/holdout.h5
"""

from __future__ import annotations

import argparse
import json

import numpy as np

from tovforge.grid import read_grid
from tovforge.solve import NEAR_DECADES
from tovforge.surrogate import _runtime as rt
from tovforge.surrogate import load

MASS_LOW, GAP = 1.0, 0.02


def pct(a):
    a = np.asarray(a, float)
    a = a[np.isfinite(a)]
    return [float(v) for v in np.percentile(a, [50, 95, 99])] + [float(a.max())] if a.size else [np.nan] * 4


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--model", required=True)
    ap.add_argument("--holdout", required=True)
    a = ap.parse_args()
    model = load(a.model)
    g = read_grid(a.holdout)
    ok = g.status == 0
    theta = np.asarray(g.parameters, float)[ok]
    mmax = g.scalars["mass_max_msun"][ok]
    masses = np.asarray(g.masses_msun, float)
    R, L = g.at_mass["radius_km"][ok], g.at_mass["tidal_deformability"][ok]
    i_pt = list(model.parameter_names).index("log_p_transition")
    solved = np.log10(g.scalars["central_pressure_at_mass_max_dyn_cm2"][ok]) - theta[:, i_pt] < NEAR_DECADES
    m = model._model  # research only: the runtime's side choice (a one-sided model: its side is "far")
    x = rt.unit_inputs(np, m, theta)[0]
    near, band = rt.sided_choice(np, m, x) if model.method == "sided" else (np.zeros(len(x), bool),) * 2
    wrong = near != solved
    eM = np.abs(model.mass_max(theta).value - mmax)
    r = model.radius(theta, masses, return_std=True)
    lam = model.tidal_deformability(theta, masses, return_std=True)
    eR = np.abs(r.value - R) * 1e3
    eL = np.abs(lam.value / L - 1.0) * 100.0
    sel = (masses[None, :] >= MASS_LOW - 1e-9) & (masses[None, :] <= mmax[:, None] - GAP) & np.isfinite(R + L)
    mm = model.mass_max(theta, return_std=True)
    out = {"eos": int(ok.sum()), "stars": int(sel.sum()), "solved_near": int(solved.sum()),
           "wrong_side": int(wrong.sum()), "band_share": float(band.mean()),
           "wrong_outside_band": int((wrong & ~band).sum()), "wrong_inside_band": int((wrong & band).sum()),
           "nan_stars": int((sel & ~np.isfinite(eR + eL)).sum()),
           "stars_not_trusted": float(1.0 - (r.trusted & lam.trusted)[sel].mean()),
           "mass_max_not_trusted": float(1.0 - mm.trusted.mean()),
           "large_mass_max_errors_trusted": int(((eM > 0.01) & mm.trusted).sum())}
    for name, rows in (("all", np.ones(len(theta), bool)), ("outside_band", ~band), ("band", band)):
        s = sel & rows[:, None]
        out[name] = {"mass_max": pct(eM[rows]), "radius_m": pct(eR[s]), "lambda_pct": pct(eL[s]),
                     "eos": int(rows.sum())}
    out["outside_band_trusted_stars"] = {"radius_m": pct(eR[sel & ~band[:, None] & r.trusted]),
                                         "lambda_pct": pct(eL[sel & ~band[:, None] & lam.trusted])}
    print(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
