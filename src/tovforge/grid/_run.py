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
import socket
import threading
import time
import uuid
import warnings
from collections import Counter
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from .._extras import require
from .._files import OutputLock, check_output, publish, remove_litter, temp_path
from .._limits import check_memory, worker_count
from .._progress import progress_bar
from .._provenance import provenance, utc_now
from ..errors import InputError, NeedsPermission
from ..status import Status
from ._design import design_points
from ._solve import ChunkResult, solve_chunk
from ._store import FORMAT, read_chunk, verify_grid, write_chunk, write_grid

__all__ = ["RunSummary", "run_grid", "parts_folder", "solve_points", "grid_memory_bytes", "WorkersLost"]

_MANIFEST_FORMAT = "tovforge-grid-parts"


class WorkersLost(InputError):
    """The run lost its workers (killed, out of memory) or its Dask scheduler; finished chunks are kept."""


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


# ---------------------------------------------------------------------------
# the work of one chunk, in a worker
# ---------------------------------------------------------------------------

_watchdog_started = False


def _watch_parent(parent: int) -> None:
    """End this worker process as soon as the run that started it is gone.

    Local workers are children of the ``grid run`` process; killed with
    SIGKILL, it cannot stop them, and loky would keep them alive for minutes.
    A daemon thread polls the parent pid and exits the process when the
    worker is re-parented (its parent died).
    """
    global _watchdog_started
    if _watchdog_started or os.getppid() != parent:
        return
    _watchdog_started = True

    def watch():
        while os.getppid() == parent:
            time.sleep(0.5)
        os._exit(0)

    threading.Thread(target=watch, name="tovforge-parent-watchdog", daemon=True).start()


def _solve_task(spec, k: int, theta: np.ndarray, parent: int | None = None):
    """One unit of work (runs in a worker): solve chunk ``k``.

    Returns ``(k, ChunkResult, warnings)``: the user warnings raised while
    solving, as text, so that the run shows each once as a clean line
    instead of the worker printing it with a source path.
    """
    if parent is not None:
        _watch_parent(parent)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        warnings.simplefilter("ignore", RuntimeWarning)  # floating-point noise: failed points carry a status
        result = solve_chunk(spec, theta)
    return k, result, [str(w.message) for w in caught]


#: How long to wait for a Dask scheduler to answer (seconds).
CONNECT_TIMEOUT_S = 10.0
#: How often a chunk lost with its Dask workers is resubmitted before the run gives up.
MAX_RESUBMITS = 3

#: Share of a design's points breaking the family's rules above which ``run_grid`` warns (issue 16: the
#: spectral family's former default box lost 81 % of its points to the Gamma rule, and nothing said so).
INVALID_SHARE_WARNING = 0.25


