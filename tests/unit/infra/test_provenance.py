"""One provenance helper: the same keys and one UTC format in every artifact tovforge writes."""

from __future__ import annotations

import re
from datetime import datetime

import h5py
import pytest

from tovforge import __version__
from tovforge._provenance import UTC_FORMAT, provenance, utc_now
from tovforge.grid import parse_spec, run_grid

UTC = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ\Z")
COMMON = ("tovforge_version", "python_version", "numpy_version", "git_commit", "created_utc")


def test_utc_now_is_iso_8601_in_utc_to_the_second():
    now = utc_now()
    assert UTC.match(now), now
    assert datetime.strptime(now, UTC_FORMAT)  # reads back with the one format


def test_provenance_has_the_common_keys_first_and_refuses_to_replace_them():
    p = provenance("scipy", "h5py", command="tovforge x")
    assert list(p)[:5] == ["tovforge_version", "python_version", "numpy_version", "scipy_version", "h5py_version"]
    assert p["tovforge_version"] == __version__ and p["command"] == "tovforge x"
    assert p["git_commit"] and UTC.match(p["created_utc"])
    with pytest.raises(ValueError, match="'git_commit' is a common key"):
        provenance(git_commit="abc")
    assert provenance(created_utc="2026-03-01T12:00:00Z")["created_utc"] == "2026-03-01T12:00:00Z"  # exports


def test_missing_package_is_recorded_not_raised():
    assert provenance("no-such-distribution-xyz")["no_such_distribution_xyz_version"] == "not installed"


def test_grid_model_check_and_table_share_keys_and_format(tmp_path):
    """Grid attributes, the model's training record, the check report and a table's metadata."""
    from tovforge.surrogate import check, train
    from tovforge.tables import box_table, read_table
    from tovforge.tables import Axis

    def grid(points, seed, name):
        spec = parse_spec({"family": "piecewise-polytrope", "chunk_size": 32,
                           "design": {"method": "sobol", "points": points, "seed": seed}})
        run_grid(spec, tmp_path / name, workers=1, progress=False)
        return tmp_path / name

    train_path, held_path = grid(64, 5, "train.h5"), grid(16, 6, "held.h5")
    with h5py.File(train_path, "r") as h5:
        attrs = {k: h5.attrs[k] for k in h5.attrs}
    model = train(train_path, "spline")
    report = check(model, held_path).to_json()
    table = tmp_path / "t.csv"
    box_table(table, model, [Axis("gamma1", 2.5, 3.0, 2)], {"log_p1": 34.5, "gamma2": 3.0, "gamma3": 3.0},
              ["mass_max"], progress=False)
    meta = read_table(table).meta
    for where, record in (("grid", attrs), ("model", model.meta.training.to_json()), ("check", report), ("table", meta)):
        for key in COMMON:
            assert key in record, (where, key)
        assert UTC.match(str(record["created_utc"])), (where, record["created_utc"])
    assert attrs["scipy_version"] and attrs["h5py_version"]
