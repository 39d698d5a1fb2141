"""Helpers shared by the grid tests: compare grid files dataset by dataset."""

from __future__ import annotations

import h5py

from tovforge.grid import content_sha256


def datasets(path) -> dict:
    """Every dataset of an HDF5 file, by path."""
    out = {}
    with h5py.File(path, "r") as h5:
        h5.visititems(lambda name, obj: out.__setitem__(name, obj[...]) if isinstance(obj, h5py.Dataset) else None)
    return out


def assert_same_datasets(a, b) -> None:
    """Same dataset paths, dtypes, shapes and bytes (NaN payloads included), and the same content hash."""
    da, db = datasets(a), datasets(b)
    assert sorted(da) == sorted(db)
    for name in da:
        assert da[name].dtype == db[name].dtype and da[name].shape == db[name].shape, name
        if da[name].dtype.kind == "O":  # strings
            assert da[name].tolist() == db[name].tolist(), name
        else:
            assert da[name].tobytes() == db[name].tobytes(), name
    assert content_sha256(a) == content_sha256(b)
