"""Table files: every format round-trips values, units, descriptions and metadata."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest
from tovforge.errors import InputError
from tovforge.tables import Column, TableWriter, read_table, table_format
from tovforge.tables import _write

FORMATS = ["csv", "h5", "npz"]
COLUMNS = [
    Column("sample", "1", "row number", dtype="int64"),
    Column("radius@1.4", "km", "radius at 1.4 Msun"),
    Column("inertia", "1e45 g cm^2", "moment of inertia; with a semicolon"),
    Column("log_p1", "log10(dyn/cm^2)", "EOS parameter"),
]
META = {"kind": "test", "command": "tovforge table x --out 'a b.csv'", "note": "quotes \" and unicode \u00b5",
        "count": 7, "ratio": 0.1, "flag": True, "missing": float("nan"), "nested_json": json.dumps({"a": [1, 2]})}


def _block(rng, n, start=0):
    return {
        "sample": np.arange(start, start + n),
        "radius@1.4": rng.normal(12.0, 1.0, n),
        "inertia": rng.lognormal(0.0, 1.0, n) * 10.0 ** rng.integers(-300, 300, n),
        "log_p1": rng.uniform(34, 35, n),
    }


def _special(n_rows=5):
    return {"sample": np.arange(n_rows), "radius@1.4": np.array([np.nan, np.inf, -np.inf, -0.0, 5e-324]),
            "inertia": np.array([1.0 / 3.0, 1e308, 2.2250738585072014e-308, 0.1 + 0.2, 12.0]),
            "log_p1": np.array([34.384, 34.0, 35.0, np.nan, 34.5])}


def _same(a, b):
    assert a.dtype == b.dtype
    assert np.array_equal(a, b, equal_nan=True)
    assert np.array_equal(np.signbit(a), np.signbit(b))


@pytest.mark.parametrize("fmt", FORMATS)
def test_round_trip_values_units_and_metadata(tmp_path, fmt):
    path = tmp_path / f"t.{fmt}"
    rng = np.random.default_rng(3)
    blocks = [_special(), _block(rng, 40, 5), _block(rng, 0, 45), _block(rng, 7, 45)]
    with TableWriter(path, COLUMNS, META) as w:
        for b in blocks:
            w.append(b)
    t = read_table(path)
    assert list(t.columns) == [c.name for c in COLUMNS]
    assert t.units == {c.name: c.unit for c in COLUMNS}
    assert t.descriptions == {c.name: c.description for c in COLUMNS}
    for name in t.columns:
        _same(t[name], np.concatenate([np.asarray(b[name], t[name].dtype) for b in blocks]))
    assert len(t) == 52 == w.n_rows
    missing = t.meta.pop("missing")
    assert np.isnan(missing)
    assert {k: v for k, v in t.meta.items() if k not in ("format", "format_version")} == \
        {k: v for k, v in META.items() if k != "missing"}
    assert t.meta["format"] == "tovforge-table" and t.meta["format_version"] == 1
    assert type(t.meta["count"]) is int and type(t.meta["flag"]) is bool


@pytest.mark.parametrize("fmt", FORMATS)
def test_blocks_larger_than_the_write_unit_are_split_transparently(tmp_path, fmt, monkeypatch):
    monkeypatch.setattr(_write, "_BLOCK_ROWS", 3)
    rng = np.random.default_rng(4)
    b = _block(rng, 10)
    with TableWriter(tmp_path / f"t.{fmt}", COLUMNS, {}) as w:
        w.append(b)
    t = read_table(tmp_path / f"t.{fmt}")
    for name in b:
        _same(t[name], np.asarray(b[name], t[name].dtype))


def test_files_are_readable_without_tovforge(tmp_path):
    b = _special()
    for fmt in FORMATS:
        with TableWriter(tmp_path / f"t.{fmt}", COLUMNS, {"kind": "test"}) as w:
            w.append(b)
    with np.load(tmp_path / "t.npz", allow_pickle=False) as npz:
        assert npz["_columns"].tolist() == [c.name for c in COLUMNS]
        assert npz["_units"].tolist()[2] == "1e45 g cm^2"
        assert json.loads(str(npz["_meta_json"]))["kind"] == "test"
        _same(npz["inertia"], b["inertia"])
    with h5py.File(tmp_path / "t.h5", "r") as h5:
        assert h5.attrs["format"] == "tovforge-table" and h5.attrs["kind"] == "test"
        assert h5["columns/radius@1.4"].attrs["unit"] == "km"
        _same(h5["columns/log_p1"][...], b["log_p1"])
    lines = [ln for ln in (tmp_path / "t.csv").read_text().splitlines() if not ln.startswith("#")]
    header = lines[0].split(",")
    assert header[2] == "inertia [1e45 g cm^2]"
    _same(np.loadtxt(lines[1:], delimiter=",")[:, 2], b["inertia"])


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_failed_write_leaves_no_file(tmp_path, fmt):
    path = tmp_path / f"t.{fmt}"
    with pytest.raises(RuntimeError, match="stop"):
        with TableWriter(path, COLUMNS, {}) as w:
            w.append(_special())
            raise RuntimeError("stop")
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("name", ["t.txt", "t", "t.json"])
def test_unknown_extension_is_named(tmp_path, name):
    with pytest.raises(InputError, match="unknown table format"):
        table_format(tmp_path / name)


def test_hdf5_long_suffix_is_accepted():
    assert table_format("x.hdf5") == "h5"


@pytest.mark.parametrize("bad", ["1radius", "radius,1.4", "radius [km]", "a/b", "_private"])
def test_column_names_are_checked(bad):
    with pytest.raises(ValueError, match="column name"):
        Column(bad, "km")


def test_block_must_hold_every_column(tmp_path):
    with TableWriter(tmp_path / "t.csv", COLUMNS, {}) as w:
        with pytest.raises(ValueError, match="missing"):
            w.append({"sample": np.arange(2)})
        w.append(_special())


def test_not_a_table_is_refused(tmp_path):
    (tmp_path / "x.csv").write_text("a,b\n1,2\n")
    with pytest.raises(InputError, match="not a tovforge table"):
        read_table(tmp_path / "x.csv")
