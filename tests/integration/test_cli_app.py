"""The command line as a package: light to import, imports pointing down, choices as Enums, one-line errors,
library messages through logging with a quiet mode."""

from __future__ import annotations

import ast
import json
import subprocess
import sys
import warnings
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tovforge.cli import app
from tovforge.cli._common import Kind, Namespace, run
from tovforge.grid import parse_spec, run_grid

runner = CliRunner()
SRC = Path(__file__).resolve().parents[2] / "src" / "tovforge"
HEAVY = ("scipy", "sklearn", "h5py", "matplotlib", "dask", "emcee", "joblib")


def test_importing_the_cli_loads_no_heavy_module():
    code = ("import sys, json, tovforge.cli; "
            f"print(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}} & set({list(HEAVY)!r}))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert json.loads(out) == []


def _imports(path: Path) -> set[str]:
    """Modules of tovforge a file imports, as dotted names relative to the package (``cli._common``)."""
    package = path.relative_to(SRC.parent).with_suffix("").parts[:-1]  # ("tovforge", "cli")
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            base = list(package[: len(package) - node.level + 1]) if node.level else []
            name = ".".join(base + ([node.module] if node.module else []))
            names = [name] + [f"{name}.{a.name}" for a in node.names]
        elif isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        else:
            continue
        found |= {n.removeprefix("tovforge.") for n in names if n.startswith("tovforge.")}
    return found


def test_imports_point_down_to_the_cli_and_inside_it():
    for path in SRC.rglob("*.py"):
        rel = path.relative_to(SRC).as_posix()
        if rel.startswith("cli/") or rel == "__main__.py":
            continue
        assert not any(m == "cli" or m.startswith("cli.") for m in _imports(path)), f"{rel} imports the CLI"
    siblings = {p.stem for p in (SRC / "cli").glob("*.py")} - {"__init__", "__main__"}
    for path in (SRC / "cli").glob("*.py"):
        if path.stem in ("__init__", "__main__"):
            continue
        used = {m.split(".")[1] for m in _imports(path) if m.startswith("cli.") and m.count(".") >= 1}
        allowed = set() if path.stem == "_common" else {"_common"}
        assert used & siblings <= allowed, (path.name, used & siblings)


STAGES = ("eos", "solve", "grid", "surrogate", "export", "tables")


def _imports_any(path: Path, packages: tuple[str, ...]) -> set[str]:
    return {m for m in _imports(path) if m.split(".")[0] in packages}


def test_stages_import_neither_workflows_nor_the_cli():
    # the stages and the package's own top-level modules sit below workflows/, which sits below cli/
    below = [p for stage in STAGES for p in (SRC / stage).rglob("*.py")]
    below += [p for p in SRC.glob("*.py") if p.name != "__main__.py"]
    assert len(below) > 60 and all((SRC / s / "__init__.py").is_file() for s in STAGES)
    for path in below:
        bad = _imports_any(path, ("workflows", "cli"))
        assert not bad, f"{path.relative_to(SRC)} imports {sorted(bad)}"
    for path in (SRC / "workflows").rglob("*.py"):
        assert not _imports_any(path, ("cli",)), f"{path.relative_to(SRC)} imports the CLI"


def test_the_import_check_sees_an_upward_import(monkeypatch):
    # a stage module reaching up (relative and absolute imports) is caught; the file is never written
    fake = SRC / "grid" / "_upward.py"
    text = "from ..workflows.refine import refine\nfrom tovforge.cli import app\nfrom ..eos import make\n"
    read = Path.read_text
    monkeypatch.setattr(Path, "read_text", lambda self, *a, **k: text if self == fake else read(self, *a, **k))
    assert _imports_any(fake, ("workflows", "cli")) == {"workflows.refine", "workflows.refine.refine", "cli",
                                                         "cli.app"}


def test_enum_choices_are_the_librarys_lists():
    from tovforge._bench import SECTIONS
    from tovforge.cli.bench import Section
    from tovforge.export import NAMESPACES
    from tovforge.surrogate import kinds

    assert tuple(k.value for k in Kind) == kinds()
    assert tuple(n.value for n in Namespace) == NAMESPACES
    assert [s.value for s in Section] == list(SECTIONS)


@pytest.mark.parametrize("module", ["tovforge", "tovforge.cli"])
def test_python_dash_m_runs_the_command_line(module):
    proc = subprocess.run([sys.executable, "-m", module, "--version"], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0 and proc.stdout.startswith("tovforge ")


@pytest.mark.parametrize("args, words", [
    (["train", "g.h5", "--out", "m", "--kind", "kriging"], ["Invalid value for '--kind'", "'kriging'", "'gp', 'spline'"]),
    (["bench", "--only", "nothing"], ["Invalid value for '--only'", "'solver'"]),
    (["export", "m", "--out", "x.py", "--namespaces", "numpy,cupy"], ["--namespaces: unknown namespace 'cupy'"]),
    (["solve"], ["Missing argument"]),
    (["no-such-command"], ["No such command"]),
])
def test_usage_errors_are_one_line_with_exit_code_2(tmp_path, args, words):
    res = runner.invoke(app, args)
    assert res.exit_code == 2, res.output
    assert res.stderr.startswith("error: ") and res.stderr.count("\n") == 1, res.stderr
    for w in words:
        assert w in res.stderr
    assert res.stdout == ""


def test_warnings_are_one_line_each_on_stderr(capsys):
    def work():
        warnings.warn("box reaches outside the allowed range", UserWarning)
        warnings.warn("box reaches outside the allowed range", UserWarning)  # shown again, not once per place
        return 7

    assert run(work) == 7
    assert capsys.readouterr().err == "warning: box reaches outside the allowed range\n" * 2


@pytest.fixture(scope="module")
def small_grid(tmp_path_factory):
    path = tmp_path_factory.mktemp("cli") / "g.h5"
    spec = parse_spec({"family": "piecewise-polytrope", "chunk_size": 32,
                       "design": {"method": "sobol", "points": 64, "seed": 3}})
    run_grid(spec, path, workers=1, progress=False)
    return path


def test_library_messages_are_printed_and_quiet_keeps_only_results(small_grid, tmp_path):
    loud = runner.invoke(app, ["train", str(small_grid), "--kind", "spline", "--out", str(tmp_path / "a")])
    quiet = runner.invoke(app, ["-q", "train", str(small_grid), "--kind", "spline", "--out", str(tmp_path / "b")])
    assert loud.exit_code == 0 and quiet.exit_code == 0, loud.output + quiet.output
    assert "RBF r^5 + degree-2 polynomial on" in loud.stdout  # logged by tovforge.surrogate._rbf
    assert "RBF r^5" not in quiet.stdout and "trained spline (rbf) on" in quiet.stdout
    assert quiet.stdout.count("\n") == 1


def test_quiet_turns_the_progress_lines_off(tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text('family = "piecewise-polytrope"\nchunk_size = 2\n[design]\nmethod = "sobol"\npoints = 4\nseed = 1\n')
    loud = runner.invoke(app, ["grid", "run", str(spec), "--out", str(tmp_path / "a.h5"), "--workers", "1"])
    quiet = runner.invoke(app, ["--quiet", "grid", "run", str(spec), "--out", str(tmp_path / "b.h5"), "--workers", "1"])
    assert loud.exit_code == 0 and quiet.exit_code == 0
    assert "4/4 EOS 100.0%" in loud.stderr
    assert quiet.stderr == "" and "content sha256" in quiet.stdout


def test_numpy_runtime_warnings_do_not_reach_the_user_and_user_warnings_are_one_line(capsys):
    """Issue 15: raw NumPy RuntimeWarnings with source paths (up to 14 per command) reached the user."""
    import numpy as np

    def work():
        with np.errstate(all="warn"):
            np.log(np.array([-1.0, 0.0]))  # invalid value, divide by zero: RuntimeWarnings
        warnings.warn("a point has no stable branch;\nits values are NaN", UserWarning)
        return 1

    assert run(work) == 1
    assert capsys.readouterr().err == "warning: a point has no stable branch; its values are NaN\n"


def test_an_unexpected_exception_is_one_line_with_exit_code_3(monkeypatch, tmp_path):
    """A bug (not bad input) still gives one line, with its own exit code, and the traceback on request."""
    from tovforge import grid

    def broken(path):
        raise IndexError("index 7 is out of bounds")

    monkeypatch.setattr(grid, "describe_grid", broken)
    res = runner.invoke(app, ["grid", "info", str(tmp_path / "g.h5")])
    assert res.exit_code == 3 and res.stderr.count("\n") == 1 and "Traceback" not in res.output
    assert "internal error (IndexError: index 7 is out of bounds)" in res.stderr and "TOVFORGE_DEBUG" in res.stderr
    monkeypatch.setenv("TOVFORGE_DEBUG", "1")
    res = runner.invoke(app, ["grid", "info", str(tmp_path / "g.h5")])
    assert res.exit_code == 3 and "Traceback" in res.stderr


def test_ctrl_c_is_exit_code_130_without_a_traceback(monkeypatch):
    from tovforge import eos

    def interrupted():
        raise KeyboardInterrupt

    monkeypatch.setattr(eos, "families", interrupted)
    res = runner.invoke(app, ["families"])
    assert res.exit_code == 130 and "Traceback" not in res.output
