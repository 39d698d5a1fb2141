"""`tovforge grid run` and `tovforge grid info` from the command line."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from typer.testing import CliRunner

from grid_helpers import assert_same_datasets
from tovforge.cli import app
from tovforge.grid import load_spec, parts_folder, read_grid, run_grid
from tovforge.grid import _run as grid_run

runner = CliRunner()

SPEC = """
family = "piecewise-polytrope"
chunk_size = {chunk}
[design]
method = "sobol"
points = {points}
seed = 11
"""


def _write(tmp_path, text, name="spec.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


@pytest.mark.parametrize("change, key_path", [
    (("seed = 11", "sede = 11"), "design.sede: unknown key 'sede' in [design] (did you mean 'seed'?)"),
    (("points = 4", 'points = "4"'), "design.points: expected an integer, got a string ('4')"),
    (("seed = 11", "seed = 11\n[box]\ngamma2 = [3.5, 1.5]"),
     "box.gamma2: the lower bound 3.5 must be below the upper bound 1.5"),
])
def test_bad_spec_exits_2_with_the_key_path_and_no_traceback(tmp_path, change, key_path):
    spec = _write(tmp_path, SPEC.format(chunk=2, points=4).replace(*change))
    proc = subprocess.run([sys.executable, "-m", "tovforge.cli", "grid", "run", str(spec), "--out",
                           str(tmp_path / "g.h5")], capture_output=True, text=True)
    assert proc.returncode == 2
    assert proc.stderr.startswith("error: ") and proc.stderr.count("\n") == 1
    assert key_path in proc.stderr and str(spec) in proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout
    assert not (tmp_path / "g.h5").exists() and not parts_folder(tmp_path / "g.h5").exists()


def test_run_info_and_refusal_through_the_cli(tmp_path):
    spec = _write(tmp_path, SPEC.format(chunk=2, points=4))
    out = tmp_path / "g.h5"
    res = runner.invoke(app, ["grid", "run", str(spec), "--out", str(out), "--workers", "1"])
    assert res.exit_code == 0, res.output
    assert "4 points in 2 chunks (2 solved now, 0 resumed)" in res.stdout
    assert "4/4 EOS 100.0%" in res.stderr and "EOS/s" in res.stderr and "ETA" in res.stderr
    info = runner.invoke(app, ["grid", "info", str(out)])
    assert info.exit_code == 0
    for text in ("family piecewise-polytrope, 4 points", "design: sobol, 4 points, seed 11", "0 ok", "log_p1",
                 "mass_max_msun", "(verified)"):
        assert text in info.stdout
    other = _write(tmp_path, SPEC.format(chunk=2, points=4).replace("seed = 11", "seed = 12"), "other.toml")
    res = runner.invoke(app, ["grid", "run", str(other), "--out", str(out)])
    assert res.exit_code == 2
    assert res.stderr.strip() == (f"error: {out} exists and was made from a different spec "
                                  f"({read_grid(out).attrs['spec_sha256'][:12]}...); pass --overwrite to replace it.")
    res = runner.invoke(app, ["grid", "info", str(tmp_path / "missing.h5")])
    assert res.exit_code == 2 and res.stderr.startswith("error: ") and "no such file" in res.stderr


def test_sigkill_mid_run_then_rerun_equals_an_uninterrupted_run(tmp_path, monkeypatch):
    """Kill `tovforge grid run` with SIGKILL, rerun: finished chunks are kept, the rest solved once."""
    n_chunks = 16
    spec_path = _write(tmp_path, SPEC.format(chunk=4, points=4 * n_chunks))
    spec = load_spec(spec_path)
    out = tmp_path / "killed.h5"
    parts = parts_folder(out)
    proc = subprocess.Popen([sys.executable, "-m", "tovforge.cli", "grid", "run", str(spec_path), "--out",
                             str(out), "--workers", "1", "--quiet"], stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    try:
        while len(list(parts.glob("chunk-*.h5"))) < 3 and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.005)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    finished = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in parts.glob("chunk-*.h5")}
    assert 3 <= len(finished) < n_chunks and not out.exists()

    # Rerun (in this process, to count the chunks solved) while watching the finished files.
    solved = []
    real = grid_run._solve_task

    def counting(spec_, k, theta, *rest):
        solved.append(k)
        assert finished == {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in parts.glob("chunk-*.h5")
                            if p.name in finished}  # never rewritten
        return real(spec_, k, theta, *rest)

    monkeypatch.setattr(grid_run, "_solve_task", counting)
    summary = run_grid(spec, out, workers=1, progress=False)
    done_before = {int(name[6:12]) for name in finished}
    assert sorted(solved) == sorted(set(range(n_chunks)) - done_before)
    assert summary.chunks_reused == len(finished)
    monkeypatch.undo()

    ref = tmp_path / "uninterrupted.h5"
    run_grid(spec, ref, workers=1, progress=False)
    assert_same_datasets(out, ref)


def _solve_json(theta, masses):
    args = ["solve", "piecewise-polytrope", *[f"{n}={float(v)!r}" for n, v in
                                              zip(("log_p1", "gamma1", "gamma2", "gamma3"), theta)],
            "--masses", ",".join(repr(float(m)) for m in masses), "--json"]
    res = runner.invoke(app, args)
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def _grid_vs_solve(tmp_path, theta):
    """One-point grid at ``theta`` and `tovforge solve` at its fixed masses and node masses."""
    spec_text = ('family = "piecewise-polytrope"\n[design]\nmethod = "regular"\npoints_per_axis = 1\n[box]\n' +
                 "".join(f"{n} = [{float(v) - 0.01!r}, {float(v) + 0.01!r}]\n"
                         for n, v in zip(("log_p1", "gamma1", "gamma2", "gamma3"), theta)))
    out = tmp_path / "one.h5"
    run_grid(load_spec(_write(tmp_path, spec_text)), out, workers=1, progress=False)
    g = read_grid(out)
    np.testing.assert_allclose(g.parameters[0], theta, rtol=1e-14)
    nodes = g.curves["mass_msun"][0]
    d = _solve_json(g.parameters[0], np.concatenate([g.masses_msun, nodes[1:]]))
    return g, d


# Tolerances: M_max and the maximum-mass star come from the same scan and cluster in both, so they agree to
# rounding (1e-10).  A star at a given mass is an exact solve in both, located by different searches
# (`solve` interpolates h_c along its branch and corrects to first order in the mass mismatch, leaving ~1e-9),
# so R, Lambda, k2, I and M_b agree to 1e-7, far below the solver's own accuracy (1e-6, 1e-5).
@pytest.mark.parametrize("theta", [[34.384, 3.005, 2.988, 2.851], [34.5, 3.0, 2.75, 2.75]], ids=["SLy", "centre"])
def test_stored_values_equal_a_direct_solve(tmp_path, theta):
    g, d = _grid_vs_solve(tmp_path, np.array(theta))
    assert g.status[0] == 0
    mm = d["mass_max"]
    for key, name in (("mass_msun", "mass_max_msun"), ("radius_km", "radius_at_mass_max_km"),
                      ("central_pressure_dyn_cm2", "central_pressure_at_mass_max_dyn_cm2"),
                      ("max_sound_speed_sq", "max_sound_speed_sq")):
        assert g.scalars[name][0] == pytest.approx(mm[key], rel=1e-10), name
    n_m = g.masses_msun.size
    at = d["at_mass"]
    for name, values in g.at_mass.items():
        ref = np.array([np.nan if s[name] is None else s[name] for s in at[:n_m]], float)
        np.testing.assert_allclose(values[0], ref, rtol=1e-7, equal_nan=True, err_msg=name)
    for name, values in g.curves.items():
        ref = np.array([s[name] for s in at[n_m:]], float)
        np.testing.assert_allclose(values[0, 1:], ref, rtol=1e-7, err_msg=name)


def test_direct_solve_near_the_maximum_with_a_kink_in_the_cluster(tmp_path):
    """Regression: mass queries just below M_max with an EOS kink inside the cluster around the
    maximum once returned a different star labelled with the requested mass (found by the grid work)."""
    g, d = _grid_vs_solve(tmp_path, np.array([34.9, 2.3, 3.6, 1.8]))
    n_m = g.masses_msun.size
    ref = np.array([s["radius_km"] for s in d["at_mass"][n_m:]], float)
    np.testing.assert_allclose(g.curves["radius_km"][0, 1:], ref, rtol=1e-7)


def _children(pid: int) -> list[int]:
    """Pids of the processes whose parent is ``pid`` (Linux /proc)."""
    kids = []
    for stat in os.listdir("/proc"):
        if stat.isdigit():
            try:
                with open(f"/proc/{stat}/stat") as fh:
                    fields = fh.read().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                kids.append(int(stat))
    return kids


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


def test_a_second_run_on_the_same_output_is_refused_and_the_first_finishes_untouched(tmp_path):
    """Issue 15: of two runs on one output the second finished with a crash and deleted the other's
    temporary chunk.  Now the second is refused with one line naming the lock, the first is unharmed."""
    spec_path = _write(tmp_path, SPEC.format(chunk=4, points=32))
    out = tmp_path / "g.h5"
    proc = subprocess.Popen([sys.executable, "-m", "tovforge.cli", "-q", "grid", "run", str(spec_path), "--out",
                             str(out), "--workers", "1"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            text=True)
    try:
        deadline = time.monotonic() + 120
        while not parts_folder(out).is_dir() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.01)
        res = runner.invoke(app, ["grid", "run", str(spec_path), "--out", str(out), "--workers", "1"])
        assert res.exit_code == 2, res.output
        assert res.stderr.count("\n") == 1 and f"pid {proc.pid}" in res.stderr and "g.h5.lock" in res.stderr
    finally:
        proc.wait(timeout=300)
    assert proc.returncode == 0 and proc.stderr.read() == ""
    ref = tmp_path / "ref.h5"
    run_grid(load_spec(spec_path), ref, workers=1, progress=False)
    assert_same_datasets(out, ref)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["g.h5", "ref.h5", "spec.toml"]  # no lock, no parts


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_workers_exit_when_the_run_is_killed(tmp_path):
    """Issue 15: loky workers of a killed `grid run` lived on for minutes; a watchdog now ends them."""
    spec_path = _write(tmp_path, SPEC.format(chunk=8, points=512))
    out = tmp_path / "g.h5"
    proc = subprocess.Popen([sys.executable, "-m", "tovforge.cli", "-q", "grid", "run", str(spec_path), "--out",
                             str(out), "--workers", "2"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        while not list(parts_folder(out).glob("chunk-*.h5")) and time.monotonic() < deadline:
            time.sleep(0.05)
        workers = _children(proc.pid)
        assert workers, "no worker processes found"
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    deadline = time.monotonic() + 20
    while any(_alive(w) for w in workers) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not any(_alive(w) for w in workers), [w for w in workers if _alive(w)]
    # the next run takes the stale lock over, reuses the finished chunks and leaves nothing behind
    res = runner.invoke(app, ["-q", "grid", "run", str(spec_path), "--out", str(out), "--workers", "2"])
    assert res.exit_code == 0, res.output
    assert "resumed" in res.stdout and sorted(p.name for p in tmp_path.iterdir()) == ["g.h5", "spec.toml"]
