"""Grid storage helpers: chunk concatenation and one-line errors for damaged files."""

from __future__ import annotations

import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest

from tovforge.errors import InputError
from tovforge.grid import ChunkResult, read_grid

DEMO = Path(__file__).resolve().parents[3] / "grids" / "demo-holdout.h5"


def _chunk(status, n_u=2):
    n = len(status)
    return ChunkResult(np.array(status, np.int8), [f"r{s}" for s in status],
                       {"mass_max_msun": np.arange(n, dtype=float)},
                       {"radius_km": np.full((n, n_u), float(n))}, {})


def test_concat_keeps_the_order_of_points():
    a, b = _chunk([0, 1]), _chunk([2, 0, 4])
    c = ChunkResult.concat([a, b])
    assert c.status.tolist() == [0, 1, 2, 0, 4] and c.status.dtype == np.int8
    assert c.reason == ["r0", "r1", "r2", "r0", "r4"]
    np.testing.assert_array_equal(c.scalars["mass_max_msun"], [0, 1, 0, 1, 2])
    assert c.curves["radius_km"].shape == (5, 2) and c.at_mass == {}


def test_damaged_grid_file_is_one_input_error(tmp_path):
    path = tmp_path / "g.h5"
    shutil.copy(DEMO, path)
    assert len(read_grid(path)) > 0
    with h5py.File(path, "r+") as h5:
        del h5["parameters/names"]
    with pytest.raises(InputError, match=r"g\.h5: cannot read grid file \(.*names"):
        read_grid(path)


@pytest.mark.parametrize("content, match", [(None, "no such file"), (b"not hdf5", "not an HDF5 file")])
def test_missing_or_foreign_file_is_one_input_error(tmp_path, content, match):
    path = tmp_path / "g.h5"
    if content is not None:
        path.write_bytes(content)
    with pytest.raises(InputError, match=match):
        read_grid(path)
