"""The demo's first stages: its inputs, the grids, training, the held-out check and the export.

Each stage is one function that logs what it does (``tovforge`` logger, level
INFO) and returns a small frozen dataclass; :func:`tovforge.workflows.demo.run_demo`
calls them in order.
"""

from __future__ import annotations

import dataclasses
import importlib.util
import logging
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ...errors import InputError
from ...status import Status
from ...surrogate import kinds

__all__ = [
    "Checks",
    "Exports",
    "Grids",
    "Inputs",
    "Training",
    "build_grids",
    "check_models",
    "export_models",
    "import_evaluator",
    "read_inputs",
    "train_models",
]

logger = logging.getLogger(__name__)
say = logger.info  # every line of the demo's report

#: The surrogate kinds the demo trains, checks and exports.
KINDS = kinds()


def import_evaluator(path, name: str | None = None):
    """Import an exported evaluator file as a module (without touching ``sys.path``)."""
    path = Path(path)
    name = name or f"_tovforge_demo_{path.stem}"
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


# -- 0. inputs -------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Inputs:
    """What the user supplied, read and checked before the long stages.

    Attributes
    ----------
    obs : Observations
    specs : dict of str to GridSpec
        ``train`` and ``holdout``.
    marker : ndarray (d,) or None
        Parameters of the EOS the observations were made around (if of the grids' family).
    generator_curve : tuple of ndarray or None
        Its exact mass (Msun), radius (km) and Lambda along the stable branch.
    """

    obs: object
    specs: dict
    marker: np.ndarray | None
    generator_curve: tuple | None


def read_inputs(settings) -> Inputs:
    """Read the observations and the grid specs; solve the generating EOS (which checks its parameters)."""
    from ...grid import load_spec
    from ._observations import load_observations

    obs = load_observations(settings.data)
    for role, spec_path in (("training", settings.train_spec), ("held-out", settings.holdout_spec)):
        if not Path(spec_path).is_file():
            raise InputError(f"{spec_path}: no such grid spec; run the demo from the tovforge repository "
                             f"(make demo) or give the {role} grid's spec.")
    specs = {"train": load_spec(settings.train_spec), "holdout": load_spec(settings.holdout_spec)}
    marker, curve = _generator(obs, specs["train"].family, specs["train"].parameter_names)
    return Inputs(obs, specs, marker, curve)


def _generator(obs, family: str, names):
    """Marker and exact curve of the observations' generating EOS, when it is of the model's family."""
    gen = dict(obs.generator)
    if not gen or gen.get("family") != family:
        return None, None
    from ...eos import make
    from ...solve import solve_sequence

    params = {k: v for k, v in gen.items() if k != "family"}
    try:
        eos = make(family, **params)
    except InputError as exc:
        raise InputError(f"{obs.path}: [generator]: {exc}") from None
    seq = solve_sequence(eos, n_stars=100)
    if not seq.success:
        return None, None
    b = seq.branch
    return np.array([params[n] for n in names], float), (b.mass_msun, b.radius_km, b.tidal_deformability)


# -- 1. grids --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Grids:
    """The demo's grid files.

    Attributes
    ----------
    paths : dict of str to Path
        ``train`` and ``holdout``.
    names : tuple of str
        The EOS parameters.
    """

    paths: dict
    names: tuple

    @property
    def numbers(self) -> dict:
        return {r: str(p) for r, p in self.paths.items()}


def build_grids(settings, specs: dict) -> Grids:
    """Build (or reuse) the training and held-out grids next to their specs."""
    from ...grid import read_grid, run_grid

    paths = {}
    for role, spec_path in (("train", settings.train_spec), ("holdout", settings.holdout_spec)):
        spec = specs[role]
        gpath = Path(spec_path).with_suffix(".h5")
        summary = run_grid(spec, gpath, workers=settings.workers, progress=settings.progress)
        ok = summary.status_counts.get(Status.OK, 0)
        how = "reused" if summary.already_complete else f"built in {summary.seconds:.1f} s"
        say(f"  {role:<8}{gpath}: {spec.n_points} points ({spec.design.method}), {ok} solved, {how}; "
            f"spec {spec.sha256[:12]}")
        paths[role] = gpath
    return Grids(paths, tuple(read_grid(paths["train"]).parameter_names))


# -- 2. training -----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Training:
    """The trained models (one per kind) and what ``summary.json`` says of them."""

    models: dict
    numbers: dict


def _subset(data, n):
    """The first ``n`` rows of training data (a Sobol prefix stays space-filling)."""
    if n is None or n >= len(data.theta):
        return data
    return dataclasses.replace(
        data, theta=data.theta[:n], scalars={k: v[:n] for k, v in data.scalars.items()},
        curves={k: v[:n] for k, v in data.curves.items()}, regular_shape=None)


