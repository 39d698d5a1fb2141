"""Two-sided splines for transition families: one RBF spline per side of the near/far discontinuity.

In the ``<base>-transition`` families the first maximum of ``M(h_c)`` lies at
the jump or just above it ("near": a cusp above Seidov's limit, or a small hump
before a twin branch) or far above it (the connected hybrid branch), and M_max,
R(M) and Lambda(M) jump between the two (research/surrogates/LOG.md, "the
transition family across its discontinuity": one spline over both sides had
held-out p95 M_max 0.21 Msun, one per side 8.8e-3).  This method fits the
spline kind's RBF (:func:`~tovforge.surrogate._rbf.fit_rbf`, with its error
model) on each side's rows, and two margin models that pick the side of a query
without solving (:mod:`tovforge.solve._margin`):

- Seidov's margin ``s`` (exact from the parameters) on every training row;
- ``asinh(g / 10 Msun)`` of the scanned margin ``g`` on the rows with ``s < 0``
  (where g decides: above Seidov's limit every EOS is near).

Each is an r^5 + quadratic RBF in the plain unit box with Rippa's closed-form
leave-one-out residuals (Rippa 1999, Adv. Comput. Math. 11, 193) and the shared
error model on them without a calibration factor (the research's margin
models).  A query is near where the emulated ``s > 0`` or ``g < 0``; where a
margin lies within ``SIDE_BAND`` of its own sigma of zero the side is uncertain
and every output's sigma is raised to at least
:data:`~tovforge.surrogate._runtime.BAND_SIGMA`, so the query contract's
``trusted`` flag is False there.

The training rows are split by the grid's solved first maximum (within
``NEAR_DECADES`` decades of the transition pressure: near), the values each
side's spline learns; the margins' rule (``s > 0 or g < 0``) is checked against
it and disagreements are logged and recorded in the model.

Below the transition mass M_t (the star centred at the jump) every star holds
none of the dense phase: it is the base family's star of the same mass, a
function of the base parameters alone.  A third spline, of the base family on
the training rows' base parameters (solved at training, :func:`base_data`),
answers every query below the emulated M_t (held-out R p95 of far stars below
M_t: 156 m from the far side's spline, 18 m from the base's; LOG.md).  Both
sides learn M_t after their curves.  Above M_t the far side's R(M) starts with a
kink that moves along the grid's ``u`` nodes with the parameters, so its spline
learns the hybrid stars at nodes of ``t`` instead (M_t at t = 0, M_max at t = 1;
:func:`~tovforge.surrogate._runtime.t_node_masses`), solved exactly at training
(:func:`far_curves`).

Arrays of a model (beside the common ones of :mod:`._kinds`; its own trend is
zero and its outputs unstandardised, the sub-models carry theirs): ``X`` (n, d)
every training point in the plain unit box; ``side_band`` (1,); the far side's
nodes ``t_nodes`` (n_u,) and their cardinal cubic-spline coefficients ``t_c``;
the arrays of each sub-model (an ``rbf`` model's; the sides' with M_t as one more output)
under the prefixes ``near__``, ``far__`` and ``base__`` (its box the base
parameters'), and of each margin model (``X``, ``alpha`` (n, 1), ``trend_powers``,
``trend_coef`` (n_terms, 1), ``loo_residual`` (n, 1), ``error_scale`` (1,))
under ``seidov__`` and ``scanned__``.
"""

from __future__ import annotations

import dataclasses
import logging
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from .. import quantities
from ..eos import Transition, get_family
from ..errors import InputError
from ..solve import NEAR_DECADES, SequenceSettings, jump_margins, jump_stars, solve_sequences
from . import _rbf
from . import _runtime as rt
from ._data import TrainingData, emulated_outputs
from ._prepare import FitResult, prepare, saddle_matrix, spline_cardinal_coefficients, trend_matrix, trend_powers
from ._rbf import RBFFit, SplineSettings, fit_rbf
from ._record import Record, nested

__all__ = ["SidedFit", "FarCurves", "fit_sided", "has_transition", "fit_sides", "fit_margin", "far_t_nodes",
           "far_curves", "base_data", "first_rows", "solved_near", "applies_sided", "reverse_sides", "describe_sided",
           "SIDE_BAND", "SCANNED_SCALE", "SIDED_ARRAYS", "SIDED_STATIC", "TRANSITION_MASS", "MIN_CURVE_NODES"]

