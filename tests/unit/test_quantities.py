"""The registry of output quantities and the one status vocabulary."""

from __future__ import annotations

import numpy as np
import pytest

from tovforge import grid, quantities, solve, tables
from tovforge.status import Status

# The grid outputs and defaults before the registry existed (grid/_spec.py of the first wave).  The defaults
# are hashed into every grid spec, so they must never change: committed grids keep their identity.
OLD_SCALARS = ("mass_max_msun", "radius_at_mass_max_km", "central_pressure_at_mass_max_dyn_cm2", "max_sound_speed_sq",
               "causality_margin", "mass_max_margin_msun", "twin_mass_max_msun")
OLD_CURVES = ("mass_msun", "radius_km", "tidal_deformability", "k2", "moment_of_inertia_1e45_g_cm2", "baryon_mass_msun")
OLD_AT_MASS = ("radius_km", "tidal_deformability", "k2", "moment_of_inertia_1e45_g_cm2", "baryon_mass_msun")
OLD_DEFAULT_AT_MASS = ("radius_km", "tidal_deformability", "moment_of_inertia_1e45_g_cm2")


def test_grid_defaults_are_the_old_ones_in_the_same_order():
    d = grid.OutputSpec()
    assert d.scalars == OLD_SCALARS
    assert d.curves == OLD_CURVES
    assert d.at_mass == OLD_DEFAULT_AT_MASS


def test_grid_lists_derive_from_the_registry_and_keep_the_old_names():
    for role, lst, old in (("scalar", grid.SCALARS, OLD_SCALARS), ("curve", grid.CURVES, OLD_CURVES),
                           ("at_mass", grid.AT_MASS, OLD_AT_MASS)):
        assert tuple(lst) == quantities.grid_names(role)
        assert [n for n in lst if n in old] == list(old)  # new outputs may join; old ones keep their order
        for name, (unit, description) in lst.items():
            assert (unit, description) == (quantities.get(name).unit, quantities.get(name).description)


def test_every_alias_names_one_quantity():
    seen = {}
    for q in quantities.QUANTITIES.values():
        for alias in q.aliases:
            assert seen.setdefault(alias, q.name) == q.name, alias
            assert quantities.get(alias) is q
    with pytest.raises(KeyError, match="unknown quantity 'radius_mi'"):
        quantities.get("radius_mi")


def test_declarations_are_consistent():
    names = set(quantities.QUANTITIES)
    for q in quantities.QUANTITIES.values():
        assert q.level in ("star", "sequence")
        assert set(q.default) <= set(q.stored) <= set(quantities.GRID_ROLES), q.name
        assert set(q.needs) <= names and (q.derive is None) == (not q.needs), q.name
        assert q.transform in (None, *quantities.TRANSFORMS)
        assert (q.transform is None) == (q.model_name is None), q.name
        if q.level == "star":
            assert not set(q.stored) & {"scalar"} and q.of_maximum is None, q.name
        else:
            assert not set(q.stored) & {"curve", "at_mass"}, q.name
        if q.of_maximum is not None:
            assert quantities.get(q.of_maximum).level == "star"
        tables.Column(q.column, q.unit, q.description)  # a valid table column (raises otherwise)


@pytest.fixture(scope="module")
def batch_result(sly):
    return solve.solve_sequences(sly.batch, n_stars=20, masses=[1.0, 1.4])


def test_every_star_quantity_resolves_on_stars(batch_result):
    stars = batch_result.at_mass
    for q in quantities.star_quantities():
        v = stars.value(q.name)
        assert v.shape == stars.mass_msun.shape and np.isfinite(v).all(), q.name
        np.testing.assert_array_equal(stars[q.column], v)  # stars[alias] is value(alias)
    with pytest.raises(KeyError, match="whole sequence"):
        stars.value("mass_max_msun")


def test_derived_star_quantity_matches_its_old_property(batch_result):
    from tovforge.units import MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2, MSUN_KM

    b = batch_result.branch
    i_km3 = b.moment_of_inertia_1e45_g_cm2 / MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2
    np.testing.assert_array_equal(b.value("moment_of_inertia_over_m3"), i_km3 / (b.mass_msun * MSUN_KM) ** 3)
    np.testing.assert_array_equal(b.moment_of_inertia_over_m3, b.value("inertia_over_m3"))


def test_every_sequence_quantity_resolves_on_a_sequence_batch(batch_result):
    seq = batch_result
    for q in quantities.sequence_quantities():
        if q.name == "mass_max_margin_msun":  # needs a grid's floor: the grid computes it
            with pytest.raises(KeyError, match="not computed by the solver"):
                seq.value(q.name)
            continue
        assert seq.value(q.name).shape == (1,), q.name
    assert seq.value("mass_max") == seq.mass_max.mass_msun
    assert seq.value("radius_at_mass_max_km") == seq.mass_max.radius_km
    assert seq.value("causality_margin") == 1.0 - seq.max_sound_speed_sq
    with pytest.raises(KeyError, match="each star"):
        seq.value("radius_km")


def test_transforms_round_trip():
    x = np.array([1e-3, 0.7, 2.5, 4e35])
    for q in quantities.emulated():
        # exp(ln x) and 10^(log10 x) carry the rounding of the logarithm: |ln x| eps ~ 1e-14 relative at 4e35
        np.testing.assert_allclose(quantities.inverse(q, quantities.forward(q, x)), x, rtol=2e-14)


def test_status_codes_and_labels_never_change():
    # stored in grid files and box tables: a code keeps its meaning forever
    assert Status.labels() == {0: "ok", 1: "invalid parameters", 2: "M_max below the floor", 3: "no maximum mass",
                               4: "solver failure", 5: "EOS ends before the maximum"}
    for s in Status:
        assert s.message.endswith(".") and s.success == (s is Status.OK)


def test_solver_statuses_are_the_shared_ones(sly):
    seq = solve.solve_sequence(sly, n_stars=8)
    assert seq.status is Status.OK and seq.success and seq.message == Status.OK.message
    # a scan that stops far below the maximum finds none
    res = solve.solve_sequence(sly, n_stars=8, settings=solve.SequenceSettings(h_high=0.1))
    assert res.status is Status.NO_MAXIMUM and res.mass_max is None
    assert not res.success and res.message == Status.NO_MAXIMUM.message
