"""Table files: CSV, HDF5 and NPZ, written block by block, read back whole.

A table is a list of named columns of equal length (float64 or int64), each
with a unit and a description, plus a flat dict of metadata (provenance and
what the table was made from).  The format follows the file extension:

``.csv``
    ``# tovforge-table 1`` on the first line, then ``# meta <key> = <JSON>``
    lines, ``# column <name> [<unit>] <dtype>: <description>`` lines, one
    header line ``name [unit],...`` and the rows (shortest round-trip
    decimal repr, ``nan`` for missing values).
``.h5``
    Root attributes ``format = "tovforge-table"``, ``format_version``,
    ``column_order`` and every metadata key; one dataset per column under
    ``/columns/<name>`` with the attributes ``unit`` and ``description``.
``.npz``
    One array per column (key = column name), plus ``_columns``, ``_units``,
    ``_descriptions`` (string arrays in column order) and ``_meta_json`` (a
    0-d string array).  Readable with ``np.load(path, allow_pickle=False)``.

Rows are appended in blocks: CSV lines are written as they come, HDF5
datasets are resized, and NPZ columns are spooled to raw files next to the
output and zipped at the end, so a table is never held in memory by the
writer.  Every file is written under a temporary name in its folder and
renamed when complete: a reader never sees half a table, and an existing
file is replaced only with ``overwrite``.
"""

from __future__ import annotations

import json
import re
import shutil
import tempfile
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np

from .._files import check_output, publish, remove_litter, temp_path
from .._limits import check_disk
from ..errors import InputError

__all__ = ["FORMAT", "FORMAT_VERSION", "SUFFIXES", "Column", "Table", "TableSummary", "TableWriter", "read_table",
           "table_format", "check_table_output"]

FORMAT = "tovforge-table"
FORMAT_VERSION = 1
SUFFIXES = (".csv", ".h5", ".npz")
_BLOCK_ROWS = 65536
_DTYPES = {"float64": np.float64, "int64": np.int64}
# letters, digits and _ @ . + -: safe as CSV header, HDF5 dataset and zip member names
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_@.+\-]*$")


@dataclass(frozen=True)
class Column:
    """One column of a table.

    Attributes
    ----------
    name : str
        Identifier (letters, digits and ``_ @ . + -``; starts with a letter).
    unit : str
        Unit of the values (``"1"`` for dimensionless).
    description : str
        One line saying what the values are.
    dtype : {"float64", "int64"}
    """

    name: str
    unit: str
    description: str = ""
    dtype: str = "float64"

    def __post_init__(self):
        if not _NAME.match(self.name):
            raise ValueError(f"column name {self.name!r} must start with a letter and use only letters, digits "
                             "and _ @ . + -")
        if self.dtype not in _DTYPES:
            raise ValueError(f"column dtype must be one of {', '.join(_DTYPES)}; got {self.dtype!r}")
        if any(c in self.unit for c in "[],\n") or any(c in self.description for c in "\n"):
            raise ValueError(f"unit {self.unit!r} / description of {self.name!r} must be one line without [ ] ,")