logger = logging.getLogger(__name__)

#: Sigmas of its own error model within which a margin counts as uncertain.  Measured on the
#: transition family's held-out set (366 EOS, research/surrogates/LOG.md): 1 / 2 / 3 sigma put 2.2 / 4.6 /
#: 6.6 % of the EOS inside the band and left 2 / 1 / 0 EOS on the wrong side outside it.
SIDE_BAND = 3.0
#: The scanned margin is emulated as ``asinh(g / SCANNED_SCALE)`` (Msun per unit z): g spans -8e3 to 40, and
#: the sign is what matters (LOG.md).
SCANNED_SCALE = 10.0
#: Nodes per curve a grid needs for the two-sided spline (the far side's t nodes are as many).
MIN_CURVE_NODES = 4
#: The far side's t nodes crowd towards M_t as ``s^T_CROWDING``: 16 such nodes above M_t gave held-out R p95
#: 43.9 m against 47 m uniform (LOG.md, far side).
T_CROWDING = 1.7
#: Where the branch of the far side's exact stars starts [Msun] (the solver's default is 0.3 Msun; transition
#: masses of 0.1-0.3 Msun occur in the sound-speed-transition box, whose nodes just above M_t then failed).
LOWEST_BRANCH_MSUN = 0.05
#: The name of the far side's scalar after the curves: the transition mass [Msun].
TRANSITION_MASS = "transition_mass_msun"
#: The arrays a two-sided model adds to the common ones (a model without them is refused).
_SUBS = rt.SIDE_PREFIXES + (rt.BASE_PREFIX,)
SIDED_ARRAYS = (("X", "side_band", "t_nodes", "t_c")
                + tuple(f"{p}{k}" for p in _SUBS for k in ("X", "alpha", "out_mean", "out_scale", "trend_powers",
                                                           "trend_coef", "loo_residual", "error_scale"))
                + tuple(f"{p}{k}" for p in rt.MARGIN_PREFIXES for k in ("X", "alpha", "trend_powers", "trend_coef",
                                                                        "loo_residual", "error_scale")))
#: Its arrays that steer loops or index.
SIDED_STATIC = (tuple(f"{p}{k}" for p in _SUBS for k in ("trend_powers", "warp_log", "warp_shift", "curve_slices"))
                + tuple(f"{p}trend_powers" for p in rt.MARGIN_PREFIXES))


@dataclass(frozen=True)
class SidedFit(Record):
    """What a two-sided fit found (recorded in the model).

    Attributes
    ----------
    rule : str
        How a query's side is chosen.
    near_rows, far_rows : int
        Training rows of each side (by the grid's solved first maximum).
    far_rows_unsolved : int
        Rows left out of their side's spline: their transition star or (far) a star at a t node failed.
    base_rows : int
        Rows the base family's spline learned.
    rows_left_out : int
        Training rows beyond the first :data:`~._rbf.DENSE_LIMIT` of a side (each spline is one dense fit;
        the margin models and the base spline learn at most as many rows too).
    seconds_far_curves : float
        Time of the exact stars at the transition, at the far side's t nodes and of the base family.
    label_disagreements : int
        Rows where the margins' rule (``s > 0 or g < 0``) and the solved first maximum disagree.
    scanned_rows : int
        Rows the scanned margin's model learned (``s < 0`` and a finite scan).
    margin_loo_p95 : dict
        The 95th percentile of each margin model's |leave-one-out residual| (``seidov``, ``scanned``).
    seconds_scan : float
        Time of the margins' scan (101 stars per EOS).
    near, far, base : RBFFit
        What each side's spline and the base family's fit found.
    """

    rule: str = "near if s > 0 or asinh(g / 10) < 0 (emulated); uncertain within 3 sigma of either margin"
    near_rows: int = 0
    far_rows: int = 0
    far_rows_unsolved: int = 0
    base_rows: int = 0
    rows_left_out: int = 0
    seconds_far_curves: float = 0.0
    label_disagreements: int = 0
    scanned_rows: int = 0
    margin_loo_p95: dict = field(default_factory=dict)
    seconds_scan: float = 0.0
    near: RBFFit = nested(RBFFit, default_factory=RBFFit)
    far: RBFFit = nested(RBFFit, default_factory=RBFFit)
    base: RBFFit = nested(RBFFit, default_factory=RBFFit)


