"""Files tovforge reads and writes (internal): one-line errors, atomic publication, locks and litter.

Every output goes the same way:

1. :func:`check_output` before any work: the folder exists and is writable,
   a file is not a folder (or the other way round), and an existing output
   is replaced only with ``overwrite``.
2. The content is written under :func:`temp_path` in the destination folder
   (same file system, so the rename is atomic) and flushed to disk.
3. :func:`publish` (a file) or :func:`publish_folder` (a model folder) gives
   it its name: a reader never sees half an output, and without
   ``overwrite`` an output that appeared in the meantime is not clobbered.

Temporary names carry the writer's process id and host, so that
:func:`remove_litter` can delete what a killed run left behind without
touching the files of a run still alive.  :class:`OutputLock` keeps two
runs from writing one grid at once.  :func:`read_text` reads UTF-8 text with
one-line errors.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import re
import shutil
import socket
from pathlib import Path

from .errors import InputError, OutputBusy, OutputExists

try:
    import fcntl
except ImportError:  # pragma: no cover - Windows: locks fall back to O_EXCL and the owner's pid
    fcntl = None

__all__ = ["read_text", "check_output", "temp_path", "publish", "publish_folder", "remove_litter", "pid_alive",
           "OutputLock", "HOST"]

#: This machine's name, as written into temporary names and lock files.
HOST = socket.gethostname() or "localhost"


# ---------------------------------------------------------------------------
# reading
# ---------------------------------------------------------------------------


def read_text(path, what: str, error_cls=InputError) -> str:
    """The UTF-8 text of ``path``; ``error_cls`` with one line naming the file otherwise.

    Parameters
    ----------
    path : path-like
    what : str
        What the file is, for the message (``"spec"``, ``"samples file"``).
    error_cls : type
        An :class:`~tovforge.errors.InputError` subclass.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except IsADirectoryError:
        raise error_cls(f"{path}: a folder, not a {what} file.") from None
    except OSError as exc:
        raise error_cls(f"{path}: cannot read the {what} ({exc.strerror or exc}).") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise error_cls(f"{path}:{line}: the {what} is not UTF-8 text (byte 0x{data[exc.start]:02x} at offset "
                        f"{exc.start}); save it as UTF-8.") from None


# ---------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------


def _probe_writable(folder: Path, what: str) -> None:
    """Create and remove a file in ``folder``: the one reliable test (``os.access`` is wrong for root and
    for read-only file systems)."""
    probe = folder / f".tovforge-probe.{os.getpid()}@{HOST}"
    try:
        fd = os.open(probe, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o600)
    except FileExistsError:
        return
    except OSError as exc:
        raise InputError(f"{folder}: cannot write the {what} there ({exc.strerror or exc}); choose another "
                         "folder.") from None
    os.close(fd)
    probe.unlink(missing_ok=True)


def check_output(path, what: str, overwrite: bool = False, folder: bool = False) -> Path:
    """Check, before any work, that the output ``path`` can be written; returns it as a Path.

    Parameters
    ----------
    path : path-like
    what : str
        What the output is, for messages (``"grid file"``, ``"model folder"``).
    overwrite : bool
        Allow replacing an existing output (for a folder: a non-empty one).
    folder : bool
        The output is a folder (otherwise a file).

    Raises
    ------
    InputError
        The parent folder is missing, a file, or not writable; a file is
        where a folder should be or the other way round.
    OutputExists
        The output exists and ``overwrite`` is False.
    """
    path = Path(path)
    parent = path.parent
    try:
        if not parent.exists():
            raise InputError(f"{parent}: no such folder for the {what} {path.name}; create it first.")
        if not parent.is_dir():
            raise InputError(f"{parent} is a file, not a folder: the {what} {path} cannot be written there.")
        if folder:
            if path.exists() and not path.is_dir():
                raise InputError(f"{path} is a file; the {what} is a folder: choose another name.")
            if path.is_dir() and any(path.iterdir()) and not overwrite:
                raise OutputExists(path, what)
        else:
            if path.is_dir():
                raise InputError(f"{path} is a folder; the {what} is a file: give a file name.")
            if path.exists() and not overwrite:
                raise OutputExists(path, what)
    except OSError as exc:
        raise InputError(f"{path}: cannot check the {what} ({exc.strerror or exc}).") from None
    _probe_writable(parent, what)
    return path


