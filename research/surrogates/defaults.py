"""Held-out figures of the library's own `train_on` (any kind and settings) on the three research boxes.

Usage::

    python research/surrogates/defaults.py ss --kind local --n 8192 [--set key=value ...] [--tag TEXT]

Training designs are prefixes of the nested Sobol grids; held-out sets are the LHS and near-face
grids of LOG.md (never trained on).  Results are printed (harness.table) and appended to
``$SURROGATE_OUT/defaults.jsonl`` (default /tmp/surrogate-defaults; grids from
``$SURROGATE_DATA``, default /work/data).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DATA = Path(os.environ.get("SURROGATE_DATA", "/work/data"))
OUT = Path(os.environ.get("SURROGATE_OUT", "/tmp/surrogate-defaults"))
BOXES = {"demo": ("demo-train-32k.h5", "demo-holdout.h5", "demo-faces.h5"),
         "ss": ("ss-train-16k.h5", "ss-holdout.h5", "ss-faces.h5"),
         "spectral": ("spectral-train-16k.h5", "spectral-holdout.h5", "spectral-faces.h5")}

__all__ = ["load_prefix", "run"]


def load_prefix(path, n):
    """TrainingData from the first ``n`` rows of a (nested Sobol) grid."""
    from tovforge.grid import read_grid
    from tovforge.surrogate._data import training_data_from_arrays

    g = read_grid(path)
    s = slice(0, n)
    return training_data_from_arrays(
        path=path, family_name=g.family, parameter_names=g.parameter_names, parameter_units=g.parameter_units,
        box=g.box, theta=g.parameters[s], status=g.status[s], scalars={k: v[s] for k, v in g.scalars.items()},
        curves={k: v[s] for k, v in g.curves.items()}, u_nodes=g.u_nodes, attrs=dict(g.attrs))


def _parse(value):
    for conv in (int, float):
        try:
            return conv(value)
        except ValueError:
            pass
    if value in ("True", "False"):
        return value == "True"
    if "," in value:
        return tuple(_parse(v) for v in value.split(",") if v)
    return value


def run(box, kind, n, overrides, tag="", train_path=None, save=None):
    sys.path.insert(0, str(HERE))
    from harness import evaluate, load_holdout, model_predictor, table

    from tovforge.surrogate._kinds import resolve
    from tovforge.surrogate._train import train_on

    tr, ho_path, faces = BOXES[box]
    data = load_prefix(train_path or DATA / tr, n)
    settings = resolve(kind, data).settings()
    settings = dataclasses.replace(settings, **overrides) if overrides else settings
    t0 = time.perf_counter()
    model = train_on(data, kind, settings)
    secs = time.perf_counter() - t0
    if save:
        model.save(save, overwrite=True)
    ho = load_holdout(DATA / ho_path, DATA / faces)
    fn, m = model_predictor(model, with_std=model.has_std)
    res = evaluate(fn, m, ho)
    label = f"{box} {kind} n={len(data.theta)} {overrides or ''} {tag}".strip()
    print(table(res, f"{label} ({secs:.0f} s)"))
    loo = model.arrays.get("loo_residual")
    if loo is not None:
        Y, slices = data.output_matrix()
        im = int(slices[0][0]) - 1
        e = {"M_max": np.abs(loo[:, im]) / 0.01, "R": np.abs(loo[:, slice(*slices[0])]).ravel() / 0.05,
             "Lambda": np.abs(loo[:, slice(*slices[1])]).ravel() / 0.02}
        res["loo_floor_units"] = {k: {q: float(np.percentile(v, q)) for q in (50, 95, 99)} for k, v in e.items()}
        print("LOO / floor p50/p95/p99:", "  ".join(f"{k} " + "/".join(f"{x:.3g}" for x in d.values())
                                                   for k, d in res["loo_floor_units"].items()))
    fit = dataclasses.asdict(model.meta.fit) if dataclasses.is_dataclass(model.meta.fit) else {}
    fit.pop("error_model", None)
    print("fit:", json.dumps(fit, default=str)[:1500])
    OUT.mkdir(parents=True, exist_ok=True)
    with open(OUT / "defaults.jsonl", "a") as fh:
        fh.write(json.dumps({"label": label, "time": time.strftime("%Y-%m-%d %H:%M"), "box": box, "kind": kind,
                             "n_train": len(data.theta), "train_seconds": secs, "fit": fit, **res},
                            default=float) + "\n")
    return res


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("box", choices=BOXES)
    ap.add_argument("--kind", default="local")
    ap.add_argument("--n", type=int, default=8192)
    ap.add_argument("--set", nargs="*", default=[], help="settings overrides key=value")
    ap.add_argument("--tag", default="")
    ap.add_argument("--train", help="another training grid (all rows up to --n)")
    ap.add_argument("--save", help="model folder to write")
    a = ap.parse_args(argv)
    overrides = {k: _parse(v) for k, v in (s.split("=", 1) for s in a.set)}
    run(a.box, a.kind, a.n, overrides, a.tag, a.train, a.save)


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
