"""The command line of the surrogate stage end to end: train, check, grid refine, export."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tovforge.cli import app

ROOT = Path(__file__).resolve().parents[2]
TRAIN = ROOT / "grids" / "demo-holdout.h5"  # 512 points: small enough to train on in seconds
HOLDOUT = ROOT / "grids" / "demo-train.h5"  # another design, so no training point is checked
runner = CliRunner()
pytestmark = pytest.mark.filterwarnings("ignore:GP kernel:UserWarning")


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    d = tmp_path_factory.mktemp("cli")
    gp = runner.invoke(app, ["train", str(TRAIN), "--kind", "gp", "--out", str(d / "gp"), "--subset", "64",
                             "--restarts", "0", "--curve-groups", "1", "--share-kernels"])
    sp = runner.invoke(app, ["train", str(TRAIN), "--kind", "spline", "--out", str(d / "spline"), "--no-warp",
                             "--isotropic"])
    return d, gp, sp


def test_train_writes_models_with_the_options_given(trained):
    d, gp, sp = trained
    assert gp.exit_code == 0, gp.output
    assert sp.exit_code == 0, sp.output
    # 512 rows: status 0 and status 2 (M_max below the floor, curves complete) are both learnt
    assert "trained gp on 512 points" in gp.stdout and "trained spline (rbf) on 512 points" in sp.stdout
    meta_gp = json.loads((d / "gp" / "model.json").read_text())
    assert meta_gp["kind"] == meta_gp["method"] == "gp"
    assert meta_gp["settings"]["n_subset"] == 64 and meta_gp["settings"]["share_curve_kernels"]
    assert meta_gp["settings"]["warp_inputs"]
    assert meta_gp["fit"]["input_warp"] == {f"gamma{i}": f"ln(gamma{i} - 1)" for i in (1, 2, 3)}
    meta_sp = json.loads((d / "spline" / "model.json").read_text())
    assert meta_sp["kind"] == "spline" and meta_sp["method"] == "rbf"
    assert meta_sp["settings"]["warp_inputs"] is False and meta_sp["settings"]["anisotropic"] is False
    assert meta_sp["fit"]["input_warp"] == {}


def test_check_prints_the_table_and_writes_the_report(trained):
    d, _, _ = trained
    res = runner.invoke(app, ["check", str(d / "spline"), "--holdout", str(HOLDOUT), "--report", str(d / "rep")])
    assert res.exit_code == 0, res.output
    assert "radius_km_at_mass" in res.stdout and "targets (p95; must reach" in res.stdout
    report = json.loads((d / "rep" / "report.json").read_text())
    assert report["holdout"]["n_used"] > 3000 and report["model"]["kind"] == "spline"
    assert report["model"]["method"] == "rbf" and "check of a spline (rbf) model" in res.stdout
    assert (d / "rep" / "report.md").is_file()


def test_refine_prints_the_learning_curve(trained):
    d, _, _ = trained
    res = runner.invoke(app, ["grid", "refine", str(d / "gp"), "--budget", "4", "--holdout", str(HOLDOUT),
                              "--candidates", "256", "--workers", "1", "--out", str(d / "gp-refined")])
    assert res.exit_code == 0, res.output
    assert "added 4 exact solves" in res.stdout and "training points" in res.stdout
    rows = [line.split() for line in res.stdout.splitlines() if line.strip()[:3].isdigit()]
    assert len(rows) == 2 and rows[0][0] == "512" and 512 < int(rows[1][0]) <= 516  # before and after
    assert json.loads((d / "gp-refined" / "model.json").read_text())["learning_curve"]


def test_export_writes_an_importable_file(trained, tmp_path):
    d, _, _ = trained
    out = tmp_path / "cli_gp.py"
    res = runner.invoke(app, ["export", str(d / "gp"), "--out", str(out), "--namespaces", "numpy"])
    assert res.exit_code == 0, res.output
    assert out.is_file() and "wrote" in res.stdout
    assert "the model sees ln(gamma1 - 1)" in out.read_text()[:3000]
