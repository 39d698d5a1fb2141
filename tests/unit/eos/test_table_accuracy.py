"""Tables solved to the accuracy of their interpolant; phase transitions in tables; warnings."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from helpers import READ2009, assert_matches_baseline, table_rows_of, write_eos_table
from tovforge import eos, solve
from tovforge.errors import TableFormatError
from tovforge.units import PRESSURE_CGS_TO_GEOM

FAMILIES = {
    "piecewise-polytrope": READ2009["SLy"],
    "spectral": dict(gamma0=0.8, gamma1=0.1, gamma2=-0.01, gamma3=0.0),
    "sound-speed": dict(cs2_1=0.1, cs2_2=0.3, cs2_3=0.5, cs2_4=0.6, cs2_5=0.4),
}
FIELDS = ("radius_km", "tidal_deformability", "moment_of_inertia_1e45_g_cm2", "baryon_mass_msun")
# Relative error allowed at 300 rows; at N rows it is this times (300 / N)^2.  Measured (this
# machine): at 300 rows up to 4e-5 (M_max), 3e-5 (R), 9e-5 (Lambda), 3e-5 (I), 9e-7 (M_b); at 2000
# rows at most 5e-7, 5e-7, 8e-7, 1.1e-7, 1.2e-8: the interpolant's error falls like N^-2 or faster.
TOL_300 = {"mass_max": 1e-4, "radius_km": 8e-5, "tidal_deformability": 2e-4,
           "moment_of_inertia_1e45_g_cm2": 8e-5, "baryon_mass_msun": 5e-6}


@pytest.fixture(scope="module")
def direct():
    out = {}
    for name, par in FAMILIES.items():
        E = eos.make(name, **par)
        out[name] = (E, solve.solve_sequence(E, n_stars=12, masses=[1.0, 1.4]))
    return out


@pytest.mark.parametrize("n_rows", [300, 1000, 2000])
@pytest.mark.parametrize("family", list(FAMILIES))
def test_table_of_an_analytic_family_matches_the_family(tmp_path, direct, family, n_rows):
    """A table written from each analytic family solves to the family's own stars within the
    interpolant's error, which falls with the number of rows (rows log-spaced in density)."""
    E, ref = direct[family]
    T = eos.make("table", path=str(write_eos_table(tmp_path / "t.csv", table_rows_of(E, n_rows))))
    seq = solve.solve_sequence(T, n_stars=12, masses=[1.0, 1.4])
    scale = (300.0 / n_rows) ** 2
    assert abs(seq.mass_max.mass_msun / ref.mass_max.mass_msun - 1.0) < TOL_300["mass_max"] * scale
    for f in FIELDS:
        err = np.max(np.abs(getattr(seq.at_mass, f) / getattr(ref.at_mass, f) - 1.0))
        assert err < TOL_300[f] * scale, (f, err)
    # the integration itself is resolved: the step-doubling estimate is within the stated tolerance
    assert seq.error_estimate is not None and seq.error_estimate.exceeded == []


@pytest.mark.parametrize("family", list(FAMILIES))
def test_table_stars_match_an_adaptive_solve_of_the_same_interpolant(tmp_path, direct, family):
    """At 2000 rows the fixed steps agree with solve_ivp (rtol 1e-12) on the same interpolant:
    Lambda to 1e-5 (the project's goal for tables), M and R to 1e-7."""
    E, _ = direct[family]
    T = eos.make("table", path=str(write_eos_table(tmp_path / "t.csv", table_rows_of(E, 2000))))
    assert_matches_baseline(T, [0.15, 0.35], {"mass_msun": 1e-7, "radius_km": 1e-7, "tidal_deformability": 1e-5})


def test_first_law_without_a_rest_mass_column(tmp_path, direct):
    """Without a rest-mass column the first law gives rho; the baryon mass agrees with the family
    (it was 1.4e-3 low when the quadrature used PCHIP second derivatives at the rows)."""
    E, ref = direct["piecewise-polytrope"]
    T = eos.make("table", path=str(write_eos_table(tmp_path / "t.csv", table_rows_of(E, 2000), rest_mass=False)))
    seq = solve.solve_sequence(T, n_stars=12, masses=[1.0, 1.4])
    np.testing.assert_allclose(seq.at_mass.baryon_mass_msun, ref.at_mass.baryon_mass_msun, rtol=5e-7)


