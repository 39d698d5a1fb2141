"""The committed demo evaluators in exported/ still tell the truth about themselves.

Each file carries the held-out error table of `tovforge check` (``CHECK``, also
printed in its header).  Recomputing that table through the file itself, on the
held-out exact solves it names, must give the same percentiles: the file's
numbers still produce the accuracy it claims, and the claim is about these
exact solves.  A slow test adds fresh exact solves at fixed parameters.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import HOLDOUT_GRID, ROOT, import_file

from tovforge.grid import read_grid

FILES = ("demo_gp.py", "demo_spline.py")
MASS_LOW, MAX_GAP = 1.0, 0.02  # the mass rule of `tovforge check` (recorded in each header)


@pytest.fixture(scope="module", params=FILES)
def committed(request):
    path = ROOT / "exported" / request.param
    assert path.is_file(), f"{path} is missing: run `make export`"
    return path, import_file(path)


@pytest.fixture(scope="module")
def holdout():
    return read_grid(HOLDOUT_GRID)


def test_files_are_small_and_checked(committed):
    path, mod = committed
    assert path.stat().st_size < 10e6
    assert mod.CHECK is not None, f"{path.name} was exported without --report"
    assert mod.CHECK["holdout"]["mass_rule"] == f">= {MASS_LOW} and <= M_max - {MAX_GAP}"
    for key in ("mass_max_msun", "radius_km_at_mass", "tidal_deformability_at_mass"):
        p95 = mod.CHECK["errors"][key]["abs_p95"]
        assert format(p95, ".3g") in mod.__doc__  # the header shows the table that CHECK holds


def test_header_error_table_is_reproduced_on_the_held_out_solves(committed, holdout):
    path, mod = committed
    assert mod.CHECK["holdout"]["content_sha256"] == holdout.attrs["content_sha256"], (
        f"{path.name} was checked on another held-out grid than {HOLDOUT_GRID.name}: run `make export`")
    theta = np.asarray(holdout.parameters, float)
    ok = (np.asarray(holdout.status) == 0) & mod.in_domain(theta)
    assert int(ok.sum()) == mod.CHECK["holdout"]["n_used"]
    th, mm_exact = theta[ok], holdout.scalars["mass_max_msun"][ok]
    masses = np.asarray(holdout.masses_msun, float)
    sel = (masses >= MASS_LOW - 1e-9) & (masses <= mm_exact[:, None] - MAX_GAP)
    sel &= np.isfinite(holdout.at_mass["radius_km"][ok])
    R = mod.radius(th, masses).value
    L = mod.tidal_deformability(th, masses).value
    use = sel & np.isfinite(R)
    got = {
        ("mass_max_msun", "abs_p95"): np.percentile(np.abs(mod.mass_max(th).value - mm_exact), 95),
        ("radius_km_at_mass", "abs_p95"): np.percentile(np.abs(R - holdout.at_mass["radius_km"][ok])[use], 95),
        ("tidal_deformability_at_mass", "rel_p95"): np.percentile(
            np.abs(L / holdout.at_mass["tidal_deformability"][ok] - 1.0)[use], 95),
    }
    for (key, stat), value in got.items():
        want = mod.CHECK["errors"][key][stat]
        assert value == pytest.approx(want, rel=1e-6), f"{path.name}: {key} {stat} is {value}, header says {want}"


@pytest.mark.slow
def test_fresh_exact_solves_fall_within_the_header_errors(committed):
    """Three fixed EOS inside the box, solved now: errors within the largest held-out error of the header."""
    from tovforge import eos
    from tovforge.solve import solve_sequence

    path, mod = committed
    fam = eos.get_family(mod.FAMILY)
    theta = np.array([[34.384, 3.005, 2.988, 2.851],   # near SLy (Read et al. 2009, Table III)
                      [34.495, 3.446, 3.572, 2.887],   # near MPA1
                      [34.5, 3.0, 2.75, 2.75]])        # the centre of the demo box
    for t in theta:
        seq = solve_sequence(fam.from_array(t), n_stars=40, masses=[1.4])
        assert seq.success
        e_m = abs(float(mod.mass_max(t).value) - seq.mass_max.mass_msun)
        assert e_m <= mod.CHECK["errors"]["mass_max_msun"]["abs_max"], (path.name, t, e_m)
        e_r = abs(float(mod.radius(t, 1.4).value) - seq.at_mass.radius_km[0])
        assert e_r <= mod.CHECK["errors"]["radius_km_at_mass"]["abs_max"], (path.name, t, e_r)
