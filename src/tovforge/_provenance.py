"""Provenance of everything tovforge writes: versions, the git commit, one UTC time format (internal).

Grid files, trained models, check reports, exported evaluators and tables all
record where they came from through :func:`provenance`, so they carry the same
keys (``tovforge_version``, ``python_version``, ``<package>_version``,
``git_commit``, ``created_utc``) and one timestamp format (:data:`UTC_FORMAT`).
"""

from __future__ import annotations

import platform
import subprocess
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

from . import __version__

__all__ = ["UTC_FORMAT", "git_commit", "package_versions", "provenance", "utc_now"]

#: The one timestamp format of tovforge's files: ISO 8601 in UTC, to the second (``2026-03-01T12:00:00Z``).
UTC_FORMAT = "%Y-%m-%dT%H:%M:%SZ"


def utc_now() -> str:
    """The current time in :data:`UTC_FORMAT`."""
    return datetime.now(timezone.utc).strftime(UTC_FORMAT)


def git_commit() -> str:
    """Commit of the tovforge source tree, marked when it has uncommitted changes.

    Returns ``"unknown (not a git checkout)"`` for an installed copy or when
    git is not available.
    """
    root = Path(__file__).resolve().parent
    try:
        head = subprocess.run(["git", "-C", str(root), "rev-parse", "HEAD"], capture_output=True, text=True,
                              timeout=20, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(root), "status", "--porcelain", "--untracked-files=no", "--", "."],
                               capture_output=True, text=True, timeout=20, check=True).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return "unknown (not a git checkout)"
    return head + (" with uncommitted changes to src/tovforge" if dirty else "")


def package_versions(*packages: str) -> dict:
    """``{"<name>_version": version}`` of installed distributions (``"not installed"`` otherwise).

    Parameters
    ----------
    *packages : str
        Distribution names (``"numpy"``, ``"h5py"``, ``"scikit-learn"``); the
        key replaces ``-`` by ``_``.
    """
    out = {}
    for name in packages:
        try:
            version = metadata.version(name)
        except metadata.PackageNotFoundError:
            version = "not installed"
        out[f"{name.replace('-', '_')}_version"] = version
    return out


def provenance(*packages: str, created_utc: str | None = None, **extra) -> dict:
    """Versions, git commit and creation time, plus ``extra`` entries.

    Parameters
    ----------
    *packages : str
        Dependencies whose versions matter for the artifact, beyond NumPy
        (always recorded).
    created_utc : str, optional
        The creation time to record (default: now, :func:`utc_now`).
    **extra
        Further entries (what the artifact was made from); they come last and
        may not replace the common keys.

    Returns
    -------
    dict
        ``tovforge_version``, ``python_version``, ``numpy_version``, one
        ``<package>_version`` per package, ``git_commit``, ``created_utc``, then
        ``extra``.
    """
    out = {"tovforge_version": __version__, "python_version": platform.python_version(),
           **package_versions("numpy", *packages), "git_commit": git_commit(),
           "created_utc": created_utc if created_utc is not None else utc_now()}
    clash = sorted(set(out) & set(extra))
    if clash:
        raise ValueError(f"provenance: {clash[0]!r} is a common key; do not pass it")
    return {**out, **extra}
