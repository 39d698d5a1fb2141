"""Refinement of a surrogate (``tovforge grid refine``): exact solves where it is least certain, then retrain.

A workflow, not a stage: it runs the grid's solver on new points, writes them
as a grid file and retrains the surrogate, through the public APIs of
:mod:`tovforge.grid` and :mod:`tovforge.surrogate`.
"""

from __future__ import annotations

import dataclasses
import json
import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._files import check_output
from .._limits import check_memory
from .._provenance import provenance
from ..errors import InputError
from ..surrogate import (
    LearningPoint,
    Surrogate,
    TrainingData,
    check,
    read_training_data,
    train_on,
    training_data_from_arrays,
)

__all__ = ["refine", "RefineResult", "select_points"]

logger = logging.getLogger(__name__)

#: Scales that make the predictive sigmas of different outputs comparable: the
#: accuracy goals (M_max 0.002 Msun, R 10 m, ln Lambda 0.005).
_SIGMA_SCALES = {"mass_max_msun": 0.002, "radius_km": 0.010, "log_tidal_deformability": 0.005}


@dataclass(frozen=True)
class RefineResult:
    """Outcome of :func:`refine`.

    Attributes
    ----------
    model : Surrogate
        The retrained model.
    added : ndarray (n_added, d)
        The parameters that were solved.
    points_path : Path
        Grid file with the added exact solves.
    learning_curve : tuple of LearningPoint
        Training size and held-out p95 errors, before and after (if a
        held-out grid was given).
    """

    model: Surrogate
    added: np.ndarray
    points_path: Path
    learning_curve: tuple


def _score(model: Surrogate, theta: np.ndarray) -> np.ndarray:
    """Largest sigma over M_max, the radius and ln Lambda nodes, in units of the goals.

    The error model's sigma (leave-one-out residuals of the nearest training points) where the
    model has one: it points at the measured errors themselves.  A GP's own sigma grows at every
    face from extrapolation, not where the errors are (research/surrogates/LOG.md, "Refinement:
    does it help?"), so it serves only models without an error model.
    """
    ev = model.evaluate(theta, std=not model.has_error_model)
    sd = model.error_model_std(theta) if model.has_error_model else ev.std
    cols = model.output_columns()
    score = sd[:, cols["mass_max_msun"]][:, 0] / _SIGMA_SCALES["mass_max_msun"]
    for name in ("radius_km", "log_tidal_deformability"):
        score = np.maximum(score, sd[:, cols[name]].max(axis=1) / _SIGMA_SCALES[name])
    # points whose M_max is far below the floor matter less to users
    mm = ev.values[:, cols["mass_max_msun"]][:, 0]
    floor = model.meta.outputs.mass_floor_msun
    return np.where(mm >= floor - 0.1, score, 0.1 * score)


