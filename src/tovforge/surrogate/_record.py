"""Frozen dataclasses that read and write themselves as JSON (model metadata, fit records, check reports)."""

from __future__ import annotations

import dataclasses

from .._jsonfile import jsonable

__all__ = ["Record", "nested", "plain"]


def nested(cls, *, many: bool = False, mapping: bool = False, **kw):
    """A dataclass field holding a :class:`Record` (or a tuple / dict of them) that JSON reads back as ``cls``."""
    if many:
        conv = lambda v: tuple(cls.from_json(x) for x in v)  # noqa: E731
    elif mapping:
        conv = lambda v: {str(k): cls.from_json(x) for k, x in v.items()}  # noqa: E731
    else:
        conv = cls.from_json
    return dataclasses.field(metadata={"json": conv}, **kw)


def plain(obj):
    """``obj`` as JSON data: records become dicts (recursively), the rest goes through
    :func:`tovforge._jsonfile.jsonable` (tuples to lists, NumPy to Python, NaN to None)."""
    if isinstance(obj, Record):
        return obj.to_json()
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    return jsonable(obj)


def _tuples(v):
    """JSON lists back to (nested) tuples."""
    return tuple(_tuples(x) for x in v) if isinstance(v, list) else v


class Record:
    """Mixin of frozen dataclasses stored as JSON objects.

    :meth:`to_json` writes every field (records nested, tuples as lists);
    :meth:`from_json` reads the fields it knows (missing ones take their
    defaults, unknown keys are ignored, so files written by a newer or older
    version of a record still read), lists back as tuples where the field is
    a tuple, and nested records through :func:`nested`.
    """

    def to_json(self) -> dict:
        return {f.name: plain(getattr(self, f.name)) for f in dataclasses.fields(self)}

    @classmethod
    def from_json(cls, data: dict):
        if not isinstance(data, dict):
            raise TypeError(f"{cls.__name__}: expected a JSON object, got {type(data).__name__}")
        kw = {}
        for f in dataclasses.fields(cls):
            if f.name not in data:
                continue
            v = data[f.name]
            conv = f.metadata.get("json")
            if conv is not None and v is not None:
                v = conv(v)
            elif isinstance(v, list) and str(f.type).startswith("tuple"):
                v = _tuples(v)
            kw[f.name] = v
        return cls(**kw)