def temp_path(path, suffix: str = "tmp") -> Path:
    """Temporary name for ``path`` in its folder: ``.NAME.PID@HOST.tmp`` (hidden; found by :func:`remove_litter`)."""
    path = Path(path)
    return path.with_name(f".{path.name}.{os.getpid()}@{HOST}.{suffix}")


def _fsync(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:  # pragma: no cover - folders cannot be opened on some systems
        return
    try:
        os.fsync(fd)  # the data reach the disk before the name does
    except OSError:  # pragma: no cover
        pass
    finally:
        os.close(fd)


def publish(tmp, path, what: str, overwrite: bool = False) -> Path:
    """Give the finished temporary file ``tmp`` its name ``path`` (atomically, flushed to disk).

    Without ``overwrite`` an existing ``path`` is never replaced, not even one
    that appeared while ``tmp`` was written: the name is taken with a hard
    link, which fails if it exists.

    Raises
    ------
    OutputExists
        ``path`` exists and ``overwrite`` is False (``tmp`` is removed).
    """
    tmp, path = Path(tmp), Path(path)
    _fsync(tmp)
    if overwrite:
        os.replace(tmp, path)
    else:
        try:
            os.link(tmp, path)
        except FileExistsError:
            tmp.unlink(missing_ok=True)
            raise OutputExists(path, what) from None
        except OSError:  # pragma: no cover - a file system without hard links
            if path.exists():
                tmp.unlink(missing_ok=True)
                raise OutputExists(path, what) from None
            os.replace(tmp, path)
        else:
            tmp.unlink()
    _fsync(path.parent)
    return path


def publish_folder(tmp, path, what: str, overwrite: bool = False) -> Path:
    """Give the finished temporary folder ``tmp`` its name ``path``; an old one is replaced only with ``overwrite``.

    The old folder is first renamed aside, then ``tmp`` takes the name, then
    the old one is removed: at every moment a complete folder, new or old,
    exists (the old one under its aside name if the process dies in between).

    Raises
    ------
    OutputExists
        ``path`` exists (a file, or a folder that is not empty) and
        ``overwrite`` is False (``tmp`` is removed).
    """
    tmp, path = Path(tmp), Path(path)
    for f in tmp.iterdir():
        _fsync(f)
    _fsync(tmp)
    old = None
    if path.exists() or path.is_symlink():
        empty_dir = path.is_dir() and not any(path.iterdir())
        if not (overwrite or empty_dir):
            shutil.rmtree(tmp, ignore_errors=True)
            raise OutputExists(path, what)
        if not empty_dir:
            old = temp_path(path, "old")
            os.rename(path, old)
    try:
        os.rename(tmp, path)
    except OSError as exc:
        if old is not None:
            os.rename(old, path)  # put the old output back
        shutil.rmtree(tmp, ignore_errors=True)
        if exc.errno in (errno.ENOTEMPTY, errno.EEXIST):  # a folder appeared in the meantime
            raise OutputExists(path, what) from None
        raise
    _fsync(path.parent)
    if old is not None:
        if old.is_dir() and not old.is_symlink():
            shutil.rmtree(old, ignore_errors=True)
        else:
            old.unlink(missing_ok=True)
    return path


def pid_alive(pid: int) -> bool:
    """Whether a process ``pid`` exists on this machine (an unknown answer counts as alive)."""
    if os.name == "nt":  # pragma: no cover - os.kill(pid, 0) would not test for a process there
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # EPERM: it exists, owned by someone else
        return True
    return True


_LITTER = r"\.{name}\.(\d+)(?:@([^/]*?))?\.(?:tmp|old)(?:\..*)?"


def remove_litter(path) -> list[Path]:
    """Remove temporary files and folders of ``path`` left by killed runs on this machine; returns them.

    Only names made by :func:`temp_path` (or the older ``.NAME.PID.tmp``)
    whose process is dead are removed: a run still writing keeps its files.
    """
    path = Path(path)
    pattern = re.compile(_LITTER.format(name=re.escape(path.name)))
    removed = []
    try:
        siblings = list(path.parent.iterdir())
    except OSError:
        return removed
    for f in siblings:
        m = pattern.fullmatch(f.name)
        if m is None or (m.group(2) not in (None, HOST)) or pid_alive(int(m.group(1))):
            continue
        if f.is_dir() and not f.is_symlink():
            shutil.rmtree(f, ignore_errors=True)
        else:
            f.unlink(missing_ok=True)
        removed.append(f)
    return removed


# ---------------------------------------------------------------------------
# locks
# ---------------------------------------------------------------------------


def _owner_text(info: dict) -> str:
    return (f"pid {info.get('pid', '?')} on {info.get('host', '?')}, started {info.get('started_utc', '?')}"
            if info else "an unknown process")


def _read_owner(fd: int) -> dict:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        info = json.loads(os.read(fd, 4096).decode("utf-8") or "{}")
    except (OSError, ValueError):
        return {}
    return info if isinstance(info, dict) else {}


class OutputLock:
    """Exclusive lock on an output while one run writes it: the file ``PATH.lock``.

    The lock file holds the owner's pid, host and start time (JSON).  The lock
    itself is an ``flock`` on that file, which the system releases when the
    owner dies, so a lock left by a killed run is stale and is taken over
    (``stale`` then says whose it was); a second run while the owner lives is
    refused with :class:`~tovforge.errors.OutputBusy`.  On systems without
    ``fcntl`` the file is created exclusively and a lock whose pid is dead on
    this host is taken over.

    Parameters
    ----------
    path : path-like
        The output the lock guards.
    what : str
        What the output is, for the message.
    """

    def __init__(self, path, what: str = "output"):
        self.path = Path(path)
        self.lock_path = self.path.with_name(self.path.name + ".lock")
        self.what = what
        self.stale: dict = {}
        self._fd = None

    def _busy(self, owner: dict) -> OutputBusy:
        return OutputBusy(f"{self.path}: the {self.what} is being written by another run ({_owner_text(owner)}; "
                          f"lock file {self.lock_path}); wait for it to finish or stop it.")

    def _info(self) -> bytes:
        from ._provenance import utc_now

        return json.dumps({"pid": os.getpid(), "host": HOST, "started_utc": utc_now()}).encode()

    def acquire(self) -> OutputLock:
        for _ in range(20):
            if fcntl is None:  # pragma: no cover
                if self._acquire_exclusive():
                    return self
                continue
            fd = os.open(self.lock_path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                owner = _read_owner(fd)
                os.close(fd)
                if exc.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                    raise self._busy(owner) from None
                raise
            try:  # a finishing owner unlinks the file it held: lock the one at the path
                same = os.fstat(fd).st_ino == os.stat(self.lock_path).st_ino
            except FileNotFoundError:
                same = False
            if not same:
                os.close(fd)
                continue
            self.stale = _read_owner(fd)
            os.ftruncate(fd, 0)
            os.lseek(fd, 0, os.SEEK_SET)
            os.write(fd, self._info())
            os.fsync(fd)
            self._fd = fd
            return self
        raise self._busy({})

    def _acquire_exclusive(self) -> bool:  # pragma: no cover - Windows
        try:
            fd = os.open(self.lock_path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            with open(self.lock_path, "rb") as fh:
                owner = _read_owner(fh.fileno())
            if owner.get("host") == HOST and isinstance(owner.get("pid"), int) and not pid_alive(owner["pid"]):
                self.stale = owner
                self.lock_path.unlink(missing_ok=True)
                return False
            raise self._busy(owner) from None
        os.write(fd, self._info())
        self._fd = fd
        return True

    def release(self) -> None:
        if self._fd is None:
            return
        with contextlib.suppress(OSError):
            self.lock_path.unlink()
        os.close(self._fd)
        self._fd = None

    def __enter__(self) -> OutputLock:
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()