def train_models(settings, grids: Grids, out: Path) -> Training:
    """Train every kind on the training grid (its first ``n_train`` points) and save it under ``out/models``."""
    from ...surrogate import read_training_data, train_on

    gp = settings.gp
    data = _subset(read_training_data(grids.paths["train"]), settings.n_train)
    models = {}
    for kind in KINDS:
        # said before the fit: the GP's kernels are fitted in parallel and listed only when all are done,
        # which left the demo silent for up to a minute and a half (issue 16)
        say(f"  {kind:<7}training on {len(data.theta)} points ..."
            + (" (the GP's kernel groups are fitted in parallel and listed when all are done)" if kind == "gp"
               else ""))
        t0 = time.perf_counter()
        model = train_on(data, kind, gp if kind == "gp" else None)
        (out / "models").mkdir(exist_ok=True)
        folder = model.save(out / "models" / kind, overwrite=True)  # the demo's folder: run_demo allowed it
        models[kind] = model
        say(f"  {kind:<7}{model.method} on {len(data.theta)} points in {time.perf_counter() - t0:.1f} s -> {folder}")
    numbers = {"n_train": int(len(data.theta)), "gp_settings": dataclasses.asdict(gp),
               "seconds": {k: models[k].meta.training.seconds for k in KINDS}}
    return Training(models, numbers)


# -- 3. check --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Checks:
    """Held-out check of every model: reports by kind, their files and the numbers for the summary."""

    reports: dict
    files: dict
    numbers: dict


def check_models(models: dict, holdout: Path, out: Path) -> Checks:
    """Compare every model with the held-out exact solves; reports under ``out/check/KIND``."""
    from ...surrogate import check

    reports, files = {}, {}
    for kind in KINDS:
        (out / "check").mkdir(exist_ok=True)
        res = check(models[kind], holdout, out / "check" / kind, overwrite=True)
        reports[kind] = res
        files[f"check_{kind}"] = out / "check" / kind / "report.md"
        say(f"  {kind}: report {files[f'check_{kind}']}")
        for line in res.table().splitlines():
            say(f"    {line}")
    numbers = {k: {"mass_max_abs_p95_msun": r.errors["mass_max_msun"].abs_p95,
                   "radius_abs_p95_km": r.errors["radius_km_at_mass"].abs_p95,
                   "radius_abs_median_km": r.errors["radius_km_at_mass"].abs_median,
                   "lambda_rel_p95": r.errors["tidal_deformability_at_mass"].rel_p95}
               for k, r in reports.items()}
    return Checks(reports, files, numbers)


# -- 4. export -------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Exports:
    """The exported evaluators, imported as modules, by kind.

    Attributes
    ----------
    evaluators : dict of str to module
    files : dict of str to Path
    numbers : dict
    failures : tuple of str
        Exports that failed (the demo goes on if the sampler's evaluator exists).
    """

    evaluators: dict
    files: dict
    numbers: dict
    failures: tuple


def export_models(settings, models: dict, reports: dict, out: Path) -> Exports:
    """Export every model as one NumPy-only file under ``out/evaluators`` and import it.

    Raises
    ------
    tovforge.errors.InputError
        If the evaluator the sampler needs could not be exported.
    """
    from ...export import ExportError, export_model

    evaluators, files, numbers, failures = {}, {}, {}, []
    for kind in KINDS:
        target = out / "evaluators" / f"demo_{kind}.py"
        target.parent.mkdir(exist_ok=True)
        try:
            res = export_model(models[kind], target, reports[kind], overwrite=True)
        except ExportError as exc:
            failures.append(f"export of the {kind} model: {exc}")
            warnings.warn(f"export of the {kind} model failed: {exc}", UserWarning, stacklevel=2)
            continue
        evaluators[kind] = import_evaluator(target, f"_tovforge_demo_{kind}_{id(res)}")
        files[f"evaluator_{kind}"] = target
        numbers[kind] = {"path": str(target), "size_bytes": res.size_bytes, "max_rel_diff": res.max_rel_diff}
        say(f"  {kind}: {target} ({res.size_bytes / 1e6:.2f} MB); differs from the library model by at most "
            f"{res.max_rel_diff:.1e} (relative)")
        for ns, verdict in res.namespaces.items():
            say(f"    {ns}: {verdict}")
    if settings.sampler_model not in evaluators:
        raise InputError(f"the {settings.sampler_model} evaluator could not be exported, so the fit cannot run: "
                         f"{failures[-1]}")
    return Exports(evaluators, files, numbers, tuple(failures))
