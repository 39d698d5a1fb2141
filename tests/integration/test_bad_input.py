"""Bad input over every command (issue 15): one line on stderr, exit code 2, no traceback, no file changed.

Each case of :data:`CASES` runs one command line in a fresh folder (the
working directory) next to a shared set of good inputs (a small grid, a held-out
grid, a GP and a spline model, a table, a samples file), some of them damaged
copies made by a ``setup`` function.  Before and after the command every file
under both folders is hashed: a failing command must leave every existing file
as it was and write no new one.

The classes of bad input: usage errors, bad values, outputs that cannot be
written (missing folder, unwritable folder, a file where a folder is expected
and the other way round, an existing output without ``--overwrite``),
undecodable (non-UTF-8) and damaged files (grids, model folders, tables,
samples), content that no longer matches its recorded hash, impossible
physics (allowed parameters without a stable star, a table with p > e),
sizes beyond the memory budget, and a grid locked by another run.

A new command gets its cases here: :func:`test_every_command_has_cases` fails
for a command of the app without one.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import zipfile
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np
import pytest
import typer
from typer.testing import CliRunner

from tovforge.cli import app
from tovforge.grid import parse_spec, run_grid

runner = CliRunner()
SLY = ["log_p1=34.384", "gamma1=3.005", "gamma2=2.988", "gamma3=2.851"]  # Read et al. (2009), helpers.READ2009
SOFT = [f"cs2_{i}=0.001" for i in range(1, 6)]  # each allowed, together no stable star
NOT_UTF8 = b"family = \"piecewise-polytrope\"\n# \xff\xfe caf\xe9\n"
UNWRITABLE = "/sys"  # a folder no process may write in (root included), on Linux
SPEC = ('family = "piecewise-polytrope"\nchunk_size = 16\n[design]\nmethod = "sobol"\npoints = 32\nseed = {seed}\n'
        '[outputs]\nu_nodes = 8\n')


# ---------------------------------------------------------------------------
# good inputs, made once
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    d = tmp_path_factory.mktemp("inputs")
    for name, seed in (("spec", 3), ("other", 4)):
        (d / f"{name}.toml").write_text(SPEC.format(seed=seed))
    run_grid(parse_spec({"family": "piecewise-polytrope", "chunk_size": 16, "outputs": {"u_nodes": 8},
                         "design": {"method": "sobol", "points": 32, "seed": 3}}, ""), d / "grid.h5",
             workers=1, progress=False)
    run_grid(parse_spec({"family": "piecewise-polytrope", "chunk_size": 16, "outputs": {"u_nodes": 8},
                         "design": {"method": "sobol", "points": 32, "seed": 4}}, ""), d / "holdout.h5",
             workers=1, progress=False)
    for args in (["--kind", "spline", "--out", str(d / "spline")],
                 ["--kind", "gp", "--subset", "16", "--restarts", "0", "--out", str(d / "gp")]):
        res = runner.invoke(app, ["-q", "train", str(d / "grid.h5"), *args])
        assert res.exit_code == 0, res.output
    res = runner.invoke(app, ["-q", "table", "sequence", "piecewise-polytrope", *SLY, "--points", "12", "--out",
                              str(d / "sly.csv")])
    assert res.exit_code == 0, res.output
    (d / "samples.csv").write_text("log_p1,gamma1,gamma2,gamma3\n34.4,3.0,3.0,2.9\n34.5,3.1,2.9,3.0\n")
    (d / "exported.py").write_text("# an existing file\n")
    return d


# ---------------------------------------------------------------------------
# damaged copies (made in the case's own folder)
# ---------------------------------------------------------------------------


def _copy_grid(inputs, here, name="bad.h5"):
    return Path(shutil.copy(inputs / "grid.h5", here / name))


def _edit_grid(fn):
    def setup(inputs, here):
        path = _copy_grid(inputs, here)
        with h5py.File(path, "r+") as h5:
            fn(h5)
        return {"bad": path}
    return setup


def _drop_dataset(h5):
    del h5["scalars/mass_max_msun"]


def _shorten_dataset(h5):
    data = h5["curves/radius_km"][...]
    del h5["curves/radius_km"]
    h5["curves/radius_km"] = data[:-3]


def _spoil_spec_attribute(h5):
    h5.attrs["spec_json"] = "{not json"


def _alter_value(h5):
    ds = h5["scalars/mass_max_msun"]
    ds[0] = ds[0] + 0.1


def _unknown_family(h5):
    spec = json.loads(h5.attrs["spec_json"])
    spec["family"] = "nonsense"
    text = json.dumps(spec, sort_keys=True, separators=(",", ":"))
    h5.attrs["spec_json"] = text
    h5.attrs["spec_sha256"] = hashlib.sha256(text.encode()).hexdigest()
    h5.attrs["family"] = "nonsense"


def _truncated_grid(inputs, here):
    path = here / "bad.h5"
    path.write_bytes((inputs / "grid.h5").read_bytes()[:5000])
    return {"bad": path}


def _copy_model(inputs, here, kind="spline"):
    return Path(shutil.copytree(inputs / kind, here / "bad"))


def _model_json(content):
    def setup(inputs, here):
        folder = _copy_model(inputs, here)
        (folder / "model.json").write_bytes(content if isinstance(content, bytes) else json.dumps(content).encode())
        return {"bad": folder}
    return setup


def _model_arrays(change, update_hash=False):
    """The model's arrays.npz changed by ``change(path)``; the recorded checksum updated if asked."""
    def setup(inputs, here):
        folder = _copy_model(inputs, here)
        change(folder / "arrays.npz")
        if update_hash:
            meta = json.loads((folder / "model.json").read_text())
            meta["arrays_sha256"] = hashlib.sha256((folder / "arrays.npz").read_bytes()).hexdigest()
            (folder / "model.json").write_text(json.dumps(meta))
        return {"bad": folder}
    return setup


