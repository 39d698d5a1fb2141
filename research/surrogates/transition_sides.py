"""The transition family across its discontinuity: one model per side of the Seidov limit against one model.

The ``<base>-transition`` families have M_max and the curves discontinuous in the parameters where the jump
crosses Seidov's (1971) limit ``Delta e / e_t = 1/2 + 3 p_t / (2 e_t)`` while the transition pressure lies below
the central pressure of the base EOS's maximum-mass star (above it the transition plays no role).  This script
labels every EOS exactly from its parameters (the family's EOS gives ``e_t`` at ``p_t``; a base-family solve gives
the base's central pressure at M_max), trains one library model per side (spline or local kind on the subset),
picks by the side, and measures held-out p50/p95/p99/max of M_max [Msun], R(M) [m] and Lambda(M) [%] for
1.0 <= M <= M_max(exact) - 0.02 (masses of the grid, as ``harness.py``) against one model on all points.  A second
split, "near/far" (the solved first maximum within NEAR decades of p_t or not), is measured the same way, and for
both the side chosen without solving: by the sign of an emulated margin (r^5 + quadratic RBFs of the exact Seidov
margin, of a +-1 indicator, or of the scanned margin of ``transition_margin.py``) or a nearest-neighbour vote,
with the errors outside a band of the smallest scores.  Results: research/surrogates/LOG.md.

    python research/surrogates/transition_sides.py [--kinds spline local] [--splits near/far "margin sign"]

Data (not committed): /work/data/trans/train.h5 (specs/transition-train.toml) and holdout.h5
(specs/transition-holdout.toml).  Results are appended to data/transition_sides.jsonl.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import time
from pathlib import Path

import numpy as np

from tovforge.eos import get_family
from tovforge.grid import read_grid
from tovforge.solve import solve_sequences
from tovforge.surrogate import read_training_data, train_on
from tovforge.surrogate import _runtime as rt

HERE = Path(__file__).resolve().parent
MASS_LOW, GAP = 1.0, 0.02
NEAR = 0.3  # decades of pressure


@dataclasses.dataclass(frozen=True)
class Sides:
    """Exact labels of EOS rows: Seidov margin (jump_ratio minus the limit), base central pressure at M_max."""

    margin: np.ndarray          # (n,) jump_ratio - (1/2 + 3 p_t / (2 e_t))
    log_p_t: np.ndarray         # (n,) log10 dyn/cm^2
    log_pc_base: np.ndarray     # (n,) log10 dyn/cm^2 of the base family's maximum-mass star (NaN: no maximum)

    @property
    def cusp(self) -> np.ndarray:
        """Above the limit with the transition inside the base's stable branch: M_max is the cusp at p_c = p_t."""
        return (self.margin > 0) & (self.log_p_t < self.log_pc_base)


def exact_sides(family_name: str, theta: np.ndarray, chunk: int = 256) -> Sides:
    fam = get_family(family_name)
    base = fam.base
    nb = len(base.parameters)
    margins, pcs = [], []
    for s in range(0, len(theta), chunk):
        t = theta[s : s + chunk]
        b = fam.build(t)
        e_t = b.w_plus - b.delta_e - b.p_t  # e + p just above, minus the jump and p: e just below
        margins.append(t[:, nb + 1] - (0.5 + 1.5 * b.p_t / e_t))
        seq = solve_sequences(base.build(t[:, :nb]), n_stars=0)
        pcs.append(np.log10(seq.value("central_pressure_at_mass_max_dyn_cm2")))
    return Sides(np.concatenate(margins), theta[:, nb], np.concatenate(pcs))


def subset(data, keep):
    return dataclasses.replace(data, theta=data.theta[keep], scalars={k: v[keep] for k, v in data.scalars.items()},
                               curves={k: v[keep] for k, v in data.curves.items()})


def pct(a):
    a = np.asarray(a, float)
    a = a[np.isfinite(a)]
    return [float(v) for v in np.percentile(a, [50, 95, 99])] + [float(a.max())] if a.size else [np.nan] * 4


def errors(y, m, ho, rows=None):
    """Held-out errors of outputs y (n, n_out) (model units); m: a runtime Model with the same output layout."""
    theta, mmax, R, L, masses = ho["theta"], ho["mmax"], ho["R"], ho["L"], ho["masses"]
    eR = np.abs(rt.curve_at_mass(np, m, y, None, None, masses, "radius")[0] - R) * 1000.0
    eL = np.abs(rt.curve_at_mass(np, m, y, None, None, masses, "tidal_deformability")[0] / L - 1.0) * 100.0
    sel = (masses[None, :] >= MASS_LOW - 1e-9) & (masses[None, :] <= mmax[:, None] - GAP) & np.isfinite(R + L)
    eM = np.abs(y[:, m.i_mass_max] - mmax)
    if rows is not None:
        sel = sel & rows[:, None]
        eM = eM[rows]
    nan = int((sel & ~np.isfinite(eR + eL)).sum())
    return {"n_eos": int(len(eM)), "n_stars": int(sel.sum()), "nan_stars": nan, "mass_max": pct(eM),
            "radius_m": pct(eR[sel]), "lambda_pct": pct(eL[sel])}


