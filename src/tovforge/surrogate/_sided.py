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

On the far side R(M) and Lambda(M) kink at the transition mass M_t (the star
centred at the jump), which moves along the grid's ``u`` nodes with the
parameters, so node values there are not smooth in the parameters (held-out R
p95 146 m from the grid's nodes, LOG.md).  The far side's spline therefore
learns M_t (a scalar after the curves) and each curve at nodes of a coordinate
``t`` with M_t at t = 1/2 (:func:`far_t_nodes`,
:func:`~tovforge.surrogate._runtime.t_node_masses`), solved exactly at training
(:func:`far_curves`); queries interpolate one cubic spline per segment of t.

Arrays of a model (beside the common ones of :mod:`._kinds`; its own trend is
zero and its outputs unstandardised, the sub-models carry theirs): ``X`` (n, d)
every training point in the plain unit box; ``side_band`` (1,); the far side's
nodes ``t_nodes`` (n_u,) and the cardinal cubic-spline coefficients of its two
segments ``t_low_c``, ``t_high_c``; the arrays of each sub-model (an ``rbf`` model's) under the prefixes ``near__`` and
``far__``, and of each margin model (``X``, ``alpha`` (n, 1), ``trend_powers``,
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
from ..solve import NEAR_DECADES, jump_margins, jump_stars, solve_sequences
from . import _runtime as rt
from ._data import TrainingData, emulated_outputs
from ._prepare import FitResult, prepare, saddle_matrix, spline_cardinal_coefficients, trend_matrix, trend_powers
from ._rbf import RBFFit, SplineSettings, fit_rbf
from ._record import Record, nested

__all__ = ["SidedFit", "FarCurves", "fit_sided", "has_transition", "fit_sides", "fit_margin", "far_t_nodes", "far_curves",
           "solved_near", "applies_sided", "reverse_sides", "describe_sided", "SIDE_BAND", "SCANNED_SCALE",
           "SIDED_ARRAYS", "SIDED_STATIC", "TRANSITION_MASS", "HIGH_CROWDING", "MIN_CURVE_NODES"]

logger = logging.getLogger(__name__)

#: Sigmas of its own error model within which a margin counts as uncertain.  Measured on the
#: transition family's held-out set (366 EOS, research/surrogates/LOG.md): 1 / 2 / 3 sigma put 2.2 / 4.6 /
#: 6.6 % of the EOS inside the band and left 2 / 1 / 0 EOS on the wrong side outside it.
SIDE_BAND = 3.0
#: The scanned margin is emulated as ``asinh(g / SCANNED_SCALE)`` (Msun per unit z): g spans -8e3 to 40, and
#: the sign is what matters (LOG.md).
SCANNED_SCALE = 10.0
#: The far side's nodes above M_t crowd towards it as ``s^HIGH_CROWDING`` (s uniform in (0, 1]): 16 such nodes
#: gave held-out R p95 43.9 m against 47 m uniform (LOG.md, far side).
HIGH_CROWDING = 1.7
#: Nodes per curve a grid needs for the far side's t nodes (at least 3 on each segment).
MIN_CURVE_NODES = 8
#: The name of the far side's scalar after the curves: the transition mass [Msun].
TRANSITION_MASS = "transition_mass_msun"
#: The arrays a two-sided model adds to the common ones (a model without them is refused).
SIDED_ARRAYS = ("X", "side_band", "t_nodes", "t_low_c", "t_high_c") + tuple(f"{p}{k}" for p in rt.SIDE_PREFIXES for k in ("X", "alpha", "out_mean",
                                                                                         "out_scale", "trend_powers",
                                                                                         "trend_coef", "loo_residual",
                                                                                         "error_scale")) + tuple(
    f"{p}{k}" for p in rt.MARGIN_PREFIXES for k in ("X", "alpha", "trend_powers", "trend_coef", "loo_residual",
                                                    "error_scale"))
#: Its arrays that steer loops or index.
SIDED_STATIC = tuple(f"{p}{k}" for p in rt.SIDE_PREFIXES for k in ("trend_powers", "warp_log", "warp_shift",
                                                                     "curve_slices")) + tuple(
    f"{p}trend_powers" for p in rt.MARGIN_PREFIXES)


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
        Far rows left out of the far side's spline: a star at one of their t nodes failed.
    seconds_far_curves : float
        Time of the far side's exact stars at the t nodes.
    label_disagreements : int
        Rows where the margins' rule (``s > 0 or g < 0``) and the solved first maximum disagree.
    scanned_rows : int
        Rows the scanned margin's model learned (``s < 0`` and a finite scan).
    margin_loo_p95 : dict
        The 95th percentile of each margin model's |leave-one-out residual| (``seidov``, ``scanned``).
    seconds_scan : float
        Time of the margins' scan (101 stars per EOS).
    near, far : RBFFit
        What each side's spline fit found.
    """

    rule: str = "near if s > 0 or asinh(g / 10) < 0 (emulated); uncertain within 3 sigma of either margin"
    near_rows: int = 0
    far_rows: int = 0
    far_rows_unsolved: int = 0
    seconds_far_curves: float = 0.0
    label_disagreements: int = 0
    scanned_rows: int = 0
    margin_loo_p95: dict = field(default_factory=dict)
    seconds_scan: float = 0.0
    near: RBFFit = nested(RBFFit, default_factory=RBFFit)
    far: RBFFit = nested(RBFFit, default_factory=RBFFit)


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


def applies_sided(data: TrainingData, largest: int | None = None) -> bool:
    """True for a transition family's data with at least :func:`_min_side_rows` rows on each side (and at most
    ``largest`` on either, if given: each side is one dense fit) and curves at :data:`MIN_CURVE_NODES` nodes
    or more."""
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
    if min(sizes) < need or (largest is not None and max(sizes) > largest):
        logger.info(f"  {data.family}: {sizes[0]} near / {sizes[1]} far training rows, not {need} to "
                    f"{largest or 'any number'} on each side: one model over both sides")
        return False
    return True


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
    """The far side's ``n`` curve nodes of t: 3/8 of them uniform on [0, 1/2] (below M_t, t = 1/2 included),
    the others on (1/2, 1] crowded towards 1/2 (:data:`HIGH_CROWDING`); t = 1 is M_max."""
    n_low = max(3, (3 * n) // 8)
    s = np.linspace(0.0, 1.0, n - n_low + 1)[1:]
    return np.concatenate([np.linspace(0.0, 0.5, n_low), 0.5 + 0.5 * s**HIGH_CROWDING])


def _t_arrays(t_nodes: np.ndarray) -> dict:
    """The far side's node arrays of a model: the nodes and each segment's cardinal spline coefficients."""
    n_low = int(np.sum(t_nodes <= 0.5))
    return {"t_nodes": t_nodes, "t_low_c": spline_cardinal_coefficients(t_nodes[:n_low]),
            "t_high_c": spline_cardinal_coefficients(t_nodes[n_low - 1:])}


@dataclass(frozen=True)
class FarCurves:
    """The far side's training curves: the transition mass and each curve at nodes of t.

    Attributes
    ----------
    t_nodes : ndarray (k,)
        The nodes (:func:`far_t_nodes`).
    transition_mass_msun : ndarray (n,)
        M_t of every training row [Msun]; NaN where not solved (near rows, failures).
    curves : dict of ndarray (n, k)
        The curves at the nodes' masses (:func:`~tovforge.surrogate._runtime.t_node_masses`), in the
        modelled units, by model name (as :attr:`TrainingData.curves`); NaN where not solved.
    """

    t_nodes: np.ndarray
    transition_mass_msun: np.ndarray
    curves: dict


def far_curves(data: TrainingData, rows: np.ndarray, chunk: int = 64) -> FarCurves:
    """Exact stars at the far side's t nodes for the training ``rows`` (a mask) of a transition family.

    M_t is the star centred just below the jump (:func:`tovforge.solve.jump_stars`, node t = 1/2), the node
    t = 1 the maximum-mass star, the others the stars of the stable branch at the nodes' masses
    (:func:`tovforge.solve.solve_sequences`), for the grid's M_max.
    """
    fam = _transition_family(data.family)
    theta = np.asarray(data.theta, float)
    idx = np.flatnonzero(rows)
    t_nodes = far_t_nodes(len(data.u_nodes))
    umax = float(np.asarray(data.u_nodes, float)[-1])
    star = emulated_outputs()[1]
    n, k = len(theta), t_nodes.size
    m_t = np.full(n, np.nan)
    curves = {q.model_name: np.full((n, k), np.nan) for q in star}
    mid, top = t_nodes == 0.5, t_nodes == 1.0
    inner = ~(mid | top)

    def solve(r):
        batch = fam.build(theta[r])
        at_jump = jump_stars(batch)
        m_t[r] = at_jump.mass_msun
        masses = rt.t_node_masses(np, t_nodes, umax, data.scalars["mass_max_msun"][r], m_t[r])
        seq = solve_sequences(batch, n_stars=0, masses=np.where(np.isfinite(masses), masses, 1.0)[:, inner])
        for q in star:
            c = curves[q.model_name]
            with np.errstate(divide="ignore", invalid="ignore"):
                c[np.ix_(r, np.flatnonzero(inner))] = quantities.forward(q, np.asarray(getattr(seq.at_mass, q.name)))
                c[r[:, None], np.flatnonzero(mid)] = quantities.forward(q, np.asarray(getattr(at_jump, q.name)))[:, None]
                c[r[:, None], np.flatnonzero(top)] = quantities.forward(
                    q, np.asarray(getattr(seq.mass_max, q.name)))[:, None]

    for start in range(0, idx.size, chunk):
        solve(idx[start : start + chunk])
    # a search that ends short of its tolerance in a batch (the stars just above the jump, where M(h_c) kinks)
    # may succeed alone; masses below the branch's lightest star (a transition mass within a few per cent of
    # it) stay NaN
    for i in idx[~np.all(np.isfinite(curves["radius_km"][idx]), axis=1)]:
        solve(np.array([i]))
    return FarCurves(t_nodes=t_nodes, transition_mass_msun=m_t, curves=curves)


def fit_sided(data: TrainingData, settings: SplineSettings | None = None) -> FitResult:
    """Fit the two-sided spline of a transition family (see the module docstring).

    The margins of every training row come from the family
    (:func:`tovforge.solve.jump_margins`: Seidov's in closed form, the scanned one
    from 101 stars per EOS), the sides from the grid's solved first maximum; then
    :func:`fit_sides`.

    Raises
    ------
    InputError
        If the family has no transition.
    """
    fam = _transition_family(data.family)
    if fam is None:
        raise InputError(f"the two-sided spline needs a <base>-transition family; got {data.family!r}.")
    t0 = time.perf_counter()
    margins = jump_margins(fam.build(np.asarray(data.theta, float)))
    seconds = time.perf_counter() - t0
    logger.info(f"  side margins of {len(data.theta)} EOS: {seconds:.1f} s")
    near = solved_near(data, fam)
    t0 = time.perf_counter()
    far = far_curves(data, ~near)
    seconds_far = time.perf_counter() - t0
    logger.info(f"  far side: exact stars at {far.t_nodes.size} nodes of t for {int((~near).sum())} EOS: "
                f"{seconds_far:.1f} s")
    result = fit_sides(data, settings, margins, near, far)
    return dataclasses.replace(result, details=dataclasses.replace(result.details, seconds_scan=seconds,
                                                                   seconds_far_curves=seconds_far))


def fit_sides(data: TrainingData, settings: SplineSettings | None, margins, near: np.ndarray,
              far: FarCurves) -> FitResult:
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
        The far rows' transition masses and curves at the t nodes (:func:`far_curves`); the far side's spline
        learns these instead of the grid's curves (rows with a NaN among them are left out).

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
    n_out = arrays["out_mean"].shape[0] + 1  # the transition mass after the curves
    arrays.update(out_mean=np.zeros(n_out), out_scale=np.ones(n_out), X=x, side_band=np.array([SIDE_BAND]),
                  trend_powers=np.zeros((1, x.shape[1]), dtype=np.int64), trend_coef=np.zeros((1, n_out)),
                  **_t_arrays(np.asarray(far.t_nodes, float)))
    solved = np.isfinite(far.transition_mass_msun)
    for c in far.curves.values():
        solved &= np.all(np.isfinite(c), axis=1)
    unsolved = int(np.sum(~near & ~solved))
    if unsolved:
        logger.info(f"  far side: {unsolved} rows without every star at the t nodes, left out of its spline")
    far_rows = ~near & solved
    far_data = dataclasses.replace(
        data.rows(far_rows), curves={k: v[far_rows] for k, v in far.curves.items()},
        scalars={**{k: v[far_rows] for k, v in data.scalars.items()},
                 TRANSITION_MASS: far.transition_mass_msun[far_rows]}, trailing=(TRANSITION_MASS,))
    details = {}
    for prefix, side_data in zip(rt.SIDE_PREFIXES, (data.rows(near), far_data)):
        name = prefix.rstrip("_")
        logger.info(f"  {name} side: RBF spline on {len(side_data.theta)} rows")
        fit = fit_rbf(side_data, settings)
        arrays.update({prefix + k: v for k, v in fit.arrays.items()})
        details[name] = fit.details
    below = (margins.seidov < 0.0) & np.isfinite(margins.scanned_msun)
    t0 = time.perf_counter()
    for prefix, rows, value in ((rt.MARGIN_PREFIXES[0], np.isfinite(margins.seidov), margins.seidov),
                                (rt.MARGIN_PREFIXES[1], below, np.arcsinh(margins.scanned_msun / SCANNED_SCALE))):
        arrays.update({prefix + k: v for k, v in fit_margin(x[rows], value[rows]).items()})
    loo = {q.rstrip("_"): float(np.percentile(np.abs(arrays[q + "loo_residual"]), 95)) for q in rt.MARGIN_PREFIXES}
    logger.info(f"  margin models: {time.perf_counter() - t0:.1f} s; |LOO| p95 Seidov {loo['seidov']:.2g}, "
                f"asinh(g / {SCANNED_SCALE:g}) {loo['scanned']:.2g} (on {int(below.sum())} rows with s < 0)")
    return FitResult(arrays=arrays, settings=settings,
                     details=SidedFit(near_rows=int(near.sum()), far_rows=int((~near).sum()), far_rows_unsolved=unsolved,
                                      label_disagreements=int(disagree.sum()), scanned_rows=int(below.sum()),
                                      margin_loo_p95=loo, **details))


def reverse_sides(arrays: dict) -> dict:
    """The sub-models' training points and weights in reverse order (their kernel sums in another order).

    The margin models keep theirs: they only choose the side.
    """
    return {p + k: np.array(arrays[p + k][::-1]) for p in rt.SIDE_PREFIXES for k in ("X", "alpha")}


def describe_sided(arrays: dict) -> str:
    """A few words on a fitted two-sided model: the rows of each side."""
    return f"{arrays['near__X'].shape[0]} near + {arrays['far__X'].shape[0]} far training points"