def _flip_data_byte(path):
    """One byte inside the stored (uncompressed) data of the largest member: a CRC error when read."""
    with zipfile.ZipFile(path) as zf:
        info = max(zf.infolist(), key=lambda i: i.file_size)
    raw = bytearray(path.read_bytes())
    at = info.header_offset + 30 + len(info.filename.encode()) + len(info.extra) + info.file_size // 2
    raw[at] ^= 0xFF
    path.write_bytes(bytes(raw))


def _wrong_shape(path):
    with np.load(path) as npz:
        arrays = {k: npz[k] for k in npz.files}
    arrays["lo"] = arrays["lo"][:2]
    np.savez(path, **arrays)


def _inconsistent_arrays(path):
    with np.load(path) as npz:
        arrays = {k: npz[k] for k in npz.files}
    arrays["X"] = arrays["X"][:, :2]  # training points of two parameters in a model of four
    np.savez(path, **arrays)


def _empty(path):
    path.write_bytes(b"")


def _file(name, content):
    def setup(inputs, here):
        path = here / name
        path.write_bytes(content)
        return {"bad": path}
    return setup


def _spec_with(**changes):
    """The good spec with some keys changed (``"design.points": 10``; None removes a key), as a TOML file."""
    def setup(inputs, here):
        raw = {"family": '"piecewise-polytrope"', "chunk_size": 16,
               "design": {"method": '"sobol"', "points": 32, "seed": 3}, "outputs": {"u_nodes": 8}}
        for key, value in changes.items():
            table, _, name = key.rpartition(".")
            where = raw.setdefault(table, {}) if table else raw
            if value is None:
                where.pop(name, None)
            else:
                where[name] = value
        top = [f"{k} = {v}" for k, v in raw.items() if not isinstance(v, dict)]
        tables = [f"[{k}]\n" + "\n".join(f"{n} = {x}" for n, x in v.items()) for k, v in raw.items()
                  if isinstance(v, dict)]
        path = here / "bad.toml"
        path.write_text("\n".join(top) + "\n" + "\n".join(tables) + "\n")
        return {"bad": path}
    return setup


def _existing(name, folder=False):
    def setup(inputs, here):
        path = here / name
        if folder:
            path.mkdir()
            (path / "keep.txt").write_text("an earlier output\n")
        else:
            path.write_text("an earlier output\n")
        return {"bad": path}
    return setup


