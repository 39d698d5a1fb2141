"""Per-query cost of the error model against the number of training points (NumPy runtime).

    python research/errors/cost.py

Synthetic 4-parameter model arrays (X uniform, 75 outputs as the demo models): seconds per
theta for batches of 2,048 rows and for one theta, next to the r^5 mean's kernel rows
(``polyharmonic_rows``) over the same points, which every RBF query pays anyway.
"""

import time

import numpy as np

from tovforge.surrogate import _runtime as rt


def per_call(fn, repeat):
    fn()
    t0 = time.perf_counter()
    for _ in range(repeat):
        fn()
    return (time.perf_counter() - t0) / repeat


def main():
    rng = np.random.default_rng(0)
    for n in (1024, 4096, 16384, 32768):
        m = rt.Model({"X": rng.random((n, 4)), "loo_residual": rng.random((n, 75)), "error_scale": np.ones(75)})
        xb, x1 = rng.random((2048, 4)), rng.random((1, 4))
        XT, X2 = rt.rbf_points(np, m)
        batch = per_call(lambda: rt.error_model_std(np, m, xb), 3) / 2048
        one = per_call(lambda: rt.error_model_std(np, m, x1), 200)
        mean_one = per_call(lambda: rt.polyharmonic_rows(np, x1, XT, X2, False), 200)
        print(f"n {n:>6}: error model {batch * 1e6:7.1f} us/theta in batches, {one * 1e6:7.1f} us one theta "
              f"(r^5 kernel row alone: {mean_one * 1e6:6.1f} us)", flush=True)


if __name__ == "__main__":
    main()
