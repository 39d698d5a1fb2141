"""Star sequences: the stable branch, the maximum mass and exact mass queries.

:func:`solve_sequences` runs the phases of a sequence solve, each vectorised
over all stars of all EOS and each in its own module:

1. *Scan* (:mod:`._scan`): a coarse sequence, log-spaced in the central
   pseudo-enthalpy; the first maximum of ``M(h_c)`` after the last minimum
   is the end of the stable branch (turning-point criterion); a later,
   higher maximum is recorded as a twin branch.
2. *Maximum* (:mod:`._maximum`) and *branch* (:mod:`._branch`): ``n_stars``
   stars spread uniformly in ``u = sqrt(1 - M / M_max)`` (a coordinate in
   which the sequence is smooth through the maximum) from below 0.5 Msun to
   just under the maximum, solved together with a cluster of
   Chebyshev-Lobatto points in ``ln h_c`` around it.  The interpolating
   polynomial through the cluster gives ``M_max`` and ``h_c`` at the
   maximum; the cluster is narrowed or shifted and solved again where an
   EOS kink lies inside it or the maximum is near its edge.  Then the
   maximum-mass star (exact, or interpolated through the cluster).
3. *Queries* (:mod:`._queries`): exact stars at requested masses by a
   bracketed secant search in ``u``.

This module assembles the phases' results into a :class:`SequenceBatch` and
holds the public wrappers for one EOS.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from .. import quantities
from ..status import Status
from ._branch import assemble_branch, place_branch, stars_below_maximum
from ._maximum import guess_maximum, max_sound_speed_sq, maximum_star, refine_maximum
from ._queries import stars_at_masses
from ._result import MaximumMass, Stars, StarSequence
from ._scan import scan
from ._settings import SequenceSettings
from ._structure import StepSettings
from ._surface import integrate, mask_stars, row, surface_fields, to_stars

__all__ = [
    "SequenceBatch",
    "solve_sequences",
    "solve_sequence",
    "solve_at_masses",
    "solve_stars",
]

#: Branch stars solved at least, when masses are requested (they bracket the searches).
_MIN_BRANCH_FOR_QUERIES = 16


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
        Fields of shape (n_eos,): the maximum-mass star.
    max_sound_speed_sq : ndarray, shape (n_eos,)
    twin_mass_max_msun : ndarray, shape (n_eos,)
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
    twin_mass_max_msun: np.ndarray
    at_mass: Stars | None
    nfev: int
    at_u: Stars | None = None

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
        if q.derive is not None:
            return q.derive({k: self.value(k) for k in q.needs})
        if q.name in self.__dataclass_fields__:  # max_sound_speed_sq, twin_mass_max_msun
            return getattr(self, q.name)
        raise KeyError(f"{name!r} is not computed by the solver")


def solve_sequences(batch, n_stars: int = 100, masses=None, settings: SequenceSettings | None = None,
                    exact_maximum: bool | None = None, u_nodes=None) -> SequenceBatch:
    """Stable branches, maximum masses and mass queries of many EOS at once.

    Parameters
    ----------
    batch : EOSBatch
        The EOS (see :meth:`tovforge.eos.EOSFamily.build`).
    n_stars : int
        Stars on each stable branch (0 for none; with ``masses`` or
        ``u_nodes`` at least 16 are solved, because they bracket the search for
        each requested star).
    masses : array_like, shape (n_masses,) or (n_eos, n_masses), optional
        Gravitational masses in Msun at which to solve exactly.
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
    # 2. maximum (the branch stars are solved in the cluster's first pass)
    guess = guess_maximum(sc, settings)
    ln_branch = place_branch(sc, guess, settings, n_stars)
    branch_rows = np.flatnonzero(sc.ok)
    cluster = refine_maximum(batch, guess, sc.ok, settings, co_solve=ln_branch if n_stars > 0 else None)
    top = maximum_star(batch, cluster, settings, exact=exact_maximum or want_queries)
    below = stars_below_maximum(cluster, ln_branch, branch_rows)
    # assemble
    ok = cluster.ok
    status = np.where(cluster.failed, int(Status.SOLVER_FAILURE), sc.status)
    rows_ok = np.flatnonzero(ok)
    safe_h = np.where(ok, np.exp(cluster.ln_h_max), settings.h_low)
    mass_max = mask_stars(to_stars(batch, np.arange(n_eos), safe_h, surface_fields(top.values)), ok)
    cs2max = np.full(n_eos, np.nan)
    if rows_ok.size:
        cs2max[rows_ok] = max_sound_speed_sq(batch, rows_ok, np.exp(cluster.ln_h_max)[rows_ok])
    branch = assemble_branch(batch, below, cluster, top.values, settings.h_low)
    nfev = sc.nfev + cluster.nfev + top.nfev
    seq = SequenceBatch(status, branch, mass_max, cs2max, np.where(ok, sc.twin_mass_max_msun, np.nan), None, nfev)
    if not want_queries:
        return seq
    # 3. queries
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
    query = stars_at_masses(batch, seq, np.concatenate(parts, axis=1), settings.steps, settings.mass_rtol)
    at_mass = query.stars.select((slice(None), slice(0, n_fixed))) if n_fixed else None
    at_u = query.stars.select((slice(None), slice(n_fixed, None))) if u_nodes is not None else None
    return SequenceBatch(status, branch, mass_max, cs2max, seq.twin_mass_max_msun, at_mass, nfev + query.nfev, at_u)


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
        Gravitational masses (Msun) at which to solve exactly.  Masses above
        the maximum give NaN and a warning.
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
    res = solve_sequences(eos.batch, n_stars=n_stars, masses=masses, settings=settings)
    return checked_sequence(_sequence_from_batch(eos, res, 0, masses), settings.steps, error_estimate)


def _sequence_from_batch(eos, res: SequenceBatch, r: int, masses) -> StarSequence:
    status = Status(int(res.status[r]))
    mm = None
    if status == Status.OK:
        mm = MaximumMass(row(res.mass_max, r, keep_nan=True), float(res.max_sound_speed_sq[r]))
    at = None
    if res.at_mass is not None:
        at = row(res.at_mass, r, keep_nan=True)
        if masses is not None and status == Status.OK:
            above = np.asarray(masses, float).ravel() > mm.mass_msun
            if above.any():
                warnings.warn(
                    f"masses {', '.join(f'{m:g}' for m in np.asarray(masses, float).ravel()[above])} Msun exceed "
                    f"M_max = {mm.mass_msun:.4f} Msun of this EOS; their values are NaN.",
                    stacklevel=3,
                )
    return StarSequence(
        family=eos.family.name,
        parameters=dict(eos.parameters),
        status=status,
        branch=row(res.branch, r),
        mass_max=mm,
        twin_mass_max_msun=float(res.twin_mass_max_msun[r]),
        at_mass=at,
        nfev=res.nfev,
        eos=eos,
    )


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