def _locked_grid(inputs, here):
    from tovforge._files import OutputLock

    lock = OutputLock(here / "g.h5", "grid file").acquire()  # held by this (live) process
    return {"bad": here / "g.h5", "_lock": lock}


def _parts_is_a_file(inputs, here):
    (here / "g.h5.parts").write_text("not a folder\n")
    return {"bad": here / "g.h5"}


# ---------------------------------------------------------------------------
# the cases
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Case:
    """One bad command line: ``{name}`` fields name inputs (``{grid}``, ``{spline}``, ...), ``{here}`` the
    case's folder and ``{bad}`` what ``setup`` made; ``words`` must appear in the error line."""

    id: str
    args: tuple
    words: tuple = ()
    setup: object = None


def C(id, args, *words, setup=None):
    return Case(id, tuple(args.split()), words, setup)


CASES = [
    # -- families, bench, demo ------------------------------------------------------------------
    C("families-extra-argument", "families spectral", "unexpected extra argument"),
    C("bench-unknown-section", "bench --only nothing", "'--only'"),
    C("bench-unknown-option", "bench --fast", "No such option"),
    C("demo-unknown-sampler", "demo --sampler kriging", "'--sampler'"),
    C("demo-out-unwritable", f"demo --quick --out {UNWRITABLE}/d", "cannot write"),
    C("demo-out-exists", "demo --quick --out {bad}", "exists already", "--overwrite", setup=_existing("d", True)),
    C("demo-data-not-utf8", "demo --quick --out {here}/d --data {bad}", "not UTF-8",
      setup=_file("obs.toml", NOT_UTF8)),
    C("demo-data-missing", "demo --quick --out {here}/d --data {here}/none.toml", "none.toml"),
    C("demo-steps-below-burn", "demo --quick --out {here}/d --steps 10 --burn 20", "burn"),
    # -- solve ----------------------------------------------------------------------------------------
    C("solve-unknown-family", "solve nonsense", "nonsense"),
    C("solve-out-of-range", "solve piecewise-polytrope log_p1=40 gamma1=3 gamma2=3 gamma3=3", "log_p1"),
    C("solve-not-a-number", "solve piecewise-polytrope log_p1=x gamma1=3 gamma2=3 gamma3=3", "log_p1"),
    C("solve-empty-masses", "solve piecewise-polytrope " + " ".join(SLY) + " --masses=", "--masses"),
    C("solve-stars-too-few", "solve piecewise-polytrope --stars 3", "'--stars'"),
    C("solve-no-stable-star", "solve sound-speed " + " ".join(SOFT), "no stable branch"),
    C("solve-table-missing-folder", "solve piecewise-polytrope " + " ".join(SLY) + " --table {here}/no/t.csv",
      "no such folder"),
    C("solve-table-unwritable", "solve piecewise-polytrope " + " ".join(SLY) + f" --table {UNWRITABLE}/t.csv",
      "cannot write"),
    C("solve-table-exists", "solve piecewise-polytrope " + " ".join(SLY) + " --table {bad}", "--overwrite",
      setup=_existing("t.csv")),
    C("solve-table-parent-is-file", "solve piecewise-polytrope " + " ".join(SLY) + " --table {sly}/t.csv",
      "is a file"),
    C("solve-eos-table-not-utf8", "solve table path={bad}", "not UTF-8", setup=_file("eos.csv", b"\xff\xfe1,2\n")),
    C("solve-eos-table-p-above-e", "solve table path={bad}", "exceeds the energy density",
      setup=_file("eos.csv", b"# pressure[dyn/cm^2], energy_density[g/cm^3]\n" + b"".join(
          f"{1e3 * 10 ** (10 + k) * 9e20:.6g},{10 ** (10 + k):.6g}\n".encode() for k in range(6)))),
    # -- grid run -----------------------------------------------------------------------------------
    C("grid-run-missing-out", "grid run {spec}", "Missing option '--out'"),
    C("grid-run-spec-not-utf8", "grid run {bad} --out {here}/g.h5", "not UTF-8", setup=_file("s.toml", NOT_UTF8)),
    C("grid-run-spec-not-toml", "grid run {bad} --out {here}/g.h5", "not valid TOML",
      setup=_file("s.toml", b"family = \n")),
    C("grid-run-unknown-key", "grid run {bad} --out {here}/g.h5", "unknown key", setup=_spec_with(chunksize=4)),
    C("grid-run-too-many-points", "grid run {bad} --out {here}/g.h5", "design.points", "memory",
      setup=_spec_with(**{"design.points": 2 ** 28})),
    C("grid-run-too-many-nodes", "grid run {bad} --out {here}/g.h5", "outputs.u_nodes",
      setup=_spec_with(**{"outputs.u_nodes": 100000000})),
    C("grid-run-regular-too-large", "grid run {bad} --out {here}/g.h5", "memory",
      setup=_spec_with(**{"design.method": '"regular"', "design.points_per_axis": 10000000, "design.points": None,
                         "design.seed": None})),
    C("grid-run-no-masses", "grid run {bad} --out {here}/g.h5", "outputs.masses_msun",
      setup=_spec_with(**{"outputs.masses_msun": "[]"})),
    C("grid-run-out-missing-folder", "grid run {spec} --out {here}/no/g.h5", "no such folder"),
    C("grid-run-out-unwritable", f"grid run {{spec}} --out {UNWRITABLE}/g.h5", "cannot write"),
    C("grid-run-out-is-folder", "grid run {spec} --out {here}", "is a directory"),
    C("grid-run-out-other-spec", "grid run {other} --out {grid}", "different spec", "--overwrite"),
    C("grid-run-locked", "grid run {spec} --out {bad}", "another run", "g.h5.lock", setup=_locked_grid),
    C("grid-run-parts-is-file", "grid run {spec} --out {bad}", "g.h5.parts", "--overwrite",
      setup=_parts_is_a_file),
    C("grid-run-bad-scheduler", "grid run {spec} --out {here}/g.h5 --scheduler nonsense", "scheduler nonsense"),
    C("grid-run-zero-workers", "grid run {spec} --out {here}/g.h5 --workers 0", "'--workers'"),
    # -- grid info ----------------------------------------------------------------------------------
    C("grid-info-missing", "grid info {here}/none.h5", "none.h5"),
    C("grid-info-not-hdf5", "grid info {sly}", "not an HDF5 file"),
    C("grid-info-truncated", "grid info {bad}", "bad.h5", setup=_truncated_grid),
    C("grid-info-mismatch", "grid info {bad}", "do not match", setup=_edit_grid(_alter_value)),
    C("grid-info-spec-not-json", "grid info {bad}", "damaged", setup=_edit_grid(_spoil_spec_attribute)),
    # -- grid refine --------------------------------------------------------------------------------
    C("refine-missing-budget", "grid refine {gp}", "--budget"),
    C("refine-budget-above-candidates", "grid refine {gp} --budget 100 --candidates 16 --out {here}/r",
      "candidates"),
    C("refine-too-many-candidates", "grid refine {gp} --budget 4 --candidates 100000000000 --out {here}/r",
      "memory"),
    C("refine-out-is-model", "grid refine {gp} --budget 2 --out {gp}", "would replace the model"),
    C("refine-out-exists", "grid refine {gp} --budget 2 --out {bad}", "--overwrite", setup=_existing("r", True)),
    C("refine-model-damaged", "grid refine {bad} --budget 2 --out {here}/r", "model.json",
      setup=_model_json([1, 2])),
    # -- train --------------------------------------------------------------------------------------
    C("train-unknown-kind", "train {grid} --out {here}/m --kind kriging", "'--kind'"),
    C("train-grid-missing", "train {here}/none.h5 --out {here}/m", "none.h5"),
    C("train-grid-not-hdf5", "train {sly} --out {here}/m", "not an HDF5 file"),
    C("train-grid-truncated", "train {bad} --out {here}/m", "bad.h5", setup=_truncated_grid),
    C("train-grid-altered", "train {bad} --out {here}/m", "do not match", "--allow-mismatch",
      setup=_edit_grid(_alter_value)),
    C("train-grid-missing-dataset", "train {bad} --out {here}/m --allow-mismatch", "mass_max_msun",
      setup=_edit_grid(_drop_dataset)),
    C("train-grid-wrong-length", "train {bad} --out {here}/m --allow-mismatch", "shape",
      setup=_edit_grid(_shorten_dataset)),
    C("train-grid-spec-not-json", "train {bad} --out {here}/m", "spec_json", setup=_edit_grid(_spoil_spec_attribute)),
    C("train-grid-unknown-family", "train {bad} --out {here}/m", "unknown EOS family",
      setup=_edit_grid(_unknown_family)),
    C("train-out-exists", "train {grid} --out {bad}", "exists already", "--overwrite",
      setup=_existing("m", True)),
    C("train-out-is-file", "train {grid} --out {sly}", "is a file"),
    C("train-out-missing-folder", "train {grid} --out {here}/no/m", "no such folder"),
    C("train-out-unwritable", f"train {{grid}} --out {UNWRITABLE}/m", "cannot write"),
    # -- check --------------------------------------------------------------------------------------
    C("check-model-missing", "check {here}/none --holdout {holdout}", "no such model folder"),
    C("check-model-json-list", "check {bad} --holdout {holdout}", "model.json", setup=_model_json([1, 2])),
    C("check-model-json-no-keys", "check {bad} --holdout {holdout}", "model.json",
      setup=_model_json({"format": "tovforge-surrogate", "format_version": 2})),
    C("check-model-json-not-utf8", "check {bad} --holdout {holdout}", "not UTF-8",
      setup=_model_json(b'{"format": "\xff"}')),
    C("check-model-json-not-json", "check {bad} --holdout {holdout}", "not valid JSON", setup=_model_json(b"{")),
    C("check-arrays-altered", "check {bad} --holdout {holdout}", "checksum", "--allow-mismatch",
      setup=_model_arrays(_flip_data_byte)),
    C("check-arrays-crc-error", "check {bad} --holdout {holdout} --allow-mismatch", "arrays.npz",
      setup=_model_arrays(_flip_data_byte)),
    C("check-arrays-empty", "check {bad} --holdout {holdout} --allow-mismatch", "arrays.npz",
      setup=_model_arrays(_empty)),
    C("check-arrays-wrong-shape", "check {bad} --holdout {holdout}", "shape",
      setup=_model_arrays(_wrong_shape, update_hash=True)),
    C("check-arrays-inconsistent", "check {bad} --holdout {holdout}", "do not fit together",
      setup=_model_arrays(_inconsistent_arrays, update_hash=True)),
    C("check-holdout-altered", "check {spline} --holdout {bad}", "do not match", setup=_edit_grid(_alter_value)),
    C("check-report-exists", "check {spline} --holdout {holdout} --report {bad}", "--overwrite",
      setup=_existing("rep", True)),
    C("check-report-unwritable", f"check {{spline}} --holdout {{holdout}} --report {UNWRITABLE}/rep", "cannot write"),
    # -- export -------------------------------------------------------------------------------------
    C("export-out-numpy", "export {spline} --out {here}/numpy.py", "standard library" if False else "numpy"),
    C("export-out-keyword", "export {spline} --out {here}/class.py", "keyword"),
    C("export-out-stdlib", "export {spline} --out {here}/json.py", "standard library"),
    C("export-out-not-identifier", "export {spline} --out {here}/my-model.py", "identifier"),
    C("export-out-exists", "export {spline} --out {exported}", "exists already", "--overwrite"),
    C("export-out-unwritable", f"export {{spline}} --out {UNWRITABLE}/e.py", "cannot write"),
    C("export-out-missing-folder", "export {spline} --out {here}/no/e.py", "no such folder"),
    C("export-unknown-namespace", "export {spline} --out {here}/e.py --namespaces cupy", "cupy"),
    C("export-model-altered", "export {bad} --out {here}/e.py", "checksum", setup=_model_arrays(_flip_data_byte)),
    C("export-report-not-json", "export {spline} --out {here}/e.py --report {bad}", "not valid JSON",
      setup=_file("report.json", b"{")),
    # -- table sequence -----------------------------------------------------------------------------
    C("table-sequence-no-out", "table sequence piecewise-polytrope " + " ".join(SLY), "--out"),
    C("table-sequence-bad-extension", "table sequence piecewise-polytrope " + " ".join(SLY) + " --out {here}/t.txt",
      "unknown table format"),
    C("table-sequence-exists", "table sequence piecewise-polytrope " + " ".join(SLY) + " --out {sly}",
      "exists already", "--overwrite"),
    C("table-sequence-unwritable", "table sequence piecewise-polytrope " + " ".join(SLY)
      + f" --out {UNWRITABLE}/t.csv", "cannot write"),
    C("table-sequence-no-stable-star", "table sequence sound-speed " + " ".join(SOFT) + " --out {here}/t.csv",
      "no stable branch"),
    C("table-sequence-too-many-points", "table sequence piecewise-polytrope " + " ".join(SLY)
      + " --points 1000000 --out {here}/t.csv", "'--points'"),
    # -- table box ----------------------------------------------------------------------------------
    C("table-box-huge-axes", "table box {spline} --axis log_p1=34.2:34.8:10000000 --axis gamma1=2.5:3.5:10000000 "
      "--fix gamma2=3 --fix gamma3=3 --out {here}/b.csv", "disk"),
    C("table-box-outside-box", "table box {spline} --axis log_p1=30:34.8:4 --fix gamma1=3 --fix gamma2=3 "
      "--fix gamma3=3 --out {here}/b.csv", "outside the model's box"),
    C("table-box-exists", "table box {spline} --axis log_p1=34.2:34.8:4 --fix gamma1=3 --fix gamma2=3 "
      "--fix gamma3=3 --out {sly}", "--overwrite"),
    C("table-box-model-altered", "table box {bad} --axis log_p1=34.2:34.8:4 --fix gamma1=3 --fix gamma2=3 "
      "--fix gamma3=3 --out {here}/b.csv", "checksum", "--allow-mismatch", setup=_model_arrays(_flip_data_byte)),
    C("table-box-exact-too-large", "table box --exact piecewise-polytrope --axis log_p1=34.2:34.8:100000 "
      "--axis gamma1=2.5:3.5:100000 --fix gamma2=3 --fix gamma3=3 --out {here}/b.csv", "needs about"),
    # -- table samples ------------------------------------------------------------------------------
    C("table-samples-not-utf8", "table samples {spline} --samples {bad} --out {here}/s.csv", "not UTF-8",
      setup=_file("post.csv", b"log_p1,gamma1,gamma2,gamma3\n34.4,3,3,\xff\n")),
    C("table-samples-header-only", "table samples {spline} --samples {bad} --out {here}/s.csv", "no data rows",
      setup=_file("post.csv", b"log_p1,gamma1,gamma2,gamma3\n")),
    C("table-samples-empty-npy", "table samples {spline} --samples {bad} --out {here}/s.csv", "empty",
      setup=_file("post.npy", b"")),
    C("table-samples-out-exists", "table samples {spline} --samples {samples} --out {sly}", "--overwrite"),
    C("table-samples-plot-unwritable", f"table samples {{spline}} --samples {{samples}} --out {{here}}/s.csv "
      f"--plot {UNWRITABLE}/p.png", "cannot write"),
    C("table-samples-model-damaged", "table samples {bad} --samples {samples} --out {here}/s.csv", "model.json",
      setup=_model_json({"format": "tovforge-surrogate", "format_version": 2})),
    # -- table binary ---------------------------------------------------------------------------------
    C("table-binary-huge", "table binary piecewise-polytrope " + " ".join(SLY)
      + " --chirp-mass 1:1.3:100000 --mass-ratio 0.7:1:100000", "pairs"),
    C("table-binary-no-stable-star", "table binary sound-speed " + " ".join(SOFT) + " --m1 1.4 --m2 1.3",
      "no stable"),
    C("table-binary-table-not-utf8", "table binary {bad} --m1 1.4 --m2 1.3", "not UTF-8",
      setup=_file("t.csv", b"# tovforge-table 1\n\xff\n")),
    C("table-binary-out-exists", "table binary {sly} --m1 1.4 --m2 1.3 --out {sly}", "--overwrite"),
    C("table-binary-out-unwritable", f"table binary {{sly}} --m1 1.4 --m2 1.3 --out {UNWRITABLE}/b.csv",
      "cannot write"),
    # -- table info ---------------------------------------------------------------------------------
    C("table-info-missing", "table info {here}/none.csv", "none.csv"),
    C("table-info-not-utf8", "table info {bad}", "not UTF-8", setup=_file("t.csv", b"# tovforge-table 1\n\xff\n")),
    C("table-info-empty-npz", "table info {bad}", "t.npz", setup=_file("t.npz", b"")),
    C("table-info-truncated-h5", "table info {bad}", "t.h5", setup=_file("t.h5", b"\x89HDF\r\n\x1a\n" + b"\0" * 64)),
]


