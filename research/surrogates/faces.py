"""Held-out points near the faces of a grid spec's box, solved exactly and written as a grid file.

Usage::

    python research/surrogates/faces.py SPEC.toml --points 200 --seed S --width 0.03 --out FILE.h5

Each point picks one of the 2 d faces of the box at random, sits within ``width``
(a fraction of that parameter's range) of it, uniformly in that distance, and is
uniform in the other parameters.  The outputs, solver settings and family come
from ``SPEC.toml`` (its design is ignored).  The file has the layout of
``tovforge grid run`` (readable by ``tovforge check`` and ``read_grid``).
"""

from __future__ import annotations

import argparse
import dataclasses
import time
from pathlib import Path

import numpy as np

__all__ = ["face_points", "solve_points"]


def face_points(box: np.ndarray, n: int, seed: int, width: float = 0.03) -> np.ndarray:
    """``n`` points (n, d) within ``width`` (fraction of each range) of a face of ``box`` (d, 2)."""
    rng = np.random.default_rng(seed)
    d = len(box)
    u = rng.random((n, d))
    face = rng.integers(0, 2 * d, n)
    axis, upper = face // 2, face % 2
    dist = width * rng.random(n)
    u[np.arange(n), axis] = np.where(upper == 1, 1.0 - dist, dist)
    return box[:, 0] + u * (box[:, 1] - box[:, 0])


def solve_points(spec, theta: np.ndarray, workers: int = 2):
    """Exact solves of ``theta`` in chunks of the spec's size (joblib processes)."""
    import joblib

    from tovforge.grid import ChunkResult, solve_chunk

    cs = spec.chunk_size
    res = joblib.Parallel(n_jobs=workers, batch_size=1)(
        joblib.delayed(solve_chunk)(spec, theta[i:i + cs]) for i in range(0, len(theta), cs))
    return ChunkResult(
        status=np.concatenate([r.status for r in res]),
        reason=[s for r in res for s in r.reason],
        scalars={k: np.concatenate([r.scalars[k] for r in res]) for k in res[0].scalars},
        curves={k: np.concatenate([r.curves[k] for r in res]) for k in res[0].curves},
        at_mass={k: np.concatenate([r.at_mass[k] for r in res]) for k in res[0].at_mass},
    )


def main(argv=None):
    from tovforge.grid import DesignSpec, load_spec
    from tovforge.grid._store import write_grid

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("spec")
    ap.add_argument("--points", type=int, default=200)
    ap.add_argument("--seed", type=int, required=True)
    ap.add_argument("--width", type=float, default=0.03)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--out", required=True)
    a = ap.parse_args(argv)
    spec = load_spec(a.spec)
    box = np.array(spec.box, float)
    theta = face_points(box, a.points, a.seed, a.width)
    t0 = time.perf_counter()
    result = solve_points(spec, theta, a.workers)
    spec = dataclasses.replace(spec, design=DesignSpec(method="faces", points=len(theta), seed=a.seed),
                               description=f"{len(theta)} points within {a.width:g} of a face of the box of {a.spec}")
    write_grid(Path(a.out), spec, theta, result, {"faces_width": a.width})
    print(f"{a.out}: {len(theta)} face points in {time.perf_counter() - t0:.1f} s; statuses "
          f"{np.bincount(result.status, minlength=5).tolist()}")


if __name__ == "__main__":
    main()
