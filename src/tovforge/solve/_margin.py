"""Margins of the side of a first-order transition: is the first maximum of M at the jump, or far above it?

The ``<base>-transition`` families have two kinds of stable branch: the first
maximum of ``M(h_c)`` sits at the transition or within a few per cent above it
("near": a cusp above Seidov's limit, or a small hump before a twin branch
below it), or the connected hybrid branch rises to a maximum 0.5-2 decades of
pressure above the transition ("far").  M_max and the curves jump between the
two (research/surrogates/LOG.md, "the transition family across its
discontinuity"), so a surrogate needs to know the side.  Two margins, both
negative on the far side of their own boundary:

- Seidov's margin ``s = Delta e / e_t - (1/2 + 3 p_t / (2 e_t))`` (Seidov 1971,
  Sov. Astron. 15, 347): s > 0 makes the branch turn down at the jump (a cusp,
  near side).  Closed form from the EOS, no solve.
- The scanned margin ``g = min dM/dz`` (Msun per unit z) over stars centred
  between the jump and ``NEAR_DECADES`` decades of pressure above it,
  ``z = (h_c - h_t)^(3/2)``: the mass of a star with a small core of the dense
  phase moves as the core's volume (the power from memory: the core radius
  grows as ``(h_c - h_t)^(1/2)``), so dM/dz stays finite at the jump.  g < 0
  when M falls somewhere in that window (a first maximum within it: near
  side); it passes through zero continuously where a hump and its dip merge
  and vanish, and at Seidov's limit next to a far branch.

The side is near where ``s > 0 or g < 0``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..eos._transition import seidov_limit
from ..units import MSUN_KM
from ._structure import StepSettings
from ._result import Stars
from ._surface import integrate, surface_fields, to_stars

__all__ = ["JumpMargins", "jump_margins", "jump_stars", "NEAR_DECADES", "SCAN_FRACTIONS", "BELOW_JUMP"]

#: Decades of pressure above the transition within which a first maximum counts as "near" (no solved first
#: maximum of the training and held-out sets of LOG.md lies between 0.05 and 0.5 decades above p_t).
NEAR_DECADES = 0.3
#: Where the scan puts its stars: ``h_c - h_t`` as fractions of the near window (geometric, 100 stars; the
#: research's scan, which agreed with fine scans of 2,000 stars on every EOS it was compared on).
SCAN_FRACTIONS = np.geomspace(1e-5, 1.0, 100)
#: A star "at the jump" is centred at ``h_t (1 - BELOW_JUMP)``: the lighter phase's side, whose mass is the
#: transition mass M_t (M(h_c) is continuous there, its slope is not).
BELOW_JUMP = 1e-9


@dataclass(frozen=True)
class JumpMargins:
    """Seidov's and the scanned margin of each EOS: is its first maximum at the jump (near) or far above it?

    See :mod:`tovforge.solve._margin`.

    Attributes
    ----------
    seidov : ndarray (n_eos,)
        ``Delta e / e_t`` minus Seidov's limit (dimensionless); > 0: a cusp at the jump.
    scanned_msun : ndarray (n_eos,)
        ``min dM/dz`` over the near window, in Msun per unit ``z = (h_c - h_t)^(3/2)``; < 0: a first maximum
        within the window.  NaN where a star of the scan failed.
    """

    seidov: np.ndarray
    scanned_msun: np.ndarray

    @property
    def near(self) -> np.ndarray:
        """True where the first maximum lies at or just above the jump: ``seidov > 0 or scanned_msun < 0``."""
        return (self.seidov > 0.0) | (self.scanned_msun < 0.0)


def near_window(batch) -> np.ndarray:
    """``h_c - h_t`` (n_eos,) where the pressure reaches ``NEAR_DECADES`` decades above ``p_t``.

    Closed form of the constant-sound-speed matter above the jump (see
    :class:`~tovforge.eos._batch.TransitionBatch`): ``p = p_t + s (w - w_+) / (1 + s)``,
    ``w = w_+ exp((1 + s) (h - h_t) / s)``.
    """
    s = batch.cs2
    dw = (1.0 + s) * (10.0**NEAR_DECADES - 1.0) * batch.p_t / s
    return s / (1.0 + s) * np.log1p(dw / batch.w_plus)


def jump_margins(batch, steps: StepSettings | None = None, chunk: int = 64) -> JumpMargins:
    """Seidov's and the scanned margin of every EOS of a transition batch.

    Parameters
    ----------
    batch : TransitionBatch
        EOS of a ``<base>-transition`` family (``Family.build`` of its parameters).
    steps : StepSettings, optional
        Steps of the scan's stars (default: the solver's defaults).
    chunk : int
        EOS per batched integration (``chunk x 101`` stars at a time: memory bounded).

    Returns
    -------
    JumpMargins
        Cost: 101 stars per EOS (about 10 ms per EOS on one core of this machine).
    """
    steps = steps or StepSettings()
    e_t = batch.w_plus - batch.delta_e - batch.p_t  # e + p just above, minus the jump and p: e just below
    seidov = batch.delta_e / e_t - seidov_limit(batch.p_t, e_t)
    scanned = []
    k = SCAN_FRACTIONS.size + 1
    for start in range(0, batch.n_eos, chunk):
        b = batch.select(np.arange(start, min(start + chunk, batch.n_eos)))
        n = b.n_eos
        dh = near_window(b)[:, None] * SCAN_FRACTIONS[None, :]
        # the star centred just below the jump first: a fall right at the jump (a cusp) counts
        h_c = np.concatenate([b.h_t[:, None] * (1.0 - BELOW_JUMP), b.h_t[:, None] + dh], axis=1)
        values, _ = integrate(b, np.repeat(np.arange(n), k), h_c.ravel(), steps)
        mass = values["mass"].reshape(n, k) / MSUN_KM
        z = np.concatenate([np.zeros((n, 1)), dh**1.5], axis=1)
        scanned.append(np.min(np.diff(mass, axis=1) / np.diff(z, axis=1), axis=1))  # NaN if a star failed
    return JumpMargins(seidov=np.asarray(seidov, float), scanned_msun=np.concatenate(scanned))


def jump_stars(batch, steps: StepSettings | None = None) -> Stars:
    """The star centred just below the jump of every EOS of a transition batch (``h_t (1 - BELOW_JUMP)``).

    Its mass is the transition mass M_t, where the mass-radius curve of a
    connected hybrid branch kinks (the far side's curves of a two-sided
    surrogate have a node there).  One star per EOS; failures NaN.

    Returns
    -------
    Stars
        Fields of shape (n_eos,).
    """
    steps = steps or StepSettings()
    idx = np.arange(batch.n_eos)
    h_c = np.asarray(batch.h_t, float) * (1.0 - BELOW_JUMP)
    values, _ = integrate(batch, idx, h_c, steps)
    return to_stars(batch, idx, h_c, surface_fields(values))
