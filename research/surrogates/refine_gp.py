"""The library's refine criterion (largest GP sigma in units of the goals, greedy damping) on the solved pool.

Usage: python research/surrogates/refine_gp.py demo --n0 4096 --add 256
Trains the library GP on the Sobol prefix, picks ``add`` pool points as ``grid refine`` would
(its ``_score`` and damping, with pool points as the candidates), retrains and evaluates both.
"""

import argparse
import dataclasses
import sys
import time

import numpy as np

sys.path.insert(0, __file__.rsplit("/", 1)[0])
import experiments as E  # noqa: E402
from harness import evaluate, model_predictor, table  # noqa: E402

from tovforge.surrogate._refine import _score  # noqa: E402
from tovforge.surrogate._train import train_on  # noqa: E402

ap = argparse.ArgumentParser()
ap.add_argument("box")
ap.add_argument("--n0", type=int, default=4096)
ap.add_argument("--add", type=int, default=256)
ap.add_argument("--pool", type=int, default=32768)
a = ap.parse_args()
pool = E.load_train(a.box, a.pool)
base = E.load_train(a.box, a.n0)
ho = E.holdout(a.box)
model = train_on(base, "gp")
n0 = len(base.theta)
rest = np.arange(n0, len(pool.theta))
cand = pool.theta[rest]
scores = np.concatenate([_score(model, c) for c in np.array_split(cand, max(1, len(cand) // 512))])
lo, hi = model.arrays["lo"], model.arrays["hi"]
x = (cand - lo) / (hi - lo)
spacing = (1.0 / n0) ** (1.0 / len(lo))
chosen = []
for _ in range(a.add):
    i = int(np.argmax(scores))
    chosen.append(i)
    scores = scores * (1.0 - np.exp(-np.sum((x - x[i]) ** 2, axis=1) / (2.0 * spacing) ** 2))
    scores[i] = -np.inf
idx = np.concatenate([np.arange(n0), rest[np.array(chosen)]])
data = dataclasses.replace(pool, theta=pool.theta[idx], scalars={k: v[idx] for k, v in pool.scalars.items()},
                           curves={k: v[idx] for k, v in pool.curves.items()})
t0 = time.perf_counter()
model2 = train_on(data, "gp")
for lab, mod in (("base", model), ("refined", model2)):
    fn, m = model_predictor(mod)
    res = evaluate(fn, m, ho)
    label = f"gp-sigma refine {a.box} {lab} n={len(mod.meta and mod.arrays['X'])}"
    print(table(res, label))
    E.record(label, res, {"box": a.box, "kind": "gp-refine", "n_train": int(len(mod.arrays["X"]))})
unit = (cand[chosen] - lo) / (hi - lo)
print("picks: unit mean", unit.mean(0).round(2), "within 3 % of a face", np.mean(np.any((unit < 0.03) | (unit > 0.97), 1)))
