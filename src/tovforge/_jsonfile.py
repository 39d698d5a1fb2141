"""JSON helpers (internal): reading a file with errors that name the file and line, and one
converter from NumPy / pathlib values to plain JSON data."""

from __future__ import annotations

import json
import math
from pathlib import Path, PurePath

__all__ = ["read_json", "jsonable"]


def read_json(path: Path, error_cls):
    """Parse ``path``; an unreadable file, text that is not UTF-8 or invalid JSON raise ``error_cls`` with
    one line (``FILE:LINE: not valid JSON (...)``)."""
    from ._files import read_text

    try:
        return json.loads(read_text(path, "JSON file", error_cls))
    except json.JSONDecodeError as exc:
        raise error_cls(f"{path}:{exc.lineno}: not valid JSON ({exc.msg}).") from None
    except RecursionError:
        raise error_cls(f"{path}: JSON nested too deeply.") from None


def jsonable(obj, *, strict: bool = True, where: str = "value"):
    """``obj`` as plain JSON data: dict (str keys), list, str, bool, int, finite float or None.

    NumPy scalars and arrays become Python numbers and lists, paths become
    strings, tuples become lists, and NaN or infinite floats become ``None``
    (JSON has no such numbers; ``json.dumps`` would write the invalid token
    ``NaN``).

    Parameters
    ----------
    obj : object
    strict : bool
        Raise for a value of any other type (default); with ``False`` it is
        written as ``str(value)``.
    where : str
        Name of ``obj`` in the error message; dict keys are appended
        (``where.key``).

    Raises
    ------
    TypeError
        For an unsupported type when ``strict``.
    """
    import numpy as np

    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, dict):
        return {str(k): jsonable(v, strict=strict, where=f"{where}.{k}") for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v, strict=strict, where=where) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist(), strict=strict, where=where)
    if isinstance(obj, PurePath):
        return str(obj)
    if strict:
        raise TypeError(f"{where}: unsupported value of type {type(obj).__name__}.")
    return str(obj)
