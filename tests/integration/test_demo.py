"""The reduced demo end to end through the CLI: tiny grids built on the spot, a short chain, every output."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from typer.testing import CliRunner
from tovforge.cli import app
from tovforge.workflows.demo import Posterior, import_evaluator, load_observations

runner = CliRunner()

TRAIN = """family = "piecewise-polytrope"
chunk_size = 32
[design]
method = "sobol"
points = 64
seed = 11
"""
HOLDOUT = TRAIN.replace('"sobol"', '"latin-hypercube"').replace("points = 64", "points = 32").replace(
    "seed = 11", "seed = 12")
FIGURES = ("corner.png", "mass_radius.png", "trace.png")
FILES = FIGURES + ("summary.md", "summary.json", "posterior_samples.csv", "posterior_table.csv",
                   "posterior_band.csv", "evaluators/demo_gp.py", "evaluators/demo_spline.py",
                   "models/gp/model.json", "models/spline/model.json")
CHECK_FILES = ("report.md", "report.json", "parity.png", "error_histograms.png", "error_vs_parameters.png",
               "worst_mass_radius.png")
ARGS = ["--walkers", "16", "--steps", "80", "--burn", "30", "--cross-check", "24", "--gp-subset", "32",
        "--workers", "2"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    (d / "train.toml").write_text(TRAIN)
    (d / "holdout.toml").write_text(HOLDOUT)
    res = runner.invoke(app, ["demo", "--out", str(d / "out"), "--train-spec", str(d / "train.toml"),
                              "--holdout-spec", str(d / "holdout.toml"), *ARGS])
    return d, res


def test_the_reduced_demo_runs_every_stage(demo):
    d, res = demo
    assert res.exit_code == 0, res.output + (res.stderr or "")
    for k, name in enumerate(["grids", "train", "check", "export", "fit", "timing", "cross-check", "figures"], 1):
        assert f"[{k}/8] {name}:" in res.stdout
    assert "NOTE: Invented data for the tovforge demo" in res.stdout
    # the tiny grids did not exist: the demo built them next to their specs
    assert re.search(r"train\s+\S*train\.h5: 64 points \(sobol\), \d+ solved, built in", res.stdout)
    assert (d / "train.h5").is_file() and (d / "holdout.h5").is_file()
    for name in ("Copper Metronome", "Saffron Kite", "Willow Lantern", "Heron Duet"):
        assert name in res.stdout


def test_every_output_file_is_written(demo):
    d, _ = demo
    out = d / "out"
    for f in FILES:
        assert (out / f).is_file() and (out / f).stat().st_size > 0, f
    for kind in ("gp", "spline"):
        for f in CHECK_FILES:
            assert (out / "check" / kind / f).is_file(), (kind, f)
    for f in FIGURES:
        assert (out / f).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_summary_links_exist_and_state_the_measured_numbers(demo):
    d, res = demo
    out = d / "out"
    md = (out / "summary.md").read_text()
    nb = json.loads((out / "summary.json").read_text())
    assert "**The observations are INVENTED for this demo**" in md
    for link in re.findall(r"\]\(([^)]+)\)", md):
        assert (out / link).is_file(), link
    tm = nb["timing"]
    for k in ("likelihood_emulated_one_us", "likelihood_emulated_batch_us_per_theta", "likelihood_exact_one_ms",
              "likelihood_exact_batch_ms_per_theta", "exact_solve_one_ms", "exact_solve_batch_ms_per_eos"):
        assert np.isfinite(tm[k]) and tm[k] > 0, k
    # the printed and written figures are the same measurements
    assert f"{tm['likelihood_emulated_one_us']:.0f} us |" in md
    assert f"{tm['speedup_one']:.0f}x" in md and f"{tm['speedup_one']:.0f}x for one theta" in res.stdout
    np.testing.assert_allclose(tm["speedup_one"], tm["likelihood_exact_one_ms"] * 1e3 / tm["likelihood_emulated_one_us"],
                               rtol=1e-12)
    assert nb["settings"]["n_steps"] == 80 and nb["training"]["gp_settings"]["n_subset"] == 32
    # the emulator's error beside each measurement's sigma, printed and written
    budget = nb["fit"]["error_budget"]
    assert [b["name"] for b in budget] == ["Copper Metronome", "Saffron Kite", "Willow Lantern", "Heron Duet"]
    for b in budget:
        assert b["ratio"] == pytest.approx(b["emulator_p95"] / b["measurement_sigma"])
        assert b["too_large"] == (b["ratio"] > nb["fit"]["error_budget_warn_ratio"])
        assert f"{b['ratio']:.2f} of the {b['quantity']} sigma" in res.stdout
        assert f"| {b['name']} | {b['quantity']} |" in md


def test_cross_check_distances_respect_the_per_sample_errors(demo):
    d, _ = demo
    cc = json.loads((d / "out" / "summary.json").read_text())["cross_check"]
    assert cc["n_samples"] == 24 and cc["masses_compared"]
    for k, v in cc["band_distance_km"].items():
        # each band is over the same samples in both answers, so a quantile moves at most as far as the
        # largest per-sample difference
        assert 0 <= v <= cc["radius_abs_max_km"] + 1e-12, k
    worst = max(cc["band_distance_km"].values())
    assert cc["verdict"] == ("inside" if worst <= cc["stated_radius_abs_p95_km"] else "OUTSIDE")
    assert cc["verdict_detail"] == f"{worst / cc['stated_radius_abs_p95_km']:.2f} of it"
    assert np.isfinite(cc["log_like_abs_median"]) and np.isfinite(cc["mass_max_abs_p95_msun"])


def test_saved_samples_are_in_the_box_and_carry_the_evaluators_log_posterior(demo):
    d, _ = demo
    out = d / "out"
    data = np.genfromtxt(out / "posterior_samples.csv", delimiter=",", names=True)
    ev = import_evaluator(out / "evaluators" / "demo_spline.py")
    theta = np.column_stack([data[n] for n in ev.PARAMETERS])
    b = np.asarray(ev.BOUNDS)
    assert len(theta) > 0 and np.all((theta >= b[:, 0]) & (theta <= b[:, 1]))
    post = Posterior(ev, load_observations())
    np.testing.assert_allclose(post(theta), data["log_posterior"], rtol=1e-12)


def test_band_table_matches_the_samples(demo):
    from tovforge.tables import read_table

    d, _ = demo
    band = read_table(d / "out" / "posterior_band.csv")
    table = read_table(d / "out" / "posterior_table.csv")
    r = table["radius@1.4"]
    i = int(np.flatnonzero(np.isclose(band["mass"], 1.4))[0])
    np.testing.assert_allclose(band["radius_median"][i], np.median(r[np.isfinite(r)]), rtol=1e-12)


@pytest.mark.parametrize("args, words", [
    (["--sampler", "bayes"], ["Invalid value for '--sampler'", "'bayes'", "'gp', 'spline'"]),
    (["--steps", "10", "--burn", "10"], ["burn-in n_burn (10 steps) must be shorter than the chain n_steps (10)"]),
    (["--train-spec", "no-such-spec.toml"], ["no-such-spec.toml: no such grid spec", "the training grid's spec"]),
])
def test_bad_input_is_one_line_and_exit_2_before_any_work(tmp_path, args, words):
    # --quick bounds the time should a check ever stop working and the demo run
    res = runner.invoke(app, ["demo", "--quick", "--out", str(tmp_path / "out"), *args])
    assert res.exit_code == 2, res.output
    assert res.stderr.startswith("error: ") and res.stderr.count("\n") == 1, res.stderr
    for w in words:
        assert w in res.stderr
    assert not (tmp_path / "out").exists()


def test_a_broken_data_file_is_named(tmp_path):
    bad = tmp_path / "obs.toml"
    bad.write_text('[[pulsar]]\nname = "A"\n')
    res = runner.invoke(app, ["demo", "--quick", "--out", str(tmp_path / "out"), "--data", str(bad)])
    assert res.exit_code == 2 and "obs.toml: pulsar[0].mass_msun: missing" in res.stderr


def test_a_bad_generator_is_named_before_any_work(tmp_path):
    from tovforge.workflows.demo import INVENTED_DATA

    bad = tmp_path / "obs.toml"
    bad.write_text(INVENTED_DATA.read_text().replace("gamma3 = 2.5", "gamma3 = -1.5"))
    res = runner.invoke(app, ["demo", "--quick", "--out", str(tmp_path / "out"), "--data", str(bad)])
    assert res.exit_code == 2 and res.stderr.startswith(f"error: {bad}: [generator]: ")
    assert "gamma3" in res.stderr and "-1.5" in res.stderr and not (tmp_path / "out").exists()