def _transition_rows(E, n):
    """Rows of a transition EOS with the Maxwell construction written as two rows of one pressure:
    ``n`` rows of the base EOS log-spaced in density up to the transition, then ``n`` rows above."""
    from tovforge.units import DENSITY_CGS_TO_GEOM, PRESSURE_CGS_TO_GEOM

    b = E.batch
    h_t = float(b.h_t[0])
    lanes = b.lanes(np.zeros(1, dtype=np.intp))
    p_t, e_t, rho_t, _ = (x[0] for x in lanes.eval(np.array([h_t]), np.array([h_t * (1.0 - 1e-12)])))
    base = eos.make("piecewise-polytrope", **READ2009["SLy"])
    lo = table_rows_of(base, n, rho_hi_g_cm3=rho_t / DENSITY_CGS_TO_GEOM * (1.0 - 1e-3))
    up = E.evaluate(h_t + np.concatenate([[0.0], np.geomspace(1e-6, 1.5, n)]))
    p = np.concatenate([lo.pressure_dyn_cm2, [p_t / PRESSURE_CGS_TO_GEOM], up.pressure_dyn_cm2])
    e = np.concatenate([lo.energy_density_g_cm3, [e_t / DENSITY_CGS_TO_GEOM], up.energy_density_g_cm3])
    r = np.concatenate([lo.rest_mass_density_g_cm3, [rho_t / DENSITY_CGS_TO_GEOM], up.rest_mass_density_g_cm3])
    p[n] = p[n + 1]  # the two rows of the transition share one pressure exactly
    return p, e, r


@pytest.mark.parametrize("rest_mass", [True, False])
def test_table_with_a_maxwell_construction_matches_the_transition_family(tmp_path, rest_mass):
    """Rows of equal pressure are a jump: the table of a transition EOS (Delta e / e_t = 0.3 at
    p_t = 10^34.6 dyn/cm^2, c_s^2 = 0.6 above) gives the family's stars, Lambda included (y jumps)."""
    E = eos.make("piecewise-polytrope-transition", **READ2009["SLy"], log_p_transition=34.6, jump_ratio=0.3,
                 cs2_above=0.6)
    T = eos.make("table", path=str(write_eos_table(tmp_path / "t.csv", _transition_rows(E, 1000),
                                                   rest_mass=rest_mass)))
    assert np.isfinite(T.batch.jumps).sum() == 1
    ref = solve.solve_sequence(E, n_stars=12, masses=[1.2, 1.6])
    tab = solve.solve_sequence(T, n_stars=12, masses=[1.2, 1.6])
    assert tab.mass_max.mass_msun == pytest.approx(ref.mass_max.mass_msun, rel=2e-6)
    np.testing.assert_allclose(tab.at_mass.radius_km, ref.at_mass.radius_km, rtol=3e-6)
    np.testing.assert_allclose(tab.at_mass.tidal_deformability, ref.at_mass.tidal_deformability, rtol=2e-5)
    np.testing.assert_allclose(tab.at_mass.baryon_mass_msun, ref.at_mass.baryon_mass_msun, rtol=2e-6)


def test_a_table_split_at_a_row_without_a_jump_gives_the_same_stars(tmp_path, direct):
    """A smooth table with one row written twice (a split with Delta e = 0) goes through the jump
    machinery and gives the stars of the unsplit table."""
    E, _ = direct["spectral"]
    rows = table_rows_of(E, 1000)
    cols = (rows.pressure_dyn_cm2, rows.energy_density_g_cm3, rows.rest_mass_density_g_cm3)
    k = int(np.searchsorted(rows.rest_mass_density_g_cm3, 5e14))
    split = tuple(np.insert(c, k, c[k]) for c in cols)
    A = eos.make("table", path=str(write_eos_table(tmp_path / "a.csv", cols)))
    B = eos.make("table", path=str(write_eos_table(tmp_path / "b.csv", split)))
    assert np.isfinite(B.batch.jumps).sum() == 1 and np.isfinite(A.batch.jumps).sum() == 0
    sa = solve.solve_sequence(A, n_stars=12, masses=[1.0, 1.4])
    sb = solve.solve_sequence(B, n_stars=12, masses=[1.0, 1.4])
    assert sb.mass_max.mass_msun == pytest.approx(sa.mass_max.mass_msun, rel=1e-7)
    for f in FIELDS:
        np.testing.assert_allclose(getattr(sb.at_mass, f), getattr(sa.at_mass, f), rtol=2e-6, err_msg=f)


