"""Vectorised EOS evaluators in pseudo-enthalpy (internal).

An :class:`EOSBatch` holds one or more EOS of the same family as arrays so
that the structure solver can evaluate many stars of many EOS in one NumPy
call.  All quantities here are geometrised (G = c = 1, lengths in km):
pressure ``p``, total energy density ``e`` and rest-mass density ``rho`` are
in km^-2, the pseudo-enthalpy ``h`` is dimensionless.

The solver asks a batch for a *lane view* (:meth:`EOSBatch.lanes`): one lane
per star, each lane pointing at the EOS of that star.  A lane view evaluates
``(p, e, rho, dedh)`` at an array ``h`` of shape ``(n_lanes,)``, where
``dedh = de/dh = (e + p) / c_s^2``.

Three building blocks cover every family:

* :class:`PolytropePieces` -- a chain of polytropes ``p = K rho^Gamma`` joined
  continuously (Read et al. 2009), evaluated in closed form in ``h``;
* :class:`HermiteTable` -- ``ln p``, ``ln e`` and ``ln rho`` tabulated against
  ``h`` with their exact derivatives, interpolated by quintic Hermite pieces;
* :class:`UniformDensityBatch` -- the incompressible star.

:class:`CrustAndTable` joins polytrope pieces (the crust) below an enthalpy
``h_join`` to a table above it; :class:`TransitionBatch` joins any batch below
a transition enthalpy ``h_t`` to matter of constant sound speed above it, with
a jump of the energy density at ``h_t`` (a first-order phase transition).

A first-order phase transition (Maxwell construction) is a jump of ``e`` and
``rho`` at one pressure.  The pressure and the chemical potential
``mu ~ (e + p) / rho`` are continuous there, hence so is ``h``: in ``h`` the
jump is a node with one-sided EOS values, like a kink, listed in ``jumps``
(the structure solver adds the jump of the tidal variable ``y`` there).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ..units import DENSITY_CGS_TO_GEOM

__all__ = [
    "EOSBatch",
    "PolytropePieces",
    "HermiteTable",
    "CrustAndTable",
    "UniformDensityBatch",
    "TransitionBatch",
    "polytrope_chain",
    "pressure_enthalpy",
]

#: Energy density (g/cm^3) at which a tabulated EOS ends.  Centres of stable neutron stars lie below
#: about 1e16 g/cm^3 (the causal limit on the central density of a maximum-mass star, Lattimer & Prakash
#: 2005, PRL 94, 111101; from memory), so this ends only EOS so soft (c_s^2 of order 1e-3) that the
#: energy density would otherwise overflow, while stars of every normal EOS are untouched.
E_CEILING_G_CM3 = 1e30

_FOUR_PI = 4.0 * np.pi
# Lower clamp of h inside closed-form pieces: keeps ln(rho) finite at the
# surface (rho ~ h^(1/(Gamma-1)) -> 0) without changing any value that matters.
_H_TINY = 1e-30


class EOSBatch:
    """Interface of a batch of EOS of one family (internal).

    Attributes
    ----------
    n_eos : int
        Number of EOS in the batch.
    kinks : ndarray, shape (n_eos, n_kinks)
        Pseudo-enthalpies where the EOS is not smooth (piece boundaries), in
        increasing order; padded with ``inf``.
    h_max : ndarray, shape (n_eos,)
        Largest pseudo-enthalpy at which the EOS is defined (``inf`` if none).
    e_surface : ndarray, shape (n_eos,)
        Energy density at ``h = 0`` in km^-2 (non-zero for self-bound matter;
        enters the tidal surface correction).
    jumps : ndarray, shape (n_eos, n_jumps)
        Pseudo-enthalpies where the energy density jumps (first-order phase
        transitions), increasing, ``inf``-padded; each is also a kink.
    """

    n_eos: int
    kinks: np.ndarray
    h_max: np.ndarray
    e_surface: np.ndarray

    @property
    def jumps(self) -> np.ndarray:
        return np.full((self.n_eos, 0), np.inf)

    def lanes(self, eos_index: np.ndarray):  # pragma: no cover - interface
        """Return an evaluator with one lane per entry of ``eos_index``."""
        raise NotImplementedError

    def select(self, eos_index: np.ndarray) -> "EOSBatch":  # pragma: no cover
        """Return the sub-batch made of the EOS ``eos_index``."""
        raise NotImplementedError


# --------------------------------------------------------------------------
# Polytrope pieces (closed form in h)
# --------------------------------------------------------------------------


def polytrope_chain(K: np.ndarray, gamma: np.ndarray, rho_bounds: np.ndarray):
    """Continuity constants of a chain of polytropes.

    Parameters
    ----------
    K : ndarray, shape (n_eos, n_pieces)
        Polytropic constants with ``p = K rho^Gamma`` in any consistent units
        (the dimensionless combination ``K rho^(Gamma-1)`` is all that is used).
    gamma : ndarray, shape (n_eos, n_pieces)
        Adiabatic indices (!= 1).
    rho_bounds : ndarray, shape (n_eos, n_pieces - 1)
        Rest-mass densities where piece ``i`` ends and piece ``i + 1`` begins,
        in the same units as ``K`` uses.

    Returns
    -------
    a : ndarray, shape (n_eos, n_pieces)
        Energy constants with ``e = (1 + a) rho + K rho^Gamma / (Gamma - 1)``
        (Read et al. 2009, PRD 79, 124032, Eq. 5), ``a[:, 0] = 0``.
    h_bounds : ndarray, shape (n_eos, n_pieces - 1)
        Pseudo-enthalpy ``h = ln((e + p) / rho)`` at each boundary.
    """
    K = np.asarray(K, float)
    gamma = np.asarray(gamma, float)
    rho_bounds = np.asarray(rho_bounds, float)
    n_eos, n_pieces = K.shape
    a = np.zeros((n_eos, n_pieces))
    h_bounds = np.empty((n_eos, n_pieces - 1))
    for i in range(n_pieces - 1):  # loop over pieces (a handful), not stars
        rb = rho_bounds[:, i]
        below = K[:, i] * rb ** (gamma[:, i] - 1.0)  # p / rho on piece i
        above = K[:, i + 1] * rb ** (gamma[:, i + 1] - 1.0)
        a[:, i + 1] = a[:, i] + below / (gamma[:, i] - 1.0) - above / (gamma[:, i + 1] - 1.0)
        h_bounds[:, i] = np.log1p(a[:, i] + below * gamma[:, i] / (gamma[:, i] - 1.0))
    return a, h_bounds


@dataclass(frozen=True)
class PolytropePieces(EOSBatch):
    """A chain of polytropes in geometrised units.

    Parameters
    ----------
    K : ndarray, shape (n_eos, n_pieces)
        ``p = K rho^Gamma`` with ``p`` and ``rho`` in km^-2.
    gamma : ndarray, shape (n_eos, n_pieces)
    a : ndarray, shape (n_eos, n_pieces)
        Energy constants from :func:`polytrope_chain`.
    h_bounds : ndarray, shape (n_eos, n_pieces - 1)
        Enthalpies of the boundaries between pieces.
    """

    K: np.ndarray
    gamma: np.ndarray
    a: np.ndarray
    h_bounds: np.ndarray

    @property
    def n_eos(self) -> int:
        return self.K.shape[0]

    @property
    def kinks(self) -> np.ndarray:
        return self.h_bounds

    @property
    def h_max(self) -> np.ndarray:
        return np.full(self.n_eos, np.inf)

    @property
    def e_surface(self) -> np.ndarray:
        return np.zeros(self.n_eos)

    def select(self, eos_index):
        idx = np.asarray(eos_index)
        return PolytropePieces(self.K[idx], self.gamma[idx], self.a[idx], self.h_bounds[idx])

    @cached_property
    def piece_table(self) -> np.ndarray:
        """Per EOS and piece: ``[a, (G-1)/(K G), 1/(G-1), G, K, 1+a]``, shape (n_eos, n_pieces, 6)."""
        g, K, a = self.gamma, self.K, self.a
        return np.stack([a, (g - 1.0) / (K * g), 1.0 / (g - 1.0), g, K, 1.0 + a], axis=-1)

    def lanes(self, eos_index):
        return _PolytropeLanes(self, np.asarray(eos_index, dtype=np.intp))


class _PolytropeLanes:
    """Per-lane evaluation of :class:`PolytropePieces`."""

    def __init__(self, pieces: PolytropePieces, eos_index: np.ndarray):
        self._table = pieces.piece_table
        self._eos = eos_index
        self._single_piece = pieces.h_bounds.shape[1] == 0
        # One EOS for every lane (a single sequence): a sorted search is cheaper.
        self._shared = eos_index.size > 0 and bool(np.all(eos_index == eos_index[0]))
        self._hb = pieces.h_bounds[eos_index[0]] if self._shared else pieces.h_bounds[eos_index]

    def piece_index(self, h):
        if self._single_piece:
            return np.zeros(h.shape, dtype=np.intp)
        if self._shared:
            return np.searchsorted(self._hb, h, side="right")
        return np.add.reduce(h[:, None] >= self._hb, axis=1)

    def eval(self, h, h_loc=None):
        """Return ``(p, e, rho, dedh)`` at pseudo-enthalpies ``h`` (one per lane).

        ``h_loc`` (default ``h``) selects the piece: at a boundary the caller
        passes a point slightly inside the interval it integrates over, so
        that one-sided values are used on each side of a kink.
        """
        h = np.maximum(h, _H_TINY)
        par = self._table[self._eos, self.piece_index(h if h_loc is None else h_loc)]
        a, coef, inv_g1, g, K, one_a = par.T
        # Near the surface of a stiff polytrope (Gamma > 2) de/dh diverges like
        # rho^(2 - Gamma) and may overflow: a property of the EOS, not an error.
        with np.errstate(over="ignore", divide="ignore", invalid="ignore", under="ignore"):
            ln_rho = inv_g1 * np.log(coef * (np.expm1(h) - a))
            rho = np.exp(ln_rho)
            p = K * np.exp(g * ln_rho)
            w = one_a * rho + g * inv_g1 * p  # e + p
            e = w - p
            dedh = w * w / (g * p)  # (e + p) / c_s^2 with c_s^2 = Gamma p / (e + p)
        return p, e, rho, dedh


# --------------------------------------------------------------------------
# Cubic Hermite tables in h
# --------------------------------------------------------------------------


def _one_sided(x, n_nodes):
    """Per-interval (left end, right end) values from per-node or per-interval input."""
    x = np.asarray(x, float)
    if x.ndim == 3 and x.shape[-1] == 2 and x.shape[1] == n_nodes - 1:
        return x[..., 0], x[..., 1]
    x = np.atleast_2d(x)
    return x[:, :-1], x[:, 1:]


@dataclass(frozen=True)
class HermiteTable(EOSBatch):
    """``ln p``, ``ln e``, ``ln rho`` against ``h``, quintic Hermite per interval.

    Each interval carries the values and the first and second derivatives
    (exact, from the thermodynamics) at both ends, so the interpolant is twice
    continuously differentiable wherever the EOS is; the high-order
    integrator then keeps its order between the nodes.  Build it with
    :meth:`from_samples`.

    Parameters
    ----------
    h_nodes : ndarray, shape (n_eos, n_nodes)
        Increasing pseudo-enthalpies of the nodes.
    coef : ndarray, shape (n_eos, n_nodes - 1, 3, 6)
        Power-basis coefficients in ``t in [0, 1]`` of ``ln p``, ``ln e`` and
        ``ln rho`` on each interval.
    kink_h : ndarray, shape (n_eos, n_kinks)
        Enthalpies of nodes where the EOS is not smooth.
    e_surface_ : ndarray, shape (n_eos,)
        Energy density at ``h = 0``.
    jump_h : ndarray, shape (n_eos, n_jumps), optional
        Enthalpies where ``e`` jumps.  Each is a node written twice (an
        interval of zero width): the interval below ends there, the one above
        starts there, so one-sided look-ups see each phase.
    h_end : ndarray, shape (n_eos,), optional
        Where the EOS ends (:attr:`h_max`) when that is below the last node:
        the start of the first interval whose coefficients are not finite (an
        EOS so soft that ``e`` overflows before the last node).
    """

    h_nodes: np.ndarray
    coef: np.ndarray
    kink_h: np.ndarray
    e_surface_: np.ndarray
    jump_h: np.ndarray | None = None
    h_end: np.ndarray | None = None

    @classmethod
    def from_samples(cls, h, p, e, rho, cs2, dcs2_dh, kink_h=None, e_surface=None, lnrho_derivs=None,
                     jump_h=None):
        """Build the table from node samples and exact derivatives.

        Parameters
        ----------
        h, p, e, rho, cs2 : ndarray, shape (n_eos, n_nodes)
            Node values in geometrised units; ``cs2 = dp/de``.
        dcs2_dh : ndarray, shape (n_eos, n_nodes) or (n_eos, n_nodes - 1, 2)
            ``d c_s^2 / dh`` per node, or per interval at its (left, right)
            ends where it jumps at nodes.
        kink_h : ndarray, shape (n_eos, n_kinks), optional
            Enthalpies where the EOS is not smooth (must be nodes).
        e_surface : ndarray, shape (n_eos,), optional
            Energy density at ``h = 0`` (defaults to zero).
        jump_h : ndarray, shape (n_eos, n_jumps), optional
            Enthalpies of jumps of ``e`` (each a node given twice, with the
            values below and then above the jump).
        lnrho_derivs : tuple, optional
            ``(d ln rho/dh, d^2 ln rho/dh^2)`` when the rest-mass density is
            given separately (the second per node or per interval ends); by default the first law gives ``1 / c_s^2`` and
            ``-(d c_s^2/dh) / c_s^4``.

        Notes
        -----
        With ``w = e + p`` and ``q = d c_s^2 / dh`` (``dw/dh = w (1 + 1/c_s^2)``):
        ``(ln p)' = w/p``, ``(ln p)'' = (w/p)(1 + 1/c_s^2) - (w/p)^2``,
        ``(ln e)' = w/(c_s^2 e)``,
        ``(ln e)'' = (ln e)' (1 + 1/c_s^2 - q/c_s^2 - (ln e)')``.
        """
        with np.errstate(over="ignore", invalid="ignore"):  # overflowed samples: the table ends before them
            return cls._from_samples(h, p, e, rho, cs2, dcs2_dh, kink_h, e_surface, lnrho_derivs, jump_h)

    @classmethod
    def _from_samples(cls, h, p, e, rho, cs2, dcs2_dh, kink_h, e_surface, lnrho_derivs, jump_h):
        h = np.atleast_2d(np.asarray(h, float))
        p, e, rho, cs2 = (np.atleast_2d(np.asarray(x, float)) for x in (p, e, rho, cs2))
        n = h.shape[1]
        w = e + p
        L1p = w / p
        L2p = L1p * (1.0 + 1.0 / cs2) - L1p * L1p
        L1e = w / (cs2 * e)
        f = np.stack([np.log(p), np.log(e), np.log(rho)], axis=-1)
        q_lo, q_hi = _one_sided(dcs2_dh, n)
        if lnrho_derivs is not None:
            r2_lo, r2_hi = _one_sided(lnrho_derivs[1], n)

        def second(sl, q, r2):
            c2 = cs2[:, sl]
            l2e = L1e[:, sl] * (1.0 + 1.0 / c2 - q / c2 - L1e[:, sl])
            l2r = -q / (c2 * c2) if r2 is None else r2
            return np.stack([L2p[:, sl], l2e, l2r], axis=-1)

        if lnrho_derivs is None:
            l1r = 1.0 / cs2
        else:
            l1r = np.atleast_2d(lnrho_derivs[0])
        df = np.stack([L1p, L1e, l1r], axis=-1)
        s_lo = second(slice(0, n - 1), q_lo, None if lnrho_derivs is None else r2_lo)
        s_hi = second(slice(1, n), q_hi, None if lnrho_derivs is None else r2_hi)
        dh = np.diff(h, axis=1)[..., None]
        dh = np.where(dh > 0, dh, 0.0)
        f0, f1 = f[:, :-1], f[:, 1:]
        d0, d1 = df[:, :-1] * dh, df[:, 1:] * dh
        s0, s1 = s_lo * dh * dh, s_hi * dh * dh
        df10 = f1 - f0
        coef = np.stack(
            [
                f0,
                d0,
                0.5 * s0,
                10.0 * df10 - 6.0 * d0 - 4.0 * d1 - 0.5 * (3.0 * s0 - s1),
                -15.0 * df10 + 8.0 * d0 + 7.0 * d1 + 0.5 * (3.0 * s0 - 2.0 * s1),
                6.0 * df10 - 3.0 * d0 - 3.0 * d1 - 0.5 * (s0 - s1),
            ],
            axis=-1,
        )
        if kink_h is None:
            kink_h = np.full((h.shape[0], 0), np.inf)
        if e_surface is None:
            e_surface = np.zeros(h.shape[0])
        if jump_h is not None:
            jump_h = np.atleast_2d(np.asarray(jump_h, float))
        # an EOS so soft that e grows like exp(h / c_s^2) passes any density of matter in stars and then
        # overflows (NaN coefficients): it ends at the first interval past E_CEILING, so that the solver
        # never integrates stars whose centre lies there
        bad = ~np.all(np.isfinite(coef), axis=(2, 3)) | ~(e[:, 1:] <= E_CEILING_G_CM3 * DENSITY_CGS_TO_GEOM)
        h_end = None
        if bad.any():
            first = np.where(bad.any(axis=1), np.argmax(bad, axis=1), n - 1)
            h_end = h[np.arange(h.shape[0]), first]
        return cls(h, coef, np.atleast_2d(np.asarray(kink_h, float)), np.asarray(e_surface, float), jump_h, h_end)

    @property
    def n_eos(self) -> int:
        return self.h_nodes.shape[0]

    @property
    def kinks(self) -> np.ndarray:
        return self.kink_h

    @property
    def jumps(self) -> np.ndarray:
        return np.full((self.n_eos, 0), np.inf) if self.jump_h is None else self.jump_h

    @property
    def h_max(self) -> np.ndarray:
        return self.h_nodes[:, -1] if self.h_end is None else self.h_end

    @property
    def h_min(self) -> np.ndarray:
        return self.h_nodes[:, 0]

    @property
    def e_surface(self) -> np.ndarray:
        return self.e_surface_

    def select(self, eos_index):
        idx = np.asarray(eos_index)
        return HermiteTable(self.h_nodes[idx], self.coef[idx], self.kink_h[idx], self.e_surface_[idx],
                            None if self.jump_h is None else self.jump_h[idx],
                            None if self.h_end is None else self.h_end[idx])

    def lanes(self, eos_index):
        return _HermiteLanes(self, np.asarray(eos_index))


_NCOEF = 6


class _HermiteLanes:
    """Per-lane evaluation of :class:`HermiteTable`.

    The node arrays of all EOS are laid end to end with an offset per EOS so
    that one ``searchsorted`` finds every lane's interval.
    """

    def __init__(self, table: HermiteTable, eos_index: np.ndarray):
        uniq, inverse = np.unique(eos_index, return_inverse=True)
        h = table.h_nodes[uniq]
        n_e, n_nodes = h.shape
        span = float(np.max(h[:, -1] - h[:, 0], initial=0.0)) + 1.0
        base = h[:, :1]
        offset = (np.arange(n_e) * span)[:, None]
        self._flat = ((h - base) + offset).ravel()
        self._lane_shift = (offset[:, 0] - base[:, 0])[inverse]
        self._lane_first = (np.arange(n_e) * n_nodes)[inverse]
        self._lane_last = self._lane_first + n_nodes - 2
        # Per interval: [h_k, 1/dh, 3 x 6 coefficients]; one padding row per
        # EOS so that flat node k maps to interval row k.
        dh = np.diff(h, axis=1)
        inv = np.where(dh > 0, 1.0 / np.where(dh > 0, dh, 1.0), 0.0)
        ncol = 3 * _NCOEF
        rows = np.concatenate(
            [h[:, :-1, None], inv[..., None], table.coef[uniq].reshape(n_e, n_nodes - 1, ncol)], axis=-1
        )
        self._rows = np.concatenate([rows, rows[:, -1:, :]], axis=1).reshape(n_e * n_nodes, ncol + 2)

    def eval(self, h, h_loc=None):
        loc = h if h_loc is None else h_loc
        k = np.searchsorted(self._flat, loc + self._lane_shift, side="right") - 1
        k = np.clip(k, self._lane_first, self._lane_last)
        r = self._rows[k]
        t = ((h - r[:, 0]) * r[:, 1])[:, None]
        c = r[:, 2:].reshape(-1, 3, _NCOEF)
        val = c[:, :, 5] * t
        for j in range(4, 0, -1):
            val += c[:, :, j]
            val *= t
        val += c[:, :, 0]
        ce = c[:, 1]
        tt = t[:, 0]
        dlne = (ce[:, 1] + tt * (2.0 * ce[:, 2] + tt * (3.0 * ce[:, 3] + tt * (4.0 * ce[:, 4] + tt * 5.0 * ce[:, 5]))))
        ex = np.exp(val)
        p, e, rho = ex[:, 0], ex[:, 1], ex[:, 2]
        return p, e, rho, e * dlne * r[:, 1]


# --------------------------------------------------------------------------
# Crust (polytrope pieces) joined to a table
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class CrustAndTable(EOSBatch):
    """Polytrope pieces for ``h < h_join`` and a Hermite table above."""

    crust: PolytropePieces
    table: HermiteTable

    @property
    def n_eos(self) -> int:
        return self.table.n_eos

    @property
    def h_join(self) -> np.ndarray:
        return self.table.h_min

    @property
    def kinks(self) -> np.ndarray:
        hj = self.h_join[:, None]
        crust_k = np.where(self.crust.h_bounds < hj, self.crust.h_bounds, np.inf)
        k = np.concatenate([crust_k, hj, self.table.kinks], axis=1)
        return np.sort(k, axis=1)

    @property
    def h_max(self) -> np.ndarray:
        return self.table.h_max

    @property
    def jumps(self) -> np.ndarray:
        return self.table.jumps

    @property
    def e_surface(self) -> np.ndarray:
        return np.zeros(self.n_eos)

    def select(self, eos_index):
        return CrustAndTable(self.crust.select(eos_index), self.table.select(eos_index))

    def lanes(self, eos_index):
        return _CrustTableLanes(self, np.asarray(eos_index))


class _CrustTableLanes:
    def __init__(self, batch: CrustAndTable, eos_index):
        self._crust = batch.crust.lanes(eos_index)
        self._table = batch.table.lanes(eos_index)
        self._h_join = batch.h_join[eos_index]

    def eval(self, h, h_loc=None):
        loc = h if h_loc is None else h_loc
        below = loc < self._h_join
        if not below.any():
            return self._table.eval(h, loc)
        if below.all():
            return self._crust.eval(h, loc)
        lo = self._crust.eval(np.minimum(h, self._h_join), np.minimum(loc, self._h_join))
        hi = self._table.eval(np.maximum(h, self._h_join), np.maximum(loc, self._h_join))
        return tuple(np.where(below, x, y) for x, y in zip(lo, hi))


# --------------------------------------------------------------------------
# Uniform density
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class UniformDensityBatch(EOSBatch):
    """Incompressible matter: ``e = e0``, ``p = e0 (exp(h) - 1)``, ``rho = e0``."""

    e0: np.ndarray

    @property
    def n_eos(self) -> int:
        return self.e0.shape[0]

    @property
    def kinks(self) -> np.ndarray:
        return np.full((self.n_eos, 0), np.inf)

    @property
    def h_max(self) -> np.ndarray:
        return np.full(self.n_eos, np.inf)

    @property
    def e_surface(self) -> np.ndarray:
        return self.e0

    def select(self, eos_index):
        return UniformDensityBatch(self.e0[np.asarray(eos_index)])

    def lanes(self, eos_index):
        return _UniformLanes(self.e0[np.asarray(eos_index)])


class _UniformLanes:
    def __init__(self, e0):
        self._e0 = e0

    def eval(self, h, h_loc=None):
        p = self._e0 * np.expm1(h)
        return p, self._e0.copy(), self._e0.copy(), np.zeros_like(h)


# --------------------------------------------------------------------------
# Any batch below a first-order transition, constant sound speed above
# --------------------------------------------------------------------------


def pressure_enthalpy(batch: EOSBatch, p_target: np.ndarray, n_iter: int = 200) -> np.ndarray:
    """Pseudo-enthalpy at which each EOS of ``batch`` has pressure ``p_target`` (km^-2).

    Vectorised bisection in ``ln h`` on ``(1e-14, min(h_max, 20)]`` (``p`` rises
    with ``h``).  Returns NaN where the target lies outside that range.
    """
    p_target = np.asarray(p_target, float)
    n = batch.n_eos
    lanes = batch.lanes(np.arange(n))
    lo = np.full(n, np.log(1e-14))
    hi = np.log(np.minimum(batch.h_max, 20.0))
    p_hi = lanes.eval(np.exp(hi), np.exp(hi) * (1.0 - 1e-12))[0]
    p_lo = lanes.eval(np.exp(lo))[0]
    inside = (p_lo < p_target) & (p_target <= p_hi)
    for _ in range(n_iter):
        mid = 0.5 * (lo + hi)
        below = lanes.eval(np.exp(mid))[0] < p_target
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
        if np.all(hi - lo <= 1e-15 * np.maximum(np.abs(hi), 1.0)):
            break
    return np.where(inside, np.exp(0.5 * (lo + hi)), np.nan)


@dataclass(frozen=True)
class TransitionBatch(EOSBatch):
    """A base EOS below ``h_t``, then matter of constant sound speed ``s`` above.

    At ``h_t`` (pressure ``p_t``) the energy density jumps from ``e_t`` to
    ``e_t + delta_e`` (Maxwell construction; ``delta_e = 0`` is allowed).  Above
    it the squared sound speed is the constant ``s`` (the constant-sound-speed
    construction of Alford, Han & Prakash 2013, PRD 88, 083013), which is
    closed-form in ``h``: with ``w = e + p`` and ``w_+ = e_t + delta_e + p_t``,

        w   = w_+ exp((1 + s) (h - h_t) / s),
        p   = p_t + s (w - w_+) / (1 + s),
        rho = rho_+ exp((h - h_t) / s),   rho_+ = rho_t w_+ / (e_t + p_t),

    (``dp/dh = w``, ``de/dh = w / s``, ``d ln rho / dh = 1 / s``; the rest-mass
    density jumps with ``e`` at fixed chemical potential ``w / rho``).

    Parameters
    ----------
    base : EOSBatch
        The EOS below the transition.
    h_t, p_t, w_plus, rho_plus, cs2 : ndarray, shape (n_eos,)
        Transition enthalpy, pressure, ``e + p`` and ``rho`` just above it, and
        ``s`` (geometrised units).
    delta_e : ndarray, shape (n_eos,)
        The jump of the energy density (km^-2); 0 for a continuous transition.
    """

    base: EOSBatch
    h_t: np.ndarray
    p_t: np.ndarray
    w_plus: np.ndarray
    rho_plus: np.ndarray
    cs2: np.ndarray
    delta_e: np.ndarray

    @property
    def n_eos(self) -> int:
        return self.base.n_eos

    @property
    def kinks(self) -> np.ndarray:
        ht = self.h_t[:, None]
        below = np.where(self.base.kinks < ht, self.base.kinks, np.inf)
        return np.sort(np.concatenate([below, ht], axis=1), axis=1)

    @property
    def jumps(self) -> np.ndarray:
        return np.where(self.delta_e > 0, self.h_t, np.inf)[:, None]

    @property
    def h_max(self) -> np.ndarray:
        return np.full(self.n_eos, np.inf)

    @property
    def e_surface(self) -> np.ndarray:
        return self.base.e_surface

    def select(self, eos_index):
        i = np.asarray(eos_index)
        return TransitionBatch(self.base.select(i), self.h_t[i], self.p_t[i], self.w_plus[i], self.rho_plus[i],
                               self.cs2[i], self.delta_e[i])

    def lanes(self, eos_index):
        return _TransitionLanes(self, np.asarray(eos_index))


class _TransitionLanes:
    def __init__(self, batch: TransitionBatch, eos_index):
        self._base = batch.base.lanes(eos_index)
        self._h_t = batch.h_t[eos_index]
        self._p_t = batch.p_t[eos_index]
        self._w_plus = batch.w_plus[eos_index]
        self._rho_plus = batch.rho_plus[eos_index]
        self._s = batch.cs2[eos_index]

    def _above(self, h):
        s = self._s
        x = h - self._h_t
        w = self._w_plus * np.exp((1.0 + s) / s * x)
        p = self._p_t + s / (1.0 + s) * (w - self._w_plus)
        e = w - p
        # de/dh from the rounded e + p, so that c_s^2 = (e + p) / (de/dh) is s itself at s = 1 (not 1 + 1 ulp)
        return p, e, self._rho_plus * np.exp(x / s), (e + p) / s

    def eval(self, h, h_loc=None):
        loc = h if h_loc is None else h_loc
        above = loc >= self._h_t
        if above.all():
            return self._above(h)
        lo = self._base.eval(np.minimum(h, self._h_t), np.minimum(loc, self._h_t))
        if not above.any():
            return lo
        hi = self._above(np.maximum(h, self._h_t))
        return tuple(np.where(above, y, x) for x, y in zip(lo, hi))
