"""Keep committed artifacts unless their content changed (internal; used by ``make grids`` and ``make export``).

A rebuilt grid file or exported evaluator differs from the committed one in
its creation time and git commit even when nothing else changed.  Replacing
it anyway would rewrite megabytes of binary history for nothing, so the
Makefile builds into ``build/`` and calls::

    python -m tovforge._artifacts NEW COMMITTED

which moves NEW onto COMMITTED only when the content differs:

- grid files (``.h5``): the ``content_sha256`` attribute (a hash of every
  dataset) or the ``spec_sha256`` (the normalised spec) differs;
- exported evaluators (``.py``): the text differs once timestamps, the git
  commit and the ``PROVENANCE`` and ``FILE_SHA256`` lines are set aside.

An unchanged exported file is touched, so that ``make`` sees it up to date.
"""

from __future__ import annotations

import os
import re
import sys
from pathlib import Path

__all__ = ["replace_if_changed", "same_content"]

_TIME = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(?:Z|[+-]\d\d:\d\d)")
_COMMIT = re.compile(r"(git commit )([0-9a-f]{40}(?: with uncommitted changes to src/tovforge)?"
                     r"|unknown \(not a git checkout\))")


def _grid_identity(path: Path) -> tuple[str, str]:
    import h5py

    with h5py.File(path, "r") as h5:
        return str(h5.attrs["content_sha256"]), str(h5.attrs["spec_sha256"])


def _evaluator_text(path: Path) -> str:
    lines = path.read_text(encoding="utf-8").splitlines()
    text = "\n".join(line for line in lines if not line.startswith(("PROVENANCE = ", "FILE_SHA256 = ")))
    return _COMMIT.sub(r"\1<commit>", _TIME.sub("<time>", text))


def same_content(new, old) -> bool:
    """Whether two grid files (``.h5``) or two exported evaluators (``.py``) hold the same content."""
    new, old = Path(new), Path(old)
    if new.suffix != old.suffix:
        raise ValueError(f"{new} and {old} are not of the same kind")
    if new.suffix == ".h5":
        return _grid_identity(new) == _grid_identity(old)
    if new.suffix == ".py":
        return _evaluator_text(new) == _evaluator_text(old)
    raise ValueError(f"{new}: only .h5 grid files and .py exported evaluators are compared")


def replace_if_changed(new, old) -> bool:
    """Move ``new`` onto ``old`` if ``old`` is missing or its content differs; returns whether it did.

    When the content is the same, ``new`` is deleted and ``old`` is kept as it
    is (an exported ``.py`` file is touched, so that ``make`` sees it newer
    than the model it came from).
    """
    new, old = Path(new), Path(old)
    if old.exists() and same_content(new, old):
        new.unlink()
        if old.suffix == ".py":
            os.utime(old)
        return False
    os.replace(new, old)
    return True


if __name__ == "__main__":  # pragma: no cover - exercised through the Makefile
    if len(sys.argv) != 3:
        sys.exit("usage: python -m tovforge._artifacts NEW COMMITTED")
    changed = replace_if_changed(sys.argv[1], sys.argv[2])
    print(f"{sys.argv[2]}: {'replaced (content changed)' if changed else 'kept (same content)'}")
