"""First-order phase transitions: Seidov's limit, the jump of y, two-zone stars, zero jumps."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from helpers import READ2009, assert_matches_baseline
from tovforge import eos, solve
from tovforge.eos import seidov_limit
from tovforge.eos._batch import EOSBatch
from tovforge.solve import StepSettings, integrate_stars
from tovforge.solve._love import love_k2, tidal_deformability
from tovforge.units import DENSITY_CGS_TO_GEOM, MSUN_KM

SLY = READ2009["SLy"]


def _transition(log_p_t, ratio, cs2=1.0):
    return eos.make("piecewise-polytrope-transition", **SLY, log_p_transition=log_p_t, jump_ratio=ratio,
                    cs2_above=cs2)


def _below(E):
    """Pressure, energy density and enthalpy just below the transition (geometrised)."""
    b = E.batch
    h_t = float(b.h_t[0])
    e_t = float((b.w_plus[0] - b.p_t[0]) - b.delta_e[0])
    return float(b.p_t[0]), e_t, h_t


@pytest.mark.parametrize("log_p_t", [34.48, 34.9])
@pytest.mark.parametrize("side", [0.9, 1.1])
def test_seidov_limit_decides_whether_the_branch_turns_at_the_transition(log_p_t, side):
    """Seidov 1971 (Sov. Astron. 15, 347): the branch stays connected for Delta e / e_t below
    1/2 + 3 p_t / (2 e_t), and M(h_c) turns down at the transition above it."""
    probe = _transition(log_p_t, 0.5)
    p_t, e_t, h_t = _below(probe)
    limit = float(seidov_limit(p_t, e_t))
    E = _transition(log_p_t, side * limit)
    h_c = h_t * np.array([1.0, 1.0 + 1e-4, 1.0 + 1e-3])
    m = solve.solve_stars(E, h_c).mass_msun
    slope = np.diff(m)
    if side < 1:
        assert np.all(slope > 0), (limit, m)
    else:
        assert np.all(slope < 0), (limit, m)
    # the stars without a core of the dense phase do not see the jump at all
    below = solve.solve_stars(E, [0.9 * h_t]).mass_msun
    ref = solve.solve_stars(eos.make("piecewise-polytrope", **SLY), [0.9 * h_t]).mass_msun
    assert below[0] == ref[0]


def test_y_jump_matches_the_baseline_that_restarts_at_the_jump():
    """Our fixed steps (node at the jump, y jump of Damour & Nagar 2009, PRD 80, 084035) against
    solve_ivp in radius stopped and restarted at the jump."""
    E = _transition(34.6, 0.4, 0.7)
    assert_matches_baseline(E, [0.2, 0.35, 0.6], {"mass_msun": 1e-8, "radius_km": 1e-8, "tidal_deformability": 1e-6,
                                                  "moment_of_inertia_1e45_g_cm2": 1e-7, "baryon_mass_msun": 1e-8})


# -- two zones of uniform density --------------------------------------------------------


@dataclass(frozen=True)
class _TwoZones(EOSBatch):
    """Energy density e1 below h_t (pressure p_t), e2 > e1 above: incompressible in each zone."""

    e1: float
    e2: float
    p_t: float

    n_eos = 1

    @property
    def h_t(self):
        return float(np.log1p(self.p_t / self.e1))

    @property
    def kinks(self):
        return np.array([[self.h_t]])

    @property
    def jumps(self):
        return np.array([[self.h_t]])

    @property
    def h_max(self):
        return np.array([np.inf])

    @property
    def e_surface(self):
        return np.array([self.e1])

    def lanes(self, eos_index):
        return self

    def eval(self, h, h_loc=None):
        loc = h if h_loc is None else h_loc
        inner = loc >= self.h_t
        p = np.where(inner, (self.e2 + self.p_t) * np.exp(h - self.h_t) - self.e2, self.e1 * np.expm1(h))
        e = np.where(inner, self.e2, self.e1)
        rho = np.where(inner, self.e2 * (self.e1 + self.p_t) / (self.e2 + self.p_t), self.e1)
        return p, e, rho, np.zeros_like(h)


def test_two_zone_incompressible_star_against_an_independent_quadrature():
    """Two zones of uniform density with a jump at p_t (a common textbook check, common practice):
    M, R and Lambda of the enthalpy solver against solve_ivp in radius with the interface as an event;
    the jump of y at the interface is that of Damour & Nagar 2009 (PRD 80, 084035, Eq. 17 as an
    interior density discontinuity) and Postnikov, Prakash & Lattimer 2010 (PRD 82, 024016)."""
    e1, e2 = 5e14 * DENSITY_CGS_TO_GEOM, 1.2e15 * DENSITY_CGS_TO_GEOM
    p_t = 0.05 * e1
    batch = _TwoZones(e1, e2, p_t)
    h_c = 0.25
    p_c = (e2 + p_t) * np.exp(h_c - batch.h_t) - e2
    ours = integrate_stars(batch, [0], [h_c], StepSettings())
    four_pi = 4.0 * np.pi

    def rhs(r, s, e):
        m, p, y = s
        elam = 1.0 / (1.0 - 2.0 * m / r)
        da = (m + four_pi * r**3 * p) / (r * r) * elam
        q = four_pi * elam * (5.0 * e + 9.0 * p) - 6.0 * elam / (r * r) - (2.0 * da) ** 2
        return [four_pi * r * r * e, -(e + p) * da,
                (-y * y - y * elam * (1.0 + four_pi * r * r * (p - e)) - r * r * q) / r]

    def reach(level):
        def ev(r, s, e):
            return s[1] - level
        ev.terminal, ev.direction = True, -1
        return ev

    r0 = 1e-7
    a = solve_ivp(rhs, (r0, 100.0), [four_pi / 3.0 * e2 * r0**3, p_c, 2.0], args=(e2,), events=reach(p_t),
                  rtol=1e-13, atol=1e-22, method="DOP853")
    r_t = a.t_events[0][0]
    m, p, y = a.y_events[0][0]
    y -= four_pi * r_t**3 * (e2 - e1) / (m + four_pi * r_t**3 * p_t)
    b = solve_ivp(rhs, (r_t, 100.0), [m, p_t, y], args=(e1,), events=reach(0.0), rtol=1e-13, atol=1e-22,
                  method="DOP853")
    R = b.t_events[0][0]
    M, _, y_R = b.y_events[0][0]
    y_R -= four_pi * R**3 * e1 / M
    C = M / R
    lam = tidal_deformability(C, love_k2(C, y_R))
    assert ours.mass[0] == pytest.approx(M, rel=1e-9)
    assert ours.radius[0] == pytest.approx(R, rel=1e-9)
    assert ours.tidal_deformability[0] == pytest.approx(lam, rel=1e-7)
    # and the jump matters: without it Lambda would be far off
    C0 = ours.compactness[0]
    no_jump = tidal_deformability(C0, love_k2(C0, ours.y_surface[0] + four_pi * r_t**3 * (e2 - e1) / (m + four_pi * r_t**3 * p_t)))
    assert abs(no_jump / lam - 1.0) > 1e-2


# -- a jump of zero adds nothing ------------------------------------------------------------


@dataclass(frozen=True)
class _DeclaredJumps(EOSBatch):
    """A batch that declares its kinks as jumps (where e is continuous: Delta e = 0)."""

    inner: EOSBatch

    @property
    def n_eos(self):
        return self.inner.n_eos

    @property
    def kinks(self):
        return self.inner.kinks

    @property
    def jumps(self):
        return self.inner.kinks

    @property
    def h_max(self):
        return self.inner.h_max

    @property
    def e_surface(self):
        return self.inner.e_surface

    def lanes(self, eos_index):
        return self.inner.lanes(eos_index)


def test_the_jump_machinery_adds_nothing_when_the_jump_is_zero():
    """Declaring the kinks of SLy as jumps of size 0 changes no star beyond rounding, except the
    stars whose centre lies within the centre offset above a kink, which start at the kink (their
    grids differ, so they agree to the integration error)."""
    sly = eos.make("piecewise-polytrope", **SLY).batch
    k = sly.kinks[0]
    h_c = np.concatenate([np.geomspace(0.05, 0.9, 12), k[-2:] * (1.0 + 3e-4), k[-2:] * (1.0 + 1e-9)])
    idx = np.zeros(h_c.size, dtype=np.intp)
    a = integrate_stars(sly, idx, h_c, StepSettings())
    b = integrate_stars(_DeclaredJumps(sly), idx, h_c, StepSettings())
    for name in ("mass", "radius", "tidal_deformability", "moment_of_inertia", "baryon_mass"):
        x, y = getattr(a, name), getattr(b, name)
        np.testing.assert_allclose(y[:12], x[:12], rtol=1e-11, err_msg=name)
        np.testing.assert_allclose(y[12:], x[12:], rtol=1e-7, err_msg=name)
