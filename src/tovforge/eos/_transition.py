"""First-order phase transitions on top of any numeric family.

``<base>-transition`` takes the parameters of a base family followed by three
of its own: the transition pressure, the jump of the energy density there
(a Maxwell construction: ``e`` and ``rho`` jump at fixed pressure and
chemical potential) and the constant squared sound speed of the matter above
(the constant-sound-speed construction of Alford, Han & Prakash 2013, PRD 88,
083013).  Below the transition pressure the EOS is the base family's.  The
evaluator (:class:`~tovforge.eos._batch.TransitionBatch`) is closed-form
above the transition, so the structure solver keeps its accuracy there.

A jump larger than Seidov's limit ``Delta e / e_t = 1/2 + 3 p_t / (2 e_t)``
(Seidov 1971, Sov. Astron. 15, 347) makes the stars with a core of the dense
phase unstable at once: the mass turns down at the transition (a cusp of
``M(h_c)``), and a second stable branch (twin stars) may follow.
"""

from __future__ import annotations

import numpy as np

from ..units import PRESSURE_CGS_TO_GEOM
from ._base import EOSFamily, Parameter, register_family
from ._batch import TransitionBatch, pressure_enthalpy

__all__ = ["Transition", "TRANSITION_PARAMETERS", "seidov_limit"]

#: The parameters a transition adds to its base family (named by us).
TRANSITION_PARAMETERS = (
    Parameter("log_p_transition", "log10(dyn/cm^2)", "log10 pressure of the first-order transition",
              (32.0, 37.0), (34.2, 35.0)),
    Parameter("jump_ratio", "1", "energy-density jump over the energy density below it, Delta e / e_t",
              (0.0, 10.0), (0.0, 1.0)),
    Parameter("cs2_above", "c^2", "constant squared sound speed above the transition", (0.0, 1.0), (0.33, 1.0),
              (True, False)),
)


def seidov_limit(p_t, e_t):
    """Seidov's (1971) largest jump ``Delta e / e_t`` that keeps the branch connected.

    ``1/2 + 3 p_t / (2 e_t)``, for the pressure ``p_t`` and the energy density
    ``e_t`` below the jump (any one unit for both, with c = 1).
    """
    return 0.5 + 1.5 * np.asarray(p_t, float) / np.asarray(e_t, float)


class Transition(EOSFamily):
    """A base family below a first-order transition, constant sound speed above.

    Parameters are those of the base family, then ``log_p_transition``
    (log10 of the transition pressure in dyn/cm^2), ``jump_ratio`` (``Delta e /
    e_t``, the jump of the energy density over its value just below) and
    ``cs2_above`` (squared sound speed above the transition, in c^2).
    """

    def __init__(self, base: EOSFamily):
        self.base = base
        self.name = f"{base.name}-transition"
        self.description = (f"{base.name} below a first-order transition (jump Delta e), constant sound speed "
                            "above")
        self.reference = f"{base.reference}; Alford, Han & Prakash 2013, PRD 88, 083013"
        self.parameters = tuple(base.parameters) + TRANSITION_PARAMETERS
        self._n_base = len(base.parameters)

    def _transition_enthalpy(self, theta):
        base = self.base.build(theta[:, : self._n_base])
        p_t = 10.0 ** theta[:, self._n_base] * PRESSURE_CGS_TO_GEOM
        return base, p_t, pressure_enthalpy(base, p_t)

    def joint_problems(self, theta):
        theta = np.atleast_2d(theta)
        msgs = list(self.base.joint_problems(theta[:, : self._n_base]))
        ok = np.flatnonzero([not m for m in msgs])
        if ok.size:
            _, _, h_t = self._transition_enthalpy(theta[ok])
            for i, h in zip(ok, h_t):
                if not np.isfinite(h):
                    msgs[i] = (f"The 'log_p_transition' parameter of {self.name} must lie inside the pressure range "
                               f"of the base EOS. Got {theta[i, self._n_base]:g} instead.")
        return msgs

    def _build(self, theta):
        theta = np.atleast_2d(theta)
        base, p_t, h_t = self._transition_enthalpy(theta)
        ratio, s = theta[:, self._n_base + 1], theta[:, self._n_base + 2]
        _, e_t, rho_t, _ = base.lanes(np.arange(base.n_eos)).eval(h_t, h_t * (1.0 - 1e-12))
        delta_e = ratio * e_t
        w_plus = e_t + delta_e + p_t
        return TransitionBatch(base, h_t, p_t, w_plus, rho_t * w_plus / (e_t + p_t), s, delta_e)


def _register():
    from ._base import get_family

    for name in ("piecewise-polytrope", "spectral", "sound-speed"):
        register_family(Transition(get_family(name)))


_register()
