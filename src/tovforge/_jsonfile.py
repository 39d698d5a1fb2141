"""Reading a JSON file with an error that names the file and line (internal)."""

from __future__ import annotations

import json
from pathlib import Path

__all__ = ["read_json"]


def read_json(path: Path, error_cls):
    """Parse ``path``; invalid JSON raises ``error_cls('FILE:LINE: not valid JSON (...)')``."""
    try:
        return json.loads(Path(path).read_text())
    except json.JSONDecodeError as exc:
        raise error_cls(f"{path}:{exc.lineno}: not valid JSON ({exc.msg}).") from None