def _transition_family(name: str):
    """The family ``name`` if it is a ``<base>-transition`` family, else None."""
    try:
        fam = get_family(name)
    except (InputError, KeyError):
        return None
    return fam if isinstance(fam, Transition) else None


def has_transition(family: str) -> bool:
    """True for a ``<base>-transition`` family (M_max and the curves jump across a surface in its box)."""
    return _transition_family(family) is not None


def solved_near(data: TrainingData, fam) -> np.ndarray:
    """Rows whose solved first maximum lies within ``NEAR_DECADES`` decades of pressure above the transition."""
    log_pt = np.asarray(data.theta, float)[:, len(fam.base.parameters)]
    return data.scalars["log10_central_pressure_at_mass_max"] - log_pt < NEAR_DECADES


def _min_side_rows(d: int) -> int:
    """Rows each side needs: twice the terms of the quadratic polynomial of the RBF."""
    return (d + 1) * (d + 2)


def applies_sided(data: TrainingData) -> bool:
    """True for a transition family's data with at least :func:`_min_side_rows` rows on each side and curves
    at :data:`MIN_CURVE_NODES` nodes or more."""
    fam = _transition_family(data.family)
    if fam is None:
        return False
    if len(data.u_nodes) < MIN_CURVE_NODES:
        logger.info(f"  {data.family}: curves at {len(data.u_nodes)} nodes, not {MIN_CURVE_NODES}: one model over "
                    "both sides")
        return False
    near = solved_near(data, fam)
    sizes = (int(near.sum()), int((~near).sum()))
    need = _min_side_rows(np.shape(data.theta)[1])
    if min(sizes) < need:
        logger.info(f"  {data.family}: {sizes[0]} near / {sizes[1]} far training rows, not {need} on each side: "
                    "one model over both sides")
        return False
    return True


def first_rows(rows: np.ndarray, limit: int) -> np.ndarray:
    """The first ``limit`` rows (in the grid's order) of the mask ``rows``: all of them if there are no more.

    Each spline of a two-sided model is one dense fit (at most :data:`~._rbf.DENSE_LIMIT` rows); a Sobol
    design's first rows on a side are the prefix of the sequence there, still spread over the box.
    """
    rows = np.asarray(rows, bool)
    return rows & (np.cumsum(rows) <= limit)


def fit_margin(x: np.ndarray, value: np.ndarray) -> dict:
    """An r^5 + quadratic RBF of ``value`` (n,) at unit inputs x (n, d), with its leave-one-out residuals.

    Returns the arrays of a margin model (see the module docstring); ``error_scale`` 1 (no calibration).
    """
    powers = trend_powers(x.shape[1], 2)
    A = saddle_matrix(x, trend_matrix(x, powers))
    n = x.shape[0]
    # one inverse gives the weights and Rippa's leave-one-out residuals (the right-hand side is zero below row n)
    inv = scipy.linalg.inv(A, check_finite=False)
    sol = inv[:, :n] @ np.asarray(value, float)[:, None]
    return {"X": x, "alpha": sol[:n], "trend_powers": powers, "trend_coef": sol[n:],
            "loo_residual": sol[:n] / np.diag(inv)[:n, None], "error_scale": np.ones(1)}


def far_t_nodes(n: int) -> np.ndarray:
    """The far side's ``n`` curve nodes of t in [0, 1] (M_t at 0, M_max at 1), crowded towards M_t as
    ``s^T_CROWDING`` (s uniform)."""
    return np.linspace(0.0, 1.0, n) ** T_CROWDING


@dataclass(frozen=True)
class FarCurves:
    """The transition mass of every training row and the far rows' hybrid stars at nodes of t.

    Attributes
    ----------
    t_nodes : ndarray (k,)
        The nodes (:func:`far_t_nodes`).
    transition_mass_msun : ndarray (n,)
        M_t of every training row [Msun] (NaN where the star failed).
    curves : dict of ndarray (n, k)
        The curves at the nodes' masses (:func:`~tovforge.surrogate._runtime.t_node_masses`), in the
        modelled units, by model name (as :attr:`TrainingData.curves`); NaN on near rows and where not solved.
    """

    t_nodes: np.ndarray
    transition_mass_msun: np.ndarray
    curves: dict


