"""Local polyharmonic splines: a partition of unity of r^5 interpolants on quantile cells (scales to large n).

The stretched unit box (inputs warped and stretched as for the RBF spline,
:class:`~tovforge.surrogate._rbf.SplineSettings`) is cut into a tensor grid of
cells, with interior edges at quantiles of the training points; each cell has
its own r^5 interpolant plus a polynomial of ``degree`` (centred and scaled on
the cell's points), fitted on the training points of the cell grown by
``margin`` times its width on every side.  Predictions blend the interpolants
of neighbouring cells with weights that form a partition of unity: along each
parameter, a quintic smoothstep of half-width ``overlap`` times the narrower
cell around each interior edge (C^2), multiplied over the parameters
(Wendland 2002, in "Approximation Theory X", 473; Cavoretto & De Rossi 2015,
Appl. Math. Lett. 40, 1, on RBF partition of unity).  A query touches one to a
few cells, each of a size set by ``points_per_cell``: its cost does not grow
with the number of training points, and the training is a set of small dense
solves.  The settings are those measured in research/surrogates/LOG.md
(overlap 0.15, margin 0.25, about 256 points per cell).

Arrays of a model (beside the common ones of :mod:`._kinds`; its global trend
is zero, the cells carry their own polynomials):

``X`` (n, d)
    The training points in the stretched unit inputs.
``patch_index`` (S,) int64, ``patch_rows`` (P + 1,) int64
    Cell ``p`` (cells in C order over ``cell_counts``) is fitted on the training
    points ``X[patch_index[patch_rows[p]:patch_rows[p + 1]]]``.
``alpha`` (S, n_out)
    The r^5 weights of each cell, rows as ``patch_index``.  float64: rounded to
    float32 they moved R by up to 2 m (the weights cancel; LOG.md).
``patch_centre`` (P, d), ``patch_scale`` (P,), ``patch_coef`` (P, n_terms, n_out), ``local_powers`` (n_terms, d)
    Each cell's polynomial in ``(x - centre) / scale``.
``cell_counts`` (d,) int64, ``cell_edges`` (d, K + 1), ``cell_half`` (d, K + 1)
    Cells per parameter, their edges (padded with the last edge to the largest
    count K) and the blend half-width at each interior edge (index j: edge j;
    zero elsewhere).
``local_targets`` (n, n_out)
    The standardised training outputs every cell interpolated (rows as ``X``).
    Exported files carry these instead of ``alpha``, the cells' polynomials and
    ``loo_residual``, and solve the cells again at import
    (:func:`~tovforge.surrogate._runtime.local_rebuild`, the training's own
    function): at 32,751 points 22.9 MB instead of 92 MB, 15 s of import on a
    quiet machine; on another LAPACK the rebuilt weights differ by rounding (measured
    with SciPy's inverse instead of NumPy's: M_max 1.6e-7 Msun, R(1.4) 1.7e-6 km,
    Lambda(1.4) 1e-6 relative at most over 2,000 random theta).  Models saved
    before it existed export their weights as they are.
``loo_residual`` (n, n_out)
    The leave-one-out residual of every training point, ``y_i - f_{-i}(x_i)``
    in the units of the model's output columns (after the output transform:
    ln Lambda, log10 p_c, ...; before the standardisation), rows in the order of
    the training data.  ``f_{-i}`` is the model refitted without point ``i``,
    the partition and the standardisation kept: each cell's residual comes in
    closed form from its interpolation matrix, ``c_i / [A^-1]_ii`` (Rippa 1999,
    Adv. Comput. Math. 11, 193; with the polynomial block, Fasshauer & Zhang
    2007, Numer. Algorithms 45, 345), and since the blend weights sum to one the
    partition's residual is the weighted sum of the cells' residuals at ``x_i``.
    Every method that stores this array uses this name, shape and meaning (the
    error models built on it rely on that).
"""

from __future__ import annotations

import itertools
import logging
import time
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from . import _runtime as rt
from ._data import TrainingData
from ._errors import calibrate_error_model, choose_by_loo
from ._prepare import FitResult, prepare, trend_powers
from ._rbf import SplineSettings, _anisotropy, stretch_candidates
from ._record import Record

