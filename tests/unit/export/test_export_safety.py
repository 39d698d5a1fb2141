"""What an exported file imports, how it refuses damaged numbers, and why metadata cannot become code."""

from __future__ import annotations

import ast
import dataclasses
import json
import os
import re
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from conftest import KINDS, import_file
from typer.testing import CliRunner

from tovforge.cli import app
from tovforge.export import ExportError, export_model

BLOCKING_RUN = textwrap.dedent(r'''
    import importlib.abc, json, sys
    BLOCKED = ("scipy", "sklearn", "joblib", "tovforge", "h5py", "matplotlib", "dask", "typer")

    class Refuse(importlib.abc.MetaPathFinder):
        def find_spec(self, name, path=None, target=None):
            if name.split(".")[0] in BLOCKED:
                raise ImportError(f"blocked import of {name}")
            return None

    sys.meta_path.insert(0, Refuse())
    before = set(sys.modules)
    import importlib.util
    spec = importlib.util.spec_from_file_location("evaluator", sys.argv[1])
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    import numpy as np
    lo, hi = np.array(mod.BOUNDS).T
    theta = lo + (hi - lo) * np.linspace(0.2, 0.8, 5)[:, None]
    out = {
        "mass_max": mod.mass_max(theta).value.tolist(),
        "radius": mod.radius(theta, 1.3, return_grad=True).value.tolist(),
        "curve": mod.curve(theta[0], n=8).radius_km.tolist(),
        "sigma": mod.predict(theta, return_std=True).std["radius_km"].tolist() if mod.HAS_STD else None,
    }
    new = {m.split(".")[0] for m in set(sys.modules) - before}
    out["foreign_modules"] = sorted(m for m in new if m not in sys.stdlib_module_names and m not in ("numpy", "evaluator"))
    print(json.dumps(out))
''')


def test_the_blocking_finder_really_blocks(tmp_path):
    """The test below is only worth something if the finder stops a forbidden import."""
    probe = tmp_path / "uses_scipy.py"
    probe.write_text("import scipy\nimport numpy as np\nBOUNDS = ((0.0, 1.0),)\n")
    r = subprocess.run([sys.executable, "-c", BLOCKING_RUN, str(probe)], capture_output=True, text=True)
    assert r.returncode != 0 and "blocked import of scipy" in r.stderr