def _fill(arg: str, names: dict) -> str:
    for key, value in names.items():
        arg = arg.replace("{" + key + "}", str(value))
    return arg


def _snapshot(*folders) -> dict:
    """Every file under ``folders`` with the SHA-256 of its bytes (folders: a marker)."""
    out = {}
    for folder in folders:
        for p in sorted(Path(folder).rglob("*")):
            out[str(p)] = hashlib.sha256(p.read_bytes()).hexdigest() if p.is_file() else "folder"
    return out


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input_is_one_line_exit_2_and_changes_nothing(case, inputs, tmp_path, monkeypatch):
    here = tmp_path / "here"
    here.mkdir()
    monkeypatch.chdir(here)
    names = {"here": here, "grid": inputs / "grid.h5", "holdout": inputs / "holdout.h5", "spec": inputs / "spec.toml",
             "other": inputs / "other.toml", "spline": inputs / "spline", "gp": inputs / "gp",
             "sly": inputs / "sly.csv", "samples": inputs / "samples.csv", "exported": inputs / "exported.py"}
    held = {}
    if case.setup is not None:
        held = case.setup(inputs, here)
        names.update({k: v for k, v in held.items() if not k.startswith("_")})
    before = _snapshot(inputs, here)
    try:
        res = runner.invoke(app, [_fill(a, names) for a in case.args])
    finally:
        if "_lock" in held:
            held["_lock"].release()
    assert res.exception is None or isinstance(res.exception, SystemExit), res.exception
    assert "Traceback" not in res.output, res.output
    assert res.exit_code == 2, (res.exit_code, res.output)
    assert res.stderr.startswith("error: ") and res.stderr.count("\n") == 1, res.stderr
    for w in case.words:
        assert w in res.stderr, (w, res.stderr)
    after = _snapshot(inputs, here)
    if "_lock" in held:  # the test's own lock file went away with its release
        before.pop(str(held["_lock"].lock_path), None)
    assert after == before, sorted(set(after.items()) ^ set(before.items()))


def _command_paths(group, prefix=()) -> set[str]:
    out = set()
    for name, cmd in group.commands.items():
        path = (*prefix, name)
        if hasattr(cmd, "commands"):
            out |= _command_paths(cmd, path)
        else:
            out.add(" ".join(path))
    return out


def test_every_command_has_cases():
    """A new command of the app needs cases of its own above (usage, and the inputs and outputs it has)."""
    commands = _command_paths(typer.main.get_command(app))
    covered = {c for c in commands for case in CASES
               if tuple(case.args[:len(c.split())]) == tuple(c.split())}
    assert commands - covered == set(), f"commands without bad-input cases: {sorted(commands - covered)}"
    assert len(commands) >= 15


def test_unreadable_input_and_every_output_class_is_covered():
    """The classes of issue 15 each have cases: the harness grows with every command, never shrinks."""
    ids = " ".join(c.id for c in CASES)
    for word in ("unwritable", "missing-folder", "exists", "not-utf8", "altered", "no-stable-star", "too-many",
                 "locked", "crc", "wrong-shape", "json-list", "json-no-keys", "empty", "huge", "is-file"):
        assert word in ids, word
    assert len(CASES) >= 100
