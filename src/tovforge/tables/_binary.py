"""Binary tidal deformability: Lambda-tilde of a neutron-star pair.

The leading tidal term of the gravitational-wave phase of an inspiral depends
on the two stars' deformabilities through one combination (Flanagan &
Hinderer 2008, PRD 77, 021502; the citation is recalled from memory, the
formula is the one in the project's design notes):

    Lambda_tilde = (16/13) [(m1 + 12 m2) m1^4 Lambda1 + (m2 + 12 m1) m2^4 Lambda2] / (m1 + m2)^5.

For equal masses and equal deformabilities it reduces to Lambda itself:
(16/13) * 2 * 13 m^5 Lambda / (32 m^5) = Lambda.  The per-star Lambda(M) comes
from a model, an exact solve or a sequence table (see the ``lambda_from_*``
functions); masses above the EOS's maximum mass have no Lambda and give NaN.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._limits import check_memory
from ..errors import InputError
from ._quantities import provenance
from ._write import Column, TableSummary, TableWriter

__all__ = [
    "BINARY_COLUMNS",
    "BinaryDeformability",
    "binary_deformability",
    "binary_table",
    "chirp_mass",
    "component_masses",
    "chirp_grid",
    "lambda_from_eos",
    "lambda_from_model",
    "lambda_from_table",
    "lambda_tilde",
]


def lambda_tilde(m1, m2, lambda1, lambda2) -> np.ndarray:
    """Binary tidal deformability of two stars (arrays broadcast together).

    Parameters
    ----------
    m1, m2 : array_like
        Gravitational masses (any common unit; only their ratios enter).
    lambda1, lambda2 : array_like
        Dimensionless tidal deformabilities of the two stars.

    Returns
    -------
    ndarray
        ``Lambda_tilde``, dimensionless; NaN where an input is NaN.

    References
    ----------
    .. [1] Flanagan & Hinderer 2008, PRD 77, 021502 (recalled from memory).
    """
    m1, m2, l1, l2 = (np.asarray(a, float) for a in (m1, m2, lambda1, lambda2))
    mt = m1 + m2
    # [1], written with the mass fractions x_i = m_i / M: the fifth powers stay O(1)
    x1, x2 = m1 / mt, m2 / mt
    return (16.0 / 13.0) * ((x1 + 12.0 * x2) * x1**4 * l1 + (x2 + 12.0 * x1) * x2**4 * l2)


def chirp_mass(m1, m2) -> np.ndarray:
    """Chirp mass ``(m1 m2)^(3/5) / (m1 + m2)^(1/5)``, in the unit of the masses."""
    m1, m2 = np.asarray(m1, float), np.asarray(m2, float)
    return (m1 * m2) ** 0.6 / (m1 + m2) ** 0.2


def component_masses(chirp, mass_ratio) -> tuple[np.ndarray, np.ndarray]:
    """Component masses from the chirp mass and ``q = m2 / m1`` in (0, 1].

    With ``Mc = q^(3/5) m1 / (1 + q)^(1/5)``: ``m1 = Mc (1 + q)^(1/5) / q^(3/5)``
    and ``m2 = q m1`` (so ``m1 >= m2``).

    Returns
    -------
    m1, m2 : ndarray
        In the unit of ``chirp``.
    """
    mc, q = np.asarray(chirp, float), np.asarray(mass_ratio, float)
    m1 = mc * (1.0 + q) ** 0.2 / q**0.6
    return m1, q * m1


#: Arrays of one value per pair a binary table holds at once (masses, Lambdas, Lambda-tilde, work arrays).
_ARRAYS_PER_PAIR = 16


def chirp_grid(chirp, mass_ratio) -> tuple[np.ndarray, np.ndarray]:
    """Component masses of every pair (chirp mass, mass ratio) of two axes: ``m1, m2`` of shape (n_c * n_q,).

    The chirp mass varies slowest.  The number of pairs is checked against
    the memory budget before any array is made.

    Raises
    ------
    tovforge.errors.ResourceLimit
        The table would not fit in memory.
    """
    mc, q = np.asarray(chirp, float).ravel(), np.asarray(mass_ratio, float).ravel()
    _check_pairs(mc.size * q.size, f"{mc.size} chirp masses x {q.size} mass ratios")
    return component_masses(*(g.ravel() for g in np.meshgrid(mc, q, indexing="ij")))


def _check_pairs(n: int, what: str) -> None:
    check_memory(8.0 * _ARRAYS_PER_PAIR * n, f"{what} = {n} pairs", "use fewer pairs")


@dataclass(frozen=True)
class BinaryDeformability:
    """Lambda-tilde of pairs of stars (one entry per pair).

    Attributes
    ----------
    m1_msun, m2_msun : ndarray
        Component masses in Msun (as given; for chirp-mass grids ``m1 >= m2``).
    chirp_mass_msun : ndarray
    mass_ratio : ndarray
        ``min(m1, m2) / max(m1, m2)`` in (0, 1].
    lambda1, lambda2 : ndarray
        Deformabilities of the components (NaN above M_max).
    lambda_tilde : ndarray
    """

    m1_msun: np.ndarray
    m2_msun: np.ndarray
    chirp_mass_msun: np.ndarray
    mass_ratio: np.ndarray
    lambda1: np.ndarray
    lambda2: np.ndarray
    lambda_tilde: np.ndarray

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


def binary_deformability(lambda_of_mass, m1, m2) -> BinaryDeformability:
    """Lambda-tilde for pairs ``(m1[i], m2[i])`` given a per-star ``Lambda(M)``.

    Parameters
    ----------
    lambda_of_mass : callable
        Maps an array of masses (Msun) to Lambda of the same shape (NaN where
        there is no stable star); see :func:`lambda_from_model`,
        :func:`lambda_from_eos` and :func:`lambda_from_table`.
    m1, m2 : array_like, broadcast to a common shape (n,)
        Component masses in Msun.

    Returns
    -------
    BinaryDeformability
    """
    m1, m2 = np.broadcast_arrays(np.atleast_1d(np.asarray(m1, float)), np.atleast_1d(np.asarray(m2, float)))
    _check_pairs(m1.size, "the masses")
    m1, m2 = m1.ravel(), m2.ravel()
    if not (np.all(np.isfinite(m1)) and np.all(np.isfinite(m2)) and np.all(m1 > 0) and np.all(m2 > 0)):
        raise InputError("component masses must be positive finite numbers (Msun).")
    # one call for all masses: a model or a solver evaluates them together
    lam = np.asarray(lambda_of_mass(np.concatenate([m1, m2])), float)
    l1, l2 = lam[: m1.size], lam[m1.size:]
    return BinaryDeformability(
        m1_msun=m1,
        m2_msun=m2,
        chirp_mass_msun=chirp_mass(m1, m2),
        mass_ratio=np.minimum(m1, m2) / np.maximum(m1, m2),
        lambda1=l1,
        lambda2=l2,
        lambda_tilde=lambda_tilde(m1, m2, l1, l2),
    )


def lambda_from_model(model, theta):
    """``Lambda(M)`` of a surrogate at one parameter point ``theta`` (d,)."""
    theta = np.asarray(theta, float).reshape(1, -1)

    def lam(masses):
        return model.tidal_deformability(theta, np.asarray(masses, float).ravel()).value[0]

    return lam


def lambda_from_eos(eos, settings=None):
    """``Lambda(M)`` by exact solves of one EOS at the requested masses.

    The returned function raises InputError when the EOS has no stable
    branch (every Lambda would be NaN).
    """
    from ..solve import SequenceSettings, solve_sequences
    from ..status import Status

    def lam(masses):
        masses = np.asarray(masses, float).ravel()
        uniq, inv = np.unique(masses, return_inverse=True)
        s = settings or SequenceSettings(low_mass_msun=min(0.3, 0.9 * float(uniq.min())))
        res = solve_sequences(eos.batch, n_stars=24, masses=uniq, settings=s)
        if int(res.status[0]) != Status.OK:
            why = Status(int(res.status[0])).message.rstrip(".")
            raise InputError(f"{eos.family.name}: no stable branch found ({why}); there is no Lambda(M) for "
                             "these parameters.")
        return np.asarray(res.at_mass.tidal_deformability, float)[0][inv]

    return lam


def lambda_from_table(table):
    """``Lambda(M)`` interpolated in a sequence table (columns ``mass`` and ``lambda``).

    ``ln Lambda`` is interpolated in ``M`` with a monotone cubic (PCHIP; Fritsch
    & Carlson 1980, SIAM J. Numer. Anal. 17, 238) through the stable-branch
    rows; masses outside the table's range give NaN.  The error is that of
    the interpolation: use a dense table (``tovforge table sequence --points``)
    or an exact solve when it matters.
    """
    from scipy.interpolate import PchipInterpolator

    for name, unit in (("mass", "Msun"), ("lambda", "1")):
        if name not in table.columns:
            raise InputError(f"{table.path}: a Lambda(M) table needs columns 'mass' and 'lambda' "
                             f"(as written by `tovforge table sequence`); it has {', '.join(table.columns)}.")
        if table.units[name] != unit:
            raise InputError(f"{table.path}: column {name!r} is in {table.units[name]!r}, expected {unit!r}.")
    m, lam = np.asarray(table["mass"], float), np.asarray(table["lambda"], float)
    ok = np.isfinite(m) & np.isfinite(lam) & (lam > 0)
    m, lam = m[ok], lam[ok]
    order = np.argsort(m)
    m, lam = m[order], lam[order]
    if m.size < 2 or np.any(np.diff(m) <= 0):
        raise InputError(f"{table.path}: the 'mass' column must hold at least two distinct masses of one stable "
                         "branch (increasing, no repeats).")
    spline = PchipInterpolator(m, np.log(lam), extrapolate=False)

    def interp(masses):
        return np.exp(spline(np.asarray(masses, float)))

    return interp


#: Columns of a binary table, and the fields of :class:`BinaryDeformability` they hold.
BINARY_COLUMNS = (
    (Column("m1", "Msun", "gravitational mass of the first star"), "m1_msun"),
    (Column("m2", "Msun", "gravitational mass of the second star"), "m2_msun"),
    (Column("chirp_mass", "Msun", "(m1 m2)^(3/5) / (m1 + m2)^(1/5)"), "chirp_mass_msun"),
    (Column("mass_ratio", "1", "min(m1, m2) / max(m1, m2)"), "mass_ratio"),
    (Column("lambda1", "1", "tidal deformability of the first star (NaN above M_max)"), "lambda1"),
    (Column("lambda2", "1", "tidal deformability of the second star (NaN above M_max)"), "lambda2"),
    (Column("lambda_tilde", "1", "binary tidal deformability (Flanagan & Hinderer 2008)"), "lambda_tilde"),
)


def binary_table(out, result: BinaryDeformability, command: str | None = None, overwrite: bool = False,
                 **source) -> TableSummary:
    """Write a :class:`BinaryDeformability` as a table.

    Parameters
    ----------
    out : path-like
        ``.csv``, ``.h5`` or ``.npz``.
    result : BinaryDeformability
    command : str, optional
        Command line for the provenance (default ``sys.argv``).
    overwrite : bool
        Replace an existing file.
    **source
        What Lambda(M) came from (str, int, float or bool values), for the metadata.
    """
    import time
    from pathlib import Path

    t0 = time.monotonic()
    columns = [c for c, _ in BINARY_COLUMNS]
    with TableWriter(out, columns, provenance(command, kind="binary", **source), overwrite=overwrite) as w:
        w.append({c.name: getattr(result, f) for c, f in BINARY_COLUMNS})
    return TableSummary(Path(out), w.n_rows, tuple(c.name for c in columns), time.monotonic() - t0)
