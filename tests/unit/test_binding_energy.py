"""The gravitational binding energy M_b - M: one registry entry, available in every layer.

It was added as the proof that an output needs one declaration (src/tovforge/quantities.py) and no
other source file; these tests ask for it in each place a star quantity appears.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from helpers import READ2009
from tovforge import eos, grid, solve
from tovforge.cli import app
from tovforge.tables import read_table, sequence_table

SLY = [f"{k}={v}" for k, v in READ2009["SLy"].items()]
NAME = "binding_energy_msun"
runner = CliRunner()


def _be(stars):
    return stars.baryon_mass_msun - stars.mass_msun


def test_it_is_not_a_grid_default():
    d = grid.OutputSpec()
    assert NAME in grid.CURVES and NAME in grid.AT_MASS
    assert NAME not in d.curves and NAME not in d.at_mass  # defaults (hashed into grid specs) unchanged


def test_grid_spec_can_ask_for_it_as_curve_and_at_mass(tmp_path):
    spec = grid.parse_spec({
        "family": "piecewise-polytrope", "chunk_size": 4,
        "design": {"method": "sobol", "points": 4, "seed": 2},
        "outputs": {"curves": ["mass_msun", "baryon_mass_msun", NAME], "u_nodes": 6,
                    "at_mass": [NAME, "baryon_mass_msun"], "masses_msun": [1.2, 1.4]},
    })
    out = tmp_path / "g.h5"
    grid.run_grid(spec, out, workers=1, progress=False)
    g = grid.read_grid(out)
    ok = g.ok
    assert ok.sum() >= 3
    c = g.curves
    np.testing.assert_array_equal(c[NAME][ok], c["baryon_mass_msun"][ok] - c["mass_msun"][ok])
    # a fixed-mass star has the target mass to solver.mass_rtol (its own mass is not stored at_mass)
    np.testing.assert_allclose(g.at_mass[NAME][ok], g.at_mass["baryon_mass_msun"][ok] - np.array([1.2, 1.4]),
                               rtol=0, atol=spec.solver.mass_rtol * 1.4)
    assert (c[NAME][ok] > 0).all()  # a bound star: M_b > M
    import h5py

    with h5py.File(out) as h5:
        assert h5["curves"][NAME].attrs["unit"] == "Msun"


def test_at_mass_grid_value_is_baryon_mass_minus_the_star_mass():
    # the fixed-mass star's own mass is within mass_rtol of the target, so M_b - target agrees to ~1e-11
    spec = grid.parse_spec({"family": "piecewise-polytrope", "design": {"method": "sobol", "points": 1, "seed": 0},
                            "outputs": {"at_mass": [NAME, "baryon_mass_msun"], "masses_msun": [1.4]}})
    res = grid.solve_chunk(spec, np.array([list(READ2009["SLy"].values())]))
    seq = solve.solve_sequence(eos.make("piecewise-polytrope", **READ2009["SLy"]), masses=[1.4])
    assert res.at_mass[NAME][0, 0] == pytest.approx(_be(seq.at_mass)[0], rel=1e-9)


def test_solve_text_json_and_table(tmp_path):
    path = tmp_path / "seq.csv"
    res = runner.invoke(app, ["solve", "piecewise-polytrope", *SLY, "--masses", "1.4", "--json", "--stars", "12",
                              "--table", str(path)])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    seq = out["sequence"]
    np.testing.assert_array_equal(seq[NAME], np.subtract(seq["baryon_mass_msun"], seq["mass_msun"]))
    assert out["at_mass"][0][NAME] == out["at_mass"][0]["baryon_mass_msun"] - out["at_mass"][0]["mass_msun"]
    t = read_table(path)
    np.testing.assert_array_equal(t["binding_energy"], t["baryon_mass"] - t["mass"])
    assert t.units["binding_energy"] == "Msun"
    text = runner.invoke(app, ["solve", "piecewise-polytrope", *SLY, "--stars", "12"]).stdout
    assert "E_b [Msun]" in text


def test_table_sequence_has_the_column(sly, tmp_path):
    sequence_table(tmp_path / "s.npz", sly, points=12, command="test")
    t = read_table(tmp_path / "s.npz")
    np.testing.assert_array_equal(t["binding_energy"], t["baryon_mass"] - t["mass"])


@pytest.mark.parametrize("name", sorted(READ2009))
def test_agrees_with_the_lattimer_prakash_fit(name):
    """BE/M ~ 0.6 beta / (1 - 0.5 beta), beta = GM/(Rc^2): Lattimer & Prakash (2001, ApJ 550, 426).

    The fit's form and its ~20 % accuracy are from memory.  Over 1.0-2.0 Msun the three published
    piecewise polytropes (Read et al. 2009) lie within 15 % of it (measured: -15 % to -2 %); below
    about 0.7 Msun the fit overestimates by 30 % and more, so lighter stars are not checked.
    """
    s = solve.solve_sequence(eos.make("piecewise-polytrope", **READ2009[name]), masses=[1.0, 1.4, 1.8, 2.0])
    a = s.at_mass
    beta = a.compactness
    fit = 0.6 * beta / (1.0 - 0.5 * beta)
    np.testing.assert_allclose(a.value(NAME) / a.mass_msun, fit, rtol=0.20)
