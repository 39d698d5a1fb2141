"""Does error-model-driven `grid refine` beat the same number of Sobol points?  (demo box, the library)

    python research/errors/refine_measure.py BASE_MODEL_DIR OUT_DIR [--budgets 256 512]

BASE_MODEL_DIR: a spline model trained on grids/demo-train.h5 (4,096 Sobol rows).  For each budget:
(a) `tovforge.workflows.refine.refine` (error-model sigma, damped greedy picks among 8,192 Sobol
candidates), (b) the next Sobol points of the training design (rows 4,096.. of the same scrambled
sequence), solved and added.  Both retrained with the base model's settings and checked on
grids/demo-holdout.h5 (p95 / p99 / max).  With ``--errors-from GRID`` also (c) refine with the measured
errors of GRID (an independent validation grid, research/errors/specs/demo-validation.toml) joining the
error model.  One JSON line per run.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import time
from pathlib import Path

import numpy as np

from tovforge.grid import design_points, parse_spec, read_grid, solve_points
from tovforge.surrogate import check, load, read_training_data, train_on, training_data_from_arrays
from tovforge.workflows.refine import _merge, refine

HOLDOUT = "grids/demo-holdout.h5"


def row(label, model, added, seconds):
    rep = check(model, HOLDOUT)
    e = rep.errors
    out = {"run": label, "n_train": model.n_train, "added": added, "seconds": round(seconds, 1)}
    for k, rel in (("mass_max_msun", False), ("radius_km_at_mass", False), ("tidal_deformability_at_mass", True)):
        s = e[k]
        out[k] = [s.rel_p95, s.rel_p99, s.rel_max] if rel else [s.abs_p95, s.abs_p99, s.abs_max]
        out[k + "_p95_interval"] = s.rel_p95_interval if rel else s.abs_p95_interval
    out["faces_R"] = [rep.regions["faces"].errors["radius_km_at_mass"].abs_p95,
                      rep.regions["faces"].errors["radius_km_at_mass"].abs_max]
    out["beyond_3_sigma_R"] = rep.calibration["radius_km"].beyond_3_sigma
    out["stars_flagged"] = rep.trust.stars_flagged
    print(json.dumps(out), flush=True)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("base")
    ap.add_argument("out")
    ap.add_argument("--budgets", type=int, nargs="+", default=[256, 512])
    ap.add_argument("--errors-from", help="also refine with the measured errors of this grid (not the held-out)")
    ap.add_argument("--only-errors-from", action="store_true", help="only that run (the others were measured)")
    a = ap.parse_args()
    base = load(a.base)
    out = Path(a.out)
    out.mkdir(parents=True, exist_ok=True)
    if not a.only_errors_from:
        row("base", base, 0, 0.0)
    grid_path = base.meta.training.grid_path
    g = read_grid(grid_path)
    spec = parse_spec(json.loads(g.attrs["spec_json"]))
    data = read_training_data(grid_path)
    for budget in a.budgets:
        if a.errors_from:
            t0 = time.perf_counter()
            res = refine(base, budget, out / f"refined-errors-{budget}", errors_from=a.errors_from, overwrite=True)
            row("error-model + measured errors refine", res.model, budget, time.perf_counter() - t0)
            if a.only_errors_from:
                continue
        t0 = time.perf_counter()
        res = refine(base, budget, out / f"refined-{budget}", overwrite=True)
        row("error-model refine", res.model, budget, time.perf_counter() - t0)
        t0 = time.perf_counter()
        more = dataclasses.replace(spec, design=dataclasses.replace(spec.design, points=spec.design.points + budget))
        theta = design_points(more)[spec.design.points:]
        solved = solve_points(spec, theta)
        new = training_data_from_arrays(
            path=out / f"sobol-{budget}.h5", family_name=base.family, parameter_names=base.parameter_names,
            parameter_units=base.parameter_units, box=base.bounds, theta=theta, status=solved.status,
            scalars=solved.scalars, curves=solved.curves, u_nodes=spec.outputs.u_nodes,
            attrs={"mass_max_floor_msun": spec.mass_max_floor_msun}, min_points=0)
        model = train_on(_merge(data, new), base.kind, base.meta.settings)
        row("next Sobol points", model, budget, time.perf_counter() - t0)


if __name__ == "__main__":
    main()