def fit_margin(x_train, s_train, x_query):
    """The margin emulated: r^5 + quadratic RBF on unit inputs (as the library's spline), with its LOO residuals."""
    from scipy.interpolate import RBFInterpolator

    f = RBFInterpolator(x_train, s_train, kernel="quintic", degree=2)
    return f(x_query)


def knn_vote(x_train, label, x_query, k=12):
    """Share of the k nearest training points (unit box) with the label true."""
    d2 = ((x_query[:, None, :] - x_train[None, :, :]) ** 2).sum(-1)
    nn = np.argpartition(d2, k, axis=1)[:, :k]
    return label[nn].mean(axis=1)


def row(label, r):
    f = lambda v, fmt: " / ".join(format(x, fmt) for x in v)  # noqa: E731
    return (f"| {label} | {r['n_eos']} | {r['n_stars']} | {f(r['mass_max'], '.2g')} | {f(r['radius_m'], '.3g')} | "
            f"{f(r['lambda_pct'], '.3g')} |")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--train", default="/work/data/trans/train.h5")
    ap.add_argument("--holdout", default="/work/data/trans/holdout.h5")
    ap.add_argument("--kinds", nargs="+", default=["spline", "local"])
    ap.add_argument("--margin", default=str(HERE / "data" / "transition_margin.npz"),
                    help="scanned margins of transition_margin.py (optional)")
    ap.add_argument("--splits", nargs="+", default=["margin sign", "near/far"])
    ap.add_argument("--out", default=str(HERE / "data" / "transition_sides.jsonl"))
    a = ap.parse_args()
    data = read_training_data(a.train)
    g = read_grid(a.holdout)
    ok = g.status == 0
    ho = {"theta": np.asarray(g.parameters, float)[ok], "mmax": g.scalars["mass_max_msun"][ok],
          "R": g.at_mass["radius_km"][ok], "L": g.at_mass["tidal_deformability"][ok],
          "masses": np.asarray(g.masses_msun, float), "pc": g.scalars["central_pressure_at_mass_max_dyn_cm2"][ok]}
    t0 = time.perf_counter()
    st = exact_sides(data.family, np.asarray(data.theta, float))
    sh = exact_sides(data.family, ho["theta"])
    print(f"labels: {time.perf_counter() - t0:.0f} s")
    # the labels from the solved sequences: a cusp has its maximum-mass star centred on the transition
    lpc = np.log10(ho["pc"])
    seq_cusp = np.abs(lpc - sh.log_p_t) < 1e-6
    print(f"training rows {len(st.margin)}: margin > 0 {int((st.margin > 0).sum())}, cusp side "
          f"{int(st.cusp.sum())}, p_t above the base's p_c(M_max) {int((st.log_p_t >= st.log_pc_base).sum())}")
    print(f"held-out EOS {len(sh.margin)}: margin > 0 {int((sh.margin > 0).sum())}, cusp side {int(sh.cusp.sum())}; "
          f"cusp from the solved sequence {int(seq_cusp.sum())}, disagreeing with the parameters' label "
          f"{int((seq_cusp != sh.cusp).sum())}")
    lo, hi = data.bounds[:, 0], data.bounds[:, 1]
    xt, xh = (data.theta - lo) / (hi - lo), (ho["theta"] - lo) / (hi - lo)
    # near: the first maximum at (cusp) or just above (a hump before a twin branch) the transition, by the
    # solved sequence: log10 p_c(M_max) - log_p_transition < NEAR (the training and held-out sets have none
    # between 0.05 and 0.5 decades)
    near_t = data.scalars["log10_central_pressure_at_mass_max"] - st.log_p_t < NEAR
    near_h = lpc - sh.log_p_t < NEAR
    s_hat = fit_margin(xt, st.margin, xh)
    f_hat = fit_margin(xt, np.where(near_t, 1.0, -1.0), xh)
    knn = knn_vote(xt, near_t, xh)
    # two stages: the Seidov margin's sign (emulated; exact in every case measured), then on its stable side an
    # indicator of the hump (first maximum just above p_t, before a twin branch) learned on that side only
    neg = st.margin < 0
    g_hat = fit_margin(xt[neg], np.where(near_t[neg], 1.0, -1.0), xh)
    two = np.where(s_hat > 0, 1.0, g_hat)
    # the same with the scanned margin of transition_margin.py (its saved npz; asinh(g / 10 Msun)) learned on
    # the stable side: near where g < 0
    scanned = None
    if Path(a.margin).exists():
        z = np.load(a.margin)
        q_hat = fit_margin(xt[neg], np.arcsinh(z["gt"][neg] / 10.0), xh)
        scanned = np.where(s_hat > 0, -np.inf, q_hat)
    print(f"near side (first maximum within {NEAR} decades of p_t): training {int(near_t.sum())}, held-out "
          f"{int(near_h.sum())} (of them margin > 0: {int((near_h & (sh.margin > 0)).sum())}; every margin > 0 is near: "
          f"{bool(np.all(near_h[sh.margin > 0]))})")
    e_s = np.abs(s_hat - sh.margin)
    wrong = np.sign(s_hat) != np.sign(sh.margin)
    print(f"emulated Seidov margin: |error| p50/p95/p99/max {' / '.join(f'{v:.2g}' for v in pct(e_s))}; "
          f"wrong sign {int(wrong.sum())} of {len(wrong)}")
    for name, v in (("RBF of the +-1 near indicator", f_hat > 0), ("12-NN vote", knn > 0.5),
                    ("margin sign, then RBF indicator", two > 0)) + (
            (("margin sign, then scanned margin", scanned < 0),) if scanned is not None else ()):
        print(f"{name}: wrong side {int((v != near_h).sum())} of {len(v)} held-out EOS")
    results = {"labels": {"train_margin_pos": int((st.margin > 0).sum()), "train_cusp": int(st.cusp.sum()),
                          "n_train": int(len(st.margin)), "holdout_margin_pos": int((sh.margin > 0).sum()),
                          "holdout_cusp": int(sh.cusp.sum()), "holdout_seq_cusp": int(seq_cusp.sum()),
                          "label_disagree": int((seq_cusp != sh.cusp).sum()), "margin_err": pct(e_s),
                          "margin_wrong_sign": int(wrong.sum()), "train_near": int(near_t.sum()),
                          "holdout_near": int(near_h.sum()), "indicator_wrong": int(((f_hat > 0) != near_h).sum()),
                          "knn_wrong": int(((knn > 0.5) != near_h).sum()),
                          "two_stage_wrong": int(((two > 0) != near_h).sum())}}
    splits = {"margin sign": (st.margin > 0, sh.margin > 0, {"emulated margin": (s_hat > 0, np.abs(s_hat),
                                                                                  3.0 * pct(e_s)[2])}),
              "near/far": (near_t, near_h, {"RBF indicator": (f_hat > 0, np.abs(f_hat), 0.5),
                                            "12-NN vote": (knn > 0.5, np.abs(2.0 * knn - 1.0), 0.5),
                                            "margin sign, then RBF indicator": (two > 0, np.where(
                                                s_hat > 0, np.abs(s_hat) / (3.0 * pct(e_s)[2]) * 0.5, np.abs(g_hat)),
                                                0.5)})}
    if scanned is not None:  # the band: the 5 or 10 % of held-out EOS with the smallest |emulated margin|
        score = np.where(s_hat > 0, np.abs(s_hat) / (3.0 * pct(e_s)[2]), np.abs(scanned))
        for share in (0.05, 0.10):
            splits["near/far"][2][f"margin sign, then scanned margin, band {share:.0%}"] = (
                scanned < 0, score, float(np.quantile(score, share)))
    print("| model | EOS | stars | M_max [Msun] p50/p95/p99/max | R [m] p50/p95/p99/max | Lambda [%] p50/p95/p99/max |")
    for kind in a.kinds:
        t0 = time.perf_counter()
        one = train_on(data, kind)
        t_one = time.perf_counter() - t0
        m1 = one._model
        y1 = rt.outputs(np, m1, ho["theta"])[0]
        res = {"kind": kind, "single": errors(y1, m1, ho), "single_seconds": t_one}
        print(row(f"{kind}, one model ({t_one:.0f} s)", res["single"]), flush=True)
        for split, (side_t, side_h, emulated) in splits.items():
            if split not in a.splits:
                continue
            t0 = time.perf_counter()
            models = {v: train_on(subset(data, side_t == v), kind) for v in (False, True)}
            t_two = time.perf_counter() - t0
            ys = {v: rt.outputs(np, models[v]._model, ho["theta"])[0] for v in (False, True)}
            y = np.where(side_h[:, None], ys[True], ys[False])
            r = {"exact": errors(y, m1, ho), "seconds": t_two,
                 "exact_by_side": {str(v): errors(y, m1, ho, side_h == v) for v in (False, True)},
                 "single_by_side": {str(v): errors(y1, m1, ho, side_h == v) for v in (False, True)}}
            print(row(f"{kind}, two models by {split}, exact side ({t_two:.0f} s; training {int(side_t.sum())} "
                      f"true / {int((~side_t).sum())} false)", r["exact"]))
            for v in (False, True):
                print(row(f"  side {v}: two models / one model", r["exact_by_side"][str(v)]))
                print(row("", r["single_by_side"][str(v)]))
            for name, (pick, score, band) in emulated.items():
                y_e = np.where(pick[:, None], ys[True], ys[False])
                near = score < band
                r[name] = {"all": errors(y_e, m1, ho), "outside_band": errors(y_e, m1, ho, ~near), "band": band,
                           "inside_share": float(near.mean()), "wrong": int((pick != side_h).sum())}
                print(row(f"{kind}, two models by {split}, side by {name} ({r[name]['wrong']} wrong)", r[name]["all"]))
                print(row(f"  outside score < {band:.2g} ({near.mean():.1%} of EOS inside)", r[name]["outside_band"]))
            res[split] = r
        with open(a.out, "a") as fh:
            fh.write(json.dumps({"label": "transition sides", **results, **res}) + "\n")


if __name__ == "__main__":
    main()
