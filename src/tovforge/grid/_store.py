"""HDF5 storage of grids and of their chunks (h5py; readable without tovforge).

Layout of a grid file (docs/reference/grid-file.md has the reader's version)::

    /                         attributes: format = "tovforge-grid", format_version,
                              family, description, n_points, spec_json, spec_toml,
                              spec_sha256, content_sha256, provenance (versions,
                              created_utc, solver settings), status_names_json
    /parameters/values        (n_points, n_parameters) float64
    /parameters/names, units  (n_parameters,) str
    /parameters/box           (n_parameters, 2) float64, the spec's bounds
    /status/code              (n_points,) int8  (0 ok; see status_names_json)
    /status/reason            (n_points,) str   ('' where ok)
    /scalars/<name>           (n_points,) float64
    /curves/u                 (n_u,) float64   nodes of u = sqrt(1 - M / M_max)
    /curves/<name>            (n_points, n_u) float64
    /at_mass/masses_msun      (n_masses,) float64
    /at_mass/<name>           (n_points, n_masses) float64

Every output dataset has the attributes ``unit`` and ``description``.  A
chunk file has the same groups for its rows only (no ``names``, ``box`` or
coordinates) and the attributes ``format = "tovforge-grid-chunk"``,
``spec_sha256``, ``chunk``, ``start``, ``stop``.

Every file is written under a temporary name in its destination folder,
flushed to disk and renamed over the final name (``os.replace`` is atomic),
so a reader never sees a half-written file.  :func:`read_grid` checks the
shapes of every dataset and recomputes the content hash: a damaged or
altered file is refused with one line.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._files import publish, temp_path
from ..errors import ContentMismatch, InputError
from ..status import Status
from ._solve import ChunkResult
from ._spec import AT_MASS, CURVES, SCALARS

__all__ = ["FORMAT", "FORMAT_VERSION", "GridData", "read_grid", "write_grid", "write_chunk", "read_chunk",
           "content_sha256", "verify_grid"]

FORMAT = "tovforge-grid"
CHUNK_FORMAT = "tovforge-grid-chunk"
FORMAT_VERSION = 1
_OUTPUT_GROUPS = {"scalars": SCALARS, "curves": CURVES, "at_mass": AT_MASS}
_COORDS = {"curves": "u", "at_mass": "masses_msun"}


def _h5py():
    import h5py

    return h5py


def _write_rows(h5, theta: np.ndarray, result: ChunkResult) -> None:
    """The per-point datasets shared by chunk and grid files."""
    h5py = _h5py()
    opts = dict(track_times=False)  # no timestamps inside: equal content, equal datasets
    h5.create_dataset("parameters/values", data=np.asarray(theta, np.float64), **opts)
    code = h5.create_dataset("status/code", data=np.asarray(result.status, np.int8), **opts)
    code.attrs["names_json"] = _status_names_json()
    h5.create_dataset("status/reason", data=np.array(result.reason, dtype=object),
                      dtype=h5py.string_dtype("utf-8"), **opts)
    for group, values in (("scalars", result.scalars), ("curves", result.curves), ("at_mass", result.at_mass)):
        g = h5.require_group(group) if group in h5 else h5.create_group(group, track_order=True)
        for name, arr in values.items():
            ds = g.create_dataset(name, data=np.asarray(arr, np.float64), **opts)
            unit, description = _OUTPUT_GROUPS[group][name]
            ds.attrs["unit"] = unit
            ds.attrs["description"] = description


def _status_names_json() -> str:
    """Code -> label of every :class:`~tovforge.status.Status`, as stored in grid files."""
    return json.dumps({str(k): v for k, v in Status.labels().items()})


def _read_rows(h5, spec_outputs=None) -> tuple[np.ndarray, ChunkResult]:
    theta = h5["parameters/values"][...]
    status = h5["status/code"][...]
    reason = [s for s in h5["status/reason"].asstr()[...]]
    out = {}
    for group in _OUTPUT_GROUPS:
        g = h5.get(group)
        out[group] = {} if g is None else {k: g[k][...] for k in g if k != _COORDS.get(group)}
    return theta, ChunkResult(status, reason, out["scalars"], out["curves"], out["at_mass"])


def _hash_datasets(h5) -> str:
    """SHA-256 over every dataset: path, dtype, shape and values, in sorted path order."""
    h = hashlib.sha256()
    names = []
    h5.visititems(lambda name, obj: names.append(name) if hasattr(obj, "shape") else None)
    for name in sorted(names):
        ds = h5[name]
        h.update(name.encode() + b"\0")
        if ds.dtype.kind == "O":
            vals = ds.asstr()[...].ravel().tolist()
            h.update(b"str" + repr(ds.shape).encode())
            for v in vals:
                b = v.encode("utf-8")
                h.update(len(b).to_bytes(8, "little") + b)
        else:
            arr = np.ascontiguousarray(ds[...])
            h.update(arr.dtype.str.encode() + repr(arr.shape).encode())
            h.update(arr.tobytes())
    return h.hexdigest()


def content_sha256(path) -> str:
    """SHA-256 of the datasets of a grid file (attributes, such as the creation time, excluded)."""
    with _h5py().File(path, "r") as h5:
        return _hash_datasets(h5)


def write_chunk(path: Path, spec, k: int, theta: np.ndarray, result: ChunkResult) -> None:
    """Write chunk ``k`` to ``path`` atomically."""
    h5py = _h5py()
    tmp = temp_path(path)
    start, stop = spec.chunk_bounds(k)
    try:
        with h5py.File(tmp, "w", track_order=True) as h5:
            h5.attrs["format"] = CHUNK_FORMAT
            h5.attrs["format_version"] = FORMAT_VERSION
            h5.attrs["spec_sha256"] = spec.sha256
            h5.attrs["chunk"] = k
            h5.attrs["start"] = start
            h5.attrs["stop"] = stop
            _write_rows(h5, theta, result)
        publish(tmp, path, "chunk file", overwrite=True)
    finally:
        tmp.unlink(missing_ok=True)


def read_chunk(path: Path, spec, k: int) -> tuple[np.ndarray, ChunkResult]:
    """Read chunk ``k``; raises ``ValueError`` if it does not belong to ``spec``."""
    with _h5py().File(path, "r") as h5:
        a = h5.attrs
        start, stop = spec.chunk_bounds(k)
        if (a.get("format") != CHUNK_FORMAT or a.get("spec_sha256") != spec.sha256 or int(a.get("chunk", -1)) != k
                or int(a.get("start", -1)) != start or int(a.get("stop", -1)) != stop):
            raise ValueError(f"{path} is not chunk {k} of this spec")
        return _read_rows(h5)


def write_grid(path: Path, spec, theta: np.ndarray, result: ChunkResult, provenance: dict,
               overwrite: bool = True) -> str:
    """Write a complete grid file atomically; returns its content SHA-256.

    Raises
    ------
    OutputExists
        ``path`` exists and ``overwrite`` is False.
    """
    h5py = _h5py()
    tmp = temp_path(path)
    try:
        with h5py.File(tmp, "w", track_order=True) as h5:
            a = h5.attrs
            a["format"] = FORMAT
            a["format_version"] = FORMAT_VERSION
            a["family"] = spec.family
            a["description"] = spec.description
            a["n_points"] = spec.n_points
            a["mass_max_floor_msun"] = spec.mass_max_floor_msun
            a["sequence_coordinate"] = "u = sqrt(1 - M / M_max); u = 0 is the maximum-mass star"
            a["stable_branch"] = ("connected branch of increasing central pressure up to the first maximum of "
                                  "M (turning-point criterion); twin_mass_max_msun records a second branch")
            a["status_names_json"] = _status_names_json()
            a["spec_json"] = spec.to_json()
            a["spec_toml"] = spec.source
            a["spec_sha256"] = spec.sha256
            for key, value in provenance.items():
                a[key] = value
            _write_rows(h5, theta, result)
            opts = dict(track_times=False)
            p = h5["parameters"]
            p.create_dataset("names", data=np.array(spec.parameter_names, dtype=object),
                             dtype=h5py.string_dtype("utf-8"), **opts)
            p.create_dataset("units", data=np.array(spec.parameter_units, dtype=object),
                             dtype=h5py.string_dtype("utf-8"), **opts)
            p.create_dataset("box", data=np.array(spec.box, np.float64), **opts)
            if result.curves:
                u = h5["curves"].create_dataset("u", data=np.array(spec.outputs.u_nodes, np.float64), **opts)
                u.attrs["description"] = "nodes of u = sqrt(1 - M / M_max) (columns of every curve)"
            if result.at_mass:
                m = h5["at_mass"].create_dataset("masses_msun", data=np.array(spec.outputs.masses_msun),
                                                 **opts)
                m.attrs["unit"] = "Msun"
                m.attrs["description"] = "gravitational masses (columns of every at_mass output)"
            digest = _hash_datasets(h5)
            a["content_sha256"] = digest
        publish(tmp, path, "grid file", overwrite=overwrite)
    finally:
        tmp.unlink(missing_ok=True)
    return digest


@dataclass(frozen=True)
class GridData:
    """A grid read back from its HDF5 file.

    Attributes
    ----------
    path : Path
    family : str
    parameter_names, parameter_units : tuple of str
    box : ndarray, shape (n_parameters, 2)
    parameters : ndarray, shape (n_points, n_parameters)
    status : ndarray of int8, shape (n_points,)
    reason : list of str
    scalars : dict of str to ndarray, shape (n_points,)
    u_nodes : ndarray, shape (n_u,)
    curves : dict of str to ndarray, shape (n_points, n_u)
    masses_msun : ndarray, shape (n_masses,)
    at_mass : dict of str to ndarray, shape (n_points, n_masses)
    attrs : dict
        Root attributes (spec, provenance, hashes).
    """

    path: Path
    family: str
    parameter_names: tuple
    parameter_units: tuple
    box: np.ndarray
    parameters: np.ndarray
    status: np.ndarray
    reason: list
    scalars: dict
    u_nodes: np.ndarray
    curves: dict
    masses_msun: np.ndarray
    at_mass: dict
    attrs: dict = field(repr=False)

    @property
    def ok(self) -> np.ndarray:
        """Mask of the points with status 0."""
        return self.status == 0

    def __len__(self) -> int:
        return len(self.status)


def _attr(value):
    return value.decode() if isinstance(value, bytes) else value


def open_grid_file(path):
    """Open ``path`` for reading, with one-line errors for what is not a grid file."""
    h5py = _h5py()
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file.")
    try:
        h5 = h5py.File(path, "r")
    except OSError:
        raise InputError(f"{path}: not an HDF5 file.") from None
    if h5.attrs.get("format") != FORMAT:
        h5.close()
        raise InputError(f"{path}: not a tovforge grid file (no format = {FORMAT!r} attribute).")
    return h5


def read_grid(path, allow_mismatch: bool = False) -> GridData:
    """Read a grid file written by ``tovforge grid run``.

    Every dataset is checked for its shape, and the content hash is
    recomputed and compared with the recorded ``content_sha256``.

    Parameters
    ----------
    path : path-like
    allow_mismatch : bool
        Read a grid whose datasets no longer match its recorded hash (for
        forensics; its numbers are not what the run wrote).

    Raises
    ------
    tovforge.errors.InputError
        If the file does not exist, is not a tovforge grid, or is damaged
        (a dataset or attribute missing, unreadable or of the wrong shape).
    tovforge.errors.ContentMismatch
        If the datasets do not match the recorded hash (and not ``allow_mismatch``).
    """
    with open_grid_file(path) as h5:
        try:
            data = _grid_data(Path(path), h5)
            digest = _hash_datasets(h5)
        except (OSError, KeyError, ValueError, TypeError, IndexError) as exc:
            raise InputError(f"{path}: cannot read grid file ({exc}).") from None
    spec = _check_shapes(data)
    if not allow_mismatch:
        _check_digest(path, data.attrs.get("content_sha256"), digest)
        _check_spec_attributes(data, spec)
    return data


def _check_spec_attributes(g: GridData, spec: dict) -> None:
    """The spec the grid records, and the root attributes copied from it, are those it was made from."""
    a = g.attrs
    if hashlib.sha256(a["spec_json"].encode()).hexdigest() != a.get("spec_sha256"):
        raise ContentMismatch(f"{g.path}: the grid's spec_json does not match its spec_sha256: the file was altered.")
    for key, value in (("family", g.family), ("mass_max_floor_msun", a.get("mass_max_floor_msun"))):
        if key in spec and value is not None and value != spec[key]:
            raise ContentMismatch(f"{g.path}: the grid's attribute {key} = {value!r} differs from its spec "
                                  f"({spec[key]!r}): the file was altered.")


def _check_digest(path, recorded, digest: str) -> None:
    if digest != recorded:
        raise ContentMismatch(f"{path}: the grid's datasets do not match its content_sha256 (recorded "
                              f"{str(recorded)[:16]}..., recomputed {digest[:16]}...): the file was altered or "
                              "damaged.")


def verify_grid(path) -> str:
    """Recompute a grid file's content hash and compare it with the recorded one; returns it.

    Raises
    ------
    tovforge.errors.InputError
        If the file is not a readable grid file.
    tovforge.errors.ContentMismatch
        If the hashes differ.
    """
    with open_grid_file(path) as h5:
        try:
            digest = _hash_datasets(h5)
        except (OSError, KeyError, ValueError, TypeError) as exc:
            raise InputError(f"{path}: cannot read grid file ({exc}).") from None
        recorded = _attr(h5.attrs.get("content_sha256"))
    _check_digest(path, recorded, digest)
    return digest


def _check_shapes(g: GridData) -> dict:
    """Every dataset of ``g`` has the shape its role gives it (InputError naming the first that does not);
    returns the spec recorded in the file."""
    n, d = len(g.status), len(g.parameter_names)
    expected = {"parameters/values": ((n, d), g.parameters.shape), "parameters/units": ((d,), (len(g.parameter_units),)),
                "parameters/box": ((d, 2), g.box.shape), "status/reason": ((n,), (len(g.reason),)),
                "status/code": ((n,), g.status.shape)}
    for group, values, width in (("scalars", g.scalars, ()), ("curves", g.curves, (g.u_nodes.size,)),
                                 ("at_mass", g.at_mass, (g.masses_msun.size,))):
        for name, arr in values.items():
            expected[f"{group}/{name}"] = ((n, *width), np.shape(arr))
    for name, (want, got) in expected.items():
        if tuple(got) != want:
            raise InputError(f"{g.path}: damaged grid file: dataset {name} has shape {tuple(got)}, expected {want}.")
    if not isinstance(g.attrs.get("spec_json"), str):
        raise InputError(f"{g.path}: damaged grid file: attribute spec_json is missing.")
    try:
        spec = json.loads(g.attrs["spec_json"])
    except ValueError:
        spec = None
    if not isinstance(spec, dict):
        raise InputError(f"{g.path}: damaged grid file: attribute spec_json is not a JSON object.")
    return spec


def _grid_data(path: Path, h5) -> GridData:
    theta, res = _read_rows(h5)
    curves = h5.get("curves")
    at_mass = h5.get("at_mass")
    return GridData(
        path=path,
        family=str(_attr(h5.attrs["family"])),
        parameter_names=tuple(h5["parameters/names"].asstr()[...]),
        parameter_units=tuple(h5["parameters/units"].asstr()[...]),
        box=h5["parameters/box"][...],
        parameters=theta,
        status=res.status,
        reason=res.reason,
        scalars=res.scalars,
        u_nodes=curves["u"][...] if curves is not None and "u" in curves else np.empty(0),
        curves=res.curves,
        masses_msun=at_mass["masses_msun"][...] if at_mass is not None and "masses_msun" in at_mass
        else np.empty(0),
        at_mass=res.at_mass,
        attrs={k: _attr(v) for k, v in h5.attrs.items()},
    )
