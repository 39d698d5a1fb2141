"""Numerical settings of sequence solves."""

from __future__ import annotations

from dataclasses import dataclass, field

from ._structure import StepSettings

__all__ = ["SequenceSettings"]


@dataclass(frozen=True)
class SequenceSettings:
    """Numerical settings of sequence solves.

    Attributes
    ----------
    n_scan : int
        Stars in the coarse scan.
    h_low, h_high : float
        Range of central pseudo-enthalpy scanned (``h_high`` is clipped to the
        EOS's largest enthalpy).
    low_mass_msun : float
        The branch starts at this mass (or at ``M_max / 2`` if smaller), or at
        the lightest scanned star if that is heavier.
    n_cluster : int
        Points of the cluster around the maximum.
    scan_steps, steps : StepSettings
        Integrator steps of the scan and of every other pass.
    max_refinements : int
        Passes allowed to re-centre or narrow the cluster.
    mass_rtol : float
        Stars at requested masses have their mass to this relative tolerance.
    """

    n_scan: int = 32
    h_low: float = 0.035
    h_high: float = 3.0
    low_mass_msun: float = 0.3
    n_cluster: int = 7
    scan_steps: StepSettings = field(default_factory=lambda: StepSettings(n_steps=10, steps_per_kink=2))
    steps: StepSettings = field(default_factory=StepSettings)
    max_refinements: int = 3
    mass_rtol: float = 1e-11
