"""Star sequences: the stable branch, the maximum mass, twin branches and exact mass queries.

:func:`solve_sequences` runs the phases of a sequence solve, each vectorised
over all stars of all EOS and each in its own module:

1. *Scan* (:mod:`._scan`): a coarse sequence, log-spaced in the central
   pseudo-enthalpy; the first maximum of ``M(h_c)`` after the last minimum
   is the end of the stable branch (turning-point criterion, or a cusp at a
   first-order transition above Seidov's limit); a later rise after a
   minimum where stability is regained is a twin branch.
2. *Extrema* (:mod:`._maximum`) and *branches* (:mod:`._branch`):
   ``n_stars`` stars spread uniformly in ``u = sqrt(1 - M / M_max)`` (a
   coordinate in which the sequence is smooth through the maximum) from
   below 0.5 Msun to just under the maximum, solved together with a cluster
   of Chebyshev-Lobatto points around it.  The interpolating polynomial
   through the cluster gives ``M_max`` and ``h_c`` at the maximum (a cusp is
   the cluster's last node); the cluster is narrowed or shifted and solved
   again where an EOS kink lies inside it or the maximum is near its edge.
   The maximum and minimum of a twin branch, and its stars, are further
   lanes of the same passes.  Then the extremal stars (exact, or
   interpolated through the clusters).
3. *Queries* (:mod:`._queries`): exact stars at requested masses by a
   bracketed secant search in ``u``, on the stable branch and on the twin
   branch at once.

This module assembles the phases' results into a :class:`SequenceBatch` and
holds the public wrappers for one EOS.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np

from .. import quantities
from ..status import Status
from ._branch import assemble_branch, place_branch, place_twin_branch, stars_below_maximum, stars_between
from ._maximum import ExtremumGuess, guess_maximum, guess_twin, max_sound_speed_sq, maximum_star, refine_extrema
from ._queries import stars_at_masses
from ._result import MaximumMass, Stars, StarSequence, TwinBranch
from ._scan import scan
from ._settings import SequenceSettings
from ._structure import StepSettings
from ._surface import GEOMETRISED, integrate, mask_stars, row, surface_fields, to_stars

__all__ = [
    "SequenceBatch",
    "TwinBatch",
    "solve_sequences",
    "solve_sequence",
    "solve_at_masses",
    "solve_stars",
]

#: Branch stars solved at least, when masses are requested (they bracket the searches).
_MIN_BRANCH_FOR_QUERIES = 16


@dataclass(frozen=True)
class TwinBatch:
    """Twin branches of many EOS (one row per EOS, NaN rows where an EOS has none).

    Attributes
    ----------
    status : ndarray of int, shape (n_eos,)
        ``Status.OK`` where the EOS has a twin branch, ``NO_MAXIMUM``
        elsewhere (so that :func:`~tovforge.solve.stars_at_masses` searches
        it like a stable branch).
    branch : Stars
        Fields of shape (n_eos, width): from the minimum to the maximum.
    mass_max, mass_min : Stars
        Fields of shape (n_eos,): the heaviest and the lightest star.
    max_sound_speed_sq : ndarray, shape (n_eos,)
        Largest ``c_s^2`` below the centre of the heaviest star.
    at_mass : Stars or None
        Fields of shape (n_eos, n_masses): stars of this branch at the
        requested masses (NaN outside it).
    """

    status: np.ndarray
    branch: Stars
    mass_max: Stars
    mass_min: Stars
    max_sound_speed_sq: np.ndarray
    at_mass: Stars | None = None

    @property
    def present(self) -> np.ndarray:
        """Mask of the EOS with a twin branch."""
        return self.status == Status.OK


@dataclass(frozen=True)
class SequenceBatch:
    """Sequences of many EOS (arrays with one row per EOS).

    Attributes
    ----------
    status : ndarray of int, shape (n_eos,)
        :class:`~tovforge.status.Status` codes (0 on success).
    branch : Stars
        Fields of shape (n_eos, n_stars), NaN where a row has fewer stars.
    mass_max : Stars
        Fields of shape (n_eos,): the maximum-mass star (first maximum).
    max_sound_speed_sq : ndarray, shape (n_eos,)
    twin : TwinBatch
        Second stable branches (NaN rows where an EOS has none).
    at_mass : Stars or None
        Fields of shape (n_eos, n_masses), NaN above M_max.
    nfev : int
    at_u : Stars or None
        Fields of shape (n_eos, n_u): exact stars at the ``u_nodes``.
    """

    status: np.ndarray
    branch: Stars
    mass_max: Stars
    max_sound_speed_sq: np.ndarray
    twin: TwinBatch
    at_mass: Stars | None
    nfev: int
    at_u: Stars | None = None

    @property
    def twin_mass_max_msun(self) -> np.ndarray:
        """Maximum of the twin branch of each EOS in Msun (NaN where none)."""
        return self.value("twin_mass_max_msun")

    def value(self, name: str) -> np.ndarray:
        """A quantity of the whole sequence by name (see :mod:`tovforge.quantities`), shape (n_eos,).

        Raises
        ------
        KeyError
            For star quantities (ask ``mass_max``, ``branch`` or ``at_mass``)
            and for sequence quantities the solver does not know (e.g. the
            margin to a grid's floor mass).
        """
        q = quantities.get(name)
        if q.level != "sequence":
            raise KeyError(f"{name!r} is a quantity of each star; ask mass_max, branch, at_mass or at_u for it")
        if q.of_maximum is not None:
            return self.mass_max.value(q.of_maximum)
        if q.of_twin is not None:
            which, star_name = q.of_twin
            return getattr(self.twin, f"mass_{which}").value(star_name)
        if q.derive is not None:
            return q.derive({k: self.value(k) for k in q.needs})
        if q.name in self.__dataclass_fields__:  # max_sound_speed_sq
            return getattr(self, q.name)
        raise KeyError(f"{name!r} is not computed by the solver")


def _no_twins(batch, n_eos: int, h_fill: float) -> TwinBatch:
    """A :class:`TwinBatch` without any twin branch."""
    nan = {k: np.full(n_eos, np.nan) for k in GEOMETRISED}
    empty = mask_stars(to_stars(batch, np.arange(n_eos), np.full(n_eos, h_fill), surface_fields(nan)), False)
    branch = Stars(**{k: v[:, None] for k, v in empty.as_dict().items()})
    return TwinBatch(np.full(n_eos, int(Status.NO_MAXIMUM)), branch, empty, empty, np.full(n_eos, np.nan))


def _twin_batch(batch, sc, cluster, ends, ln_twin, first_ok, settings) -> TwinBatch:
    """Assemble the twin branches from the lanes of the extremum refinement.

    ``cluster`` and ``ends`` (the extremal stars) hold the lanes: one per
    EOS for the first maximum, then the twin maxima, then the twin minima of
    the EOS with a twin (``sc.twin``), in increasing EOS order.
    """
    n_eos = sc.ln_h.shape[0]
    rows = np.flatnonzero(sc.twin)
    n_t = rows.size
    lane_max = np.full(n_eos, -1, dtype=np.intp)
    lane_min = np.full(n_eos, -1, dtype=np.intp)
    lane_max[rows] = n_eos + np.arange(n_t)
    lane_min[rows] = n_eos + n_t + np.arange(n_t)
    top, low = cluster.rows(lane_max), cluster.rows(lane_min)

    def values(lane_of_row):
        k = np.where(lane_of_row >= 0, lane_of_row, 0)
        return {key: np.where(lane_of_row >= 0, v[k], np.nan) for key, v in ends.values.items()}

    top_v, low_v = values(lane_max), values(lane_min)
    present = first_ok & top.ok & low.ok & (low.ln_h_max < top.ln_h_max) & (low_v["mass"] < top_v["mass"])
    parts = [(low.ln_h, low.values), (top.ln_h, top.values)]
    if top.co_solved is not None:
        ln_rows = np.full((n_eos, ln_twin.shape[1]), np.nan)
        ln_rows[rows] = ln_twin
        parts.append((ln_rows, top.co_solved))
    between = stars_between(parts, low.ln_h_max + 1e-6, top.ln_h_max - 1e-6)
    branch = assemble_branch(batch, between, present, top.ln_h_max, top_v, settings.h_low,
                             bottom=(np.where(present, low.ln_h_max, np.nan), low_v))

    def star(ln_h, vals):
        h = np.where(present, np.exp(ln_h), settings.h_low)
        return mask_stars(to_stars(batch, np.arange(n_eos), h, surface_fields(vals)), present)

    cs2 = np.full(n_eos, np.nan)
    if present.any():
        p_rows = np.flatnonzero(present)
        cs2[p_rows] = max_sound_speed_sq(batch, p_rows, np.exp(top.ln_h_max)[p_rows])
    status = np.where(present, int(Status.OK), int(Status.NO_MAXIMUM))
    return TwinBatch(status, branch, star(top.ln_h_max, top_v), star(low.ln_h_max, low_v), cs2)


@dataclass(frozen=True)
class _Branches:
    """Branches to search for stars of given masses (the layout :func:`stars_at_masses` reads)."""

    status: np.ndarray
    branch: Stars
    mass_max: Stars


def _stacked(first: SequenceBatch, twin: TwinBatch) -> _Branches:
    """The stable and the twin branches as one set of rows (first the stable ones), for one search."""
    w = max(first.branch.mass_msun.shape[1], twin.branch.mass_msun.shape[1])

    def pad(stars):
        return {k: np.pad(v, ((0, 0), (0, w - v.shape[1])), constant_values=np.nan)
                for k, v in stars.as_dict().items()}

    a, b = pad(first.branch), pad(twin.branch)
    branch = Stars(**{k: np.concatenate([a[k], b[k]]) for k in a})
    mass_max = Stars(**{k: np.concatenate([getattr(first.mass_max, k), getattr(twin.mass_max, k)])
                        for k in Stars.__dataclass_fields__})
    return _Branches(np.concatenate([first.status, twin.status]), branch, mass_max)


def solve_sequences(batch, n_stars: int = 100, masses=None, settings: SequenceSettings | None = None,
                    exact_maximum: bool | None = None, u_nodes=None) -> SequenceBatch:
    """Stable branches, maximum masses, twin branches and mass queries of many EOS at once.

    Parameters
    ----------
    batch : EOSBatch
        The EOS (see :meth:`tovforge.eos.EOSFamily.build`).
    n_stars : int
        Stars on each stable branch and on each twin branch (0 for none;
        with ``masses`` or ``u_nodes`` at least 16 are solved, because they
        bracket the search for each requested star).
    masses : array_like, shape (n_masses,) or (n_eos, n_masses), optional
        Gravitational masses in Msun at which to solve exactly, on the stable
        branch (``at_mass``) and on the twin branch (``twin.at_mass``).
    settings : SequenceSettings, optional
    u_nodes : array_like, shape (n_u,), optional
        Values of the sequence coordinate ``u = sqrt(1 - M / M_max)`` in
        [0, 1) at which to solve exactly (masses ``M_max (1 - u^2)``); the
        results are in ``SequenceBatch.at_u``.
    exact_maximum : bool, optional
        Solve the maximum-mass star exactly (otherwise its radius, Love number
        and moment of inertia are interpolated through the cluster around the
        maximum, which agrees to about 1e-9).  Default: only when ``masses``
        are requested (they share that pass).

    Returns
    -------
    SequenceBatch
    """
    settings = settings or SequenceSettings()
    n_eos = batch.n_eos
    want_queries = masses is not None or u_nodes is not None
    if want_queries:
        # the exact search for a star of given mass starts from a bracket of branch stars
        n_stars = max(n_stars, _MIN_BRANCH_FOR_QUERIES)
    if exact_maximum is None:
        exact_maximum = want_queries

    # 1. scan
    sc = scan(batch, settings)
    # 2. extrema (the branch stars are solved in the clusters' first pass), twin lanes after the first maxima
    guess = guess_maximum(sc, settings)
    ln_branch = place_branch(sc, guess, settings, n_stars)
    lanes, lane_ok, co_solve, ln_twin = guess, sc.ok, ln_branch, None
    if sc.twin.any():
        twin_top, twin_low = guess_twin(sc, settings)
        ln_twin = place_twin_branch(sc, twin_top, settings, n_stars)
        lanes = ExtremumGuess.concat(guess, twin_top, twin_low)
        lane_ok = np.concatenate([sc.ok, np.ones(2 * twin_top.eos_index.size, dtype=bool)])
        co_solve = np.concatenate([ln_branch, ln_twin, np.full(ln_twin.shape, np.nan)])
    all_lanes = refine_extrema(batch, lanes, lane_ok, settings, co_solve=co_solve if n_stars > 0 else None)
    ends = maximum_star(batch, all_lanes, settings, exact=exact_maximum or want_queries)
    if ln_twin is None:
        cluster, top = all_lanes, ends.values
    else:
        cluster = all_lanes.rows(np.arange(n_eos))
        top = {k: v[:n_eos] for k, v in ends.values.items()}
    below = stars_below_maximum(cluster, ln_branch)
    # assemble
    ok = cluster.ok
    status = np.where(cluster.failed, int(Status.SOLVER_FAILURE), sc.status)
    rows_ok = np.flatnonzero(ok)
    safe_h = np.where(ok, np.exp(cluster.ln_h_max), settings.h_low)
    mass_max = mask_stars(to_stars(batch, np.arange(n_eos), safe_h, surface_fields(top)), ok)
    cs2max = np.full(n_eos, np.nan)
    if rows_ok.size:
        cs2max[rows_ok] = max_sound_speed_sq(batch, rows_ok, np.exp(cluster.ln_h_max)[rows_ok])
    branch = assemble_branch(batch, below, ok, cluster.ln_h_max, top, settings.h_low)
    if ln_twin is None:
        twin = _no_twins(batch, n_eos, settings.h_low)
    else:
        twin = _twin_batch(batch, sc, all_lanes, ends, ln_twin, ok, settings)
    nfev = sc.nfev + all_lanes.nfev + ends.nfev
    seq = SequenceBatch(status, branch, mass_max, cs2max, twin, None, nfev)
    if not want_queries:
        return seq
    # 3. queries: the stable branches, and the twin branches (as more rows of one search) at the fixed masses
    parts = []
    n_fixed = 0
    if masses is not None:
        qm = np.asarray(masses, float)
        qm = np.broadcast_to(qm if qm.ndim == 2 else qm.reshape(1, -1), (n_eos, qm.shape[-1] if qm.ndim else 1))
        parts.append(qm)
        n_fixed = qm.shape[1]
    if u_nodes is not None:
        u_arr = np.asarray(u_nodes, float).ravel()
        parts.append(mass_max.mass_msun[:, None] * (1.0 - u_arr[None, :] ** 2))
    targets = np.concatenate(parts, axis=1)
    twin_at = None
    if n_fixed and twin.present.any():
        t_targets = np.full(targets.shape, np.nan)
        t_targets[:, :n_fixed] = np.where(twin.present[:, None], qm, np.nan)
        query = stars_at_masses(batch, _stacked(seq, twin), np.concatenate([targets, t_targets]), settings.steps,
                                settings.mass_rtol, eos_index=np.tile(np.arange(n_eos), 2))
        twin_at = query.stars.select((slice(n_eos, None), slice(0, n_fixed)))
        stars = query.stars.select(slice(0, n_eos))
    else:
        query = stars_at_masses(batch, seq, targets, settings.steps, settings.mass_rtol)
        stars = query.stars
    at_mass = stars.select((slice(None), slice(0, n_fixed))) if n_fixed else None
    at_u = stars.select((slice(None), slice(n_fixed, None))) if u_nodes is not None else None
    if n_fixed:
        nan_at = Stars(**{k: np.full((n_eos, n_fixed), np.nan) for k in Stars.__dataclass_fields__})
        twin = replace(twin, at_mass=twin_at if twin_at is not None else nan_at)
    return SequenceBatch(status, branch, mass_max, cs2max, twin, at_mass, nfev + query.nfev, at_u)


def solve_sequence(eos, n_stars: int = 100, masses=None, settings: SequenceSettings | None = None,
                   error_estimate: bool | None = None) -> StarSequence:
    """Solve the stable branch of one EOS.

    Parameters
    ----------
    eos : tovforge.eos.EOS
        The equation of state.
    n_stars : int
        Stars along the stable branch, spread uniformly in
        ``u = sqrt(1 - M / M_max)`` from below 0.5 Msun to the maximum (the
        branch returned also holds the few cluster stars below the maximum and
        the maximum-mass star itself).
    masses : array_like, optional
        Gravitational masses (Msun) at which to solve exactly, on the stable
        branch (``at_mass``) and on a twin branch (``twin.at_mass``).  The
        branch starts below the lightest of them (if the EOS has such
        stars).  Masses without a star on the stable branch give NaN, a
        warning, and their reason in :meth:`StarSequence.at_mass_reasons`.
    settings : SequenceSettings, optional
    error_estimate : bool, optional
        Estimate the integration error of every branch star by step doubling
        (``StarSequence.error_estimate``; a warning when it exceeds the stated
        tolerance).  Default: for tabulated EOS only.

    Returns
    -------
    StarSequence

    Examples
    --------
    >>> from tovforge import eos, solve
    >>> sly = eos.make("piecewise-polytrope", log_p1=34.384, gamma1=3.005, gamma2=2.988, gamma3=2.851)
    >>> seq = solve.solve_sequence(sly, masses=[1.4])
    >>> round(seq.mass_max.mass_msun, 2)
    2.05
    """
    from ._accuracy import checked_sequence

    settings = settings or SequenceSettings()
    if masses is not None:
        lightest = float(np.min(np.asarray(masses, float), initial=np.inf))
        if 0.0 < 0.9 * lightest < settings.low_mass_msun:  # start the branch below the lightest request
            settings = replace(settings, low_mass_msun=0.9 * lightest)
    res = solve_sequences(eos.batch, n_stars=n_stars, masses=masses, settings=settings)
    return checked_sequence(_sequence_from_batch(eos, res, 0, masses), settings.steps, error_estimate)


def _sequence_from_batch(eos, res: SequenceBatch, r: int, masses) -> StarSequence:
    status = Status(int(res.status[r]))
    mm = None
    if status == Status.OK:
        mm = MaximumMass(row(res.mass_max, r, keep_nan=True), float(res.max_sound_speed_sq[r]))
    twin = None
    if status == Status.OK and res.twin.present[r]:
        twin = TwinBranch(
            branch=row(res.twin.branch, r),
            mass_max=MaximumMass(row(res.twin.mass_max, r, keep_nan=True), float(res.twin.max_sound_speed_sq[r])),
            mass_min=row(res.twin.mass_min, r, keep_nan=True),
            at_mass=None if res.twin.at_mass is None else row(res.twin.at_mass, r, keep_nan=True),
        )
    at = None
    requested = None
    if res.at_mass is not None:
        at = row(res.at_mass, r, keep_nan=True)
        requested = np.asarray(masses, float).ravel()
    seq = StarSequence(
        family=eos.family.name,
        parameters=dict(eos.parameters),
        status=status,
        branch=row(res.branch, r),
        mass_max=mm,
        twin=twin,
        at_mass=at,
        requested_mass_msun=requested,
        nfev=res.nfev,
        eos=eos,
    )
    if requested is not None and status == Status.OK:
        missing = [f"{m:g} Msun ({why})" for m, why in zip(requested, seq.at_mass_reasons()) if why]
        if missing:
            warnings.warn(f"no star on the stable branch at {'; '.join(missing)}: their values are NaN.",
                          stacklevel=3)
    return seq


def solve_stars(eos, central_pseudo_enthalpy, steps: StepSettings | None = None) -> Stars:
    """Stars of one EOS at given central pseudo-enthalpies (any order, one call).

    Parameters
    ----------
    eos : tovforge.eos.EOS
    central_pseudo_enthalpy : array_like, shape (n,)
        ``h_c`` of each star, in (0, h_max of the EOS].
    steps : StepSettings, optional

    Returns
    -------
    Stars
        NaN rows where the integration failed.
    """
    h_c = np.atleast_1d(np.asarray(central_pseudo_enthalpy, float))
    if np.any(~np.isfinite(h_c)) or np.any(h_c <= 0) or np.any(h_c > eos.h_max):
        from ..errors import InputError

        raise InputError(f"central_pseudo_enthalpy must be in (0, {eos.h_max:g}] for this EOS.")
    idx = np.zeros(h_c.size, dtype=np.intp)
    sv, _ = integrate(eos.batch, idx, h_c, steps or StepSettings())
    return to_stars(eos.batch, idx, h_c, surface_fields(sv))


def solve_at_masses(sequence: StarSequence, masses, settings: SequenceSettings | None = None) -> Stars:
    """Exact stars of the EOS of ``sequence`` at the given masses.

    Parameters
    ----------
    sequence : StarSequence
        From :func:`solve_sequence` (it carries its EOS).
    masses : array_like, shape (n,)
        Gravitational masses in Msun.
    settings : SequenceSettings, optional

    Returns
    -------
    Stars
        Fields of shape (n,); NaN above M_max.
    """
    res = solve_sequences(sequence.eos.batch, n_stars=max(len(sequence.branch) - 1, 24), masses=masses,
                          settings=settings)
    return row(res.at_mass, 0, keep_nan=True)
