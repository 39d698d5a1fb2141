"""Rough edges a new user met in the first hour (issue 16): help texts, --stars, uniform-density."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from typer.testing import CliRunner

from helpers import READ2009
from tovforge import eos, solve
from tovforge.cli import app

runner = CliRunner()
SLY = [f"{k}={v}" for k, v in READ2009["SLy"].items()]


def _help(*command: str) -> str:
    res = runner.invoke(app, [*command, "--help"], terminal_width=200)
    assert res.exit_code == 0, res.output
    return res.output


@pytest.mark.parametrize("option, default", [("--walkers", "32"), ("--steps", "1500"), ("--burn", "500"),
                                             ("--cross-check", "300"), ("--gp-subset", "512"),
                                             ("--seed", "20260301"), ("--out", "demo-output")])
def test_demo_help_shows_every_default(option, default):
    """Issue 16: rich markup swallowed '[default: 32]' written into a help text."""
    line = next(ln for ln in _help("demo").splitlines() if ln.strip().startswith(option + " "))
    assert re.search(rf"\[default: {re.escape(default)}[];]", line), line


def test_help_keeps_brackets_and_flags_have_no_metavar():
    text = _help("demo")
    assert "tovforge[demo]" in text  # the extra's name, not eaten as markup
    assert "<bool>" not in text
    for command in (("solve",), ("grid", "run"), ("table", "sequence"), ("train",)):
        assert "<bool>" not in _help(*command), command


@pytest.mark.parametrize("n", [8, 13])
def test_solve_stars_gives_that_many_stars(n):
    res = runner.invoke(app, ["solve", "piecewise-polytrope", *SLY, "--stars", str(n), "--json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    m = np.asarray(out["sequence"]["mass_msun"])
    assert m.size == n
    assert np.all(np.diff(m) > 0)  # still the stable branch in increasing mass
    assert m[-1] == out["mass_max"]["mass_msun"]  # the maximum-mass star is kept
    seq = solve.solve_sequence(eos.make("piecewise-polytrope", **READ2009["SLy"]), n_stars=n)
    assert m[0] == seq.branch.mass_msun[0]  # and the lightest: stars are left out, none is moved


def test_uniform_density_without_central_pressures_names_both_routes():
    res = runner.invoke(app, ["solve", "uniform-density", "energy_density=1e15"])
    assert res.exit_code == 2
    line = res.stderr.strip()
    assert "\n" not in line and "no maximum mass" in line
    assert "--central-pressures" in line and "solve.solve_stars" in line


def test_uniform_density_stars_at_central_pressures_match_the_library():
    pressures = [1e34, 1e35, 1e36]
    res = runner.invoke(app, ["solve", "uniform-density", "energy_density=1e15", "--central-pressures",
                              ",".join(f"{p:g}" for p in pressures), "--json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    E = eos.make("uniform-density", energy_density=1e15)
    ref = solve.solve_stars(E, [solve.central_enthalpy(E, pressure_dyn_cm2=p) for p in pressures])
    np.testing.assert_allclose(out["stars"]["central_pressure_dyn_cm2"], pressures, rtol=1e-9)
    np.testing.assert_array_equal(out["stars"]["radius_km"], ref.radius_km)
    # Buchdahl's limit (Buchdahl 1959, Phys. Rev. 116, 1027): 2M/R < 8/9, approached as p_c grows
    assert np.all(np.diff(out["stars"]["compactness"]) > 0) and out["stars"]["compactness"][-1] < 4 / 9
    text = runner.invoke(app, ["solve", "uniform-density", "energy_density=1e15", "--central-pressures", "1e35"])
    assert text.exit_code == 0 and "no search for M_max" in text.stdout


@pytest.mark.parametrize("args, words", [
    (["--central-pressures", "1e35", "--masses", "1.4"], "cannot be combined with --masses"),
    (["--central-pressures", "-1"], "must be positive"),
    (["--central-pressures", "1e35,abc"], "--central-pressures"),
])
def test_central_pressures_bad_input_is_one_line(args, words):
    res = runner.invoke(app, ["solve", "uniform-density", "energy_density=1e15", *args])
    assert res.exit_code == 2
    assert words in res.stderr and len(res.stderr.strip().splitlines()) == 1


def test_a_spectral_eos_without_maximum_is_not_told_of_a_table():
    """Issue 16: the spectral "no maximum" message spoke of "the EOS table"."""
    from tovforge.status import Status

    soft = ["gamma0=0.3485", "gamma1=-0.10528", "gamma2=0.010064", "gamma3=0.000197"]  # M rises to x = 10
    seq = solve.solve_sequence(eos.make("spectral", **{k: float(v) for k, v in (a.split("=") for a in soft)}))
    assert seq.status == Status.EOS_ENDS
    res = runner.invoke(app, ["solve", "spectral", *soft])
    assert res.exit_code == 2
    assert "tabulated" not in res.stderr and "for the spectral family x = ln(p/p0) = 10" in res.stderr
