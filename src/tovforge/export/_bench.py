"""Benchmark section ``export``: the exported evaluators beside the exact solver."""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from .._bench import demo_box_points, timeit_median
from ._verify import import_file as _import_file

__all__ = ["bench_export"]

DEMO_FILES = ("demo_gp.py", "demo_spline.py")


def _exported_dir() -> Path:
    return Path(__file__).resolve().parents[3] / "exported"


def synthetic_training_data(points_per_axis: int = 8):
    """A smooth, plausible stable branch on a regular grid of the demo box (TrainingData).

    For tensor-product splines, which need a regular design (the demo grid is
    scattered): the bench times them, and the export tests use them.
    """
    import itertools

    from ..surrogate import TrainingData

    box = np.array([[34.0, 35.0], [2.0, 4.0], [1.5, 4.0], [1.5, 4.0]])
    x = np.array(list(itertools.product(*[np.linspace(0.0, 1.0, points_per_axis)] * 4)))  # C order
    n_u = 24
    u = 0.85 * 0.5 * (1.0 - np.cos(np.pi * np.arange(n_u) / (n_u - 1)))
    x0, x1, x2, x3 = (x[:, i : i + 1] for i in range(4))
    scalars = {
        "mass_max_msun": 2.0 + 0.4 * x0[:, 0] + 0.2 * x1[:, 0] - 0.1 * x2[:, 0] * x3[:, 0],
        "log10_central_pressure_at_mass_max": 35.5 - 0.3 * x0[:, 0] + 0.05 * x1[:, 0] ** 2,
        "max_sound_speed_sq": 0.5 + 0.2 * x1[:, 0] + 0.1 * np.sin(2.0 * x2[:, 0]),
    }
    curves = {
        "radius_km": 10.5 + 1.5 * x0 - 0.5 * x1 + 0.3 * x2 * x3 + (1.2 + 0.2 * x0) * u**2 + 0.1 * u * x1,
        "log_tidal_deformability": 1.0 + 0.4 * x0 + (6.0 + 0.5 * x1) * u + 0.2 * u**2 * x3,
        "log_moment_of_inertia": 0.8 + 0.2 * x0 - 1.5 * u**2 + 0.05 * x2 * u,
    }
    return TrainingData(family="piecewise-polytrope", parameter_names=("log_p1", "gamma1", "gamma2", "gamma3"),
                        parameter_units=("log10(dyn/cm^2)", "1", "1", "1"), bounds=box,
                        theta=box[:, 0] + x * (box[:, 1] - box[:, 0]), scalars=scalars, u_nodes=u, curves=curves,
                        mass_floor_msun=1.0, regular_shape=(points_per_axis,) * 4,
                        provenance={"grid_path": "synthetic", "grid_content_sha256": "synthetic"})


def _tensor_demo(folder: Path):
    """A tensor-spline evaluator on the synthetic 8^4 regular grid."""
    from ..surrogate import train_on
    from . import export_model

    path = folder / "bench_tensor.py"
    export_model(train_on(synthetic_training_data(8), "spline"), path, namespaces=("numpy",))
    return _import_file(path, "bench_tensor")


def bench_export(quick: bool = False, echo=print) -> None:
    """Latency for one theta and throughput for 10^4 theta of the exported files, beside the exact solver.

    BLAS runs on one thread, as the solver does: the figures are per core (and
    OpenBLAS threads that wait for a busy core make shared machines erratic).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):
        _bench_export(quick, echo)


def _bench_export(quick: bool, echo) -> None:
    from .. import eos
    from ..solve import solve_sequence

    family = "piecewise-polytrope"
    fam = eos.get_family(family)
    n_eos = 2 if quick else 5
    repeat = 3 if quick else 7
    theta_s = demo_box_points(family, n_eos, seed=11)
    eoses = [fam.from_array(t) for t in theta_s]
    solve_sequence(eoses[0])
    t_exact = float(np.median([timeit_median(lambda E=E: solve_sequence(E), repeat) for E in eoses]))

    evaluators = []
    for name in DEMO_FILES:
        path = _exported_dir() / name
        if path.is_file():
            evaluators.append((f"{name} ({path.stat().st_size / 1e6:.2f} MB)", _import_file(path, f"bench_{path.stem}")))
        else:
            echo(f"{path} is missing (run `make export`); skipped")
    tmp = tempfile.TemporaryDirectory()
    evaluators.append(("tensor splines, synthetic 8^4 grid", _tensor_demo(Path(tmp.name))))

    n_batch = 2_000 if quick else 10_000
    theta_b = demo_box_points(family, n_batch, seed=12)
    one = theta_b[0]
    echo(f"one core. exact solver (solve_sequence, 100 stars + M_max, one EOS per call): {t_exact * 1e3:.1f} ms per EOS "
         f"(median of {n_eos} EOS)")
    echo(f"one theta: median of {30 if quick else 200} calls; batch: {n_batch} theta of the demo {family} box, "
         "one call")
    echo("")
    head = (f"{'evaluator':<38}{'curve us':>10}{'radius us':>11}{'batch radius/s':>16}{'batch curve/s':>15}"
            f"{'speed-up 1':>12}{'speed-up N':>12}")
    echo(head)
    reps = 30 if quick else 200
    for label, mod in evaluators:
        mod.curve(one, n=100)
        t_curve = timeit_median(lambda: mod.curve(one, n=100), reps)
        t_radius = timeit_median(lambda: mod.radius(one, 1.4), reps)
        t_batch = timeit_median(lambda: mod.radius(theta_b, 1.4), 1 if quick else 3)
        t_bcurve = timeit_median(lambda: mod.curve(theta_b, n=100), 1 if quick else 2)
        echo(f"{label:<38}{t_curve * 1e6:>10.0f}{t_radius * 1e6:>11.0f}{n_batch / t_batch:>16.3g}"
             f"{n_batch / t_bcurve:>15.3g}{t_exact / t_curve:>12.3g}{t_exact / (t_bcurve / n_batch):>12.3g}")
    tmp.cleanup()
    echo("")
    echo("curve: mass, radius and Lambda at 100 points of the stable branch; radius: R at 1.4 Msun.")
    echo("speed-up 1: exact solve time / one-theta curve time; speed-up N: per theta in the batched curve call.")
    echo("floors: <= 1000 us for one theta, >= 1e4 theta/s batched; goals: <= 50 us (spline), <= 300 us (GP), "
         ">= 1e6 theta/s (spline).")
