"""Experiments of the surrogate research (see LOG.md for what was run and measured).

Usage::

    python research/surrogates/experiments.py baseline demo --kind gp --n 4096
    python research/surrogates/experiments.py pu demo --n 4096 [--cells 3 3 3 3] [--warp learned|library|none]

Boxes: ``demo`` (piecewise polytrope), ``ss`` (sound speed), ``spectral`` (proposed box).
Results are appended to ``data/results.jsonl``; the tables are printed.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"

BOXES = {
    "demo": {"train": [DATA / "demo-train-32k.h5", HERE.parents[1] / "grids" / "demo-train.h5"],
             "holdout": DATA / "demo-holdout.h5", "faces": DATA / "demo-faces.h5"},
    "ss": {"train": [DATA / "ss-train-16k.h5"], "holdout": DATA / "ss-holdout.h5", "faces": DATA / "ss-faces.h5"},
    "spectral": {"train": [DATA / "spectral-train-16k.h5"], "holdout": DATA / "spectral-holdout.h5",
                 "faces": DATA / "spectral-faces.h5"},
}


def load_train(box: str, n: int):
    """TrainingData from the first ``n`` rows of the box's (nested Sobol) training grid."""
    from tovforge.grid import read_grid
    from tovforge.surrogate._data import training_data_from_arrays

    path = next(p for p in BOXES[box]["train"] if p.exists())
    g = read_grid(path)
    if n > len(g.status):
        raise SystemExit(f"{path} has {len(g.status)} rows < {n}")
    s = slice(0, n)
    return training_data_from_arrays(
        path=path, family_name=g.family, parameter_names=g.parameter_names, parameter_units=g.parameter_units,
        box=g.box, theta=g.parameters[s], status=g.status[s], scalars={k: v[s] for k, v in g.scalars.items()},
        curves={k: v[s] for k, v in g.curves.items()}, u_nodes=g.u_nodes, attrs=dict(g.attrs))


def holdout(box: str):
    from harness import load_holdout

    b = BOXES[box]
    return load_holdout(b["holdout"], b["faces"])


def record(label, res, extra):
    DATA.mkdir(exist_ok=True)
    with open(DATA / "results.jsonl", "a") as fh:
        fh.write(json.dumps({"label": label, "time": time.strftime("%Y-%m-%d %H:%M"), **extra, **res},
                            default=float) + "\n")


def cmd_baseline(a):
    from harness import evaluate, model_predictor, table

    from tovforge.surrogate._train import train_on

    data = load_train(a.box, a.n)
    t0 = time.perf_counter()
    model = train_on(data, a.kind)
    secs = time.perf_counter() - t0
    ho = holdout(a.box)
    fn, m = model_predictor(model)
    res = evaluate(fn, m, ho)
    label = f"baseline {a.box} {model.kind} n={len(data.theta)}"
    print(table(res, f"{label} ({secs:.0f} s)"))
    record(label, res, {"box": a.box, "kind": model.kind, "n_train": len(data.theta), "train_seconds": secs})
    if a.save:
        model.save(DATA / "models" / f"{a.box}-{model.kind}-{a.n}")


def _weights(index, slices):
    """Output groups of the LOO objective: M_max, R nodes, ln Lambda nodes (equal weights)."""
    im = index["mass_max_msun"]
    return [([im], 1.0), (list(range(*slices[0])), 1.0), (list(range(*slices[1])), 1.0)]


def _open_lower_shift(data):
    from tovforge import eos

    fam = eos.get_family(data.family)
    par = {p.name: p for p in fam.parameters}
    sh = np.array([par[n].allowed[0] if par[n].open_ends[0] else np.nan for n in data.parameter_names], float)
    print("open-lower-bound warp shifts", sh)
    return sh if np.isfinite(sh).any() else None


def _library_shift(data):
    from tovforge import eos

    fam = eos.get_family(data.family)
    off = {p.name: p.log_offset for p in fam.parameters}
    sh = np.array([np.nan if off.get(n) is None else off[n] for n in data.parameter_names])
    return sh if np.isfinite(sh).any() else None


