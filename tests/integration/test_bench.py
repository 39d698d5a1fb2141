"""`tovforge bench --quick` runs every section to the end (a smoke run: nothing is timed or compared here)."""

from __future__ import annotations

import subprocess
import sys

import pytest


@pytest.mark.slow
def test_quick_bench_runs_every_section():
    r = subprocess.run([sys.executable, "-m", "tovforge.cli", "bench", "--quick"], capture_output=True, text=True,
                       timeout=900)
    assert r.returncode == 0, r.stderr[-2000:]
    for section in ("== solver ==", "== grid ==", "== surrogate ==", "== export ==", "== scaling =="):
        assert section in r.stdout, section
    for words in ("SciPy baseline", "10^4 points on 2 cores", "train spline", "train gp", "demo_gp.py",
                  "demo_spline.py", "floors (goals)", "== likelihood ==", "train local", "file MB"):
        assert words in r.stdout, words
    assert "Traceback" not in r.stderr
