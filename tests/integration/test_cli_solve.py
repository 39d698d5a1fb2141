"""The `tovforge solve` and `tovforge families` commands."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

from helpers import READ2009
from tovforge import eos, quantities, solve
from tovforge.cli import app
from tovforge.tables import SEQUENCE_COLUMNS, read_table

runner = CliRunner()
SLY = [f"{k}={v}" for k, v in READ2009["SLy"].items()]


def test_families_lists_parameters_and_boxes():
    res = runner.invoke(app, ["families"])
    assert res.exit_code == 0
    for word in ("piecewise-polytrope", "log_p1", "spectral", "sound-speed", "table", "uniform-density"):
        assert word in res.output


def test_json_output_has_the_documented_keys():
    res = runner.invoke(app, ["solve", "piecewise-polytrope", *SLY, "--masses", "1.4,2.0,3.0", "--json", "--stars", "20"])
    assert res.exit_code == 0, res.output
    lines = [ln for ln in res.stdout.splitlines() if ln.strip()]
    assert len(lines) == 1  # exactly one JSON object on stdout
    out = json.loads(lines[0])
    assert set(out) >= {"family", "parameters", "mass_max", "at_mass", "sequence"}
    assert set(out["mass_max"]) == {"mass_msun", "radius_km", "central_pressure_dyn_cm2", "max_sound_speed_sq"}
    star_keys = {q.name for q in quantities.star_quantities()}  # every star quantity, by canonical name
    assert {"mass_msun", "radius_km", "tidal_deformability", "k2", "moment_of_inertia_1e45_g_cm2",
            "baryon_mass_msun", "central_pressure_dyn_cm2"} <= star_keys
    assert set(out["sequence"]) == star_keys
    assert set(out["at_mass"][0]) == star_keys | {"requested_mass_msun", "reason"}
    assert out["at_mass"][0]["mass_msun"] == pytest.approx(1.4) and out["at_mass"][0]["reason"] is None
    # above M_max: null, not a crash, and the entry still says which mass was asked and why it is null
    third = out["at_mass"][2]
    assert third["radius_km"] is None and third["mass_msun"] is None and third["requested_mass_msun"] == 3.0
    assert third["reason"].startswith("above M_max = 2.04")
    assert out["twin_branch"] is None
    assert "above M_max" in res.stderr
    assert out["mass_max"]["mass_msun"] == pytest.approx(2.05, abs=0.02)


def test_table_and_profile(tmp_path):
    path = tmp_path / "seq.csv"
    res = runner.invoke(app, ["solve", "piecewise-polytrope", *SLY, "--stars", "12", "--table", str(path),
                              "--profile", "1.4"])
    assert res.exit_code == 0, res.output
    assert "M_max" in res.stdout and "interior of the 1.4 Msun star" in res.stdout
    t = read_table(path)  # the format of `tovforge table sequence`
    assert list(t.columns) == [c.name for c in SEQUENCE_COLUMNS]
    assert t.units["mass"] == "Msun" and t.meta["kind"] == "sequence" and t.meta["mode"] == "branch"
    assert np.all(np.diff(t["mass"]) > 0)
    seq = solve.solve_sequence(eos.make("piecewise-polytrope", **READ2009["SLy"]), n_stars=12)
    # --stars 12: twelve of the branch's exact stars (those that locate M_max are thinned out, issue 16)
    lam = seq.branch.tidal_deformability
    assert len(t) == 12 and np.all(np.isin(t["lambda"], lam))
    assert t["lambda"][0] == lam[0] and t["lambda"][-1] == lam[-1]


def test_solve_table_feeds_table_binary(tmp_path):
    """`table binary` reads Lambda(M) from a `solve --table` file as from a `table sequence` file."""
    path = tmp_path / "seq.csv"
    assert runner.invoke(app, ["solve", "piecewise-polytrope", *SLY, "--table", str(path)]).exit_code == 0
    for source in (path, tmp_path / "seq2.csv"):
        if source != path:
            assert runner.invoke(app, ["table", "sequence", "piecewise-polytrope", *SLY, "--out",
                                       str(source)]).exit_code == 0
        res = runner.invoke(app, ["table", "binary", str(source), "--chirp-mass", "1.188",
                                  "--mass-ratio", "0.8", "--out", str(tmp_path / f"b-{source.stem}.csv")])
        assert res.exit_code == 0, res.output
        assert np.isfinite(read_table(tmp_path / f"b-{source.stem}.csv")["lambda_tilde"]).all()


def test_unknown_table_suffix_is_refused_before_solving(tmp_path):
    res = runner.invoke(app, ["solve", "piecewise-polytrope", *SLY, "--table", str(tmp_path / "seq.txt")])
    assert res.exit_code == 2 and "seq.txt" in res.stderr and not (tmp_path / "seq.txt").exists()


@pytest.mark.parametrize(
    "args, words",
    [
        (["solve", "piecewise", "a=1"], ["Unknown EOS family 'piecewise'"]),
        (["solve", "piecewise-polytrope", *SLY[:3]], ["needs parameter 'gamma3'"]),
        (["solve", "piecewise-polytrope", *SLY, "gamma4=2"], ["no parameter 'gamma4'"]),
        (["solve", "piecewise-polytrope", "log_p1=34.4", "gamma1=0.9", "gamma2=3", "gamma3=3"],
         ["'gamma1'", "(1, 10]", "0.9"]),
        (["solve", "piecewise-polytrope", "log_p1=nan", "gamma1=3", "gamma2=3", "gamma3=3"], ["'log_p1'", "nan"]),
        (["solve", "piecewise-polytrope", "log_p1=abc", "gamma1=3", "gamma2=3", "gamma3=3"], ["'log_p1'", "abc"]),
        (["solve", "piecewise-polytrope", *SLY, "--masses", "1.4,x"], ["--masses"]),
        (["solve", "table", "path=/nonexistent/eos.csv"], ["cannot read the EOS table"]),
    ],
)
def test_bad_input_is_one_line_and_exit_2(args, words):
    res = runner.invoke(app, args)
    assert res.exit_code == 2
    err = res.stderr.strip()
    assert len(err.splitlines()) == 1 and err.startswith("error:")
    assert "Traceback" not in res.output
    for w in words:
        assert w in err


def test_malformed_table_names_the_line(tmp_path):
    path = tmp_path / "eos.csv"
    path.write_text("# pressure[dyn/cm^2], energy_density[g/cm^3]\n1,1\n2,2\n1.5,3\n4,4\n")
    res = runner.invoke(app, ["solve", "table", f"path={path}"])
    assert res.exit_code == 2
    assert f"{path}:4:" in res.stderr


def test_console_script_runs_as_a_process():
    """The installed entry point gives the same exit code and one stderr line."""
    proc = subprocess.run([sys.executable, "-m", "tovforge.cli", "solve", "polytrope", "K=-1", "gamma=2"],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and "'K'" in proc.stderr


def test_json_of_a_twin_branch_keeps_every_requested_mass():
    """SLy with the issue's jump at 2 n_sat (above Seidov's limit): M_max is the cusp at 0.653 Msun,
    the twin branch reaches 2.26 Msun; every at_mass entry says which mass was asked and why it is null."""
    res = runner.invoke(app, ["solve", "piecewise-polytrope-transition", *SLY, "log_p_transition=34.46",
                              "jump_ratio=0.639", "cs2_above=1", "--masses", "0.1,0.652,1.4,2.5", "--json",
                              "--stars", "12"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    assert out["mass_max"]["mass_msun"] == pytest.approx(0.6533, abs=1e-4)
    asked = [0.1, 0.652, 1.4, 2.5]
    assert [e["requested_mass_msun"] for e in out["at_mass"]] == asked
    assert [e["mass_msun"] is None for e in out["at_mass"]] == [True, False, True, True]
    assert out["at_mass"][0]["reason"].startswith("below the lightest star of the stable branch")
    assert out["at_mass"][2]["reason"].startswith("above M_max") and "twin branch" in out["at_mass"][2]["reason"]
    tw = out["twin_branch"]
    assert set(tw) == {"mass_max", "mass_min", "at_mass", "sequence"}
    assert tw["mass_max"]["mass_msun"] == pytest.approx(2.264, abs=1e-3)
    assert tw["mass_min"]["mass_msun"] == pytest.approx(out["mass_max"]["mass_msun"] - 0.0016, abs=1e-4)
    assert [e["requested_mass_msun"] for e in tw["at_mass"]] == asked
    assert [e["mass_msun"] is None for e in tw["at_mass"]] == [True, False, False, True]
    assert tw["at_mass"][3]["reason"].startswith("above its maximum")
    assert tw["sequence"]["mass_msun"][0] == tw["mass_min"]["mass_msun"]
    text = runner.invoke(app, ["solve", "piecewise-polytrope-transition", *SLY, "log_p_transition=34.46",
                               "jump_ratio=0.639", "cs2_above=1", "--stars", "8"])
    assert text.exit_code == 0 and "twins    a second stable branch from its minimum 0.6517" in text.stdout


def test_table_of_a_sequence_with_twins_holds_both_branches(tmp_path):
    path = tmp_path / "twins.csv"
    res = runner.invoke(app, ["solve", "piecewise-polytrope-transition", *SLY, "log_p_transition=34.46",
                              "jump_ratio=0.639", "cs2_above=1", "--stars", "8", "--table", str(path)])
    assert res.exit_code == 0, res.output
    t = read_table(path)
    stable, twin = t["branch"] == 1, t["branch"] == 2
    assert stable.any() and twin.any() and np.all(np.diff(t["branch"]) >= 0)
    assert t["mass"][stable].max() < 0.66 and t["mass"][twin].max() > 2.2