def far_curves(data: TrainingData, far: np.ndarray, chunk: int = 64) -> FarCurves:
    """M_t of every training row, and exact hybrid stars at the far side's t nodes for the rows ``far`` (a mask).

    M_t is the star centred just below the jump (:func:`tovforge.solve.jump_stars`, the node t = 0), the node
    t = 1 the maximum-mass star, the others the stars of the stable branch at the nodes' masses
    (:func:`tovforge.solve.solve_sequences`), for the grid's M_max.
    """
    fam = _transition_family(data.family)
    theta = np.asarray(data.theta, float)
    t_nodes = far_t_nodes(len(data.u_nodes))
    star = emulated_outputs()[1]
    n, k = len(theta), t_nodes.size
    far = np.asarray(far, bool)
    m_t = np.full(n, np.nan)
    curves = {q.model_name: np.full((n, k), np.nan) for q in star}
    for start in range(0, n, 512):  # the star at the jump of every row: M_t, and the far rows' node t = 0
        r = np.arange(start, min(start + 512, n))
        at_jump = jump_stars(fam.build(theta[r]))
        m_t[r] = at_jump.mass_msun
        with np.errstate(divide="ignore", invalid="ignore"):
            for q in star:
                curves[q.model_name][r[far[r]], 0] = quantities.forward(q, np.asarray(getattr(at_jump, q.name)))[far[r]]
    inner = np.arange(1, k - 1)

    def solve(r):
        batch = fam.build(theta[r])
        masses = rt.t_node_masses(np, t_nodes, data.scalars["mass_max_msun"][r], m_t[r])
        # the branch from the lightest scanned star (not from 0.3 Msun): a transition mass can be lighter
        seq = solve_sequences(batch, n_stars=0, masses=np.where(np.isfinite(masses), masses, 1.0)[:, inner],
                              settings=SequenceSettings(low_mass_msun=LOWEST_BRANCH_MSUN))
        for q in star:
            c = curves[q.model_name]
            with np.errstate(divide="ignore", invalid="ignore"):
                c[np.ix_(r, inner)] = quantities.forward(q, np.asarray(getattr(seq.at_mass, q.name)))
                c[r, -1] = quantities.forward(q, np.asarray(getattr(seq.mass_max, q.name)))

    idx = np.flatnonzero(far)
    for start in range(0, idx.size, chunk):
        solve(idx[start : start + chunk])
    # a search that ends short of its tolerance in a batch (the stars just above the jump, where M(h_c) kinks)
    # may succeed alone
    for i in idx[~np.all(np.isfinite(curves["radius_km"][idx]), axis=1)]:
        solve(np.array([i]))
    return FarCurves(t_nodes=t_nodes, transition_mass_msun=m_t, curves=curves)


def base_data(data: TrainingData) -> TrainingData:
    """The base family's exact sequences at the training rows' base parameters, as training data.

    Solved as a grid solves its points (:func:`tovforge.grid.solve_chunk`, the same u nodes); rows whose base
    parameters repeat are kept once, in the grid's order, and at most :data:`~._rbf.DENSE_LIMIT` of them (the
    first: the base spline is one dense fit); failed rows dropped.
    """
    from ..grid import parse_spec
    from ..grid._solve import solve_chunk
    from ._data import training_data_from_arrays

    fam = _transition_family(data.family)
    nb = len(fam.base.parameters)
    names = tuple(data.parameter_names[:nb])
    box = np.asarray(data.bounds, float)[:nb]
    base = np.asarray(data.theta, float)[:, :nb]
    # (np.unique sorts: its first rows would all sit at the low end of the first parameter)
    theta = base[np.sort(np.unique(base, axis=0, return_index=True)[1])][: _rbf.DENSE_LIMIT]
    spec = parse_spec({"family": fam.base.name, "box": {k: [float(a), float(b)] for k, (a, b) in zip(names, box)},
                       "mass_max_floor_msun": 0.0, "design": {"method": "sobol", "points": 16, "seed": 1},
                       "outputs": {"u_nodes": [float(u) for u in data.u_nodes]}})
    parts = [solve_chunk(spec, theta[i : i + 256]) for i in range(0, len(theta), 256)]
    join = lambda field: {k: np.concatenate([getattr(p, field)[k] for p in parts])  # noqa: E731
                          for k in getattr(parts[0], field)}
    return training_data_from_arrays(
        path=f"{fam.base.name} at the base parameters of {data.provenance.get('grid_path', 'the training grid')}",
        family_name=fam.base.name, parameter_names=names, parameter_units=tuple(data.parameter_units[:nb]), box=box,
        theta=theta, status=np.concatenate([p.status for p in parts]), scalars=join("scalars"),
        curves=join("curves"), u_nodes=data.u_nodes, attrs={}, min_points=0)


