"""Grid specs: strict keys, types and bounds named by their TOML key path; designs."""

from __future__ import annotations

import re
import tomllib

import numpy as np
import pytest

from tovforge import eos
from tovforge.errors import InputError
from tovforge.grid import design_points, load_spec, parse_spec

BASE = """
family = "piecewise-polytrope"
chunk_size = 4
[design]
method = "sobol"
points = 8
seed = 3
"""


def _spec(text: str = BASE):
    return parse_spec(tomllib.loads(text), source=text)


@pytest.mark.parametrize("text, match", [
    ("chunksize = 3\n" + BASE, "chunksize: unknown key 'chunksize' in the top level (did you mean 'chunk_size'?)"),
    (BASE.replace("points = 8", "pionts = 8"), "design.pionts: unknown key 'pionts' in [design]"),
    (BASE + "[solver]\nsteps_per_knik = 2\n", "solver.steps_per_knik: unknown key"),
    (BASE + "[box]\ngama1 = [2.0, 3.0]\n", "box.gama1: unknown key 'gama1' in [box] (did you mean 'gamma1'?)"),
    (BASE.replace("points = 8", 'points = "8"'), "design.points: expected an integer, got a string ('8')"),
    (BASE.replace("points = 8", "points = 8.0"), "design.points: expected an integer, got a number (8.0)"),
    (BASE + "[outputs]\nmasses_msun = 1.4\n", "outputs.masses_msun: expected an array, got a number"),
    (BASE + "[outputs]\ncurves = [\"radius\"]\n", "outputs.curves[0]: 'radius' is not one of"),
    (BASE + "[box]\ngamma1 = [4.0, 2.0]\n", "box.gamma1: the lower bound 4 must be below the upper bound 2"),
    (BASE + "[box]\ngamma1 = [2.0]\n", "box.gamma1: expected [lower, upper], got 1 values"),
    (BASE + "[box]\nlog_p1 = [34.0, \"35\"]\n", "box.log_p1[1]: expected a number, got a string"),
    (BASE + "[outputs]\nmasses_msun = [1.4, 1.2]\n", "outputs.masses_msun[1]: values must increase"),
    (BASE + "[outputs]\nu_nodes = [0.0, 1.0]\n", "outputs.u_nodes[1]: must be a finite number in [0, 1)"),
    (BASE + "[outputs]\nu_nodes = [0.1]\nu_max = 0.5\n", "outputs.u_max: applies only when"),
    (BASE.replace("seed = 3", ""), "design.seed: missing"),
    (BASE.replace('method = "sobol"', 'method = "sobel"'), "design.method: 'sobel' is not one of regular, "
                                                           "latin-hypercube, sobol (did you mean 'sobol'?)"),
    (BASE.replace("points = 8", "points_per_axis = 3"), "design.points_per_axis: unknown key"),
    (BASE.replace('"piecewise-polytrope"', '"table"'), "family: 'table' has no numeric parameters"),
    (BASE.replace('"piecewise-polytrope"', '"piecewise"'), "family: Unknown EOS family 'piecewise'"),
    (BASE.replace("chunk_size = 4", "chunk_size = 0"), "chunk_size: must be an integer in [1, 4096]. Got 0."),
    (BASE + "[solver]\nmass_rtol = 0.1\n", "solver.mass_rtol: must be a finite number in [1e-14, 0.0001]"),
])
def test_bad_specs_name_the_key_path(text, match):
    with pytest.raises(InputError, match=re.escape(match)):
        _spec(text)


def test_regular_design_needs_a_count_for_every_parameter():
    text = BASE.replace('method = "sobol"\npoints = 8\nseed = 3', 'method = "regular"\n'
                        "points_per_axis = {log_p1 = 2, gamma1 = 3, gamma2 = 1}")
    with pytest.raises(InputError, match=re.escape("design.points_per_axis.gamma3: missing")):
        _spec(text)


def test_load_spec_prefixes_the_file_and_reports_toml_errors(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(BASE + "[design\n")
    with pytest.raises(InputError, match=r"bad\.toml: not valid TOML"):
        load_spec(bad)
    typo = tmp_path / "typo.toml"
    typo.write_text(BASE.replace("seed", "sead"))
    with pytest.raises(InputError, match=r"typo\.toml: design\.sead: unknown key"):
        load_spec(typo)


def test_hash_ignores_comments_and_spelled_out_defaults():
    fam = eos.get_family("piecewise-polytrope")
    box = "\n".join(f"{p.name} = [{p.box[0]!r}, {p.box[1]!r}]  # default" for p in fam.parameters)
    spelled = "mass_max_floor_msun = 1.0  # default\n" + BASE + f"[box]\n{box}\n[solver]\nbranch_stars = 16\n"
    assert _spec(spelled).sha256 == _spec().sha256
    assert _spec(BASE.replace("seed = 3", "seed = 4")).sha256 != _spec().sha256
    assert _spec(BASE.replace("chunk_size = 4", "chunk_size = 5")).sha256 != _spec().sha256


def test_box_outside_the_allowed_range_warns_but_is_accepted():
    with pytest.warns(UserWarning, match=r"box\.gamma1 = \[0\.5, 3\] reaches outside the allowed range"):
        spec = _spec(BASE + "[box]\ngamma1 = [0.5, 3.0]\n")
    assert spec.box[1] == (0.5, 3.0)


def test_regular_design_is_the_tensor_product_with_both_bounds():
    text = BASE.replace('method = "sobol"\npoints = 8\nseed = 3', 'method = "regular"\n'
                        "points_per_axis = {log_p1 = 3, gamma1 = 2, gamma2 = 1, gamma3 = 2}")
    text += "[box]\nlog_p1 = [34.1, 34.9]\ngamma1 = [2.2, 3.3]\ngamma2 = [2.0, 3.0]\n"
    spec = _spec(text)
    theta = design_points(spec)
    assert theta.shape == (12, 4) == (spec.n_points, 4)
    np.testing.assert_array_equal(np.unique(theta[:, 0]), [34.1, 34.5, 34.9])
    np.testing.assert_array_equal(np.unique(theta[:, 1]), [2.2, 3.3])
    np.testing.assert_array_equal(np.unique(theta[:, 2]), [2.5])  # one point: the centre
    assert np.all(theta[:4, 0] == 34.1) and np.all(theta[-4:, 0] == 34.9)  # first parameter varies slowest
    assert len({tuple(r) for r in theta}) == 12


@pytest.mark.parametrize("method", ["sobol", "latin-hypercube"])
def test_random_designs_are_seeded_and_fill_the_box(method):
    text = BASE.replace('"sobol"', f'"{method}"').replace("points = 8", "points = 64")
    a = design_points(_spec(text))
    np.testing.assert_array_equal(a, design_points(_spec(text)))
    b = design_points(_spec(text.replace("seed = 3", "seed = 4")))
    assert not np.array_equal(a, b)
    box = eos.get_family("piecewise-polytrope").box
    assert np.all(a >= box[:, 0]) and np.all(a <= box[:, 1])
    # every eighth of every axis is hit (latin hypercube: exactly 8 points each)
    counts = np.stack([np.bincount(((a[:, j] - box[j, 0]) / (box[j, 1] - box[j, 0]) * 8).astype(int), minlength=8)
                       for j in range(4)])
    assert counts.min() >= 4
    if method == "latin-hypercube":
        assert np.all(counts == 8)