def auto_cells(n, s, per_cell=256):
    """Cells per parameter: split the parameter of largest stretch per cell until cells hold ~per_cell points."""
    cells = np.ones(len(s), dtype=int)
    while n / np.prod(cells) > 1.5 * per_cell:
        i = int(np.argmax(np.asarray(s) / cells))
        cells[i] += 1
    return tuple(int(c) for c in cells)


def make_warp(a, data, Z, index, slices, cols=None):
    import proto

    shift = _library_shift(data) if a.warp in ("library", "library+learned", "libstretch") else None
    if a.log_all:  # ln(theta - log_all_shift) for every parameter (e.g. ln c_s^2)
        shift = np.full(len(data.bounds), a.log_all_shift)
    if a.open_log:  # ln(theta - allowed lower bound) where the family's allowed range is open below
        shift = _open_lower_shift(data)
    if a.warp in ("learned", "library+learned"):
        warp, _ = proto.learn_warp(data.theta, Z, data.bounds, _weights(index, slices), n_sub=a.n_sub,
                                   log_shift=shift, learn_k=not a.no_k, log=print)
        return warp
    warp = proto.Warp(data.bounds[:, 0], data.bounds[:, 1], np.zeros(len(data.bounds)),
                      np.ones(len(data.bounds)), shift)
    if a.warp == "libstretch":  # the library RBF's stretch: l_min / l_i of one GP on 256 points
        from tovforge.surrogate._rbf import SplineSettings, _anisotropy
        if cols is not None:
            sl = None
            warp.s = _anisotropy(warp(data.theta), Z[:, cols], np.array([[0, len(cols)]]), SplineSettings())[0]
        elif a.stretch_on == "maxof":  # elementwise max of the curves' and M_max's stretches
            im = index["mass_max_msun"]
            s1 = _anisotropy(warp(data.theta), Z, slices, SplineSettings())[0]
            s2 = _anisotropy(warp(data.theta), Z, np.array([[im, im + 1]]), SplineSettings())[0]
            warp.s = np.maximum(s1 / s1.max(), s2 / s2.max())
            sl = None
        elif a.stretch_on == "curves":
            sl = slices
        elif a.stretch_on == "mmax":
            im = index["mass_max_msun"]
            sl = np.array([[im, im + 1]])
        else:
            sl = np.array([[0, Z.shape[1]]])
        if sl is not None:
            warp.s = _anisotropy(warp(data.theta), Z, sl, SplineSettings())[0]
        print("library stretch", np.round(warp.s, 3))
    if a.scale:
        warp.s = np.array(a.scale, float)
    return warp


def _loo_score(loo_phys, cols, index, slices):
    """Sum over M_max, R nodes, ln Lambda nodes (those among ``cols``) of log p95 + log p99 of |LOO| / goal."""
    goal = {}
    goal[index["mass_max_msun"]] = GOALS["mass_max"]
    for c in range(*slices[0]):
        goal[c] = GOALS["radius"]
    for c in range(*slices[1]):
        goal[c] = GOALS["log_lambda"]
    total = 0.0
    for group in ([index["mass_max_msun"]], list(range(*slices[0])), list(range(*slices[1]))):
        g = [cols.index(c) for c in group if c in cols]
        if not g:
            continue
        e = np.abs(loo_phys[:, g]) / np.array([goal[cols[i]] for i in g])
        total += np.log(np.percentile(e, 95)) + np.log(np.percentile(e, 99))
    return float(total)


