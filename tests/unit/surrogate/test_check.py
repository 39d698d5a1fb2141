"""Held-out checks, calibration on the demo grids, and bad input."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest
from typer.testing import CliRunner

from tovforge import surrogate
from tovforge.cli import app
from tovforge.errors import InputError
from tovforge.grid import parse_spec, run_grid
from tovforge.surrogate import CheckReport, GPSettings, check, read_training_data, train_on

ROOT = Path(__file__).resolve().parents[3]
TRAIN = ROOT / "grids" / "demo-train.h5"
HOLDOUT = ROOT / "grids" / "demo-holdout.h5"
runner = CliRunner()


def _subset(data, n):
    import dataclasses

    return dataclasses.replace(data, theta=data.theta[:n], scalars={k: v[:n] for k, v in data.scalars.items()},
                               curves={k: v[:n] for k, v in data.curves.items()})


@pytest.fixture(scope="module")
def spline_model():
    return train_on(_subset(read_training_data(TRAIN), 1024), "spline")


@pytest.fixture(scope="module")
def gp_model():
    settings = GPSettings(n_subset=256, n_restarts=0, curve_groups=1, n_jobs=2)
    return train_on(_subset(read_training_data(TRAIN), 1024), "gp", settings)


def test_report_numbers_equal_an_independent_recomputation(spline_model, tmp_path):
    res = check(spline_model, HOLDOUT, tmp_path / "rep")
    saved = json.loads((tmp_path / "rep" / "report.json").read_text())
    assert CheckReport.from_json(saved) == res  # the typed report is what the file holds
    for name in ("report.md", "parity.png", "error_histograms.png", "error_vs_parameters.png",
                 "worst_mass_radius.png"):
        assert (tmp_path / "rep" / name).stat().st_size > 0
    # recompute from the file with h5py and numpy alone
    with h5py.File(HOLDOUT, "r") as f:
        ok = f["status/code"][...] == 0
        theta = f["parameters/values"][...][ok]
        mmax = f["scalars/mass_max_msun"][...][ok]
        masses = f["at_mass/masses_msun"][...]
        r_exact = f["at_mass/radius_km"][...][ok]
        l_exact = f["at_mass/tidal_deformability"][...][ok]
    sel = (masses[None, :] >= 1.0) & (masses[None, :] <= mmax[:, None] - 0.02) & np.isfinite(r_exact)
    r = spline_model.radius(theta, masses).value
    lam = spline_model.tidal_deformability(theta, masses).value
    dm = np.abs(spline_model.mass_max(theta).value - mmax)
    assert saved["errors"]["mass_max_msun"]["abs_p95"] == pytest.approx(np.percentile(dm, 95), rel=1e-12)
    assert saved["errors"]["mass_max_msun"]["abs_max"] == pytest.approx(dm.max(), rel=1e-12)
    dr = np.abs(r - r_exact)[sel]
    assert saved["errors"]["radius_km_at_mass"]["abs_p95"] == pytest.approx(np.percentile(dr, 95), rel=1e-12)
    assert saved["errors"]["radius_km_at_mass"]["abs_median"] == pytest.approx(np.median(dr), rel=1e-12)
    dl = np.abs(lam / l_exact - 1)[sel]
    assert saved["errors"]["tidal_deformability_at_mass"]["rel_p95"] == pytest.approx(np.percentile(dl, 95), rel=1e-12)
    assert saved["holdout"]["n_star_comparisons"] == int(sel.sum())
    assert res.to_json()["errors"] == saved["errors"]
    assert len(saved["worst"]) == 10 and saved["model"]["kind"] == "spline" and saved["model"]["method"] == "rbf"
    assert saved["calibration"] == {}  # a spline has no sigma to calibrate


def test_gp_sigma_is_calibrated_on_the_demo_grids(gp_model):
    """Fraction of held-out errors inside 2 predicted sigma: between 85 % and 99.5 %."""
    rep = check(gp_model, HOLDOUT)
    for name in ("mass_max_msun", "radius_km", "tidal_deformability"):
        frac = rep.calibration[name].within_2_sigma
        assert 0.85 <= frac <= 0.995, (name, frac)


def test_check_refuses_training_points(spline_model, tmp_path):
    """Never evaluate on training points: a held-out file that repeats them is refused."""
    bad = tmp_path / "train-as-holdout.h5"
    shutil.copy(TRAIN, bad)
    with pytest.raises(InputError, match="are training points"):
        check(spline_model, bad)


def test_bad_inputs_exit_2(spline_model, tmp_path):
    model_dir = tmp_path / "model"
    spline_model.save(model_dir)
    # held-out grid of another family
    other = tmp_path / "other-family.h5"
    run_grid(parse_spec({"family": "spectral", "design": {"method": "sobol", "points": 4, "seed": 1}}), other,
             workers=1, progress=False)
    res = runner.invoke(app, ["check", str(model_dir), "--holdout", str(other)])
    assert res.exit_code == 2 and "family 'spectral'" in res.stderr and len(res.stderr.strip().splitlines()) == 1
    # an edited family attribute: the file no longer matches its spec
    edited = tmp_path / "edited-family.h5"
    shutil.copy(HOLDOUT, edited)
    with h5py.File(edited, "r+") as f:
        f.attrs["family"] = "spectral"
    res = runner.invoke(app, ["check", str(model_dir), "--holdout", str(edited)])
    assert res.exit_code == 2 and "was altered" in res.stderr and len(res.stderr.strip().splitlines()) == 1
    # corrupt and truncated grid files
    junk = tmp_path / "junk.h5"
    junk.write_bytes(b"not an HDF5 file at all\n" * 10)
    res = runner.invoke(app, ["train", str(junk), "--kind", "spline", "--out", str(tmp_path / "m2")])
    assert res.exit_code == 2 and "junk.h5" in res.stderr and "Traceback" not in res.output
    cut = tmp_path / "cut.h5"
    cut.write_bytes(TRAIN.read_bytes()[: 200_000])
    res = runner.invoke(app, ["train", str(cut), "--kind", "spline", "--out", str(tmp_path / "m3")])
    assert res.exit_code == 2 and "cut.h5" in res.stderr
    # a model folder with a missing array (checksum updated, so the missing array is what is reported)
    arrays = dict(np.load(model_dir / "arrays.npz"))
    del arrays["alpha"]
    np.savez(model_dir / "arrays.npz", **arrays)
    meta = json.loads((model_dir / "model.json").read_text())
    meta["arrays_sha256"] = surrogate._model._sha256(model_dir / "arrays.npz")
    (model_dir / "model.json").write_text(json.dumps(meta))
    res = runner.invoke(app, ["check", str(model_dir), "--holdout", str(HOLDOUT)])
    assert res.exit_code == 2 and "missing array 'alpha'" in res.stderr
    # and an altered array file is caught by the checksum
    meta["arrays_sha256"] = "0" * 64
    (model_dir / "model.json").write_text(json.dumps(meta))
    res = runner.invoke(app, ["check", str(model_dir), "--holdout", str(HOLDOUT)])
    assert res.exit_code == 2 and "checksum" in res.stderr
    # no model folder at all
    res = runner.invoke(app, ["check", str(tmp_path / "nothing"), "--holdout", str(HOLDOUT)])
    assert res.exit_code == 2 and "no such model folder" in res.stderr


def test_check_figures_draw_the_exact_branch_and_the_calibration(gp_model, tmp_path):
    """Issue 16: the worst-case panels draw the exact solver's branch (not a polyline through the grid nodes)
    and are titled with parameter names; a model with a sigma gets a calibration figure."""
    from tovforge.surrogate._report_figures import _exact_branch, _theta_title

    check(gp_model, HOLDOUT, tmp_path / "rep")
    assert (tmp_path / "rep" / "calibration.png").stat().st_size > 0
    with h5py.File(HOLDOUT, "r") as f:
        i = int(np.flatnonzero(f["status/code"][...] == 0)[0])
        theta = f["parameters/values"][i]
        mmax = float(f["scalars/mass_max_msun"][i])
        r_nodes = f["curves/radius_km"][i]
        m_nodes = f["curves/mass_msun"][i]
    r, m = _exact_branch(gp_model.family, theta)
    assert r.size >= 200 and abs(m.max() - mmax) < 1e-6 * mmax  # the branch reaches the exact maximum
    inside = (m_nodes > m.min()) & (m_nodes < m.max() - 0.05)  # linear interpolation fails at the turn
    order = np.argsort(m[: int(np.argmax(m)) + 1])
    r_at_nodes = np.interp(m_nodes[inside], m[order], r[order])
    np.testing.assert_allclose(r_at_nodes, r_nodes[inside], atol=0.02)  # the same stars, 200 of them
    title = _theta_title(gp_model, theta)
    assert all(f"{n} = " in title for n in gp_model.parameter_names)