@dataclass(frozen=True)
class Table:
    """A table read back from a file.

    Attributes
    ----------
    columns : dict of str to ndarray, shape (n_rows,)
        The values, in file order.
    units, descriptions : dict of str to str
    meta : dict
        Metadata and provenance (str, int, float or bool values).
    path : Path
    """

    columns: dict
    units: dict
    descriptions: dict
    meta: dict
    path: Path

    def __len__(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def __getitem__(self, name: str) -> np.ndarray:
        try:
            return self.columns[name]
        except KeyError:
            raise InputError(f"{self.path}: no column {name!r}; columns: {', '.join(self.columns)}.") from None


@dataclass(frozen=True)
class TableSummary:
    """What a table writer did.

    Attributes
    ----------
    path : Path
        The table file.
    n_rows : int
    columns : tuple of str
    seconds : float
        Wall time.
    notes : tuple of str
        One-line remarks for the user (masses above M_max, failed points, ...).
    skipped : tuple of (int, str)
        Input rows left out, with the reason (samples tables; 1-based row numbers).
    error : str
        One line describing bad input found while the table was made (rows left
        out); empty if none.  The table holds everything else.
    """

    path: Path
    n_rows: int
    columns: tuple
    seconds: float
    notes: tuple = ()
    skipped: tuple = ()
    error: str = ""


def table_format(path) -> str:
    """The format chosen by ``path``'s extension: ``"csv"``, ``"h5"`` or ``"npz"``.

    Raises
    ------
    InputError
        For any other extension.
    """
    suffix = Path(path).suffix.lower()
    if suffix == ".hdf5":
        suffix = ".h5"
    if suffix not in SUFFIXES:
        raise InputError(f"{path}: unknown table format {suffix or '(no extension)'!r}; "
                         f"use one of {', '.join(SUFFIXES)}.")
    return suffix[1:]


#: Bytes per value of a table on disk, by format (CSV: a shortest round-trip decimal and a comma).
_BYTES_PER_VALUE = {"csv": 24, "h5": 8, "npz": 8}


def check_table_output(path, overwrite: bool = False, rows: int | None = None, columns: int | None = None,
                       what: str = "table") -> str:
    """Check, before any work, that a table can be written to ``path``; returns its format.

    With ``rows`` and ``columns`` the table's size is checked against the
    free disk space of the folder.

    Raises
    ------
    InputError
        Unknown extension, missing or unwritable folder, a folder at ``path``,
        a table too large for the disk.
    OutputExists
        ``path`` exists and ``overwrite`` is False.
    """
    fmt = table_format(path)
    check_output(path, what, overwrite)
    if rows is not None and columns is not None:
        check_disk(Path(path).parent, float(rows) * columns * _BYTES_PER_VALUE[fmt],
                   f"{path}: a table of {rows} rows x {columns} columns", "use fewer or shorter axes")
    return fmt


def _check_meta(meta: Mapping) -> dict:
    out = {}
    for k, v in meta.items():
        if not re.match(r"^[A-Za-z][A-Za-z0-9_]*$", k):
            raise ValueError(f"metadata key {k!r} must be an identifier")
        if isinstance(v, (np.integer, np.floating, np.bool_)):
            v = v.item()
        if not isinstance(v, (str, int, float, bool)):
            raise ValueError(f"metadata {k!r} must be str, int, float or bool (encode others as JSON); got {type(v)}")
        out[k] = v
    return out


# ---------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------


class _CsvSink:
    def __init__(self, tmp: Path, columns, meta):
        self.fh = open(tmp, "w", encoding="utf-8", newline="\n")
        self.columns = columns
        self.fh.write(f"# {FORMAT} {FORMAT_VERSION}\n")
        for k, v in meta.items():
            self.fh.write(f"# meta {k} = {json.dumps(v)}\n")
        for c in columns:
            self.fh.write(f"# column {c.name} [{c.unit}] {c.dtype}: {c.description}\n")
        self.fh.write(",".join(f"{c.name} [{c.unit}]" for c in columns) + "\n")

    def append(self, arrays):
        # repr of a Python float is the shortest string that reads back to the same double
        cells = [map(repr, a.tolist()) if a.dtype.kind == "f" else map(str, a.tolist()) for a in arrays]
        self.fh.write("".join(",".join(row) + "\n" for row in zip(*cells)))

    def finish(self, n_rows):
        self.fh.close()

    def abort(self):
        self.fh.close()


class _H5Sink:
    def __init__(self, tmp: Path, columns, meta):
        import h5py

        self.h5 = h5py.File(tmp, "w")
        self.h5.attrs["format"] = FORMAT
        self.h5.attrs["format_version"] = FORMAT_VERSION
        self.h5.attrs["column_order"] = [c.name for c in columns]
        for k, v in meta.items():
            self.h5.attrs[k] = v
        group = self.h5.create_group("columns")
        self.ds = []
        for c in columns:
            ds = group.create_dataset(c.name, shape=(0,), maxshape=(None,), dtype=_DTYPES[c.dtype],
                                      chunks=(16384,))
            ds.attrs["unit"] = c.unit
            ds.attrs["description"] = c.description
            self.ds.append(ds)
        self.n = 0

    def append(self, arrays):
        m = len(arrays[0])
        for ds, a in zip(self.ds, arrays):
            ds.resize((self.n + m,))
            ds[self.n:] = a
        self.n += m

    def finish(self, n_rows):
        self.h5.attrs["n_rows"] = n_rows
        self.h5.close()

    def abort(self):
        self.h5.close()


class _NpzSink:
    def __init__(self, tmp: Path, columns, meta):
        self.tmp, self.columns, self.meta = tmp, columns, meta
        self.spool = Path(tempfile.mkdtemp(prefix=f"{tmp.name}.", dir=tmp.parent))
        self.files = [open(self.spool / f"{i}.raw", "wb") for i in range(len(columns))]

    def append(self, arrays):
        for fh, a in zip(self.files, arrays):
            a.tofile(fh)

    def _member(self, zf, key, array):
        with zf.open(f"{key}.npy", "w", force_zip64=True) as out:
            np.lib.format.write_array(out, np.asarray(array), allow_pickle=False)

    def finish(self, n_rows):
        for fh in self.files:
            fh.close()
        fmt = np.lib.format
        with zipfile.ZipFile(self.tmp, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
            for i, c in enumerate(self.columns):
                header = {"descr": fmt.dtype_to_descr(np.dtype(_DTYPES[c.dtype])), "fortran_order": False,
                          "shape": (n_rows,)}
                with zf.open(f"{c.name}.npy", "w", force_zip64=True) as out, open(self.spool / f"{i}.raw", "rb") as src:
                    fmt.write_array_header_1_0(out, header)
                    shutil.copyfileobj(src, out, 1 << 20)
            self._member(zf, "_columns", np.array([c.name for c in self.columns], dtype=str))
            self._member(zf, "_units", np.array([c.unit for c in self.columns], dtype=str))
            self._member(zf, "_descriptions", np.array([c.description for c in self.columns], dtype=str))
            self._member(zf, "_meta_json", np.array(json.dumps({"format": FORMAT, "format_version": FORMAT_VERSION,
                                                                **self.meta})))
        shutil.rmtree(self.spool, ignore_errors=True)

    def abort(self):
        for fh in self.files:
            fh.close()
        shutil.rmtree(self.spool, ignore_errors=True)


_SINKS = {"csv": _CsvSink, "h5": _H5Sink, "npz": _NpzSink}


class TableWriter:
    """Write a table block by block (context manager).

    Parameters
    ----------
    path : path-like
        Output file; ``.csv``, ``.h5`` or ``.npz`` (see the module notes).
    columns : sequence of Column
    meta : mapping
        Metadata and provenance; values must be str, int, float or bool.
    overwrite : bool
        Replace an existing file (refused otherwise, also when the file
        appears while the table is written).

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "t.npz")
    >>> with TableWriter(path, [Column("mass", "Msun")], {"kind": "demo"}) as w:
    ...     w.append({"mass": np.array([1.0, 1.4])})
    >>> read_table(path)["mass"].tolist()
    [1.0, 1.4]
    """

    def __init__(self, path, columns: Sequence[Column], meta: Mapping, overwrite: bool = False):
        self.path = Path(path)
        self.format = check_table_output(self.path, overwrite)
        names = [c.name for c in columns]
        if len(set(names)) != len(names):
            raise ValueError(f"duplicate column names in {names}")
        self.columns = list(columns)
        self.n_rows = 0
        self.overwrite = overwrite
        remove_litter(self.path)  # temporary files of writers that were killed
        self._tmp = temp_path(self.path)
        self._sink = _SINKS[self.format](self._tmp, self.columns, _check_meta(meta))
        self._open = True

    def append(self, block: Mapping[str, np.ndarray]) -> None:
        """Append rows: ``block`` maps every column name to an array of the same length."""
        missing = [c.name for c in self.columns if c.name not in block]
        if missing or len(block) != len(self.columns):
            extra = sorted(set(block) - {c.name for c in self.columns})
            raise ValueError(f"block columns differ from the table's: missing {missing}, extra {extra}")
        arrays = [np.ascontiguousarray(block[c.name], dtype=_DTYPES[c.dtype]).reshape(-1) for c in self.columns]
        if len({a.size for a in arrays}) != 1:
            raise ValueError("all columns of a block must have the same length")
        n = arrays[0].size
        for start in range(0, n, _BLOCK_ROWS):  # bounds the text the CSV sink builds at once
            self._sink.append([a[start:start + _BLOCK_ROWS] for a in arrays])
        self.n_rows += n

    def close(self) -> Path:
        """Finish the file and move it to its name; returns the path."""
        if self._open:
            self._open = False
            try:
                self._sink.finish(self.n_rows)
                publish(self._tmp, self.path, "table", self.overwrite)
            finally:
                self._tmp.unlink(missing_ok=True)
        return self.path

    def abort(self) -> None:
        """Drop the unfinished file."""
        if self._open:
            self._open = False
            self._sink.abort()
            self._tmp.unlink(missing_ok=True)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.close()
        else:
            self.abort()
        return False


# ---------------------------------------------------------------------------
# reading
# ---------------------------------------------------------------------------


def _plain(v):
    return v.item() if isinstance(v, np.generic) else v


def _read_csv(path: Path) -> Table:
    meta, units, descr, dtypes, order = {}, {}, {}, {}, []
    header_line = None
    with open(path, encoding="utf-8") as fh:
        first = fh.readline().strip()
        if first != f"# {FORMAT} {FORMAT_VERSION}":
            raise InputError(f"{path}:1: not a tovforge table (expected '# {FORMAT} {FORMAT_VERSION}').")
        lineno = 1
        for line in fh:
            lineno += 1
            if line.startswith("# meta "):
                key, _, value = line[7:].partition(" = ")
                meta[key] = json.loads(value)
            elif line.startswith("# column "):
                m = re.match(r"# column (\S+) \[([^\]]*)\] (\w+): ?(.*)$", line.rstrip("\n"))
                if not m:
                    raise InputError(f"{path}:{lineno}: malformed column line.")
                name, units[name], dtypes[name], descr[name] = m.group(1), m.group(2), m.group(3), m.group(4)
                order.append(name)
            elif not line.startswith("#"):
                header_line = line.rstrip("\n")
                break
        if header_line is None:
            raise InputError(f"{path}: no header line.")
        heads = [h.strip() for h in header_line.split(",")]
        if heads != [f"{n} [{units[n]}]" for n in order]:
            raise InputError(f"{path}:{lineno}: header does not match the column lines.")
        data = np.loadtxt(fh, delimiter=",", ndmin=2, dtype=float).reshape(-1, len(order))
    cols = {n: data[:, i].astype(_DTYPES.get(dtypes[n], np.float64)) for i, n in enumerate(order)}
    return Table(cols, units, descr, meta, path)


def _read_h5(path: Path) -> Table:
    import h5py

    with h5py.File(path, "r") as h5:
        if h5.attrs.get("format") != FORMAT:
            raise InputError(f"{path}: not a tovforge table (format {h5.attrs.get('format')!r}).")
        order = [str(n) for n in h5.attrs["column_order"]]
        cols = {n: h5["columns"][n][...] for n in order}
        units = {n: str(h5["columns"][n].attrs["unit"]) for n in order}
        descr = {n: str(h5["columns"][n].attrs["description"]) for n in order}
        skip = {"format", "format_version", "column_order", "n_rows"}
        meta = {k: _plain(v) for k, v in h5.attrs.items() if k not in skip}
        meta = {"format": FORMAT, "format_version": int(h5.attrs["format_version"]), **meta}
    return Table(cols, units, descr, meta, path)


def _read_npz(path: Path) -> Table:
    with np.load(path, allow_pickle=False) as npz:
        if "_meta_json" not in npz.files:
            raise InputError(f"{path}: not a tovforge table (no _meta_json).")
        order = npz["_columns"].tolist()
        cols = {n: npz[n] for n in order}
        units = dict(zip(order, npz["_units"].tolist()))
        descr = dict(zip(order, npz["_descriptions"].tolist()))
        meta = json.loads(str(npz["_meta_json"]))
    return Table(cols, units, descr, meta, path)


def read_table(path) -> Table:
    """Read a table file written by :class:`TableWriter`.

    Parameters
    ----------
    path : path-like
        ``.csv``, ``.h5`` or ``.npz``.

    Returns
    -------
    Table
        Columns, units, descriptions and metadata.  For CSV the metadata
        also hold ``format`` and ``format_version`` from the first line.

    Raises
    ------
    InputError
        If the file is missing or not a tovforge table.
    """
    path = Path(path)
    fmt = table_format(path)
    if not path.is_file():
        raise InputError(f"{path}: no such table file.")
    try:
        table = {"csv": _read_csv, "h5": _read_h5, "npz": _read_npz}[fmt](path)
    except InputError:
        raise
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: the table is not UTF-8 text (byte at offset {exc.start}).") from None
    except (OSError, ValueError, KeyError, TypeError, IndexError, AttributeError, EOFError,
            zipfile.BadZipFile) as exc:
        raise InputError(f"{path}: cannot read the table ({type(exc).__name__}: {exc}).") from None
    if fmt == "csv":
        table.meta.setdefault("format", FORMAT)
        table.meta.setdefault("format_version", FORMAT_VERSION)
    return table
