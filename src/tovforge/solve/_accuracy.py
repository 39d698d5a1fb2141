"""Error estimates of solved branches, and the warnings that go with them.

The fixed-step integrator is exact to about 1e-8 for the analytic families,
whose EOS are smooth between declared kinks.  A user's table can hide
features (kinks between rows, noisy rows) that no declared kink marks, so a
sequence of a table carries an estimate of its integration error per star:
every branch star solved again with twice the steps (step doubling; common
practice), the relative difference of each quantity taken as the estimate of
the error of the coarser solve.  For an integrator of order 8 on a smooth
EOS this overestimates the error by orders of magnitude; where the EOS is
rough the order drops and the estimate becomes sharp.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..units import MSUN_KM
from ._structure import StepSettings, integrate_stars

__all__ = ["BranchError", "ERROR_TOLERANCE", "branch_error", "warn_branch_error", "warn_table_causality"]

#: Stated accuracy of the solver (relative): M, R and the baryon mass to 1e-6,
#: Lambda and I to 1e-5 (the floors of the project's targets).
ERROR_TOLERANCE = {
    "mass_msun": 1e-6,
    "radius_km": 1e-6,
    "tidal_deformability": 1e-5,
    "moment_of_inertia_1e45_g_cm2": 1e-5,
    "baryon_mass_msun": 1e-6,
}

_SURFACE = {
    "mass_msun": lambda sv: sv.mass / MSUN_KM,
    "radius_km": lambda sv: sv.radius,
    "tidal_deformability": lambda sv: sv.tidal_deformability,
    "moment_of_inertia_1e45_g_cm2": lambda sv: sv.moment_of_inertia,
    "baryon_mass_msun": lambda sv: sv.baryon_mass / MSUN_KM,
}


@dataclass(frozen=True)
class BranchError:
    """Estimated relative integration error of each branch star (step doubling).

    Attributes
    ----------
    relative : dict of str to ndarray
        Per quantity (``mass_msun``, ``radius_km``, ``tidal_deformability``,
        ``moment_of_inertia_1e45_g_cm2``, ``baryon_mass_msun``), the relative
        difference between the solve and one with twice the steps, one entry
        per branch star.
    tolerance : dict of str to float
        The stated tolerance of each quantity (:data:`ERROR_TOLERANCE`).
    """

    relative: dict
    tolerance: dict

    @property
    def worst(self) -> dict:
        """Largest estimate of each quantity over the branch."""
        return {k: float(np.nanmax(v, initial=0.0)) for k, v in self.relative.items()}

    @property
    def exceeded(self) -> list[str]:
        """Quantities whose largest estimate exceeds the stated tolerance."""
        return [k for k, v in self.worst.items() if v > self.tolerance[k]]


def branch_error(batch, eos_index: int, h_c, steps: StepSettings) -> BranchError:
    """Step-doubling estimate for stars of one EOS at central enthalpies ``h_c``.

    Solves the stars with ``steps`` and with ``steps.refined(2)`` in one call each.
    """
    h_c = np.asarray(h_c, float)
    idx = np.full(h_c.size, eos_index, dtype=np.intp)
    coarse = integrate_stars(batch, idx, h_c, steps)
    fine = integrate_stars(batch, idx, h_c, steps.refined(2))
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = {k: np.abs(f(coarse) / f(fine) - 1.0) for k, f in _SURFACE.items()}
    return BranchError(rel, dict(ERROR_TOLERANCE))


def warn_branch_error(err: BranchError, what: str, stacklevel: int = 3) -> None:
    """Warn if an estimate exceeds the stated tolerance."""
    bad = err.exceeded
    if bad:
        worst = err.worst
        text = ", ".join(f"{k} {worst[k]:.1e} (tolerance {err.tolerance[k]:.0e})" for k in bad)
        warnings.warn(
            f"{what}: the estimated integration error exceeds the stated tolerance: {text}. The EOS has features "
            "between its rows that the steps do not resolve; solve with finer steps "
            "(SequenceSettings(steps=StepSettings(n_steps=...))) or give more rows.",
            stacklevel=stacklevel,
        )


def warn_table_causality(batch, central_pressure_geom: float, max_cs2: float, what: str,
                         stacklevel: int = 3) -> None:
    """Warn if a table is acausal below M_max only through its interpolant.

    ``batch`` is a :class:`~tovforge.eos._tabulated.TableBatch`; the rows are
    causal when every secant ``dp/de`` between consecutive rows of one phase
    stays at or below 1.
    """
    if not (max_cs2 > 1.0) or getattr(batch, "row_pressure", None) is None:
        return
    rows = batch.row_sound_speed_sq(central_pressure_geom)
    if rows <= 1.0:
        warnings.warn(
            f"{what}: c_s^2 reaches {max_cs2:.4g} below the maximum-mass star although the table's rows are causal "
            f"(largest dp/de between rows {rows:.4g}): the interpolant between rows exceeds the speed of light, "
            "and M_max depends on it. Give more rows where the sound speed is high.",
            stacklevel=stacklevel,
        )


def checked_sequence(seq, steps: StepSettings, error_estimate: bool | None = None, stacklevel: int = 4):
    """``seq`` with its error estimate (tables by default) and the warnings of its EOS.

    Parameters
    ----------
    seq : StarSequence
        A solved sequence (its ``eos`` attached).
    steps : StepSettings
        The steps the branch was solved with.
    error_estimate : bool, optional
        Estimate the integration error of every branch star (default: for
        tabulated EOS only, whose rows may hide unresolved features).
    """
    from dataclasses import replace

    batch = seq.eos.batch
    is_table = getattr(batch, "row_pressure", None) is not None
    if error_estimate is None:
        error_estimate = is_table
    if seq.status != 0:
        return seq
    what = f"{seq.family} EOS" + (f" {seq.parameters.get('path')}" if is_table else "")
    if is_table:
        from ..units import PRESSURE_CGS_TO_GEOM

        warn_table_causality(batch, seq.mass_max.central_pressure_dyn_cm2 * PRESSURE_CGS_TO_GEOM,
                             seq.mass_max.max_sound_speed_sq, what, stacklevel)
    if not error_estimate:
        return seq
    err = branch_error(batch, 0, seq.branch.central_pseudo_enthalpy, steps)
    warn_branch_error(err, what, stacklevel)
    return replace(seq, error_estimate=err)
