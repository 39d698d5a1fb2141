"""Resource limits (internal): the memory budget that sizes are checked against before work starts, disk
space, and the number of worker processes.

The memory budget is half of this machine's physical memory, or
``TOVFORGE_MEMORY_GB`` (gigabytes) when set.  Work whose arrays would not
fit (a design of 3e8 points, 1e8 nodes per curve, a binary table of 1e10
pairs) is refused with one line before it starts, instead of ending in a
MemoryError minutes later or pushing the machine into swap.
"""

from __future__ import annotations

import os
import shutil
import warnings

from .errors import InputError, ResourceLimit

__all__ = ["BUDGET_ENV", "memory_budget", "check_memory", "check_disk", "machine_cores", "worker_count",
           "size_text"]

#: Environment variable that sets the memory budget in gigabytes (1e9 bytes).
BUDGET_ENV = "TOVFORGE_MEMORY_GB"


def size_text(n_bytes: float) -> str:
    """``1.2 GB``, ``340 MB``, ``5.6 TB``: a size in decimal units, for messages."""
    for unit, scale in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n_bytes >= scale:
            return f"{n_bytes / scale:.3g} {unit}"
    return f"{int(n_bytes)} bytes"


def memory_budget() -> tuple[float, str]:
    """The memory budget in bytes, and where it comes from (for messages)."""
    raw = os.environ.get(BUDGET_ENV)
    if raw is not None:
        try:
            gb = float(raw)
        except ValueError:
            gb = float("nan")
        if not gb > 0 or gb == float("inf"):
            raise InputError(f"{BUDGET_ENV}={raw!r}: the memory budget must be a positive number of gigabytes.")
        return gb * 1e9, f"{BUDGET_ENV}"
    try:
        total = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (AttributeError, ValueError, OSError):  # pragma: no cover - systems without sysconf
        return 4e9, f"a default; {BUDGET_ENV} sets it"
    return total / 2, f"half of this machine's memory; {BUDGET_ENV} sets it"


def check_memory(n_bytes: float, what: str, fix: str) -> None:
    """Refuse work whose arrays need more than the memory budget.

    Parameters
    ----------
    n_bytes : float
        Estimated peak memory of the work.
    what : str
        What asks for it (``"design.points = 300000000"``).
    fix : str
        What the user can do (``"use fewer points or split the grid"``).

    Raises
    ------
    ResourceLimit
    """
    budget, source = memory_budget()
    if n_bytes > budget:
        raise ResourceLimit(f"{what}: needs about {size_text(n_bytes)} of memory, above the budget of "
                            f"{size_text(budget)} ({source}); {fix}.")


def check_disk(folder, n_bytes: float, what: str, fix: str) -> None:
    """Refuse an output that would not fit on the disk of ``folder``.

    Raises
    ------
    ResourceLimit
    """
    try:
        free = shutil.disk_usage(folder).free
    except OSError:  # pragma: no cover - then the write itself will say so
        return
    if n_bytes > free:
        raise ResourceLimit(f"{what}: the output needs about {size_text(n_bytes)} of disk, but {folder} has "
                            f"{size_text(free)} free; {fix}.")


def machine_cores() -> int:
    """Cores this process may run on (its CPU affinity, else the machine's count)."""
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # pragma: no cover - macOS, Windows
        return os.cpu_count() or 1


def worker_count(workers: int | None, oversubscribe: bool = False) -> int | None:
    """The number of local worker processes to start for ``workers`` (None: every core).

    More workers than cores only slow a run down (each solve needs a core of
    its own) and can exhaust the process table, so ``workers`` is capped to
    :func:`machine_cores` with a warning unless ``oversubscribe``.

    Raises
    ------
    InputError
        ``workers`` below 1.
    """
    if workers is None:
        return None
    if isinstance(workers, bool) or int(workers) != workers or workers < 1:
        raise InputError(f"workers must be a whole number >= 1. Got {workers}.")
    cores = machine_cores()
    if workers > cores and not oversubscribe:
        warnings.warn(f"workers = {workers} is more than the {cores} cores of this machine; using {cores} "
                      "(more workers than cores only slow a run down; the oversubscribe option allows it).",
                      stacklevel=3)
        return cores
    return int(workers)