def select_warp_loo(a, data, Y, cols, index, slices, candidates=(None, 1.0, 0.3, 0.1, 0.03), log=print):
    """Per-parameter warp ln(theta - lo + c (hi - lo)), chosen coordinate-wise by the PU model's own LOO
    residuals on all training points (p95 + p99 in goal units); the stretch of each candidate from one GP."""
    import proto

    from tovforge.surrogate._rbf import MIN_STRETCH, SplineSettings, _anisotropy

    d = data.theta.shape[1]
    lo, hi = data.bounds[:, 0].astype(float), data.bounds[:, 1].astype(float)
    sd = np.where(Y.std(0) > 0, Y.std(0), 1.0)
    Z = (Y - Y.mean(0)) / sd

    def evaluate(cs):
        shift = np.array([np.nan if c is None else l - c * (h - l) for c, l, h in zip(cs, lo, hi)])
        w = proto.Warp(lo, hi, np.zeros(d), np.ones(d), shift if np.isfinite(shift).any() else None)
        import warnings
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            w.s = _anisotropy(w(data.theta), Z[:, cols], np.array([[0, len(cols)]]), SplineSettings())[0]
        X = w(data.theta)
        cells = auto_cells(len(X), w.s, a.per_cell)
        pu = proto.PURBF.fit(X, Z[:, cols], cells, overlap=a.overlap, margin=a.margin, degree=a.degree, loo=True)
        return _loo_score(pu.loo * sd[cols], cols, index, slices), w

    t0 = time.perf_counter()
    cs = [None] * d
    best, wbest = evaluate(cs)
    for i in range(d):
        for c in candidates:
            if c == cs[i]:
                continue
            trial = list(cs)
            trial[i] = c
            v, w = evaluate(trial)
            if v < best - 0.05:
                best, wbest, cs = v, w, trial
    if log:
        log(f"select_warp_loo: c = {cs}, score {best:.2f}, stretch {np.round(wbest.s, 3)}, "
            f"{time.perf_counter() - t0:.0f} s")
    return wbest, cs


