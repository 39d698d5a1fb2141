"""`tovforge solve` with user tables and transition families: bad tables are one line and exit 2."""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

from helpers import READ2009
from tovforge.cli import app

runner = CliRunner()
HEAD = "# pressure[dyn/cm^2], energy_density[g/cm^3]\n"


@pytest.mark.parametrize(
    "rows, line, words",
    [
        ("1,1\n2,2\n3,2.5\n4,2.4\n5,5\n", 5, "energy_density must increase strictly"),  # non-monotone e
        ("1,1\n2,2\n2,1.5\n4,4\n5,5\n", 4, "must not fall across a phase transition"),  # negative jump
        ("1,1\n1,2\n3,3\n4,4\n5,5\n", 3, "cannot start at the first row"),  # jump at the first row
        ("1,1\n2,2\nnan,3\n4,4\n5,5\n", 4, "pressure must be a positive finite number"),  # NaN row
    ],
)
def test_bad_tables_are_one_line_with_file_and_line_and_exit_2(tmp_path, rows, line, words):
    path = tmp_path / "bad.csv"
    path.write_text(HEAD + rows)
    res = runner.invoke(app, ["solve", "table", f"path={path}"])
    assert res.exit_code == 2, res.output
    err = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(err) == 1 and "Traceback" not in res.output
    assert f"bad.csv:{line}:" in err[0] and words in err[0]


def test_transition_family_solves_from_the_command_line():
    sly = [f"{k}={v}" for k, v in READ2009["SLy"].items()]
    res = runner.invoke(app, ["solve", "piecewise-polytrope-transition", *sly, "log_p_transition=34.6",
                              "jump_ratio=0.3", "cs2_above=0.6", "--json", "--stars", "16", "--masses", "1.4"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    assert out["parameters"]["jump_ratio"] == 0.3
    assert 1.4 < out["mass_max"]["mass_msun"] < 3.0


def test_transition_parameter_out_of_range_is_one_line():
    sly = [f"{k}={v}" for k, v in READ2009["SLy"].items()]
    res = runner.invoke(app, ["solve", "piecewise-polytrope-transition", *sly, "log_p_transition=34.6",
                              "jump_ratio=-0.1", "cs2_above=0.6"])
    assert res.exit_code == 2
    assert "'jump_ratio'" in res.stderr and "[0, 10]" in res.stderr
