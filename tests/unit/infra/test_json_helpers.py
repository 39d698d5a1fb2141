"""One converter to JSON data for every writer (CLI output, demo summary, exported metadata)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from tovforge._jsonfile import jsonable


def test_numpy_values_paths_and_tuples_become_plain_json():
    data = {"a": np.float64(1.5), "b": np.int32(3), "c": np.array([[1, 2], [3, 4]]), "d": (1, 2.0),
            "e": Path("x/y.h5"), "f": np.bool_(True), 7: None}
    out = jsonable(data)
    assert out == {"a": 1.5, "b": 3, "c": [[1, 2], [3, 4]], "d": [1, 2.0], "e": "x/y.h5", "f": True, "7": None}
    assert type(out["b"]) is int and type(out["f"]) is bool
    assert json.loads(json.dumps(out)) == out


def test_non_finite_numbers_become_null_so_the_json_is_valid():
    out = jsonable([math.nan, np.float32("inf"), -math.inf, np.array([1.0, np.nan])])
    assert out == [None, None, None, [1.0, None]]
    json.loads(json.dumps(out, allow_nan=False))  # raises if a NaN token were written


def test_unknown_types_are_refused_with_their_key_path_or_stringified():
    with pytest.raises(TypeError, match=r"report\.model\.kind: unsupported value of type object"):
        jsonable({"model": {"kind": object()}}, where="report")
    assert jsonable({"x": complex(1, 2)}, strict=False) == {"x": "(1+2j)"}
