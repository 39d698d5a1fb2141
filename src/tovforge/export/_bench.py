"""Benchmark section ``export``: the exported evaluators, old-style and generated side by side, and the exact solver."""

from __future__ import annotations

import itertools
import math
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass
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
    """The exported evaluators, old-style (general runtime) and generated side by side, per query; file sizes.

    BLAS runs on one thread, as the solver does: the figures are per core (and
    OpenBLAS threads that wait for a busy core make shared machines erratic).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):
        _bench_export(quick, echo)


@dataclass(frozen=True)
class _Pair:
    """One demo evaluator in both styles.

    Attributes
    ----------
    label : str
    old, new : module
        The same model answering through the general runtime (old-style) and through its generated code;
        ``old`` is None when only the generated one is at hand.
    sizes : str
        File sizes, in MB.
    """

    label: str
    old: object
    new: object
    sizes: str


@contextmanager
def _general(mod):
    """The generated file ``mod`` answering through its general runtime (old-style) inside the block."""
    mod._general_only(True)
    try:
        yield
    finally:
        mod._general_only(False)


def _styled(mod, old):
    """``fn -> timed callable`` of one style: the module itself, or a generated one in old style (``old=True``)."""
    def wrap(fn):
        if not old or mod is None or not hasattr(mod, "_general_only"):
            return lambda: fn(mod)

        def call():
            with _general(mod):
                return fn(mod)
        return call
    return wrap


def _demo_pairs(folder: Path, echo) -> list:
    """The committed demo files with their other style: a generated file is also timed old-style; an old-style
    file is exported anew with generated code from its trained model in build/models, when that is there."""
    from ..surrogate import load
    from . import export_model

    pairs = []
    for name in DEMO_FILES:
        path = _exported_dir() / name
        if not path.is_file():
            echo(f"{path} is missing (run `make export`); skipped")
            continue
        mod = _import_file(path, f"bench_{path.stem}")
        size = f"{path.stat().st_size / 1e6:.2f} MB"
        if hasattr(mod, "_general_only"):
            pairs.append(_Pair(name, mod, mod, f"{size} (generated)"))
            continue
        kind = path.stem.split("_", 1)[1]
        model_dir = _exported_dir().parent / "build" / "models" / kind
        if not (model_dir / "model.json").is_file():
            echo(f"{name} is old-style and {model_dir} has no trained model: generated code not timed")
            pairs.append(_Pair(name, mod, None, f"{size} (old-style)"))
            continue
        new_path = folder / f"generated_{path.stem}.py"
        export_model(load(model_dir), new_path, namespaces=("numpy",))
        pairs.append(_Pair(f"{name} vs {model_dir.relative_to(_exported_dir().parent)} generated", mod,
                           _import_file(new_path, f"bench_generated_{path.stem}"),
                           f"{size} (old-style) -> {new_path.stat().st_size / 1e6:.2f} MB (generated)"))
    return pairs


def _side_by_side(old, new, repeat: int, rounds: int) -> tuple[float, float]:
    """Median seconds of the calls ``old`` and ``new`` (None: not timed, inf), interleaved in ``rounds`` rounds;
    the best round of each."""
    best = [math.inf, math.inf]
    for _ in range(rounds):
        for i, call in enumerate((old, new)):
            if call is None:
                continue
            call()
            best[i] = min(best[i], timeit_median(call, repeat))
    return best[0], best[1]


def _bench_export(quick: bool, echo) -> None:
    from .. import eos
    from ..solve import solve_sequence

    family = "piecewise-polytrope"
    fam = eos.get_family(family)
    n_eos = 2 if quick else 5
    theta_s = demo_box_points(family, n_eos, seed=11)
    eoses = [fam.from_array(t) for t in theta_s]
    solve_sequence(eoses[0])
    t_exact = float(np.median([timeit_median(lambda E=E: solve_sequence(E), 3 if quick else 7) for E in eoses]))

    tmp = tempfile.TemporaryDirectory()
    pairs = _demo_pairs(Path(tmp.name), echo)
    tensor = _tensor_demo(Path(tmp.name))
    pairs.append(_Pair("tensor splines, synthetic 8^4 grid", tensor, tensor, "(not committed)"))

    n_batch = 2_000 if quick else 10_000
    theta_b = demo_box_points(family, n_batch, seed=12)
    # one-theta rows ask a new theta at every call, as a sampler does: evaluators keep the kernel rows of
    # the latest theta (for the several queries of one likelihood call), which a repeated theta would reuse
    pool = itertools.cycle(list(theta_b[:997]))
    reps, rounds = (30, 2) if quick else (200, 3)
    queries = [
        ("R(1.4), one theta", lambda m: m.radius(next(pool), 1.4), reps, None),
        ("R(1.4) with sigma, one theta", lambda m: m.radius(next(pool), 1.4, return_std=True), reps, "std"),
        ("R(1.4) with gradient, one theta", lambda m: m.radius(next(pool), 1.4, return_grad=True), reps, None),
        ("whole curve (100 masses), one theta", lambda m: m.curve(next(pool), n=100), reps, None),
        ("M_max, one theta", lambda m: m.mass_max(next(pool)), reps, None),
        (f"batched R(1.4), {n_batch} theta", lambda m: m.radius(theta_b, 1.4), 1 if quick else 3, "batch"),
        (f"batched whole curve, {n_batch} theta", lambda m: m.curve(theta_b, n=100), 1 if quick else 2, "batch"),
    ]
    echo(f"one core. exact solver (solve_sequence, 100 stars + M_max, one EOS per call): {t_exact * 1e3:.1f} ms "
         f"per EOS (median of {n_eos} EOS)")
    echo(f"one theta: a new theta at each call, median of {reps} calls, best of {rounds} interleaved rounds; "
         f"batches: {n_batch} theta of the "
         f"demo {family} box in one call")
    echo("old-style: the general runtime of the file (every exported file before generated code); generated: the "
         "code written for the model")
    for pair in pairs:
        echo("")
        echo(f"{pair.label}: {pair.sizes}")
        echo(f"    {'query':<38}{'old-style':>14}{'generated':>14}{'ratio':>8}")
        for title, fn, repeat, what in queries:
            if what == "std" and not (pair.new or pair.old).HAS_STD:
                continue
            old = _styled(pair.old, pair.old is pair.new)(fn) if pair.old is not None else None
            new = _styled(pair.new, False)(fn) if pair.new is not None else None  # no trained model: old only
            t_old, t_new = _side_by_side(old, new, repeat, rounds)
            if what == "batch":
                cells = [f"{n_batch / t:>10.3g} /s" if math.isfinite(t) else f"{'-':>12}" for t in (t_old, t_new)]
            else:
                cells = [f"{t * 1e6:>11.0f} us" if math.isfinite(t) else f"{'-':>14}" for t in (t_old, t_new)]
            ratio = f"{t_old / t_new:>7.2f}x" if math.isfinite(t_old) and math.isfinite(t_new) else ""
            echo(f"    {title:<38}{cells[0]:>14}{cells[1]:>14}{ratio:>8}")
        fastest = pair.new or pair.old
        t_curve = timeit_median(lambda: fastest.curve(next(pool), n=100), reps)
        echo(f"    speed-up over the exact solver: {t_exact / t_curve:.3g} (one-theta curve)")
    tmp.cleanup()
    echo("")
    echo("ratio: old-style time / generated time (above 1: the generated code is faster).  "
         "Old-style rows of a generated file run its general runtime (_general_only).")
    echo("floors (goals), one core: spline R(1.4) one theta 100 (30) us; spline curve one theta 120 (50) us; "
         "GP R(1.4) with sigma one theta 200 (80) us;")
    echo("batched R(1.4) spline 5e4 (2e5) /s, GP 2e4 (5e4) /s; batched curve GP 1e4 (3e4) /s.")
