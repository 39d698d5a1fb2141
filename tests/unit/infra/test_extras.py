"""Code that needs an optional dependency says which extra to install, in one line."""

from __future__ import annotations

import subprocess
import sys

import pytest

from tovforge._extras import require
from tovforge.errors import InputError, MissingExtra


def test_require_names_the_extra_and_is_an_input_error():
    with pytest.raises(MissingExtra, match=r"^the plot needs no_such_pkg_xyz, which is not installed; install the "
                                           r"extra with pip install 'tovforge\[plots\]'\.$"):
        require("no_such_pkg_xyz.sub", "plots", "the plot")
    assert issubclass(MissingExtra, InputError)
    assert require("json", "plots", "x").dumps([1]) == "[1]"


def test_cli_without_dask_says_to_install_the_cluster_extra(tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text('family = "piecewise-polytrope"\n[design]\nmethod = "sobol"\npoints = 4\nseed = 1\n')
    code = ("import sys; sys.modules['dask'] = None; sys.modules['dask.distributed'] = None; "
            "from tovforge.cli import main; main()")
    proc = subprocess.run([sys.executable, "-c", code, "grid", "run", str(spec), "--out", str(tmp_path / "g.h5"),
                           "--scheduler", "tcp://127.0.0.1:9"], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr == ("error: running on a Dask scheduler needs dask, which is not installed; install the extra "
                           "with pip install 'tovforge[cluster]'.\n")