def select_points(model: Surrogate, budget: int, n_candidates: int = 8192, seed: int = 0) -> np.ndarray:
    """Choose ``budget`` parameter points where the model's sigma (its error model's, if any) is largest.

    Candidates are a scrambled Sobol sample of the box (valid points only);
    after each choice the scores of nearby candidates are damped by
    ``1 - exp(-(d / l)^2)``, with ``l`` the typical training-point spacing, so
    that one batch spreads over the regions of large uncertainty.
    """
    from scipy.stats import qmc

    from .. import eos

    if not model.has_std:
        raise InputError(f"grid refine needs a model with a predictive sigma (a Gaussian process, or any model "
                         f"with leave-one-out residuals); this model is {model.kind} ({model.method}).")
    if budget < 1:
        raise InputError(f"budget must be at least 1 exact solve. Got {budget}.")
    if n_candidates < budget:
        raise InputError(f"n_candidates = {n_candidates} is below the budget of {budget} exact solves; the points "
                         "are chosen among the candidates: give more candidates (several times the budget).")
    # the candidates, their unit coordinates and scores are held at once (the scoring itself goes by blocks)
    check_memory(8.0 * n_candidates * (3 * len(model.parameter_names) + 8), f"n_candidates = {n_candidates}",
                 "score fewer candidates")
    fam = eos.get_family(model.family)
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    cand = qmc.scale(qmc.Sobol(len(lo), seed=seed).random(n_candidates), lo, hi)
    cand = cand[[not msg for msg in fam.validate_rows(cand)]]
    if len(cand) < budget:
        raise InputError(f"only {len(cand)} of the {n_candidates} candidates are valid EOS of {fam.name}, fewer "
                         f"than the budget of {budget}: give more candidates.")
    scores = np.concatenate([_score(model, c) for c in np.array_split(cand, max(1, len(cand) // 512))])
    x = (cand - lo) / (hi - lo)
    spacing = (1.0 / max(model.n_train, 1)) ** (1.0 / len(lo))
    chosen = []
    for _ in range(min(budget, len(cand))):
        i = int(np.argmax(scores))
        chosen.append(i)
        d2 = np.sum((x - x[i]) ** 2, axis=1)
        scores = scores * (1.0 - np.exp(-d2 / (2.0 * spacing) ** 2))
        scores[i] = -np.inf
    return cand[np.array(chosen)]


def _merge(a: TrainingData, b: TrainingData) -> TrainingData:
    return dataclasses.replace(
        a,
        theta=np.vstack([a.theta, b.theta]),
        scalars={k: np.concatenate([a.scalars[k], b.scalars[k]]) for k in a.scalars},
        curves={k: np.vstack([a.curves[k], b.curves[k]]) for k in a.curves},
        regular_shape=None,
        provenance={**a.provenance, "refinement_points": int(len(b.theta))},
    )


def _p95_row(model, holdout) -> LearningPoint:
    rep = check(model, holdout)
    return LearningPoint(n_train=model.n_train, mass_max_p95=rep.errors["mass_max_msun"].abs_p95,
                         radius_p95_km=rep.errors["radius_km_at_mass"].abs_p95,
                         lambda_rel_p95=rep.errors["tidal_deformability_at_mass"].rel_p95)


def refine(model: Surrogate, budget: int, out, *, holdout=None, errors_from=None, n_candidates: int = 8192,
           seed: int = 0, workers=None, overwrite: bool = False, allow_mismatch: bool = False,
           oversubscribe: bool = False) -> RefineResult:
    """Add ``budget`` exact solves where the model's sigma (its error model's, if any) is largest and retrain.

    Parameters
    ----------
    model : Surrogate
        A model with a sigma (a GP, or one with leave-one-out residuals) trained by ``tovforge train`` (its training
        grid must exist).
    budget : int
        Exact solves to add.
    out : path
        Folder of the retrained model (a new folder, written whole: see
        :meth:`Surrogate.save`); the added solves go to
        ``out/refinement-points.h5`` (same layout as a grid).  It must not
        hold any input of the refinement (the model's grids, the held-out grid).
    holdout : path, optional
        Held-out grid: the errors before and after are measured and stored in
        the model as its learning curve.
    errors_from : path, optional
        A grid of exact solves (not the training grid, not ``holdout``) whose
        measured errors join the error model's residuals when the points are
        chosen (:meth:`Surrogate.with_measured_errors`): the picks go where the
        model is measured wrong as well as where its sigma is large.  Needs a
        model with an error model.
    overwrite : bool
        Replace an existing folder ``out``.
    allow_mismatch : bool
        Read grids whose datasets do not match their content hash (forensics).
    oversubscribe : bool
        Allow more workers than cores.
    """
    from ..grid import DesignSpec, parse_spec, read_grid, solve_points, write_grid

    tr = model.meta.training
    grid_path = tr.grid_path
    out = check_output(out, "model folder", overwrite, folder=True)  # before the work, not after it
    inputs = [p for p in (grid_path, *tr.refinement_grids, holdout, errors_from) if p]
    if errors_from is not None and holdout is not None and Path(errors_from).resolve() == Path(holdout).resolve():
        raise InputError(f"errors_from {errors_from} is the held-out grid: points chosen by its errors would make "
                         "the learning curve on it optimistic; measure errors on another grid.")
    inside = [p for p in inputs if Path(p).resolve().is_relative_to(out.resolve())]
    if inside:
        raise InputError(f"out {out}: the folder holds {inside[0]}, an input of this refinement, which the new "
                         "model folder would replace; choose another folder.")
    if not grid_path or not Path(grid_path).is_file():
        raise InputError(f"the model's training grid {grid_path!r} is not available; refine needs it.")
    base = read_training_data(grid_path, family=model.family, allow_mismatch=allow_mismatch)
    want = tr.grid_content_sha256
    if want and base.provenance["grid_content_sha256"] != want:
        raise InputError(f"{grid_path}: the training grid changed since the model was trained "
                         "(content hash differs); retrain first.")
    for extra in tr.refinement_grids:
        base = _merge(base, read_training_data(extra, family=model.family, min_points=0,
                                               allow_mismatch=allow_mismatch))
    if len(base.theta) != tr.n_train:
        # e.g. a model trained in memory on part of the grid: retraining on the whole file would
        # silently change what the learning curve compares
        raise InputError(f"the model was trained on {tr.n_train} points, but {grid_path} and its refinements "
                         f"hold {len(base.theta)} usable points; refine needs a model trained on the whole "
                         "grid file (tovforge train GRID).")
    g = read_grid(grid_path, allow_mismatch)
    spec = parse_spec(json.loads(g.attrs["spec_json"]))
    scorer = model
    if errors_from is not None:
        scorer = model.with_measured_errors(read_training_data(errors_from, family=model.family, min_points=0,
                                                               allow_mismatch=allow_mismatch))
    added = select_points(scorer, budget, n_candidates, seed)
    # a two-sided model's sigma is its sides' error models, raised where the side is uncertain
    what = "error-model" if model.has_error_model else ("GP" if model.method == "gp" else f"{model.method} model's")
    if errors_from is not None:
        what += f" (with the measured errors of {errors_from})"
    logger.info(f"solving {len(added)} points of largest {what} sigma (from {n_candidates} Sobol candidates)")
    result = solve_points(spec, added, workers=workers, oversubscribe=oversubscribe)
    points_path = out / "refinement-points.h5"
    rspec = dataclasses.replace(
        spec, design=DesignSpec(method="refinement", points=len(added), seed=seed),
        description=f"{len(added)} points added by tovforge grid refine to {grid_path} "
                    f"(largest {what} sigma among {n_candidates} Sobol candidates, seed {seed})")
    new = training_data_from_arrays(
        path=points_path, family_name=model.family, parameter_names=model.parameter_names,
        parameter_units=model.parameter_units, box=model.bounds, theta=added,
        status=result.status, scalars=result.scalars, curves=result.curves, u_nodes=spec.outputs.u_nodes,
        attrs={"mass_max_floor_msun": spec.mass_max_floor_msun}, min_points=0)
    data = _merge(base, new)
    # retrain with the settings the model was trained with
    logger.info(f"retraining on {len(data.theta)} points")
    new_model = train_on(data, model.kind, model.meta.settings)
    new_model = new_model.with_meta(training={"refinement_grids": tr.refinement_grids + (str(points_path),)})
    curve = list(model.meta.learning_curve)
    if holdout is not None:
        if not curve:
            curve.append(_p95_row(model, holdout))
        curve.append(_p95_row(new_model, holdout))
        new_model = new_model.with_meta(learning_curve=tuple(curve), learning_curve_holdout=str(holdout))

    def write_points(folder):  # into the new model folder, before it takes its name
        write_grid(folder / points_path.name, rspec, added, result,
                   provenance("scipy", "h5py", refinement_of=str(grid_path),
                              refinement_of_sha256=tr.grid_content_sha256))

    new_model.save(out, overwrite=overwrite, extra=write_points)
    return RefineResult(new_model, added, points_path, tuple(curve))