def test_first_row_far_from_zero_pressure_warns(tmp_path, direct):
    E, _ = direct["piecewise-polytrope"]
    path = write_eos_table(tmp_path / "core.csv", table_rows_of(E, 400, rho_lo_g_cm3=1e14))
    with pytest.warns(UserWarning, match=r"core\.csv:2: the first row .* taken as the stellar surface"):
        eos.make("table", path=str(path))
    fine = write_eos_table(tmp_path / "full.csv", table_rows_of(E, 400))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        eos.make("table", path=str(fine))


def test_rough_table_gets_an_error_estimate_and_a_warning(tmp_path, direct):
    """Noise of 1e-3 in the energy density puts features between rows that the steps cannot
    resolve: the step-doubling estimate says so (and the interpolated sound speed exceeds c
    between causal rows)."""
    E, _ = direct["piecewise-polytrope"]
    rows = table_rows_of(E, 600)
    rng = np.random.default_rng(1)
    e = rows.energy_density_g_cm3 * (1.0 + 1e-3 * rng.standard_normal(600))
    e = np.maximum.accumulate(e * (1 + 1e-12 * np.arange(600)))
    T = eos.make("table", path=str(write_eos_table(tmp_path / "rough.csv", (rows.pressure_dyn_cm2, e),
                                                   rest_mass=False)))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        seq = solve.solve_sequence(T, n_stars=12)
    said = " | ".join(str(w.message) for w in caught)
    assert "estimated integration error exceeds" in said
    assert seq.error_estimate.exceeded
    # its noisy sound speed also overshoots c between causal rows, which gets its own warning
    assert "rows are causal" in said and "interpolant between rows exceeds the speed of light" in said
    rows_cs2 = T.batch.row_sound_speed_sq(seq.mass_max.central_pressure_dyn_cm2 * PRESSURE_CGS_TO_GEOM)
    assert rows_cs2 <= 1.0 < seq.mass_max.max_sound_speed_sq


@pytest.mark.parametrize(
    "rows, match",
    [
        ([(1, 1), (2, 2), (3, 2.5), (4, 2.4), (5, 5)], r"t\.csv:5: energy_density must increase strictly"),
        ([(1, 1), (2, 2), (2, 1.5), (4, 4), (5, 5)], r"t\.csv:4: energy_density must not fall across a phase"),
        ([(1, 1), (1, 2), (3, 3), (4, 4), (5, 5)], r"t\.csv:3: a phase transition .* cannot start at the first row"),
        ([(1, 1), (2, 2), (3, 3), (4, 4), (4, 5)], r"t\.csv:6: a phase transition at the last row"),
        ([(1, 1), (2, 2), ("nan", 3), (4, 4), (5, 5)], r"t\.csv:4: pressure must be a positive finite number"),
    ],
)
def test_bad_tables_name_file_and_line(tmp_path, rows, match):
    path = tmp_path / "t.csv"
    path.write_text("# pressure[dyn/cm^2], energy_density[g/cm^3]\n" + "\n".join(f"{a}, {b}" for a, b in rows) + "\n")
    with pytest.raises(TableFormatError, match=match):
        eos.make("table", path=str(path))


def test_table_with_a_maxwell_construction_above_seidovs_limit_has_the_cusp_and_the_twins(tmp_path):
    """The issue's example as 1000 + 1000 rows with two rows of one pressure (Delta e / e_t = 0.639 at
    p_t = 10^34.46 dyn/cm^2, c_s^2 = 1 above; above Seidov's limit, Seidov 1971, Sov. Astron. 15, 347):
    M_max is the cusp at the transition and the twin branch follows, as for the family, to the table's
    interpolation error (measured: 2.7e-6 at the cusp and the minimum, 1e-8 at the twin maximum)."""
    E = eos.make("piecewise-polytrope-transition", **READ2009["SLy"], log_p_transition=34.46, jump_ratio=0.639,
                 cs2_above=1.0)
    T = eos.make("table", path=str(write_eos_table(tmp_path / "t.csv", _transition_rows(E, 1000))))
    ref = solve.solve_sequence(E, n_stars=12)
    tab = solve.solve_sequence(T, n_stars=12)
    assert tab.mass_max.mass_msun == pytest.approx(ref.mass_max.mass_msun, rel=1e-5)
    assert tab.mass_max.star.central_pseudo_enthalpy[0] == pytest.approx(float(T.batch.jumps[0, 0]), rel=1e-14)
    assert tab.twin.mass_min_msun == pytest.approx(ref.twin.mass_min_msun, rel=1e-5)
    assert tab.twin.mass_max.mass_msun == pytest.approx(ref.twin.mass_max.mass_msun, rel=1e-6)