def fit_sided(data: TrainingData, settings: SplineSettings | None = None) -> FitResult:
    """Fit the two-sided spline of a transition family (see the module docstring).

    The sides come from the grid's solved first maximum (a side with more than
    :data:`~._rbf.DENSE_LIMIT` rows keeps its first ones, :func:`first_rows`); the
    family gives every kept row its margins (:func:`tovforge.solve.jump_margins`:
    Seidov's in closed form, the scanned one from 101 stars per EOS), its transition
    mass and the far rows' stars at the t nodes (:func:`far_curves`), and the base
    family's sequences (:func:`base_data`); then :func:`fit_sides`.

    Raises
    ------
    InputError
        If the family has no transition.
    """
    fam = _transition_family(data.family)
    if fam is None:
        raise InputError(f"the two-sided spline needs a <base>-transition family; got {data.family!r}.")
    limit = _rbf.DENSE_LIMIT
    near = solved_near(data, fam)
    keep = first_rows(near, limit) | first_rows(~near, limit)
    if not keep.all():
        logger.info(f"  {int(near.sum())} near and {int((~near).sum())} far rows: each side learns its first "
                    f"{limit} (one dense spline each); {int((~keep).sum())} rows left out")
        data, near = data.rows(keep), near[keep]
    t0 = time.perf_counter()
    margins = jump_margins(fam.build(np.asarray(data.theta, float)))
    seconds = time.perf_counter() - t0
    logger.info(f"  side margins of {len(data.theta)} EOS: {seconds:.1f} s")
    t0 = time.perf_counter()
    far = far_curves(data, ~near)
    logger.info(f"  transition masses, far side's exact stars at {far.t_nodes.size} nodes of t for "
                f"{int((~near).sum())} EOS: {time.perf_counter() - t0:.1f} s")
    t1 = time.perf_counter()
    base = base_data(data)
    logger.info(f"  base family ({fam.base.name}) at {len(base.theta)} training rows' base parameters: "
                f"{time.perf_counter() - t1:.1f} s")
    seconds_far = time.perf_counter() - t0
    result = fit_sides(data, settings, margins, near, far, base)
    return dataclasses.replace(result, details=dataclasses.replace(result.details, seconds_scan=seconds,
                                                                   seconds_far_curves=seconds_far,
                                                                   rows_left_out=int((~keep).sum())))