@pytest.mark.parametrize("kind", KINDS)
def test_runs_with_scipy_sklearn_joblib_and_tovforge_blocked(kind, exported, models):
    mod, path = exported[kind]
    r = subprocess.run([sys.executable, "-c", BLOCKING_RUN, str(path)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["foreign_modules"] == []
    lo, hi = models[kind].bounds.T
    theta = lo + (hi - lo) * np.linspace(0.2, 0.8, 5)[:, None]
    # local splines solve their cells at import: LAPACK's rounding depends on its thread count, which this
    # subprocess need not share with the test (measured 3e-12 relative); the other files carry their weights
    rtol = 1e-10 if kind == "local" else 1e-12
    np.testing.assert_allclose(out["mass_max"], models[kind].mass_max(theta).value, rtol=rtol)
    np.testing.assert_allclose(out["radius"], models[kind].radius(theta, 1.3).value, rtol=rtol)
    assert np.isfinite(out["curve"]).all()
    if models[kind].has_std:
        assert np.all(np.asarray(out["sigma"]) > 0)


def test_stored_weights_give_the_library_bits_in_another_process(models, tmp_path):
    """``store_weights``: a local model's file carries the library's weights; a subprocess with one BLAS thread
    gives the library's bits on these small cells (a rebuilt file need not; see above)."""
    from tovforge.export import export_model

    model = models["local"]
    path = tmp_path / "local_stored.py"
    export_model(model, path, namespaces=("numpy",), store_weights=True)
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    r = subprocess.run([sys.executable, "-c", BLOCKING_RUN, str(path)], capture_output=True, text=True, env=env)
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    lo, hi = model.bounds.T
    theta = lo + (hi - lo) * np.linspace(0.2, 0.8, 5)[:, None]
    np.testing.assert_array_equal(out["mass_max"], model.mass_max(theta).value)
    np.testing.assert_array_equal(out["radius"], model.radius(theta, 1.3).value)
    assert "alpha" in path.read_text()  # the weights are in the payload's index


def _payload_lines(src: str) -> tuple[int, int]:
    lines = src.splitlines()
    start = lines.index("_PAYLOAD = (") + 1
    return start, lines


def test_only_numpy_and_the_standard_library_are_imported(exported):
    src = exported["gp"][1].read_text()
    imports = set()
    for node in ast.walk(ast.parse(src)):
        if isinstance(node, ast.Import):
            imports |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            imports.add((node.module or "").split(".")[0])
    assert imports == {"base64", "bisect", "dataclasses", "hashlib", "io", "math", "zlib", "numpy", "array_api_compat"}
    # array_api_compat: imported only when a caller passes a tensor of a library without the standard's hook
    assert src.count("import array_api_compat") == 1
    flags = [k.value for k in ast.walk(ast.parse(src)) if isinstance(k, ast.keyword) and k.arg == "allow_pickle"]
    assert flags and all(isinstance(v, ast.Constant) and v.value is False for v in flags)


def _tampered(path, tmp_path, edit):
    src = path.read_text()
    bad = tmp_path / "tampered.py"
    bad.write_text(edit(src))
    return bad


def _flip_payload_char(src: str) -> str:
    start, lines = _payload_lines(src)
    line = lines[start + 3]
    i = line.index('"') + 10
    lines[start + 3] = line[:i] + ("A" if line[i] != "A" else "B") + line[i + 1 :]
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize("edit, match", [
    (_flip_payload_char, r"damaged or were altered: their sha256 is [0-9a-f]{64}, but the header records"),
    (lambda s: s.replace('_PAYLOAD = (\n    "', '_PAYLOAD = (\n    "*', 1), r"damaged \(not base64"),
    (lambda s: re.sub(r"PAYLOAD_SHA256 = '([0-9a-f])", lambda m: "PAYLOAD_SHA256 = '" + ("0" if m[1] != "0" else "1"),
                      s, count=1), r"damaged or were altered"),
])
def test_tampered_payload_fails_at_import(edit, match, exported, tmp_path):
    bad = _tampered(exported["rbf"][1], tmp_path, edit)
    with pytest.raises(ImportError, match=match) as info:
        import_file(bad)
    assert "export the model again" in str(info.value)


NASTY = [
    'x"""\nimport os; os._exit(3)\n"""',
    "x'''\n__import__('os')._exit(4)\n'''",
    '\\"; __import__("os")._exit(5); "',
    "line\nbreak # comment\r\n\t\\u0041 \\",
    'r"""',
    "\\",
]


@pytest.mark.parametrize("nasty", NASTY)
def test_metadata_strings_are_written_inertly(nasty, models, tmp_path):
    m = models["rbf"]
    evil = m.with_meta(family=nasty, parameter_units=(nasty, "1", "1", '"""'),
                       training={"grid_description": nasty, "grid_path": nasty})
    report = _report_for(evil, nasty)
    path = tmp_path / "nasty.py"
    export_model(evil, path, report, namespaces=("numpy",))
    # in a subprocess: an injected os._exit would show as its exit code
    r = subprocess.run([sys.executable, "-c", "import importlib.util,sys; s=importlib.util.spec_from_file_location("
                        "'e', sys.argv[1]); m=importlib.util.module_from_spec(s); s.loader.exec_module(m); "
                        "print(m.FAMILY == sys.argv[2] and m.UNITS[0] == sys.argv[2])", str(path), nasty],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip() == "True"
    mod = import_file(path)
    assert mod.PROVENANCE["training"]["grid_description"] == nasty
    assert nasty in mod.CHECK["errors"] and mod.CHECK["holdout"]["path"] == nasty
    assert mod.__doc__.count(json.dumps(nasty)[1:-1]) >= 3  # shown escaped in the header


def _report_for(model, name):
    stats = {k: 0.001 for k in ("abs_median", "abs_p95", "abs_max", "rel_median", "rel_p95", "rel_max")}
    return {"format": "tovforge-check", "created_utc": "2026-01-01T00:00:00+00:00", "tovforge_version": name,
            "model": {"kind": model.kind, "method": model.method, "n_train": model.n_train,
                      "training_grid_sha256": model.meta.training.grid_content_sha256},
            "holdout": {"path": name, "content_sha256": name, "n_points": 1, "n_used": 1,
                        "n_star_comparisons": 1, "mass_rule": name},
            "errors": {name: dict(stats, n=1), "mass_max_msun": dict(stats, abs_p95=float("nan"), n=1)},
            "targets": {}, "calibration": {}}


@pytest.mark.parametrize("where, value, match", [
    ("parameter", 'a"); __import__("os")._exit(9); ("', "parameter name"),
    ("parameter", "two words", "parameter name"),
    ("output", "x\ny", "output name"),
])
def test_names_that_are_not_identifiers_are_refused(where, value, match, models, tmp_path):
    m = models["rbf"]
    if where == "parameter":
        bad = m.with_meta(parameters=(m.parameter_names[0], value, *m.parameter_names[2:]))
    else:
        outputs = m.meta.outputs
        first = dataclasses.replace(outputs.scalars[0], name=value)
        bad = m.with_meta(outputs=dataclasses.replace(outputs, scalars=(first, *outputs.scalars[1:])))
    with pytest.raises(ExportError, match=match):
        export_model(bad, tmp_path / "x.py", namespaces=("numpy",))
    assert not (tmp_path / "x.py").exists()


@pytest.mark.parametrize("name", ["my-model.py", "1model.py", "model.txt", "os.system.py"])
def test_output_file_must_be_an_importable_module_name(name, models, tmp_path):
    with pytest.raises(ExportError, match="stem must be a Python identifier"):
        export_model(models["rbf"], tmp_path / name, namespaces=("numpy",))


def test_report_of_another_model_is_refused(models, tmp_path):
    report = _report_for(models["gp"], "x")
    with pytest.raises(ExportError, match="the report was made for another model: its kind is 'gp'"):
        export_model(models["rbf"], tmp_path / "m.py", report, namespaces=("numpy",))


def test_cli_exports_and_reports_bad_input_in_one_line(models, tmp_path):
    folder = models["tensor"].save(tmp_path / "model")
    runner = CliRunner()
    res = runner.invoke(app, ["export", str(folder), "--out", str(tmp_path / "spline_demo.py"), "--namespaces", "numpy"])
    assert res.exit_code == 0, res.output
    assert "wrote" in res.output and (tmp_path / "spline_demo.py").is_file()
    mod = import_file(tmp_path / "spline_demo.py")
    theta = models["tensor"].bounds.mean(axis=1)
    assert float(mod.mass_max(theta).value) == pytest.approx(float(models["tensor"].mass_max(theta).value), rel=1e-12)
    res = runner.invoke(app, ["export", str(folder), "--out", str(tmp_path / "bad-name.py"), "--namespaces", "numpy"])
    assert res.exit_code == 2
    assert "stem must be a Python identifier" in res.output and "Traceback" not in res.output
    res = runner.invoke(app, ["export", str(folder), "--out", str(tmp_path / "ok.py"), "--namespaces", "numpy,cupy"])
    assert res.exit_code == 2 and "unknown namespace 'cupy'" in res.output
    res = runner.invoke(app, ["export", str(folder), "--out", str(tmp_path / "ok.py"), "--report",
                              str(tmp_path / "missing.json"), "--namespaces", "numpy"])
    assert res.exit_code == 2 and "no such report" in res.output


@pytest.mark.parametrize("edit", [
    lambda s: re.sub(r"^MASS_FLOOR_MSUN = .*$", "MASS_FLOOR_MSUN = 0.5", s, count=1, flags=re.M),
    lambda s: s.replace("    return 1.0 - ", "    return 1.00001 - ", 1) if "    return 1.0 - " in s else s + "# x\n",
    lambda s: s.replace("\n\n\n", "\n\n", 1),  # a blank line lost
])
def test_an_edited_constant_or_line_is_refused_at_import(edit, exported, tmp_path):
    """Issue 15: changing one constant outside the payload made mass_max return 0.917 instead of 2.08.
    The file's own SHA-256 (its last line) now covers code and constants."""
    bad = _tampered(exported["rbf"][1], tmp_path, edit)
    assert bad.read_text() != exported["rbf"][1].read_text()
    with pytest.raises(ImportError, match=r"was edited after export: its sha256 without the FILE_SHA256 line is "
                                          r"[0-9a-f]{64}, but that line records [0-9a-f]{64}"):
        import_file(bad)


def test_the_file_checksum_survives_windows_line_ends_and_is_the_last_line(exported, tmp_path):
    path = exported["rbf"][1]
    lines = path.read_text().splitlines()
    assert lines[-1].startswith('FILE_SHA256 = "') and sum(ln.startswith("FILE_SHA256 = ") for ln in lines) == 1
    crlf = tmp_path / "crlf.py"
    crlf.write_bytes(path.read_bytes().replace(b"\n", b"\r\n"))
    assert import_file(crlf).mass_max(np.mean(np.array(import_file(path).BOUNDS), axis=1)).value > 0


def test_a_huge_batch_is_evaluated_in_blocks_of_bounded_memory(models, tmp_path):
    """Issue 15: memory grew by ~2.5 kB per query row (1.9 GB above the answers for 200 000 rows, measured).
    Queries now run by blocks of BLOCK_ROWS rows, so NumPy's peak allocations beyond the inputs and answers
    do not grow with the batch: the same for 50 000 and 200 000 rows (to 1 MB), and below 48 MB (a block's
    work arrays, with the generated code's plan columns, about 17 kB a row for this test model)."""
    import tracemalloc

    path = tmp_path / "big_batch.py"
    export_model(models["gp"], path, namespaces=("numpy",))
    mod = import_file(path)
    lo, hi = np.array(mod.BOUNDS).T
    excess = {}
    for n in (50_000, 200_000):
        theta = lo + (hi - lo) * np.random.default_rng(5).random((n, len(lo)))
        small = mod.radius(theta[:100], 1.4, return_grad=True)  # warm the model's caches outside the measurement
        tracemalloc.start()
        try:
            res = mod.radius(theta, 1.4, return_grad=True, return_std=True)
            _, peak = tracemalloc.get_traced_memory()
        finally:
            tracemalloc.stop()
        answers = res.value.nbytes + res.grad.nbytes + res.std.nbytes  # 48 bytes a row
        excess[n] = peak - 2 * answers  # the joined blocks and their parts coexist once
    assert excess[200_000] < excess[50_000] + 1e6, excess  # unblocked: +375 MB
    assert excess[200_000] < 48e6, excess
    np.testing.assert_array_equal(res.value[:100], small.value)  # blocks change no bits
    np.testing.assert_array_equal(res.grad[:100], small.grad)


@pytest.mark.parametrize("kind", KINDS)
def test_header_says_which_array_libraries_run_the_file(kind, exported, models):
    """Methods whose runtime part is NumPy only (local, two-sided) say so instead of promising other libraries."""
    head = exported[kind][1].read_text().split('"""', 2)[1]
    numpy_only = models[kind].method_info.numpy_only
    assert numpy_only == (models[kind].method == "local")  # among the small models of the fixtures
    assert ("other array libraries are refused" in head) == numpy_only
    assert ("other array libraries run the general runtime" in head) == (not numpy_only)
