"""Running a grid: chunks in parallel, each saved atomically, then one file.

Work layout for an output path ``P``::

    P.parts/manifest.json      spec hash, design hash, tovforge version
    P.parts/chunk-000012.h5    one file per finished chunk
    P                          written once every chunk exists; P.parts is then removed

A run looks at ``P.parts`` first and solves only the chunks that have no
file there, so rerunning the same command after a crash, Ctrl-C or SIGKILL
resumes.  Chunk boundaries, the design and the batch of EOS each chunk is
solved in depend on the spec alone, and the solver is deterministic, so the
assembled file equals that of an uninterrupted run dataset for dataset.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import time
import warnings
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from .._extras import require
from .._progress import progress_bar
from .._provenance import provenance, utc_now
from ..errors import InputError
from ..status import Status
from ._design import design_points
from ._solve import ChunkResult, solve_chunk
from ._store import FORMAT, atomic_path, read_chunk, write_chunk, write_grid

__all__ = ["RunSummary", "run_grid", "parts_folder", "solve_points"]

_MANIFEST_FORMAT = "tovforge-grid-parts"


@dataclass(frozen=True)
class RunSummary:
    """What a call of :func:`run_grid` did.

    Attributes
    ----------
    path : Path
        The grid file.
    n_points, n_chunks : int
    chunks_reused : int
        Chunks found finished on disk (not recomputed).
    chunks_solved : int
        Chunks solved by this call.
    status_counts : dict of int to int
        Points per status code.
    content_sha256 : str
    seconds : float
        Wall time of this call.
    already_complete : bool
        The output existed (same spec) and nothing was done.
    """

    path: Path
    n_points: int
    n_chunks: int
    chunks_reused: int
    chunks_solved: int
    status_counts: dict
    content_sha256: str
    seconds: float
    already_complete: bool = False

    def text(self) -> str:
        if self.already_complete:
            head = f"{self.path}: already complete ({self.n_points} points); nothing to do."
        else:
            head = (f"{self.path}: {self.n_points} points in {self.n_chunks} chunks "
                    f"({self.chunks_solved} solved now, {self.chunks_reused} resumed) in {self.seconds:.1f} s.")
        counts = ", ".join(f"{Status(k).label}: {v}" for k, v in sorted(self.status_counts.items()))
        return f"{head}\nstatus: {counts}\ncontent sha256: {self.content_sha256}"


def parts_folder(out: Path) -> Path:
    """The work folder of output ``out``: ``out`` + ``.parts``."""
    out = Path(out)
    return out.with_name(out.name + ".parts")


def _chunk_path(parts: Path, k: int) -> Path:
    return parts / f"chunk-{k:06d}.h5"


def _theta_sha256(theta: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(theta, np.float64).tobytes()).hexdigest()


def _solve_task(spec, k: int, theta: np.ndarray) -> tuple[int, ChunkResult]:
    """One unit of work (runs in a worker): solve chunk ``k``."""
    return k, solve_chunk(spec, theta)


#: How long to wait for a Dask scheduler to answer.
CONNECT_TIMEOUT = "20s"


def _connect(scheduler: str):
    """A dask.distributed client of the scheduler at ``scheduler`` (one-line error if unreachable)."""
    Client = require("dask.distributed", "cluster", "running on a Dask scheduler").Client
    try:
        return Client(scheduler, timeout=CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"scheduler {scheduler}: cannot connect to a Dask scheduler ({exc}).") from None


def _execute(spec, chunks, workers: int | None, client):
    """Yield ``(k, ChunkResult)`` for each ``(k, theta)`` of ``chunks`` as they finish, in any order.

    Locally joblib's default (loky) backend; with a dask.distributed
    ``client``, joblib's Dask backend on that cluster.
    """
    import joblib

    tasks = (joblib.delayed(_solve_task)(spec, k, theta) for k, theta in chunks)
    n_jobs = workers if workers else -1  # -1: every core (or every worker of the cluster)
    # each task is already a batch of EOS: dispatch them one at a time
    options = dict(n_jobs=n_jobs, batch_size=1, return_as="generator_unordered")
    if client is None:
        yield from joblib.Parallel(**options)(tasks)
        return
    with joblib.parallel_config(backend="dask", client=client):  # the backend is chosen when Parallel is made
        yield from joblib.Parallel(**options)(tasks)


def solve_points(spec, theta: np.ndarray, *, workers: int | None = None) -> ChunkResult:
    """Exact solves of any points ``theta`` with a spec's solver settings and outputs.

    The points are cut into chunks of ``spec.chunk_size`` and solved in
    parallel as :func:`run_grid` does, but nothing is written to disk.

    Parameters
    ----------
    spec : GridSpec
        Solver settings and outputs (its design is not used).
    theta : ndarray, shape (n, d)
        EOS parameters in the spec's units.
    workers : int, optional
        Parallel workers (default: all cores).

    Returns
    -------
    ChunkResult
        The points in the order of ``theta``.
    """
    theta = np.asarray(theta, np.float64)
    if workers is not None and workers < 1:
        raise InputError(f"workers must be at least 1. Got {workers}.")
    size = spec.chunk_size
    chunks = [(k, theta[start:start + size]) for k, start in enumerate(range(0, len(theta), size))]
    finished = dict(_execute(spec, chunks, workers, None))
    return ChunkResult.concat(finished[k] for k in range(len(chunks)))


def _check_existing_output(out: Path, spec, overwrite: bool) -> bool:
    """True if ``out`` is already the finished grid of ``spec``; raise if it is something else."""
    if not out.exists():
        return False
    import h5py

    found = None
    try:
        with h5py.File(out, "r") as h5:
            if h5.attrs.get("format") == FORMAT:
                found = str(h5.attrs.get("spec_sha256"))
    except OSError:
        pass
    if found == spec.sha256:
        return True
    if overwrite:
        return False
    what = "is not a tovforge grid file" if found is None else f"was made from a different spec ({found[:12]}...)"
    raise InputError(f"{out} exists and {what}; pass overwrite=True to replace it.")


def _prepare_parts(parts: Path, spec, theta_hash: str, overwrite: bool) -> dict:
    manifest_path = parts / "manifest.json"
    expected = {"format": _MANIFEST_FORMAT, "spec_sha256": spec.sha256, "design_sha256": theta_hash,
                "tovforge_version": __version__, "n_chunks": spec.n_chunks}
    if parts.exists():
        try:
            manifest = json.loads(manifest_path.read_text())
        except (OSError, ValueError):
            manifest = None
        same = manifest is not None and all(manifest.get(k) == v for k, v in expected.items())
        if same:
            return manifest  # resume
        if not overwrite:
            why = ("holds no readable manifest" if manifest is None else
                   "holds chunks of a different spec, design or tovforge version")
            raise InputError(f"{parts} {why}; pass overwrite=True to discard them, or choose another output file.")
        shutil.rmtree(parts)
    parts.mkdir(parents=True)
    manifest = {**expected, "started_utc": utc_now(), "spec": json.loads(spec.to_json())}
    tmp = atomic_path(manifest_path)
    tmp.write_text(json.dumps(manifest, indent=1))
    os.replace(tmp, manifest_path)
    return manifest


def _finished_chunks(parts: Path, spec) -> set[int]:
    """Chunks with a valid file in ``parts``; removes leftovers of killed writes."""
    for stale in parts.glob(".*.tmp"):
        stale.unlink(missing_ok=True)
    done = set()
    for k in range(spec.n_chunks):
        path = _chunk_path(parts, k)
        if not path.exists():
            continue
        try:
            read_chunk(path, spec, k)
        except (OSError, ValueError, KeyError):
            warnings.warn(f"{path} is unreadable or foreign; chunk {k} will be solved again.", stacklevel=3)
            path.unlink()
            continue
        done.add(k)
    return done


def _assemble(parts: Path, spec) -> tuple[np.ndarray, ChunkResult]:
    thetas, results = [], []
    for k in range(spec.n_chunks):
        theta, res = read_chunk(_chunk_path(parts, k), spec, k)
        thetas.append(theta)
        results.append(res)
    return np.concatenate(thetas), ChunkResult.concat(results)


def _provenance(spec, manifest: dict) -> dict:
    settings = spec.solver.sequence_settings()
    return provenance(
        "scipy", "h5py",
        started_utc=manifest.get("started_utc", ""),
        solver_settings_json=json.dumps({**asdict(settings), "branch_stars": spec.solver.branch_stars,
                                         "mass_rtol": spec.solver.mass_rtol}, sort_keys=True),
        design_sha256=manifest["design_sha256"],
    )


def run_grid(spec, out, *, workers: int | None = None, scheduler: str | None = None, overwrite: bool = False,
             progress: bool = True, stream=None) -> RunSummary:
    """Solve every point of a grid spec and write the grid file ``out``.

    Parameters
    ----------
    spec : GridSpec
    out : path-like
        The HDF5 file to write.  Finished chunks are kept in ``out.parts``
        until the file is assembled.
    workers : int, optional
        Parallel workers (default: all cores; with ``scheduler``, all the
        cluster's workers).
    scheduler : str, optional
        Address of a dask.distributed scheduler (``tcp://host:8786``): run
        through joblib's Dask backend on that cluster.
    overwrite : bool
        Replace an output file, and discard unfinished chunks, made from
        another spec (or another tovforge version).  Without it, they are
        refused.  An output or chunks of the same spec are never discarded:
        the run is then complete already, or resumes.
    progress : bool
        Show a progress bar on ``stream`` (default stderr).

    Returns
    -------
    RunSummary

    Raises
    ------
    tovforge.errors.InputError
        If ``out`` holds another grid (and not ``overwrite``), or the
        scheduler cannot be reached.
    """
    t0 = time.monotonic()
    out = Path(out)
    if workers is not None and workers < 1:
        raise InputError(f"workers must be at least 1. Got {workers}.")
    if not out.parent.exists():
        raise InputError(f"{out.parent}: no such folder for the output.")
    if _check_existing_output(out, spec, overwrite):
        import h5py

        with h5py.File(out, "r") as h5:
            codes = h5["status/code"][...]
            digest = str(h5.attrs["content_sha256"])
        counts = {int(c): int(n) for c, n in zip(*np.unique(codes, return_counts=True))}
        return RunSummary(out, spec.n_points, spec.n_chunks, spec.n_chunks, 0, counts, digest,
                          time.monotonic() - t0, already_complete=True)
    theta = design_points(spec)
    client = _connect(scheduler) if scheduler is not None else None
    try:
        parts = parts_folder(out)
        manifest = _prepare_parts(parts, spec, _theta_sha256(theta), overwrite)
        done = _finished_chunks(parts, spec)
        todo = [k for k in range(spec.n_chunks) if k not in done]
        n_done = sum(np.subtract(*spec.chunk_bounds(k)[::-1]) for k in done)
        with progress_bar(spec.n_points, out.name, done=int(n_done), enabled=progress, stream=stream) as bar:
            chunks = ((k, theta[slice(*spec.chunk_bounds(k))]) for k in todo)
            for k, result in _execute(spec, chunks, workers, client):
                start, stop = spec.chunk_bounds(k)
                write_chunk(_chunk_path(parts, k), spec, k, theta[start:stop], result)
                bar.update(stop - start)
    finally:
        if client is not None:
            client.close()
    theta_all, merged = _assemble(parts, spec)
    digest = write_grid(out, spec, theta_all, merged, _provenance(spec, manifest))
    shutil.rmtree(parts)
    counts = {int(c): int(n) for c, n in zip(*np.unique(merged.status, return_counts=True))}
    return RunSummary(out, spec.n_points, spec.n_chunks, len(done), len(todo), counts, digest,
                      time.monotonic() - t0)
