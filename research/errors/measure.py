"""Measure the error model and the trust flag with the library's own check (issue 13, part B).

    python research/errors/measure.py MODEL_DIR [MODEL_DIR ...] --holdout grids/demo-holdout.h5

For each model: the check as shipped; for GP models also the GP's own sigma alone (no error model)
and the error model alone (GP sigma set to zero), to see which is better calibrated.  Prints one
JSON line per variant (calibration, trust flag, p95/p99/max by region).
"""

from __future__ import annotations

import argparse
import json

import numpy as np

from tovforge.surrogate import check, load
from tovforge.surrogate._model import Surrogate


def variants(model):
    yield "as shipped", model
    if model.method == "gp" and "loo_residual" in model.arrays:
        arrays = {k: v for k, v in model.arrays.items() if k not in ("loo_residual", "error_scale")}
        yield "GP sigma alone", Surrogate(model.meta, arrays)
        yield "error model alone", model.with_arrays(resid_scale=np.zeros_like(model.arrays["resid_scale"]))


def summary(label, model, rep):
    out = {"model": f"{model.kind} ({model.method})", "variant": label, "n_train": model.n_train}
    out["errors"] = {k: {"abs_p95": e.abs_p95, "abs_p95_interval": e.abs_p95_interval, "abs_p99": e.abs_p99,
                         "abs_max": e.abs_max, "rel_p95": e.rel_p95, "rel_p99": e.rel_p99, "rel_max": e.rel_max}
                     for k, e in rep.errors.items() if k in ("mass_max_msun", "radius_km_at_mass",
                                                             "tidal_deformability_at_mass")}
    out["calibration"] = {k: c.to_json() for k, c in rep.calibration.items()}
    out["trust"] = rep.trust.to_json() if rep.trust else None
    out["regions"] = {k: {n: (e.abs_p95, e.abs_p99, e.abs_max) if not n.startswith("tidal") else
                          (e.rel_p95, e.rel_p99, e.rel_max) for n, e in r.errors.items()}
                      for k, r in rep.regions.items()}
    return out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("models", nargs="+")
    ap.add_argument("--holdout", default="grids/demo-holdout.h5")
    a = ap.parse_args()
    for path in a.models:
        model = load(path)
        for label, m in variants(model):
            print(json.dumps(summary(label, m, check(m, a.holdout))), flush=True)


if __name__ == "__main__":
    main()