def _connect(scheduler: str):
    """A dask.distributed client of the scheduler at ``scheduler`` (one-line error if unreachable).

    The address is first tried with one handshake of Dask's protocol, so that
    a wrong address, a closed port or something that is not a Dask scheduler
    fails within :data:`CONNECT_TIMEOUT_S`, before a client exists (a client
    that never connected can hang for twice its timeout when it is collected).
    """
    import asyncio

    distributed = require("dask.distributed", "cluster", "running on a Dask scheduler")

    def refuse(exc):
        detail = (str(exc).splitlines() or [""])[0][:160]
        return InputError(f"scheduler {scheduler}: cannot connect to a Dask scheduler ({type(exc).__name__}"
                          f"{': ' + detail if detail else ''}); check the address (tcp://HOST:PORT) and that the "
                          "scheduler is running.")

    async def handshake():
        scheme, location = distributed.comm.parse_address(scheduler)
        if scheme == "tcp":  # a refused port or an unknown host fail at once here, not after the timeout
            host, port = distributed.comm.parse_host_port(location)
            socket.create_connection((host, port), timeout=CONNECT_TIMEOUT_S).close()
        comm = await asyncio.wait_for(distributed.comm.connect(scheduler, timeout=CONNECT_TIMEOUT_S),
                                      CONNECT_TIMEOUT_S + 1.0)
        await comm.close()

    try:
        asyncio.run(handshake())
    except RuntimeError as exc:
        if "running event loop" not in str(exc):  # called from async code (a notebook): the client tries alone
            raise refuse(exc) from None
    except Exception as exc:  # refused, timed out, not a Dask scheduler (garbage answers included)
        raise refuse(exc) from None
    try:
        return distributed.Client(scheduler, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
    except Exception as exc:
        raise refuse(exc) from None


def _execute(spec, chunks, workers: int | None, client):
    """Yield ``(k, ChunkResult, warnings)`` for each ``(k, theta)`` of ``chunks`` as they finish, in any order.

    Locally joblib's default (loky) backend; with a dask.distributed
    ``client``, the cluster (chunks lost with their workers are resubmitted).
    """
    if client is not None:
        yield from _execute_dask(spec, chunks, workers, client)
        return
    import joblib

    from joblib.externals.loky.process_executor import TerminatedWorkerError

    parent = os.getpid()
    tasks = (joblib.delayed(_solve_task)(spec, k, theta, parent) for k, theta in chunks)
    n_jobs = workers if workers else -1  # -1: every core
    # each task is already a batch of EOS: dispatch them one at a time
    try:
        yield from joblib.Parallel(n_jobs=n_jobs, batch_size=1, return_as="generator_unordered")(tasks)
    except TerminatedWorkerError as exc:
        raise WorkersLost(f"a worker process died ({str(exc).split('(')[-1].rstrip(').') or 'killed'}: out of "
                          "memory, or killed); finished chunks are kept: rerun the same command to resume.") from None


def _execute_dask(spec, chunks, workers: int | None, client):
    """Chunks on a Dask cluster, at most ``workers`` at a time (default: all at once).

    Each task carries its chunk's parameters (nothing is scattered to a
    worker), so a chunk lost with a worker is simply run again: the
    scheduler reschedules it, and a chunk that still fails with the workers
    that run it (``KilledWorker``) or is cancelled is resubmitted up to
    :data:`MAX_RESUBMITS` times.  Results are the same as from an
    uninterrupted run: a chunk's result depends only on the spec and its points.
    """
    distributed = require("dask.distributed", "cluster", "running on a Dask scheduler")
    run_id = uuid.uuid4().hex[:12]
    points = dict(chunks)
    waiting = list(points)
    limit = workers if workers else len(waiting)
    tries = Counter()
    running = {}
    finished = distributed.as_completed(loop=client.loop)

    def submit(k):
        fut = client.submit(_solve_task, spec, k, points[k],
                            key=f"tovforge-chunk-{run_id}-{k}-{tries[k]}", pure=False)
        running[fut.key] = k
        finished.add(fut)

    def fill():
        while waiting and len(running) < limit:
            submit(waiting.pop(0))

    fill()
    for fut in finished:
        k = running.pop(fut.key)
        if fut.status == "finished":
            yield fut.result()
            fut.release()
            fill()
            continue
        if client.status not in ("running", "connecting"):
            raise WorkersLost(f"lost the connection to the Dask scheduler ({client.status}); finished chunks are "
                               "kept: rerun the same command to resume.")
        try:
            exc = fut.exception() if fut.status == "error" else None
        except Exception as err:  # a cancelled future raises instead of returning its exception
            exc = err
        lost = exc is None or type(exc).__name__ in ("KilledWorker", "CancelledError", "FutureCancelledError",
                                                     "CommClosedError")
        if not lost:
            raise exc  # an error of the chunk itself, not of the cluster
        tries[k] += 1
        if tries[k] > MAX_RESUBMITS:
            raise WorkersLost(f"chunk {k} was lost with the Dask workers running it {tries[k]} times "
                               f"({type(exc).__name__ if exc else 'cancelled'}); the workers keep dying (out of "
                               "memory?); finished chunks are kept: rerun the same command to resume.")
        warnings.warn(f"chunk {k} was lost with a Dask worker; resubmitted (try {tries[k] + 1}).", stacklevel=2)
        submit(k)


# ---------------------------------------------------------------------------
# the run
# ---------------------------------------------------------------------------


def grid_memory_bytes(spec) -> int:
    """Peak memory of assembling the grid of ``spec`` (the chunks are joined in memory), in bytes.

    Every point holds its parameters and outputs as float64 and a reason
    string; the chunks and their joined copy coexist while the file is
    written, hence the factor 2.
    """
    o = spec.outputs
    values = (len(spec.parameter_names) + len(o.scalars) + len(o.curves) * len(o.u_nodes)
              + len(o.at_mass) * len(o.masses_msun))
    return 2 * spec.n_points * (8 * values + 1 + 64)


def _warn_once(told: Counter) -> None:
    """Each warning the workers raised, once, with the number of chunks that raised it."""
    for message, n in told.items():
        warnings.warn(message + (f" (in {n} chunks)" if n > 1 else ""), stacklevel=3)


def solve_points(spec, theta: np.ndarray, *, workers: int | None = None, oversubscribe: bool = False) -> ChunkResult:
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
        Parallel workers (default: all cores; at most the cores unless ``oversubscribe``).
    oversubscribe : bool
        Allow more workers than cores.

    Returns
    -------
    ChunkResult
        The points in the order of ``theta``.
    """
    theta = np.asarray(theta, np.float64)
    workers = worker_count(workers, oversubscribe)
    size = spec.chunk_size
    chunks = [(k, theta[start:start + size]) for k, start in enumerate(range(0, len(theta), size))]
    finished, told = {}, Counter()
    try:
        for k, result, said in _execute(spec, chunks, workers, None):
            finished[k] = result
            told.update(dict.fromkeys(said, 1))
    finally:
        _warn_once(told)
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
        try:
            verify_grid(out)
        except InputError as exc:
            if overwrite:
                return False
            raise NeedsPermission(f"{out} exists, made from this spec, but is damaged ({exc}).",
                                  "Remove it, or pass {how} to build it again.", "overwrite") from None
        return True
    if overwrite:
        return False
    what = "is not a tovforge grid file" if found is None else f"was made from a different spec ({found[:12]}...)"
    raise NeedsPermission(f"{out} exists and {what};", "pass {how} to replace it.", "overwrite")


def _prepare_parts(parts: Path, spec, theta_hash: str, overwrite: bool) -> dict:
    manifest_path = parts / "manifest.json"
    expected = {"format": _MANIFEST_FORMAT, "spec_sha256": spec.sha256, "design_sha256": theta_hash,
                "tovforge_version": __version__, "n_chunks": spec.n_chunks}
    if parts.exists() and not parts.is_dir():
        if not overwrite:
            raise NeedsPermission(f"{parts} is a file, but the run keeps its finished chunks in a folder of that "
                                  "name;", "remove it, or pass {how} to discard it.", "overwrite")
        parts.unlink()
    if parts.exists():
        try:
            manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            manifest = None
        same = isinstance(manifest, dict) and all(manifest.get(k) == v for k, v in expected.items())
        if same:
            return manifest  # resume
        if not overwrite:
            why = ("holds no readable manifest" if manifest is None else
                   "holds chunks of a different spec, design or tovforge version")
            raise NeedsPermission(f"{parts} {why};", "pass {how} to discard them, or choose another output file.",
                                  "overwrite")
        shutil.rmtree(parts)
    parts.mkdir()
    manifest = {**expected, "started_utc": utc_now(), "spec": json.loads(spec.to_json())}
    tmp = temp_path(manifest_path)
    tmp.write_text(json.dumps(manifest, indent=1), encoding="utf-8")
    publish(tmp, manifest_path, "manifest", overwrite=True)
    return manifest


def _finished_chunks(parts: Path, spec) -> set[int]:
    """Chunks with a valid file in ``parts``; removes leftovers of killed writes (the run holds the lock)."""
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


def _warn_if_mostly_invalid(spec, theta) -> None:
    """Warn, before any solve, when more than :data:`INVALID_SHARE_WARNING` of the design is invalid."""
    from .. import eos

    messages = eos.get_family(spec.family).validate_rows(theta)
    bad = [m for m in messages if m]
    if len(bad) > INVALID_SHARE_WARNING * len(theta):
        warnings.warn(f"{len(bad)} of {len(theta)} design points ({100 * len(bad) / len(theta):.0f} %) break the "
                      f"rules of the {spec.family} family and will only be stored as invalid (status 1), for "
                      f"example: {bad[0].rstrip('.')}.  Narrow [box] to where the family is valid "
                      "(`tovforge families` shows its demo box).", stacklevel=3)


def run_grid(spec, out, *, workers: int | None = None, scheduler: str | None = None, overwrite: bool = False,
             progress: bool = True, stream=None, oversubscribe: bool = False) -> RunSummary:
    """Solve every point of a grid spec and write the grid file ``out``.

    Parameters
    ----------
    spec : GridSpec
    out : path-like
        The HDF5 file to write.  Finished chunks are kept in ``out.parts``
        until the file is assembled; ``out.lock`` exists while a run writes it.
    workers : int, optional
        Parallel workers (default: all cores; with ``scheduler``, all the
        cluster's workers).  Locally at most the machine's cores (a warning
        says so) unless ``oversubscribe``.
    scheduler : str, optional
        Address of a dask.distributed scheduler (``tcp://host:8786``): run
        the chunks on that cluster.  Chunks lost with a worker are run again.
    overwrite : bool
        Replace an output file, and discard unfinished chunks, made from
        another spec (or another tovforge version).  Without it, they are
        refused.  An output or chunks of the same spec are never discarded:
        the run is then complete already, or resumes.
    progress : bool
        Show a progress bar on ``stream`` (default stderr).
    oversubscribe : bool
        Allow more local workers than cores.

    Returns
    -------
    RunSummary

    Raises
    ------
    tovforge.errors.InputError
        If ``out`` holds another grid (and not ``overwrite``), cannot be
        written, the grid would not fit the memory budget, or the scheduler
        cannot be reached.
    tovforge.errors.OutputBusy
        If another run is writing ``out``.
    """
    t0 = time.monotonic()
    out = Path(out)
    if scheduler is None:
        workers = worker_count(workers, oversubscribe)
    elif workers is not None and workers < 1:
        raise InputError(f"workers must be at least 1. Got {workers}.")
    check_output(out, "grid file", overwrite=True)  # the folder; an existing file is judged below
    o = spec.outputs
    check_memory(grid_memory_bytes(spec), f"the grid of design.points = {spec.n_points} with {len(o.u_nodes)} u "
                 f"nodes and {len(o.scalars) + len(o.curves) + len(o.at_mass)} outputs",
                 "use fewer points, u nodes or outputs, or split the box into several grids")
    with OutputLock(out, "grid file"):
        remove_litter(out)  # a temporary grid file of a run killed while assembling
        parts = parts_folder(out)
        if _check_existing_output(out, spec, overwrite):
            if parts.is_dir():  # a run killed between writing the file and removing its chunks
                shutil.rmtree(parts)
            import h5py

            with h5py.File(out, "r") as h5:
                codes = h5["status/code"][...]
                digest = str(h5.attrs["content_sha256"])
            counts = {int(c): int(n) for c, n in zip(*np.unique(codes, return_counts=True))}
            return RunSummary(out, spec.n_points, spec.n_chunks, spec.n_chunks, 0, counts, digest,
                              time.monotonic() - t0, already_complete=True)
        theta = design_points(spec)
        _warn_if_mostly_invalid(spec, theta)
        client = _connect(scheduler) if scheduler is not None else None
        told = Counter()
        try:
            manifest = _prepare_parts(parts, spec, _theta_sha256(theta), overwrite)
            done = _finished_chunks(parts, spec)
            todo = [k for k in range(spec.n_chunks) if k not in done]
            n_done = sum(np.subtract(*spec.chunk_bounds(k)[::-1]) for k in done)
            with progress_bar(spec.n_points, out.name, done=int(n_done), enabled=progress, stream=stream) as bar:
                chunks = ((k, theta[slice(*spec.chunk_bounds(k))]) for k in todo)
                for k, result, said in _execute(spec, chunks, workers, client):
                    start, stop = spec.chunk_bounds(k)
                    write_chunk(_chunk_path(parts, k), spec, k, theta[start:stop], result)
                    told.update(dict.fromkeys(said, 1))
                    bar.update(stop - start)
        finally:
            if client is not None:
                client.close()
            _warn_once(told)
        theta_all, merged = _assemble(parts, spec)
        digest = write_grid(out, spec, theta_all, merged, _provenance(spec, manifest))
        shutil.rmtree(parts)
    counts = {int(c): int(n) for c, n in zip(*np.unique(merged.status, return_counts=True))}
    return RunSummary(out, spec.n_points, spec.n_chunks, len(done), len(todo), counts, digest,
                      time.monotonic() - t0)