def fit_sides(data: TrainingData, settings: SplineSettings | None, margins, near: np.ndarray,
              far: FarCurves, base: TrainingData) -> FitResult:
    """The two-sided spline from given margins and sides of the training rows.

    Parameters
    ----------
    data : TrainingData
    settings : SplineSettings or None
        Options of both sides' splines.
    margins : JumpMargins
        Seidov's and the scanned margin of every row (:func:`tovforge.solve.jump_margins`).
    near : ndarray of bool (n,)
        The side each row's outputs belong to (True: near).
    far : FarCurves
        Every row's transition mass and the far rows' curves at the t nodes (:func:`far_curves`); the far
        side's spline learns these instead of the grid's curves (rows with a NaN among them are left out).
    base : TrainingData
        The base family's sequences (:func:`base_data`), whose parameters are the first of ``data``'s; at most
        :data:`~._rbf.DENSE_LIMIT` rows (one dense fit).

    Returns
    -------
    FitResult
        The arrays, the settings, and a :class:`SidedFit`.
    """
    settings = settings or SplineSettings()
    near = np.asarray(near, bool)
    disagree = margins.near != near
    logger.info(f"  {int(near.sum())} near, {int((~near).sum())} far rows; the margins' rule disagrees with the "
                f"sides on {int(disagree.sum())}")
    if disagree.any():
        warnings.warn(f"the side margins (Seidov's, scanned) disagree with the grid's solved first maximum on "
                      f"{int(disagree.sum())} training rows (first rows {np.flatnonzero(disagree)[:8].tolist()}): "
                      "queries near them may take the wrong side; the splines learn the solved sides.",
                      UserWarning, stacklevel=2)
    p = prepare(data, False)
    arrays, x = dict(p.arrays), p.x
    n_side = arrays["out_mean"].shape[0]
    n_out = 2 * n_side + 2  # the side's outputs, M_t, the base's outputs, the side flag
    arrays.update(out_mean=np.zeros(n_out), out_scale=np.ones(n_out), X=x, side_band=np.array([SIDE_BAND]),
                  trend_powers=np.zeros((1, x.shape[1]), dtype=np.int64), trend_coef=np.zeros((1, n_out)),
                  t_nodes=np.asarray(far.t_nodes, float),
                  t_c=spline_cardinal_coefficients(np.asarray(far.t_nodes, float)))
    m_t = far.transition_mass_msun
    solved = np.isfinite(m_t)
    for c in far.curves.values():
        solved &= np.all(np.isfinite(c), axis=1) | near
    unsolved = int(np.sum(~solved))
    if unsolved:
        logger.info(f"  {unsolved} rows without their transition mass or every star at the t nodes, left out of "
                    "their side's spline")
    with_mt = lambda rows, curves: dataclasses.replace(  # noqa: E731
        data.rows(rows), curves={k: v[rows] for k, v in curves.items()},
        scalars={**{k: v[rows] for k, v in data.scalars.items()}, TRANSITION_MASS: m_t[rows]},
        trailing=(TRANSITION_MASS,))
    details = {}
    for prefix, side_data in ((rt.SIDE_PREFIXES[0], with_mt(near & solved, data.curves)),
                              (rt.SIDE_PREFIXES[1], with_mt(~near & solved, far.curves)), (rt.BASE_PREFIX, base)):
        name = prefix.rstrip("_")
        logger.info(f"  {name}: RBF spline on {len(side_data.theta)} rows")
        fit = fit_rbf(side_data, settings)
        arrays.update({prefix + k: v for k, v in fit.arrays.items()})
        details[name] = fit.details
    limit = _rbf.DENSE_LIMIT
    below = first_rows((margins.seidov < 0.0) & np.isfinite(margins.scanned_msun), limit)
    t0 = time.perf_counter()
    for prefix, rows, value in ((rt.MARGIN_PREFIXES[0], first_rows(np.isfinite(margins.seidov), limit),
                                 margins.seidov),
                                (rt.MARGIN_PREFIXES[1], below, np.arcsinh(margins.scanned_msun / SCANNED_SCALE))):
        arrays.update({prefix + k: v for k, v in fit_margin(x[rows], value[rows]).items()})
    loo = {q.rstrip("_"): float(np.percentile(np.abs(arrays[q + "loo_residual"]), 95)) for q in rt.MARGIN_PREFIXES}
    logger.info(f"  margin models: {time.perf_counter() - t0:.1f} s; |LOO| p95 Seidov {loo['seidov']:.2g}, "
                f"asinh(g / {SCANNED_SCALE:g}) {loo['scanned']:.2g} (on {int(below.sum())} rows with s < 0)")
    return FitResult(arrays=arrays, settings=settings,
                     details=SidedFit(near_rows=int(near.sum()), far_rows=int((~near).sum()),
                                      far_rows_unsolved=unsolved, base_rows=len(base.theta),
                                      label_disagreements=int(disagree.sum()), scanned_rows=int(below.sum()),
                                      margin_loo_p95=loo, **details))


def reverse_sides(arrays: dict) -> dict:
    """The sub-models' training points and weights in reverse order (their kernel sums in another order).

    The margin models keep theirs: they only choose the side.
    """
    return {p + k: np.array(arrays[p + k][::-1]) for p in _SUBS for k in ("X", "alpha")}


def describe_sided(arrays: dict) -> str:
    """A few words on a fitted two-sided model: the rows of each side and of the base family."""
    return (f"{arrays['near__X'].shape[0]} near + {arrays['far__X'].shape[0]} far training points, base family "
            f"on {arrays['base__X'].shape[0]}")