def fit_pu_groups(a, data, Y, index, slices, log=print):
    """PU-RBF per output group, each with its own warp and stretch (``--groups two``: scalars | curves)."""
    import proto

    Z = (Y - Y.mean(0)) / np.where(Y.std(0) > 0, Y.std(0), 1.0)
    if a.groups == "two":
        groups = [list(range(slices[0][0])), list(range(slices[0][0], Y.shape[1]))]
    elif a.groups == "three":  # scalars | first half of the u nodes of every curve | second half
        half = [(int(a0), int(a0 + (b0 - a0) // 2), int(b0)) for a0, b0 in slices]
        groups = [list(range(slices[0][0])), [c for a0, h, _ in half for c in range(a0, h)],
                  [c for _, h, b0 in half for c in range(h, b0)]]
    elif a.groups == "ublocks":  # scalars with the near-maximum half of every curve | the light half
        half = [(int(a0), int(a0 + (b0 - a0) // 2), int(b0)) for a0, b0 in slices]
        groups = [list(range(slices[0][0])) + [c for a0, h, _ in half for c in range(a0, h)],
                  [c for _, h, b0 in half for c in range(h, b0)]]
    else:
        groups = [list(range(Y.shape[1]))]
    parts = []
    warps = getattr(a, "_warps", None) or {}
    for g, cols in enumerate(groups):
        if g in warps:
            warp = warps[g]
        elif a.warp == "select":
            warp, cs = proto.select_warp(data.theta, Z, data.bounds, cols, n_sub=a.sel_sub, log=log)
        elif a.warp == "selectloo":
            warp, cs = select_warp_loo(a, data, Y, cols, index, slices, log=log)
        else:
            warp = make_warp(a, data, Z, index, slices, cols if a.groups != "one" else None)
        warps[g] = warp
        pred, pu, em, cells = fit_pu(a, data.theta, Y[:, cols], warp, log=log)
        parts.append((cols, pred, pu, warp))

    a._warps = warps

    def predict(th):
        y = np.empty((len(th), Y.shape[1]))
        s = np.empty_like(y)
        for cols, pred, _, _ in parts:
            y[:, cols], s[:, cols] = pred(th)
        return y, s

    return predict, parts


def cmd_pug(a):
    """PU-RBF with per-group warps and stretches."""
    from harness import evaluate, runtime_view, table

    data = load_train(a.box, a.n)
    Y, index, slices = data.output_matrix()
    t0 = time.perf_counter()
    predict, parts = fit_pu_groups(a, data, Y, index, slices)
    secs = time.perf_counter() - t0
    ho = holdout(a.box)
    m = runtime_view(data.u_nodes, slices, index["mass_max_msun"])
    res = evaluate(predict, m, ho)
    label = f"pug {a.box} n={len(data.theta)} warp={a.warp} groups={a.groups} {a.tag}"
    print(table(res, f"{label} ({secs:.0f} s)"))
    if a.worst:
        _show_worst(predict, m, ho, a.worst)
    record(label, res, {"box": a.box, "kind": "pug", "n_train": len(data.theta), "train_seconds": secs,
                        "warps": [(p[3].log_shift.tolist() if p[3].log_shift is not None else None, p[3].s.tolist())
                                  for p in parts]})


def fit_pu(a, theta, Y, warp, log=print):
    """PU-RBF and its LOO error model on (theta, Y); returns predict(theta) -> (y, sd) and the parts."""
    import proto

    mu, sd = Y.mean(0), np.where(Y.std(0) > 0, Y.std(0), 1.0)
    Z = (Y - mu) / sd
    X = warp(theta)
    cells = tuple(a.cells) if a.cells else auto_cells(len(X), warp.s, a.per_cell)
    pu = proto.PURBF.fit(X, Z, cells, overlap=a.overlap, margin=a.margin, degree=a.degree, loo=True, log=log)
    if a.err == "knn":
        em = proto.ErrorModel.fit(X, pu.loo, k=a.k_err, target=a.err_target)
        # the exact solves' own accuracy (DESIGN floors: 1e-6 in M and R, 1e-5 in Lambda), times 3,
        # in standardised units: sigma never claims more than the training data can give
        rel = np.full(Y.shape[1], 3e-6)
        if getattr(a, "_log_cols", None) is not None:
            rel[a._log_cols] = 3e-5
        em.floor = rel * np.abs(mu) / sd
        if getattr(a, "_log_cols", None) is not None:
            em.floor[a._log_cols] = 3e-5 / sd[a._log_cols]  # ln Lambda, ln I: absolute in the log
    else:
        em = proto.SmoothErrorModel.fit(X, pu.loo, h=a.err_h, target=a.err_target)

    def predict(th):
        x = warp(th)
        return mu + sd * pu.predict(x), sd * em(x)

    return predict, pu, em, cells


def cmd_pu(a):
    from harness import evaluate, runtime_view, table

    data = load_train(a.box, a.n)
    Y, index, slices = data.output_matrix()
    a._log_cols = np.arange(slices[1][0], slices[2][1])
    Z = (Y - Y.mean(0)) / np.where(Y.std(0) > 0, Y.std(0), 1.0)
    t0 = time.perf_counter()
    warp = make_warp(a, data, Z, index, slices)
    t_warp = time.perf_counter() - t0
    predict, pu, em, cells = fit_pu(a, data.theta, Y, warp)
    secs = time.perf_counter() - t0
    ho = holdout(a.box)
    m = runtime_view(data.u_nodes, slices, index["mass_max_msun"])
    res = evaluate(predict, m, ho)
    ppp = pu.patches_per_point(warp(ho.theta))
    label = (f"pu {a.box} n={len(data.theta)} warp={a.warp} cells={cells} ov={a.overlap} mg={a.margin} "
             f"deg={a.degree} {a.tag}")
    print(table(res, f"{label} ({secs:.0f} s; warp {t_warp:.0f} s; patches {pu.stats['patch_sizes']}, "
                     f"stored rows {pu.stats['stored_rows']}, patches/query {ppp.mean():.2f})"))
    if a.worst:
        _show_worst(predict, m, ho, a.worst)
    record(label, res, {"box": a.box, "kind": "pu", "n_train": len(data.theta), "train_seconds": secs,
                        "warp_k": warp.k.tolist(), "warp_s": warp.s.tolist(), "pu": pu.stats,
                        "patches_per_query": float(ppp.mean())})


GOALS = {"mass_max": 0.002, "radius": 0.010, "log_lambda": 0.005}


def _score(sd_nodes, index, slices):
    """Largest node sigma in units of the goals (M_max, R, ln Lambda)."""
    im = index["mass_max_msun"]
    sc = sd_nodes[:, im] / GOALS["mass_max"]
    sc = np.maximum(sc, sd_nodes[:, slice(*slices[0])].max(1) / GOALS["radius"])
    return np.maximum(sc, sd_nodes[:, slice(*slices[1])].max(1) / GOALS["log_lambda"])


def cmd_adaptive(a):
    """Designs chosen from the solved pool (the box's largest Sobol grid): stages of error-driven picks."""
    from scipy.spatial import cKDTree

    from harness import evaluate, runtime_view, table

    pool = load_train(a.box, a.pool)
    Y, index, slices = pool.output_matrix()
    ho = holdout(a.box)
    m = runtime_view(pool.u_nodes, slices, index["mass_max_msun"])
    first = load_train(a.box, a.n0)
    chosen = np.arange(len(first.theta))  # the Sobol prefix is the start of the pool (same rows, same filter)
    assert np.array_equal(pool.theta[chosen], first.theta)
    import dataclasses

    def subset(rows):
        return dataclasses.replace(pool, theta=pool.theta[rows])

    t0 = time.perf_counter()
    if a.static_faces:  # no error model: uniform picks among pool points within static_faces of a face
        unit = (pool.theta - pool.bounds[:, 0]) / (pool.bounds[:, 1] - pool.bounds[:, 0])
        near = np.flatnonzero(np.any((unit < a.static_faces) | (unit > 1 - a.static_faces), axis=1))
        near = np.setdiff1d(near, chosen)
        pick = np.random.default_rng(0).choice(near, a.stages * a.add, replace=False)
        chosen = np.concatenate([chosen, pick])
    for stage in range(0 if a.static_faces else a.stages):
        predict, parts = fit_pu_groups(a, subset(chosen), Y[chosen], index, slices, log=None)
        warp = parts[-1][3]  # the curves' metric steers distances and damping
        rest = np.setdiff1d(np.arange(len(pool.theta)), chosen)
        xr = warp(pool.theta[rest])
        sd_nodes = predict(pool.theta[rest])[1]
        score = _score(sd_nodes, index, slices)
        xc = warp(pool.theta[chosen])
        tree = cKDTree(xc)
        if a.distance:
            dnn = tree.query(xr, 1)[0]
            score = score * (dnn / np.median(dnn)) ** a.distance
        # greedy with damping around each pick (nearest-neighbour spacing of the current design)
        spacing = np.median(tree.query(xc, 2)[0][:, 1])
        picks = []
        sc = score.copy()
        for _ in range(a.add):
            i = int(np.argmax(sc))
            picks.append(i)
            d2 = np.sum((xr - xr[i]) ** 2, axis=1)
            sc = sc * (1.0 - np.exp(-d2 / (a.damp * spacing) ** 2))
            sc[i] = -np.inf
        chosen = np.concatenate([chosen, rest[np.array(picks)]])
        print(f"stage {stage + 1}: +{len(picks)} points -> {len(chosen)}; picked score median "
              f"{np.median(score[picks]):.3g} vs pool median {np.median(score):.3g}", flush=True)
    predict, parts = fit_pu_groups(a, subset(chosen), Y[chosen], index, slices, log=None)
    secs = time.perf_counter() - t0
    res = evaluate(predict, m, ho)
    label = (f"adaptive {a.box} n0={a.n0} +{a.stages}x{a.add} -> {len(chosen)} damp={a.damp} dist={a.distance} "
             f"{a.tag}")
    print(table(res, f"{label} ({secs:.0f} s)"))
    if a.worst:
        _show_worst(predict, m, ho, a.worst)
    unit = (pool.theta[chosen] - pool.bounds[:, 0]) / (pool.bounds[:, 1] - pool.bounds[:, 0])
    print("added points: unit-box mean", np.round(unit[a.n0:].mean(0), 2), "share within 3 % of a face",
          np.round(np.mean(np.any((unit[a.n0:] < 0.03) | (unit[a.n0:] > 0.97), axis=1)), 3))
    record(label, res, {"box": a.box, "kind": "pu-adaptive", "n_train": len(chosen), "train_seconds": secs})


def _show_worst(predict, m, ho, k):
    """The k largest R(M) errors: parameters (unit box), M_max, M, error, sigma."""
    from harness import GAP, MASS_LOW

    from tovforge.surrogate import _runtime as rt

    y, sd = predict(ho.theta)
    R, _, sR = rt.curve_at_mass(np, m, y, None, sd, ho.masses, "radius")
    sel = (ho.masses[None, :] >= MASS_LOW) & (ho.masses[None, :] <= ho.mass_max[:, None] - GAP) & np.isfinite(ho.radius)
    e = np.where(sel, np.abs(R - ho.radius), -1)
    unit = (ho.theta - ho.box[:, 0]) / (ho.box[:, 1] - ho.box[:, 0])
    flat = np.argsort(e, axis=None)[::-1][:k]
    for f in flat:
        i, j = np.unravel_index(f, e.shape)
        im = m.i_mass_max
        print(f"  unit {np.round(unit[i], 3)} face {bool(ho.is_face[i])} Mmax {ho.mass_max[i]:.3f} (err "
              f"{y[i, im] - ho.mass_max[i]:+.1e}, sd {sd[i, im] if sd is not None else 0:.1e}) M {ho.masses[j]:.1f} "
              f"R {ho.radius[i, j]:.3f} err {1000 * (R[i, j] - ho.radius[i, j]):+.0f} m sd "
              f"{1000 * sR[i, j] if sR is not None else 0:.0f} m")


def main(argv=None):
    ap = argparse.ArgumentParser()
    sub = ap.add_subparsers(dest="cmd", required=True)
    b = sub.add_parser("baseline")
    b.add_argument("box", choices=BOXES)
    b.add_argument("--kind", default="gp", choices=("gp", "spline"))
    b.add_argument("--n", type=int, default=4096)
    b.add_argument("--save", action="store_true")
    ad = sub.add_parser("adaptive")
    ad.add_argument("--pool", type=int, default=32768)
    ad.add_argument("--n0", type=int, default=2048)
    ad.add_argument("--stages", type=int, default=2)
    ad.add_argument("--add", type=int, default=1024)
    ad.add_argument("--damp", type=float, default=1.0)
    ad.add_argument("--distance", type=float, default=0.0)
    ad.add_argument("--static-faces", type=float, default=0.0)
    pg = sub.add_parser("pug")
    pg.add_argument("--groups", default="two", choices=("one", "two", "three", "ublocks"))
    ad.add_argument("--groups", default="one", choices=("one", "two", "three", "ublocks"))
    for p in (sub.add_parser("pu"), ad, pg):
        _pu_args(p)
    a = ap.parse_args(argv)
    {"baseline": cmd_baseline, "pu": cmd_pu, "adaptive": cmd_adaptive, "pug": cmd_pug}[a.cmd](a)


def _pu_args(p):
    p.add_argument("box", choices=BOXES)
    p.add_argument("--n", type=int, default=4096)
    p.add_argument("--cells", type=int, nargs="*")
    p.add_argument("--overlap", type=float, default=0.15)
    p.add_argument("--margin", type=float, default=0.25)
    p.add_argument("--warp", default="learned", choices=("none", "library", "learned", "library+learned", "libstretch", "select", "selectloo"))
    p.add_argument("--no-k", action="store_true", help="learn the scales only")
    p.add_argument("--scale", type=float, nargs="*")
    p.add_argument("--n-sub", type=int, default=1200)
    p.add_argument("--k-err", type=int, default=12)
    p.add_argument("--worst", type=int, default=0)
    p.add_argument("--per-cell", type=int, default=256)
    p.add_argument("--degree", type=int, default=2)
    p.add_argument("--tag", default="")
    p.add_argument("--log-all", action="store_true")
    p.add_argument("--open-log", action="store_true", help="ln(theta - allowed lower bound) where it is open")
    p.add_argument("--stretch-on", default="curves", choices=("curves", "mmax", "all", "maxof"))
    p.add_argument("--sel-sub", type=int, default=400)
    p.add_argument("--log-all-shift", type=float, default=0.0)
    p.add_argument("--err", default="knn", choices=("knn", "smooth"))
    p.add_argument("--err-h", type=float, default=1.5)
    p.add_argument("--err-target", type=float, default=0.005)


if __name__ == "__main__":
    import sys

    sys.path.insert(0, str(HERE))
    main()
