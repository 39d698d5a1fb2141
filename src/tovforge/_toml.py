"""Strict reading of TOML files (internal): one set of checks for grid specs and observation files.

Every check names the key path of the value (``design.points``,
``pulsar[0].mass_msun``), what was expected, and what was found; unknown
keys get a "did you mean" hint.  Callers prefix the file name (see
:func:`load_toml` and :func:`in_file`).
"""

from __future__ import annotations

import contextlib
import difflib
import math
import tomllib

from .errors import InputError

__all__ = [
    "array",
    "check_keys",
    "in_file",
    "increasing",
    "integer",
    "join",
    "kind_of",
    "load_toml",
    "names",
    "number",
    "required",
    "string",
    "table",
]

_TYPE_NAMES = {str: "a string", bool: "a boolean", int: "an integer", float: "a number", list: "an array",
               dict: "a table"}


def load_toml(path, what: str) -> tuple[dict, str]:
    """Read and parse a TOML file; returns ``(document, text)``.

    Parameters
    ----------
    path : path-like
    what : str
        What the file is, for the error message (``"spec"``, ``"observations"``).

    Raises
    ------
    InputError
        ``FILE: cannot read the WHAT (reason).``, ``FILE:LINE: the WHAT is not UTF-8 text ...`` or
        ``FILE: not valid TOML: ...``.
    """
    from ._files import read_text

    text = read_text(path, what)
    try:
        return tomllib.loads(text), text
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML: {exc}.") from None


@contextlib.contextmanager
def in_file(path):
    """Prefix the file name to the message of an :class:`InputError` raised inside the block."""
    try:
        yield
    except InputError as exc:
        raise type(exc)(f"{path}: {exc}") from None


def kind_of(value) -> str:
    """``"an integer"``, ``"a string"``, ...: the TOML type of a parsed value, for messages."""
    for t in (bool, int, float, str, list, dict):  # bool before int: True is an int in Python
        if isinstance(value, t):
            return _TYPE_NAMES[t]
    return type(value).__name__


def join(path: str, key) -> str:
    """The key path of ``key`` inside ``path``: ``a.b`` for names, ``a[3]`` for indices."""
    if isinstance(key, int):
        return f"{path}[{key}]"
    return f"{path}.{key}" if path else str(key)


def check_keys(tbl: dict, allowed, path: str) -> None:
    """Refuse keys of ``tbl`` not in ``allowed``, with a "did you mean" hint."""
    where = f"[{path}]" if path else "the top level"
    allowed = list(allowed)
    for key in tbl:
        if key not in allowed:
            hint = difflib.get_close_matches(key, allowed, n=1)
            did = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise InputError(f"{join(path, key)}: unknown key {key!r} in {where}{did}; "
                             f"allowed keys: {', '.join(allowed)}.")


def required(tbl: dict, key: str, path: str, hint: str = ""):
    """``tbl[key]``, or ``PATH.KEY: missing`` followed by ``hint``."""
    if key not in tbl:
        raise InputError(f"{join(path, key)}: missing{hint}.")
    return tbl[key]


def table(value, path: str) -> dict:
    """A TOML table."""
    if not isinstance(value, dict):
        raise InputError(f"{path}: expected a table, got {kind_of(value)} ({value!r}).")
    return value


def array(value, path: str) -> list:
    """A TOML array."""
    if not isinstance(value, list):
        raise InputError(f"{path}: expected an array, got {kind_of(value)} ({value!r}).")
    return value


def integer(value, path: str, lo: int | None = None, hi: int | None = None) -> int:
    """An integer (not a boolean) in ``[lo, hi]``."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(f"{path}: expected an integer, got {kind_of(value)} ({value!r}).")
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        rng = f">= {lo}" if hi is None else f"in [{lo}, {hi}]"
        raise InputError(f"{path}: must be an integer {rng}. Got {value}.")
    return value


def number(value, path: str, lo: float | None = None, hi: float | None = None, open_lo: bool = False,
           open_hi: bool = False) -> float:
    """A finite number (integer or float, not a boolean) in the interval from ``lo`` to ``hi``."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{path}: expected a number, got {kind_of(value)} ({value!r}).")
    v = float(value)
    bad = not math.isfinite(v)
    if lo is not None:
        bad |= v <= lo if open_lo else v < lo
    if hi is not None:
        bad |= v >= hi if open_hi else v > hi
    if bad:
        left = "-inf" if lo is None else f"{lo:g}"
        right = "inf" if hi is None else f"{hi:g}"
        rng = f"{'(' if open_lo or lo is None else '['}{left}, {right}{')' if open_hi or hi is None else ']'}"
        raise InputError(f"{path}: must be a finite number in {rng}. Got {value}.")
    return v


def string(value, path: str, choices=None, nonempty: bool = False) -> str:
    """A string, one of ``choices`` when given (with a "did you mean" hint), not blank if ``nonempty``."""
    if not isinstance(value, str):
        raise InputError(f"{path}: expected a string, got {kind_of(value)} ({value!r}).")
    if nonempty and not value.strip():
        raise InputError(f"{path}: must not be empty.")
    if choices is not None and value not in choices:
        hint = difflib.get_close_matches(value, list(choices), n=1)
        did = f" (did you mean {hint[0]!r}?)" if hint else ""
        raise InputError(f"{path}: {value!r} is not one of {', '.join(choices)}{did}.")
    return value


def names(value, path: str, choices) -> tuple[str, ...]:
    """An array of distinct strings, each one of ``choices``."""
    items = [string(v, join(path, i), choices) for i, v in enumerate(array(value, path))]
    for i, v in enumerate(items):
        if v in items[:i]:
            raise InputError(f"{join(path, i)}: {v!r} is listed twice.")
    return tuple(items)


def increasing(values, path: str, lo: float | None, hi: float | None, open_lo: bool, open_hi: bool
               ) -> tuple[float, ...]:
    """An array of strictly increasing finite numbers, each in the interval from ``lo`` to ``hi``."""
    vals = [number(v, join(path, i), lo, hi, open_lo, open_hi) for i, v in enumerate(array(values, path))]
    for i in range(1, len(vals)):
        if not vals[i] > vals[i - 1]:
            raise InputError(f"{join(path, i)}: values must increase; {vals[i]:g} follows {vals[i - 1]:g}.")
    return tuple(vals)
