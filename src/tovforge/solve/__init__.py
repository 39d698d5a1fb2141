"""Exact stellar-structure solver: TOV, tides, moment of inertia, sequences.

The solver integrates the structure equations in the pseudo-enthalpy
(Lindblom 1992) for many stars of many EOS at once; see
:mod:`tovforge.solve._structure` for the equations.
"""

from __future__ import annotations

from ._love import love_k2, tidal_deformability
from ._result import STATUS_MESSAGES, MaximumMass, StarProfile, Stars, StarSequence
from ._sequence import (
    SequenceBatch,
    SequenceSettings,
    max_sound_speed_sq,
    solve_at_masses,
    solve_sequence,
    solve_sequences,
    solve_stars,
    stars_at_masses,
)
from ._star import central_enthalpy, solve_star
from ._structure import StepSettings, SurfaceValues, integrate_stars

__all__ = [
    "STATUS_MESSAGES",
    "MaximumMass",
    "SequenceBatch",
    "SequenceSettings",
    "StarProfile",
    "StarSequence",
    "Stars",
    "StepSettings",
    "SurfaceValues",
    "central_enthalpy",
    "integrate_stars",
    "solve_star",
    "love_k2",
    "max_sound_speed_sq",
    "solve_at_masses",
    "solve_sequence",
    "solve_sequences",
    "solve_stars",
    "stars_at_masses",
    "tidal_deformability",
]
