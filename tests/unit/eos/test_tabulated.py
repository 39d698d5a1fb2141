"""Tabulated EOS files: reading, units, validation with line numbers, solves."""

from __future__ import annotations

import numpy as np
import pytest

from tovforge import eos, solve
from tovforge.errors import TableFormatError
from tovforge.units import C_CGS, MEV_FM3_TO_DYN_CM2, MEV_FM3_TO_G_CM3


def _sly_rows(sly, n=600):
    h = np.concatenate([np.geomspace(1e-7, 0.02, n // 3), np.linspace(0.02, 1.4, 2 * n // 3)[1:]])
    pt = sly.evaluate(h)
    return pt.pressure_dyn_cm2, pt.energy_density_g_cm3, pt.rest_mass_density_g_cm3


def _write(path, header, rows, sep=","):
    lines = [header] + [sep.join(f"{v:.12e}" for v in r) for r in rows]
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture(scope="module")
def sly_table(tmp_path_factory, sly):
    p, e, rho = _sly_rows(sly)
    path = tmp_path_factory.mktemp("tab") / "sly.csv"
    return _write(path, "# pressure[dyn/cm^2], energy_density[g/cm^3], rest_mass_density[g/cm^3]", zip(p, e, rho))


def test_table_of_a_smooth_eos_reproduces_its_stars(tmp_path):
    """A table sampled from a Gamma = 2 polytrope gives the same stars.

    The residual differences come from cutting the table at its first row
    (h = 1e-7 instead of 0: a layer ~1e-6 R thick) and from the PCHIP
    interpolation; both are far below 1e-4.
    """
    E = eos.make("polytrope", K=100.0, gamma=2.0)
    h = np.geomspace(1e-7, 1.2, 300)
    pt = E.evaluate(h)
    path = _write(tmp_path / "poly.csv", "# pressure[dyn/cm^2], energy_density[g/cm^3], rest_mass_density[g/cm^3]",
                  zip(pt.pressure_dyn_cm2, pt.energy_density_g_cm3, pt.rest_mass_density_g_cm3))
    T = eos.make("table", path=str(path))
    ref = solve.solve_sequence(E, n_stars=10, masses=[1.0])
    tab = solve.solve_sequence(T, n_stars=10, masses=[1.0])
    assert tab.mass_max.mass_msun == pytest.approx(ref.mass_max.mass_msun, rel=1e-5)
    assert tab.at_mass.radius_km[0] == pytest.approx(ref.at_mass.radius_km[0], rel=1e-5)
    assert tab.at_mass.tidal_deformability[0] == pytest.approx(ref.at_mass.tidal_deformability[0], rel=1e-4)
    assert tab.at_mass.baryon_mass_msun[0] == pytest.approx(ref.at_mass.baryon_mass_msun[0], rel=1e-5)


def test_table_of_sly_mass_and_radius(sly, sly_table):
    """A 600-row table of SLy: M and R agree to 2e-4.

    Lambda is not compared tightly: the sound speed of the piecewise polytrope
    jumps at its dividing densities, which a C1 interpolant of the table
    smooths over one row interval.
    """
    T = eos.make("table", path=str(sly_table))
    ref = solve.solve_sequence(sly, n_stars=20, masses=[1.4])
    tab = solve.solve_sequence(T, n_stars=20, masses=[1.4])
    assert tab.mass_max.mass_msun == pytest.approx(ref.mass_max.mass_msun, rel=2e-4)
    assert tab.at_mass.radius_km[0] == pytest.approx(ref.at_mass.radius_km[0], rel=2e-4)
    assert tab.at_mass.tidal_deformability[0] == pytest.approx(ref.at_mass.tidal_deformability[0], rel=2e-2)


def test_units_mev_fm3_and_whitespace(tmp_path, sly):
    p, e, _ = _sly_rows(sly, 300)
    a = _write(tmp_path / "a.txt", "# pressure[dyn/cm^2] energy_density[g/cm^3]", zip(p, e), sep=" ")
    b = _write(tmp_path / "b.csv", "pressure[MeV/fm^3],energy_density[MeV/fm^3]",
               zip(p / MEV_FM3_TO_DYN_CM2, e / MEV_FM3_TO_G_CM3))
    c = _write(tmp_path / "c.csv", "# no header names here", zip(p * 0.1, e * C_CGS**2))
    Ea = eos.make("table", path=str(a))
    Eb = eos.make("table", path=str(b))
    Ec = eos.make("table", path=str(c), columns="pressure,energy_density", units="Pa,erg/cm^3")
    h = np.linspace(0.01, 0.8, 9)
    for E in (Eb, Ec):
        np.testing.assert_allclose(E.evaluate(h).pressure_dyn_cm2, Ea.evaluate(h).pressure_dyn_cm2, rtol=1e-9)


@pytest.mark.parametrize(
    "header, rows, match",
    [
        ("# pressure[dyn/cm^2], energy_density[g/cm^3]", [(1, 1), (2, 2), (1.5, 3), (4, 4)], r"bad\.csv:4: pressure must not decrease"),
        ("# pressure[dyn/cm^2], energy_density[g/cm^3]", [(1, 1), (2, -2), (3, 3), (4, 4)], r"bad\.csv:3: energy_density must be a positive"),
        ("# pressure[dyn/cm^2], temperature[K]", [(1, 1), (2, 2), (3, 3), (4, 4)], r"bad\.csv:1: unknown column 'temperature'"),
        ("# pressure[dyn/cm^2]", [(1,), (2,), (3,), (4,)], r"missing column 'energy_density'"),
        ("# pressure[bar], energy_density[g/cm^3]", [(1, 1), (2, 2), (3, 3), (4, 4)], r"bad\.csv:1: unknown unit 'bar' for pressure"),
        ("# pressure[dyn/cm^2], energy_density[g/cm^3]", [(1, 1), (2, 2)], r"needs at least 4 data rows"),
        ("# pressure[dyn/cm^2], energy_density[g/cm^3]", [(1, 1), (2, 2, 2), (3, 3), (4, 4)], r"bad\.csv:3: expected 2 columns"),
    ],
)
def test_malformed_tables_name_file_and_line(tmp_path, header, rows, match):
    path = tmp_path / "bad.csv"
    path.write_text("\n".join([header] + [",".join(str(v) for v in r) for r in rows]) + "\n")
    with pytest.raises(TableFormatError, match=match):
        eos.make("table", path=str(path))


def test_missing_file(tmp_path):
    with pytest.raises(TableFormatError, match="cannot read the EOS table"):
        eos.make("table", path=str(tmp_path / "nope.csv"))
