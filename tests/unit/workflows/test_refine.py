"""grid refine: exact solves where the GP's sigma is largest, retraining, the learning curve, bad input."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from tovforge.cli import app
from tovforge.errors import InputError
from tovforge.grid import load_spec, read_grid, run_grid
from tovforge.surrogate import GPSettings, Surrogate, read_training_data, train, train_on
from tovforge.workflows.refine import refine, select_points

ROOT = Path(__file__).resolve().parents[3]
HOLDOUT = ROOT / "grids" / "demo-holdout.h5"
runner = CliRunner()
# GPs on a few dozen points may come out with a degenerate kernel (and say so); not the subject here
pytestmark = pytest.mark.filterwarnings("ignore:GP kernel:UserWarning")

SPEC = """description = "refine test: 32 Sobol points over the demo box"
family = "piecewise-polytrope"
chunk_size = 16
mass_max_floor_msun = 1.0

[design]
method = "sobol"
points = 32
seed = 11
"""


@pytest.fixture(scope="module")
def small_gp(tmp_path_factory):
    """A GP trained from a small grid file (as `tovforge train GRID` does), with that file."""
    d = tmp_path_factory.mktemp("refine")
    (d / "small.toml").write_text(SPEC)
    run_grid(load_spec(d / "small.toml"), d / "small.h5", workers=1, progress=False)
    model = train(d / "small.h5", "gp", GPSettings(n_subset=32, n_restarts=0, curve_groups=1, n_jobs=1))
    model.save(d / "gp")
    return model, d


def test_refine_adds_solves_where_sigma_is_largest_and_retrains(small_gp, tmp_path):
    model, _ = small_gp
    n0 = model.n_train
    res = refine(model, 6, tmp_path / "refined", holdout=HOLDOUT, n_candidates=512, workers=1)
    # the added points: inside the box, new, and among the largest-sigma candidates
    lo, hi = model.bounds.T
    assert res.added.shape == (6, 4) and np.all((res.added >= lo) & (res.added <= hi))
    old = np.asarray(read_grid(small_gp[1] / "small.h5").parameters, float)
    assert model.in_domain(res.added).all()
    assert not np.any(np.all(np.isclose(res.added[:, None, :], old[None, :, :]), axis=-1))
    # the file of added solves is a grid with statuses, and the retrained model has them
    added = read_grid(res.points_path)
    n_ok = len(read_training_data(res.points_path, min_points=0).theta)  # the rows training keeps
    assert len(added.parameters) == 6 and n_ok >= 1
    assert res.model.n_train == n0 + n_ok
    assert res.model.meta.training.refinement_grids == (str(res.points_path),)
    assert res.model.meta.settings == model.meta.settings  # retrained as it was trained
    # the learning curve: before and after, on the held-out grid, and the model stored it
    assert [row.n_train for row in res.learning_curve] == [n0, n0 + n_ok]
    assert all(np.isfinite(row.radius_p95_km) and row.radius_p95_km > 0 for row in res.learning_curve)
    assert res.model.meta.learning_curve == res.learning_curve


def test_selected_points_have_larger_sigma_than_typical_candidates(small_gp):
    model, _ = small_gp
    from tovforge.workflows.refine import _score

    chosen = select_points(model, 8, 512, 0)
    from scipy.stats import qmc

    cand = qmc.scale(qmc.Sobol(4, seed=0).random(512), model.bounds[:, 0], model.bounds[:, 1])
    assert np.median(_score(model, chosen)) > np.median(_score(model, cand))


def test_refine_refuses_a_model_trained_on_part_of_its_grid(small_gp, tmp_path):
    import dataclasses

    _, d = small_gp
    data = read_training_data(d / "small.h5")
    part = dataclasses.replace(data, theta=data.theta[:20], scalars={k: v[:20] for k, v in data.scalars.items()},
                               curves={k: v[:20] for k, v in data.curves.items()})
    model = train_on(part, "gp", GPSettings(n_subset=20, n_restarts=0, curve_groups=1, n_jobs=1))
    with pytest.raises(InputError, match=r"trained on 20 points, but .*small.h5 and its refinements hold \d+"):
        refine(model, 4, tmp_path / "r", n_candidates=256, workers=1)


def test_refine_of_a_model_without_sigma_is_one_line_with_exit_2(small_gp, tmp_path):
    """A spline without leave-one-out residuals (trained before the error model) has no sigma to refine by."""
    _, d = small_gp
    m = train(d / "small.h5", "spline")
    Surrogate(m.meta, {k: v for k, v in m.arrays.items() if k not in ("loo_residual", "error_scale")}).save(
        tmp_path / "spline")
    res = runner.invoke(app, ["grid", "refine", str(tmp_path / "spline"), "--budget", "4"])
    assert res.exit_code == 2 and "needs a model with a predictive sigma" in res.stderr
    assert res.stderr.count("\n") == 1 and "Traceback" not in res.output


def test_measured_errors_join_the_error_model_and_steer_the_picks(small_gp, tmp_path):
    """The demo held-out grid's measured errors, added at their points, raise the error model's sigma there
    (the means do not move) and change which candidates refine picks; the held-out grid itself is refused."""
    model, d = small_gp
    data = read_training_data(HOLDOUT)
    steered = model.with_measured_errors(data)
    theta = data.theta[:50]
    np.testing.assert_array_equal(steered.evaluate(theta).values, model.evaluate(theta).values)
    err = np.abs(model.evaluate(theta).values - data.output_matrix()[0][:50])
    before, after = model.error_model_std(theta), steered.error_model_std(theta)
    # at a point of its own measured error the sigma follows that error (weights 1 / (d_j + d_1)^2)
    assert np.corrcoef(np.log(after.ravel() + 1e-12), np.log(err.ravel() + 1e-12))[0, 1] > \
        np.corrcoef(np.log(before.ravel() + 1e-12), np.log(err.ravel() + 1e-12))[0, 1]
    assert not np.array_equal(select_points(model, 8, 512), select_points(steered, 8, 512))
    with pytest.raises(InputError, match="is the held-out grid"):
        refine(model, 4, tmp_path / "r", holdout=HOLDOUT, errors_from=HOLDOUT, n_candidates=256, workers=1)