__all__ = ["LocalSettings", "LocalFit", "Partition", "fit_local", "fit_patches", "partition", "join_groups",
           "auto_cells", "reverse_patches", "describe_local"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class LocalSettings(Record):
    """Options of the local (partition-of-unity) polyharmonic spline.

    Attributes
    ----------
    warp_inputs, anisotropic, n_subset, seed
        The input warp and the stretch learned from the data, as for
        :class:`~tovforge.surrogate._rbf.SplineSettings` (one Gaussian process's
        length scales over the curve outputs, on ``n_subset`` points).
    degree : int
        Degree of each cell's polynomial (>= 2: r^5 is conditionally positive
        definite of order 3, so a lower degree may leave the system singular).
    points_per_cell : int
        Cells are added (one more along the parameter whose cells are widest in
        the stretched metric) while the cells hold more than 1.5 times this
        many training points on average.
    overlap : float
        Half-width of the blend around each interior edge, as a fraction of the
        narrower neighbouring cell; in [0, 0.5).
    margin : float
        Each cell's interpolant also learns the points within ``margin`` times the
        cell's width outside it; >= ``overlap`` (a cell's weight then vanishes
        outside the points it learned).
    min_points : int
        A cell whose grown box holds fewer training points is refused (and at
        least twice the polynomial's terms are always needed).
    cells : tuple of int
        Cells per parameter (every metric group); empty: chosen from ``points_per_cell``.
    separate_scalars : bool
        Two metric groups: the scalars (M_max and the others per EOS) get their own
        stretch (a GP on the scalars) and their own cells, the curves theirs (a GP
        on the curves); False (default): one group, the curves' stretch.  Measured
        (held-out p95): sound-speed box, 8,025 points, M_max 1.2e-2 / 1.2e-2 Msun,
        R 30.3 / 24.8 m, Lambda 4.7 / 2.3 % with two groups / one (M_max p50 3.3e-4
        / 2.0e-3); demo box, 4,093 points, M_max 1.2e-3 / 1.1e-3, R 19.6 / 19.4 m,
        Lambda 1.07 / 0.61 %.  R(M) and Lambda(M) go through M_max (u = sqrt(1 -
        M / M_max)); with one operator for M_max and the nodes their errors stay
        consistent, a separately interpolated M_max breaks that.  (The research's
        gain from two groups on the sound-speed box came with learned log warps,
        research/surrogates/LOG.md.)
    stretch_on : str
        One group: the outputs whose GP sets the stretch, ``"curves"`` (R, ln Lambda,
        ln I at the u nodes), ``"mass_max"`` or ``"auto"`` (default): both are fitted and
        the one with the lower leave-one-out score is kept
        (:func:`~tovforge.surrogate._errors.loo_score`: the p95 of the closed-form
        leave-one-out residuals of M_max, R and ln Lambda in units of the limits every
        model must reach, the largest of the three; the choice and both scores are recorded in
        the model, :attr:`LocalFit.stretch_on`).  Training costs about twice one fit.
        Measured (held-out p95, M_max / R / Lambda): sound-speed box (ln cs2 inputs),
        8,025 points: curves 1.35e-2 Msun / 12.7 m / 1.12 %, M_max 7.6e-3 / 7.7 m /
        0.78 % (chosen); demo box, 4,093 points: curves 1.1e-3 / 19.4 m / 0.61 %
        (chosen), M_max 8.7e-4 / 75 m / 1.24 %.  Two groups ignore it (each group's
        stretch comes from its own outputs).
    """

    warp_inputs: bool = True
    anisotropic: bool = True
    n_subset: int = 256
    degree: int = 2
    points_per_cell: int = 256
    overlap: float = 0.15
    margin: float = 0.25
    min_points: int = 50
    cells: tuple = ()
    separate_scalars: bool = False
    stretch_on: str = "auto"
    seed: int = 0


@dataclass(frozen=True)
class LocalFit(Record):
    """What a local fit found (recorded in the model); per metric group where a tuple of tuples.

    Attributes
    ----------
    kernel : str
    input_warp : dict
        ``{name: "ln(name - offset)"}`` of the warped parameters.
    groups : tuple of (int, int)
        The output columns of each metric group.
    input_scale : tuple of tuple of float
        Each group's stretch of the parameters' unit intervals.
    length_scales : tuple of tuple of float
        The GP length scales each stretch came from (empty: isotropic).
    cells : tuple of tuple of int
        Each group's cells per parameter.
    patch_points : tuple of int
        Training points per cell's interpolant (all groups): min, median, max.
    stored_rows : int
        Rows of ``alpha`` (training points counted once per cell that learns them).
    loo_rms : float
        Root mean square of the standardised leave-one-out residuals (all outputs).
    seconds_solve : float
        Time of the cells' solves (of the kept stretch).
    stretch_on : str
        The outputs whose GP set the stretch: ``"curves"``, ``"mass_max"``, or ``"own"``
        (two groups, or no stretch).
    stretch_scores : dict
        The leave-one-out score of each candidate of ``stretch_on="auto"`` (lower is
        better; empty when there was one candidate).
    error_model : dict
        The error model's calibration
        (:func:`tovforge.surrogate._errors.calibrate_error_model`).
    """

    kernel: str = "r^5, partition of unity"
    input_warp: dict = field(default_factory=dict)
    groups: tuple = ()
    input_scale: tuple = ()
    length_scales: tuple = ()
    cells: tuple = ()
    patch_points: tuple = ()
    stored_rows: int = 0
    loo_rms: float = 0.0
    seconds_solve: float = 0.0
    stretch_on: str = "curves"
    stretch_scores: dict = field(default_factory=dict)
    error_model: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Partition:
    """The cells of a fit: ``counts`` (d,), ``edges`` (d, K + 1) padded, ``half`` (d, K + 1) (see the module doc)."""

    counts: np.ndarray
    edges: np.ndarray
    half: np.ndarray


def auto_cells(n: int, stretch: np.ndarray, points_per_cell: int) -> tuple:
    """Cells per parameter: split the parameter of widest stretched cells until cells hold <= 1.5 x the target."""
    cells = np.ones(len(stretch), dtype=int)
    while n / np.prod(cells) > 1.5 * points_per_cell:
        cells[int(np.argmax(np.asarray(stretch, float) / cells))] += 1
    return tuple(int(c) for c in cells)


def partition(x: np.ndarray, top: np.ndarray, cells, overlap: float) -> Partition:
    """Cells with interior edges at the quantiles of ``x`` (n, d) along each parameter of the box [0, top]."""
    d = x.shape[1]
    K = max(cells)
    edges = np.zeros((d, K + 1))
    half = np.zeros((d, K + 1))
    for i, k in enumerate(cells):
        e = np.quantile(x[:, i], np.linspace(0.0, 1.0, k + 1))
        e[0], e[-1] = 0.0, float(top[i])
        edges[i, : k + 1] = e
        edges[i, k + 1 :] = e[-1]
        w = np.diff(e)
        if k > 1:
            half[i, 1:k] = overlap * np.minimum(w[:-1], w[1:])
    return Partition(np.asarray(cells, dtype=np.int64), edges, half)


def fit_patches(x: np.ndarray, Z: np.ndarray, part: Partition, margin: float, degree: int, min_points: int) -> dict:
    """Each cell's interpolant of Z (n, n_out) at x (n, d): the method's arrays and ``loo`` (n, n_out), standardised.

    The cells' solves are the runtime's (:func:`~tovforge.surrogate._runtime.local_solve_group`), which
    exported files run again at import from the training outputs.

    Raises
    ------
    InputError
        If a cell's grown box holds fewer than ``max(min_points, 2 n_terms)`` training points.
    """
    n, d = x.shape
    powers = trend_powers(d, degree)
    need = max(int(min_points), 2 * len(powers))
    counts = [int(c) for c in part.counts]
    index, rows = [], [0]
    for J in itertools.product(*[range(c) for c in counts]):
        lo = np.array([part.edges[i, J[i]] for i in range(d)])
        hi = np.array([part.edges[i, J[i] + 1] for i in range(d)])
        grow = margin * (hi - lo)
        idx = np.flatnonzero(np.all((x >= lo - grow) & (x <= hi + grow), axis=1))
        if len(idx) < need:
            raise InputError(f"cell {J} of {tuple(counts)} holds {len(idx)} training points with its margin; the local "
                             f"spline needs >= {need} (min_points {min_points}, or 2 x {len(powers)} polynomial "
                             "terms): use fewer cells (larger points_per_cell) or more training points.")
        index.append(idx)
        rows.append(rows[-1] + len(idx))
    index = np.concatenate(index).astype(np.int64)
    fitted = rt.local_solve_group(np, x, Z, index, rows, part.counts, part.edges, part.half, powers)
    return {**fitted, "patch_index": index, "patch_rows": np.asarray(rows, dtype=np.int64), "local_powers": powers}


def fit_local(data: TrainingData, settings: LocalSettings | None = None) -> FitResult:
    """Fit the local polyharmonic spline (see the module docstring).

    Returns
    -------
    FitResult
        The arrays (with ``loo_residual``), the settings, and a :class:`LocalFit`.
    """
    s = settings or LocalSettings()
    if s.degree < 2:
        raise InputError(f"the r^5 kernel needs a polynomial of degree >= 2; got degree {s.degree}.")
    if not 0.0 <= s.overlap < 0.5:
        raise InputError(f"overlap must be in [0, 0.5); got {s.overlap}.")
    if not s.margin >= s.overlap:
        raise InputError(f"margin must be >= overlap ({s.overlap}); got {s.margin}.")
    if s.points_per_cell < 1:
        raise InputError(f"points_per_cell must be >= 1; got {s.points_per_cell}.")
    p = prepare(data, s.warp_inputs)
    arrays, x, Z = dict(p.arrays), p.x, p.Z
    n, d = x.shape
    if s.cells and (len(s.cells) != d or min(s.cells) < 1):
        raise InputError(f"cells must give d = {d} counts >= 1; got {tuple(s.cells)}.")
    first_curve, n_out = int(p.slices[0][0]), Z.shape[1]
    groups = [(0, first_curve), (first_curve, n_out)] if s.separate_scalars and first_curve > 0 else [(0, n_out)]
    scored, stretch_cols, options = stretch_candidates(s, p.slices)
    options = options or ["own"]  # no stretch (two groups: each group's stretch from its own outputs)
    t_solve = 0.0
    parts, fits, scales, lengths = [], [], [], []
    loo = np.zeros(Z.shape)
    scores = {}
    for a, b in groups:
        option, (fitted, part, scale, length, seconds), found = choose_by_loo(
            ["own"] if len(groups) > 1 else options,
            lambda o: _fit_group(x, Z[:, a:b], (a, b) if o == "own" else stretch_cols[o], Z, s),
            lambda r: r[0]["loo"] * arrays["out_scale"],  # one group: its columns are all outputs
            scored, lambda line: logger.info(f"  local r^5, stretch on the {line.strip()}"))
        scores.update(found)
        t_solve += seconds
        loo[:, a:b] = fitted.pop("loo")
        sizes = np.diff(fitted["patch_rows"])
        logger.info(f"  local r^5, outputs {a}:{b}: stretch {np.array2string(scale, precision=3)}, cells "
                    f"{tuple(int(c) for c in part.counts)}, points per cell {sizes.min()}/{int(np.median(sizes))}/"
                    f"{sizes.max()}")
        parts.append(part)
        fits.append(_widen(fitted, a, b, n_out))
        scales.append(scale)
        lengths.append(length)
    arrays.update(join_groups(parts, fits), X=x, local_targets=Z, group_scale=np.stack(scales),
                  group_columns=np.array([g[0] for g in groups] + [n_out], dtype=np.int64),
                  trend_powers=np.zeros((1, d), dtype=np.int64), trend_coef=np.zeros((1, n_out)))
    t0 = time.perf_counter()
    em_arrays, em_summary = calibrate_error_model(arrays, loo * arrays["out_scale"])  # its sigma, as the RBF's
    arrays.update(em_arrays)
    logger.info(f"  error model from the leave-one-out residuals: {time.perf_counter() - t0:.1f} s")
    sizes = np.diff(arrays["patch_rows"])
    logger.info(f"  local r^5 on {n} points: {len(sizes)} cells, {t_solve:.1f} s of solves")
    details = LocalFit(input_warp=p.input_warp, groups=tuple(groups),
                       input_scale=tuple(tuple(v.tolist()) for v in scales),
                       length_scales=tuple(tuple(v.tolist()) for v in lengths),
                       cells=tuple(tuple(int(c) for c in q.counts) for q in parts),
                       patch_points=(int(sizes.min()), int(np.median(sizes)), int(sizes.max())),
                       stored_rows=int(sizes.sum()), loo_rms=float(np.sqrt(np.mean(loo**2))), seconds_solve=t_solve,
                       stretch_on=option, stretch_scores=scores, error_model=em_summary)
    return FitResult(arrays=arrays, settings=s, details=details)


def _fit_group(x, Zg, stretch_cols, Z, s: LocalSettings):
    """One metric group: its stretch (a GP on the columns ``stretch_cols`` of ``Z``), cells and interpolants of ``Zg``.

    Returns the fitted arrays (with ``loo``, standardised), the partition, the stretch, the GP length
    scales and the seconds of the solves.
    """
    n, d = x.shape
    scale, length = np.ones(d), np.zeros(0)
    if s.anisotropic:
        scale, length = _anisotropy(x, Z, stretch_cols, SplineSettings(n_subset=s.n_subset, seed=s.seed))
    xg = x * scale
    cells = tuple(int(c) for c in s.cells) or auto_cells(n, scale, s.points_per_cell)
    part = partition(xg, scale, cells, s.overlap)
    t0 = time.perf_counter()
    fitted = fit_patches(xg, Zg, part, s.margin, s.degree, s.min_points)
    return fitted, part, scale, length, time.perf_counter() - t0


def _widen(fitted: dict, a: int, b: int, n_out: int) -> dict:
    """A group's weights and coefficients (outputs a:b) as columns a:b of n_out-wide arrays (zeros elsewhere)."""
    alpha = np.zeros((fitted["alpha"].shape[0], n_out))
    alpha[:, a:b] = fitted["alpha"]
    coef = np.zeros(fitted["patch_coef"].shape[:2] + (n_out,))
    coef[:, :, a:b] = fitted["patch_coef"]
    return {**fitted, "alpha": alpha, "patch_coef": coef}


def join_groups(parts: list, fits: list) -> dict:
    """The groups' cells and interpolants as one set of arrays (cells numbered group after group)."""
    d = parts[0].counts.shape[0]
    K = max(int(q.counts.max()) for q in parts)
    edges = np.zeros((len(parts), d, K + 1))
    half = np.zeros((len(parts), d, K + 1))
    for g, q in enumerate(parts):
        k = q.edges.shape[1]
        edges[g, :, :k], half[g, :, :k] = q.edges, q.half
        edges[g, :, k:] = q.edges[:, -1:]
    offsets = np.cumsum([0] + [f["alpha"].shape[0] for f in fits[:-1]])
    return {"patch_index": np.concatenate([f["patch_index"] for f in fits]),
            "patch_rows": np.concatenate([[0]] + [f["patch_rows"][1:] + o for f, o in zip(fits, offsets)]),
            "group_patches": np.cumsum([0] + [len(f["patch_scale"]) for f in fits]).astype(np.int64),
            "alpha": np.concatenate([f["alpha"] for f in fits]),
            "patch_coef": np.concatenate([f["patch_coef"] for f in fits]),
            "patch_centre": np.concatenate([f["patch_centre"] for f in fits]),
            "patch_scale": np.concatenate([f["patch_scale"] for f in fits]), "local_powers": fits[0]["local_powers"],
            "cell_counts": np.stack([q.counts for q in parts]), "cell_edges": edges, "cell_half": half}


def reverse_patches(arrays: dict) -> dict:
    """``patch_index`` and ``alpha`` with each cell's rows in reverse order (sums in another order: rounding noise)."""
    rows = arrays["patch_rows"]
    order = np.concatenate([np.arange(b - 1, a - 1, -1) for a, b in zip(rows[:-1], rows[1:])])
    return {"patch_index": np.array(arrays["patch_index"][order]), "alpha": np.array(arrays["alpha"][order])}


def describe_local(arrays: dict) -> str:
    """A few words on a fitted local model: its cells and points per cell."""
    sizes = np.diff(arrays["patch_rows"])
    cells = " + ".join("x".join(str(int(c)) for c in g) for g in arrays["cell_counts"])
    return f"{cells} cells of {int(sizes.min())}-{int(sizes.max())} points"
