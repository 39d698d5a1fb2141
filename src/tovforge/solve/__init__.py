"""Exact stellar-structure solver: TOV, tides, moment of inertia, sequences.

The solver integrates the structure equations in the pseudo-enthalpy
(Lindblom 1992) for many stars of many EOS at once; see
:mod:`tovforge.solve._structure` for the equations and
:mod:`tovforge.solve._sequence` for the phases of a sequence solve.
"""

from __future__ import annotations

from ._love import love_k2, tidal_deformability
from ._margin import NEAR_DECADES, JumpMargins, jump_margins, jump_stars
from ._maximum import max_sound_speed_sq
from ._queries import MassQuery, stars_at_masses
from ._result import MaximumMass, StarProfile, Stars, StarSequence
from ._sequence import SequenceBatch, solve_at_masses, solve_sequence, solve_sequences, solve_stars
from ._settings import SequenceSettings
from ._star import central_enthalpy, solve_star
from ._structure import StepSettings, SurfaceValues, integrate_stars

__all__ = [
    "JumpMargins",
    "NEAR_DECADES",
    "jump_margins",
    "jump_stars",
    "MassQuery",
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
