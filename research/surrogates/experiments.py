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
    from tovforge.surrogate._dataset import training_data_from_arrays

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


def _library_shift(data):
    from tovforge import eos

    fam = eos.get_family(data.family)
    off = {p.name: p.log_offset for p in fam.parameters}
    sh = np.array([np.nan if off.get(n) is None else off[n] for n in data.parameter_names])
    return sh if np.isfinite(sh).any() else None


def cmd_pu(a):
    import proto
    from harness import evaluate, runtime_view, table

    data = load_train(a.box, a.n)
    Y, index, slices = data.output_matrix()
    mu, sd = Y.mean(0), np.where(Y.std(0) > 0, Y.std(0), 1.0)
    Z = (Y - mu) / sd
    t0 = time.perf_counter()
    shift = _library_shift(data) if a.warp in ("library", "library+learned") else None
    if a.warp in ("learned", "library+learned"):
        warp, _ = proto.learn_warp(data.theta, Z, data.bounds, _weights(index, slices), n_sub=a.n_sub,
                                   log_shift=shift, learn_k=not a.no_k, log=print)
    else:
        warp = proto.Warp(data.bounds[:, 0], data.bounds[:, 1], np.zeros(len(data.bounds)),
                          np.ones(len(data.bounds)), shift)
        if a.scale:
            warp.s = np.array(a.scale, float)
    t_warp = time.perf_counter() - t0
    X = warp(data.theta)
    cells = tuple(a.cells) if a.cells else (1,) * X.shape[1]
    pu = proto.PURBF.fit(X, Z, cells, overlap=a.overlap, margin=a.margin, loo=True, log=print)
    secs = time.perf_counter() - t0
    em = proto.ErrorModel.fit(X, pu.loo, k=a.k_err)
    ho = holdout(a.box)

    def predict(theta):
        x = warp(theta)
        return mu + sd * pu.predict(x), sd * em(x)

    m = runtime_view(data.u_nodes, slices, index["mass_max_msun"])
    res = evaluate(predict, m, ho)
    ppp = pu.patches_per_point(warp(ho.theta))
    label = (f"pu {a.box} n={len(data.theta)} warp={a.warp} cells={cells} ov={a.overlap} mg={a.margin}")
    print(table(res, f"{label} ({secs:.0f} s; warp {t_warp:.0f} s; patches {pu.stats['patch_sizes']}, "
                     f"stored rows {pu.stats['stored_rows']}, patches/query {ppp.mean():.2f})"))
    record(label, res, {"box": a.box, "kind": "pu", "n_train": len(data.theta), "train_seconds": secs,
                        "warp_k": warp.k.tolist(), "warp_s": warp.s.tolist(), "pu": pu.stats,
                        "patches_per_query": float(ppp.mean())})


def main(argv=None):
    ap = argparse.ArgumentParser()
    sub = ap.add_subparsers(dest="cmd", required=True)
    b = sub.add_parser("baseline")
    b.add_argument("box", choices=BOXES)
    b.add_argument("--kind", default="gp", choices=("gp", "spline"))
    b.add_argument("--n", type=int, default=4096)
    b.add_argument("--save", action="store_true")
    p = sub.add_parser("pu")
    p.add_argument("box", choices=BOXES)
    p.add_argument("--n", type=int, default=4096)
    p.add_argument("--cells", type=int, nargs="*")
    p.add_argument("--overlap", type=float, default=0.15)
    p.add_argument("--margin", type=float, default=0.25)
    p.add_argument("--warp", default="learned", choices=("none", "library", "learned", "library+learned"))
    p.add_argument("--no-k", action="store_true", help="learn the scales only")
    p.add_argument("--scale", type=float, nargs="*")
    p.add_argument("--n-sub", type=int, default=1200)
    p.add_argument("--k-err", type=int, default=12)
    a = ap.parse_args(argv)
    {"baseline": cmd_baseline, "pu": cmd_pu}[a.cmd](a)


if __name__ == "__main__":
    import sys

    sys.path.insert(0, str(HERE))
    main()
