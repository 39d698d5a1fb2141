"""The `tovforge table` commands: files written, values from the library, bad input as one line and exit 2."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
from helpers import READ2009
from table_helpers import THETA_SLY, tiny_model
from typer.testing import CliRunner
from tovforge import eos, solve, tables
from tovforge.cli import app

runner = CliRunner()
SLY = [f"{k}={v}" for k, v in READ2009["SLy"].items()]
NAMES = ("log_p1", "gamma1", "gamma2", "gamma3")


@pytest.fixture(scope="module")
def model_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("model") / "spline"
    tiny_model("spline").save(folder)
    return folder


def _one_line_error(res, *words):
    assert res.exit_code == 2, res.output
    assert res.stderr.startswith("error: ") and res.stderr.count("\n") == 1, res.stderr
    for w in words:
        assert w in res.stderr, (w, res.stderr)


def _samples_csv(path, n=40, seed=2, broken=()):
    """Invented samples (demo data): columns shuffled, a weight column, some broken rows."""
    rng = np.random.default_rng(seed)
    th = np.column_stack([rng.uniform(34.2, 34.6, n), rng.uniform(2.6, 3.4, n), rng.uniform(2.6, 3.4, n),
                          rng.uniform(2.6, 3.4, n)])
    lines = ["gamma2,log_p1,gamma1,gamma3,weight"]
    for i, r in enumerate(th):
        cells = [repr(float(r[2])), repr(float(r[0])), repr(float(r[1])), repr(float(r[3])), "1.0"]
        if i + 1 in broken:
            cells[2] = "nan"
        lines.append(",".join(cells))
    path.write_text("\n".join(lines) + "\n")
    return th


@pytest.mark.parametrize("fmt", ["csv", "h5", "npz"])
def test_sequence_in_every_format(tmp_path, fmt):
    out = tmp_path / f"sly.{fmt}"
    res = runner.invoke(app, ["table", "sequence", "piecewise-polytrope", *SLY, "--points", "12", "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert f"wrote 12 rows x {len(tables.SEQUENCE_COLUMNS)} columns to {out}" in res.stdout
    t = tables.read_table(out)
    assert t.units["central_density"] == "g/cm^3" and t.meta["kind"] == "sequence"
    assert t.meta["command"].startswith(("tovforge", "pytest", "python", "__main__"))
    info = runner.invoke(app, ["table", "info", str(out)])
    assert info.exit_code == 0 and "inertia_over_m3" in info.stdout and "[1e45 g cm^2]" in info.stdout


def test_sequence_csv_header_carries_units(tmp_path):
    out = tmp_path / "m.csv"
    res = runner.invoke(app, ["table", "sequence", "piecewise-polytrope", *SLY, "--masses", "1.4,3.0",
                              "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "no stable star at 3 Msun" in res.stdout
    header = [ln for ln in out.read_text().splitlines() if not ln.startswith("#")][0]
    assert header.startswith("target_mass [Msun],mass [Msun],radius [km],compactness [1],lambda [1],k2 [1],"
                             "inertia [1e45 g cm^2],inertia_over_m3 [1],baryon_mass [Msun],")
    # every star quantity of the registry, in its order, with its unit
    assert header.split(",")[1:] == [f"{c.name} [{c.unit}]" for c in tables.SEQUENCE_COLUMNS]


def test_box_from_a_model_equals_the_model(tmp_path, model_dir):
    out = tmp_path / "b.h5"
    res = runner.invoke(app, ["table", "box", str(model_dir), "--axis", "gamma1=2.5:3.5:5", "--axis",
                              "gamma2=2:4:4", "--fix", "log_p1=34.4", "--fix", "gamma3=3",
                              "--quantities", "mass_max,lambda,causality_margin", "--masses", "1.4",
                              "--out", str(out), "--quiet"])
    assert res.exit_code == 0, res.output
    t = tables.read_table(out)
    theta = np.stack([t[n] for n in NAMES], axis=1)
    model = tiny_model("spline")  # the model saved in model_dir
    np.testing.assert_allclose(t["lambda@1.4"], model.tidal_deformability(theta, 1.4).value, rtol=1e-12)
    assert t.meta["model"] == str(model_dir) and len(t) == 20


def test_box_exact_runs_through_the_grid_machinery(tmp_path):
    out = tmp_path / "e.npz"
    res = runner.invoke(app, ["table", "box", "--exact", "piecewise-polytrope", "--axis", "gamma1=2.8:3.2:2",
                              "--fix", "log_p1=34.384", "--fix", "gamma2=2.988", "--fix", "gamma3=2.851",
                              "--quantities", "mass_max,radius", "--masses", "1.4", "--workers", "1",
                              "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "2/2 EOS 100.0%" in res.stderr  # the grid's progress bar
    t = tables.read_table(out)
    np.testing.assert_array_equal(t["status"], [0, 0])
    np.testing.assert_allclose(t["gamma1"], [2.8, 3.2], rtol=1e-15)
    seq = solve.solve_sequence(eos.make("piecewise-polytrope", **{**READ2009["SLy"], "gamma1": 2.8}), masses=[1.4])
    np.testing.assert_allclose([t["mass_max"][0], t["radius@1.4"][0]],
                               [seq.mass_max.mass_msun, seq.at_mass.radius_km[0]], rtol=1e-9)
    assert t.meta["source"] == "exact" and not (tmp_path / "e.npz.grid.h5").exists()


def test_samples_left_out_rows_exit_2_and_the_rest_is_written(tmp_path, model_dir):
    samples = tmp_path / "post.csv"
    th = _samples_csv(samples, broken=(3, 17))
    out = tmp_path / "post.csv.out.npz"
    res = runner.invoke(app, ["table", "samples", str(model_dir), "--samples", str(samples), "--out", str(out),
                              "--ignore", "weight", "--masses", "1.4,2.0", "--plot", str(tmp_path / "mr.png"),
                              "--quiet"])
    _one_line_error(res, "2 of 40 rows left out", "rows 3, 17", "NaN", str(out))
    t = tables.read_table(out)
    assert len(t) == 38 and 3 not in t["sample"] and 17 not in t["sample"]
    keep = np.setdiff1d(np.arange(40), [2, 16])
    np.testing.assert_allclose(t["radius@1.4"], tiny_model("spline").radius(th[keep], 1.4).value, rtol=1e-12)
    assert (tmp_path / "post.csv.out.band.npz").is_file() and (tmp_path / "mr.png").is_file()


def test_samples_from_npy(tmp_path, model_dir):
    arr = np.zeros(5, dtype=[(n, "f8") for n in NAMES])
    for n in NAMES:
        arr[n] = THETA_SLY[n]
    np.save(tmp_path / "s.npy", arr)
    res = runner.invoke(app, ["table", "samples", str(model_dir), "--samples", str(tmp_path / "s.npy"),
                              "--out", str(tmp_path / "s.csv"), "--band", str(tmp_path / "band.h5"), "--quiet"])
    assert res.exit_code == 0, res.output
    band = tables.read_table(tmp_path / "band.h5")
    # five identical samples: a band of zero width, up to rounding (BLAS may sum a row differently
    # depending on its position in the block, by about 1e-15 relative)
    np.testing.assert_allclose(band["radius_p05"], band["radius_p95"], rtol=1e-13, atol=0)
    assert np.all(np.isfinite(band["radius_p05"]))


@pytest.mark.parametrize("args, words", [
    (["box", "{model}", "--axis", "gamma1=2:4:3", "--fix", "log_p1=34.4", "--fix", "gamma2=3", "--fix", "gamma3=3",
      "--quantities", "mass_max,radius_at_1.4"], ["unknown quantity 'radius_at_1.4'", "mass_max"]),
    (["box", "{model}", "--axis", "gamma1=1:4:3", "--fix", "log_p1=34.4", "--fix", "gamma2=3", "--fix", "gamma3=3"],
     ["axis gamma1=1:4:3", "outside the model's box", "[2, 4]"]),
    (["box", "{model}", "--axis", "gamma1=2:4", "--fix", "log_p1=34.4"], ["expects NAME=LO:HI:N"]),
    (["box", "{model}", "--axis", "gamma1=2:4:3", "--fix", "log_p1=34.4"], ["neither an axis nor fixed"]),
    (["box", "--axis", "gamma1=2:4:3"], ["give a MODEL folder or --exact FAMILY"]),
    (["box", "--exact", "piecewise-polytrope", "--axis", "gamma1=0.5:4:3", "--fix", "log_p1=34.4", "--fix",
      "gamma2=3", "--fix", "gamma3=3"], ["outside the allowed range of gamma1"]),
    (["box", "{model}", "--axis", "gamma1=2:4:3", "--fix", "log_p1=34.4", "--fix", "gamma2=3", "--fix", "gamma3=3",
      "--out", "{tmp}/b.txt"], ["unknown table format '.txt'"]),
    (["samples", "{model}", "--samples", "{tmp}/post.csv"], ["extra column weight", "or ignore weight"]),
    (["samples", "{model}", "--samples", "{tmp}/short.csv"], ["missing column gamma3"]),
    (["samples", "{model}", "--samples", "{tmp}/post.csv", "--ignore", "weight", "--quantities", "radius,mass"],
     ["unknown quantity 'mass'"]),
    (["sequence", "piecewise-polytrope", *SLY, "--points", "1"], ["Invalid value for '--points'", "greater than or equal to 2"]),
    (["sequence", "piecewise-polytrope", *SLY[:3]], ["needs parameter 'gamma3'"]),
    (["sequence", "piecewise-polytrope", *SLY, "--points", "5", "--masses", "1.4"], ["--points or --masses"]),
    (["binary", "piecewise-polytrope", *SLY, "--m1", "1.4"], ["--m1 and --m2 go together"]),
    (["binary", "nonsense", "--m1", "1.4", "--m2", "1.3"], ["neither a model folder, a table file nor an EOS"]),
    (["binary", "{model}", "log_p1=34.4", "--m1", "1.4", "--m2", "1.3"], ["gamma1 is missing"]),
    (["binary", "{model}", *SLY[:3], "gamma3=5", "--m1", "1.4", "--m2", "1.3"], ["outside the model's box"]),
    (["binary", "piecewise-polytrope", *SLY, "--chirp-mass", "1.2", "--mass-ratio", "1.5"],
     ["--mass-ratio 1.5: values must be in (0, 1]"]),
])
def test_bad_input_is_one_line_and_exit_2(tmp_path, model_dir, args, words):
    _samples_csv(tmp_path / "post.csv")
    (tmp_path / "short.csv").write_text("log_p1,gamma1,gamma2\n34.4,3,3\n")
    args = [a.format(model=model_dir, tmp=tmp_path) for a in args]
    if "--out" not in args and args[0] in ("box", "samples", "sequence"):
        args += ["--out", str(tmp_path / "out.csv")]
    res = runner.invoke(app, ["table", *args, *(["--quiet"] if args[0] in ("box", "samples") else [])])
    _one_line_error(res, *words)
    assert not (tmp_path / "out.csv").exists()


def test_binary_equal_masses_print_lambda(tmp_path):
    res = runner.invoke(app, ["table", "binary", "piecewise-polytrope", *SLY, "--m1", "1.35", "--m2", "1.35"])
    assert res.exit_code == 0, res.output
    row = res.stdout.splitlines()[1].split()
    assert row[4] == row[5] == row[6]  # Lambda1 = Lambda2 = Lambda_tilde


def test_binary_over_chirp_mass_and_ratio_from_a_table(tmp_path):
    seq = tmp_path / "sly.h5"
    assert runner.invoke(app, ["table", "sequence", "piecewise-polytrope", *SLY, "--points", "80",
                               "--out", str(seq)]).exit_code == 0
    out = tmp_path / "lt.csv"
    res = runner.invoke(app, ["table", "binary", str(seq), "--chirp-mass", "1.1:1.3:3", "--mass-ratio", "0.7:1:4",
                              "--out", str(out)])
    assert res.exit_code == 0, res.output
    t = tables.read_table(out)
    assert len(t) == 12 and t.meta["source"] == "table"
    np.testing.assert_allclose(t["chirp_mass"], np.repeat([1.1, 1.2, 1.3], 4), rtol=1e-14)
    np.testing.assert_allclose(t["mass_ratio"], np.tile([0.7, 0.8, 0.9, 1.0], 3), rtol=1e-14)
    np.testing.assert_allclose(t["lambda_tilde"], tables.lambda_tilde(t["m1"], t["m2"], t["lambda1"], t["lambda2"]),
                               rtol=1e-15)


def test_console_script_reports_bad_input_on_one_line(tmp_path):
    proc = subprocess.run([sys.executable, "-c", "from tovforge.cli import main; main()", "table", "box",
                           "--exact", "piecewise-polytrope", "--axis", "gamma1=2:4:3", "--quantities", "nope",
                           "--out", str(tmp_path / "x.csv")], capture_output=True, text=True)
    assert proc.returncode == 2
    assert proc.stderr.startswith("error: quantities: unknown quantity 'nope'") and proc.stderr.count("\n") == 1
    assert "Traceback" not in proc.stderr + proc.stdout


def test_helpful_refusals(tmp_path, model_dir):
    res = runner.invoke(app, ["table", "box", "piecewise-polytrope", "--axis", "gamma1=2:4:3", "--out",
                              str(tmp_path / "b.csv")])
    _one_line_error(res, "for exact solves write --exact piecewise-polytrope")
    (tmp_path / "pandas.csv").write_text(",log_p1,gamma1,gamma2,gamma3\n0,34.4,3,3,3\n")
    res = runner.invoke(app, ["table", "samples", str(model_dir), "--samples", str(tmp_path / "pandas.csv"),
                              "--out", str(tmp_path / "o.csv")])
    _one_line_error(res, "column 1 has no name (an index column?")
    _samples_csv(tmp_path / "post.csv")
    res = runner.invoke(app, ["table", "samples", str(model_dir), "--samples", str(tmp_path / "post.csv"),
                              "--ignore", "weight", "--out", str(tmp_path / "post.csv")])
    _one_line_error(res, "would be overwritten")
