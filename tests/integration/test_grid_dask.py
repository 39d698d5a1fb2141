"""The Dask backend (a LocalCluster started here) gives the same grid as the local backend, bit for bit,
also when a worker dies in the middle of the run; an unreachable scheduler is one prompt error."""

from __future__ import annotations

import os
import signal
import time

import pytest

from grid_helpers import assert_same_datasets
from tovforge.errors import InputError
from tovforge.grid import _run as grid_run
from tovforge.grid import parse_spec, parts_folder, read_grid, run_grid

distributed = pytest.importorskip("dask.distributed")


def _spec(points=12, chunk=3):
    return parse_spec({"family": "piecewise-polytrope", "chunk_size": chunk,
                       "design": {"method": "latin-hypercube", "points": points, "seed": 21}})


def _cluster():
    return distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                    dashboard_address=None, worker_dashboard_address=None)


def test_local_cluster_equals_local_backend(tmp_path):
    spec = _spec()
    local = tmp_path / "local.h5"
    run_grid(spec, local, workers=2, progress=False)
    with _cluster() as cluster:
        on_dask = tmp_path / "dask.h5"
        summary = run_grid(spec, on_dask, scheduler=cluster.scheduler_address, progress=False)
    assert summary.chunks_solved == spec.n_chunks == 4
    assert (read_grid(on_dask).status == 0).sum() > 8
    assert_same_datasets(local, on_dask)


def test_a_worker_killed_mid_run_costs_nothing(tmp_path, monkeypatch):
    """Issue 15: one dead worker aborted the whole run (joblib's Dask backend scattered the chunk data to
    the worker that died).  Now the lost chunk runs again and the file equals an uninterrupted run's."""
    spec = _spec(points=192, chunk=32)  # chunks above 1 kB, which joblib scattered
    local = tmp_path / "local.h5"
    run_grid(spec, local, workers=2, progress=False)
    killed = []
    write_chunk = grid_run.write_chunk

    with _cluster() as cluster:
        def write_and_kill(path, *args):
            write_chunk(path, *args)
            if not killed:  # after the first finished chunk: kill a worker while the others run
                nanny = next(iter(cluster.workers.values()))
                killed.append(nanny.process.pid)
                os.kill(nanny.process.pid, signal.SIGKILL)

        monkeypatch.setattr(grid_run, "write_chunk", write_and_kill)
        on_dask = tmp_path / "dask.h5"
        summary = run_grid(spec, on_dask, scheduler=cluster.scheduler_address, progress=False)
    assert killed and summary.chunks_solved == spec.n_chunks == 6
    assert_same_datasets(local, on_dask)


def test_unreachable_scheduler_is_a_prompt_input_error(tmp_path):
    out = tmp_path / "g.h5"
    t0 = time.monotonic()
    with pytest.raises(InputError, match="scheduler tcp://127.0.0.1:9: cannot connect to a Dask scheduler"):
        run_grid(_spec(), out, scheduler="tcp://127.0.0.1:9", progress=False)
    with pytest.raises(InputError, match="scheduler nonsense: cannot connect"):
        run_grid(_spec(), out, scheduler="nonsense", progress=False)
    assert time.monotonic() - t0 < grid_run.CONNECT_TIMEOUT_S  # refused at once, not after the timeout
    assert not parts_folder(out).exists() and not out.with_name("g.h5.lock").exists()  # nothing started
