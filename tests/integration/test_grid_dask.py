"""The Dask backend (a LocalCluster started here) gives the same grid as the local backend, bit for bit."""

from __future__ import annotations

import pytest

from grid_helpers import assert_same_datasets
from tovforge.errors import InputError
from tovforge.grid import _run as grid_run
from tovforge.grid import parse_spec, parts_folder, read_grid, run_grid

distributed = pytest.importorskip("dask.distributed")


def _spec():
    return parse_spec({"family": "piecewise-polytrope", "chunk_size": 3,
                       "design": {"method": "latin-hypercube", "points": 12, "seed": 21}})


def test_local_cluster_equals_local_backend(tmp_path):
    spec = _spec()
    local = tmp_path / "local.h5"
    run_grid(spec, local, workers=2, progress=False)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                  worker_dashboard_address=None) as cluster:
        on_dask = tmp_path / "dask.h5"
        summary = run_grid(spec, on_dask, scheduler=cluster.scheduler_address, progress=False)
    assert summary.chunks_solved == spec.n_chunks == 4
    assert (read_grid(on_dask).status == 0).sum() > 8
    assert_same_datasets(local, on_dask)


def test_unreachable_scheduler_is_an_input_error(tmp_path, monkeypatch):
    monkeypatch.setattr(grid_run, "CONNECT_TIMEOUT", "1s")
    out = tmp_path / "g.h5"
    with pytest.raises(InputError, match="scheduler tcp://127.0.0.1:9: cannot connect to a Dask scheduler"):
        run_grid(_spec(), out, scheduler="tcp://127.0.0.1:9", progress=False)
    assert not parts_folder(out).exists()  # nothing started
