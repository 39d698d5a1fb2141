"""Rows of the ``solver`` benchmark for user tables and first-order transitions."""

from __future__ import annotations

import tempfile
import warnings
from pathlib import Path

import numpy as np

from .._bench import timeit_median
from ..units import MSUN_KM

__all__ = ["bench_exact_rows"]

_SLY = dict(log_p1=34.384, gamma1=3.005, gamma2=2.988, gamma3=2.851)  # Read et al. 2009, Table III
_TRANSITION = dict(log_p_transition=34.6, jump_ratio=0.3, cs2_above=0.6)  # invented example
# a jump at about twice saturation density above Seidov's limit: a cusp, a dip of 0.0016 Msun, twin stars
_TWINS = dict(log_p_transition=34.46, jump_ratio=0.639, cs2_above=1.0)


def _errors(E, seq, fine_steps):
    """Largest relative error over the branch (and of M_max) against the same solver with 8x the steps."""
    from . import SequenceSettings, integrate_stars, solve_sequence

    h = seq.branch.central_pseudo_enthalpy[:-1]
    ref = integrate_stars(E.batch, np.zeros(h.size, int), h, fine_steps)
    ref_max = solve_sequence(E, n_stars=8, settings=SequenceSettings(steps=fine_steps),
                             error_estimate=False).mass_max.mass_msun

    def rel(a, b):
        return float(np.nanmax(np.abs(np.asarray(a) / np.asarray(b) - 1.0)))

    return (rel(seq.branch.mass_msun[:-1], ref.mass / MSUN_KM), rel(seq.branch.radius_km[:-1], ref.radius),
            rel(seq.branch.tidal_deformability[:-1], ref.tidal_deformability),
            abs(seq.mass_max.mass_msun / ref_max - 1.0))


def bench_exact_rows(quick: bool, echo, repeat: int, fine_steps) -> None:
    """Print rows for SLy tables (300 and 2000 rows) and the SLy transition family (one with twin stars).

    Table rows are timed with their error estimate (a second solve of the branch
    with twice the steps), as ``solve_sequence`` does by default for tables.
    """
    from .. import eos
    from . import SequenceSettings, solve_sequence, solve_sequences
    from ._baseline import baseline_star

    sly = eos.make("piecewise-polytrope", **_SLY)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in (300, 2000):
            path = eos.write_table(Path(tmp) / f"sly{n}.csv", eos.table_rows(sly, n))
            T = eos.make("table", path=str(path))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                t = timeit_median(lambda T=T: solve_sequence(T), repeat)
                seq = solve_sequence(T)
            err = _errors(T, seq, fine_steps)
            worst = seq.error_estimate.worst["tidal_deformability"]
            extra = f"  kinks {T.h_kinks.size}, est. Lambda err {worst:.1e}"
            if not quick:
                idx = [len(seq.branch) // 3, len(seq.branch) - 2]  # two branch stars: 1-2 s each for solve_ivp
                adaptive = max(
                    abs(seq.branch.tidal_deformability[i] / baseline_star(
                        T, float(seq.branch.central_pseudo_enthalpy[i]), rtol=1e-12, atol=1e-16
                    ).tidal_deformability - 1.0)
                    for i in idx
                )
                extra += f", Lambda vs solve_ivp {adaptive:.1e}"
            rows.append((f"SLy table, {n} rows", t, err, extra))
    E = eos.make("piecewise-polytrope-transition", **_SLY, **_TRANSITION)
    t = timeit_median(lambda: solve_sequence(E), repeat)
    seq = solve_sequence(E)
    rows.append(("SLy + transition (jump 0.3, c_s^2 0.6)", t, _errors(E, seq, fine_steps), ""))
    E = eos.make("piecewise-polytrope-transition", **_SLY, **_TWINS)
    t = timeit_median(lambda: solve_sequence(E), repeat)
    seq = solve_sequence(E)
    fine = solve_sequence(E, n_stars=8, settings=SequenceSettings(steps=fine_steps), error_estimate=False).twin
    twin = (f"  twin min {seq.twin.mass_min_msun:.6f} ({abs(seq.twin.mass_min_msun / fine.mass_min_msun - 1):.0e}), "
            f"max {seq.twin.mass_max.mass_msun:.6f} ({abs(seq.twin.mass_max.mass_msun / fine.mass_max.mass_msun - 1):.0e})")
    rows.append(("SLy + jump 0.639 at 2 n_sat (cusp, twins)", t, _errors(E, seq, fine_steps), twin))
    fam = eos.get_family("piecewise-polytrope-transition")
    n_batch = 8 if quick else 32
    rng = np.random.default_rng(5)
    box = fam.box
    theta = box[:, 0] + rng.random((n_batch, len(box))) * (box[:, 1] - box[:, 0])
    theta = theta[[not m for m in fam.validate_rows(theta)]]
    batch = fam.build(theta)
    t_b = timeit_median(lambda: solve_sequences(batch, n_stars=100), 1) / len(theta)
    echo("")
    echo("user tables and first-order transitions (errors against the same solver with 8x the steps):")
    echo(f"{'case':<40}{'ms/EOS':>10}{'max err M':>11}{'R':>9}{'Lambda':>9}{'M_max':>9}")
    for name, t, (eM, eR, eL, eX), extra in rows:
        echo(f"{name:<40}{t * 1e3:>10.1f}{eM:>11.1e}{eR:>9.1e}{eL:>9.1e}{eX:>9.1e}{extra}")
    echo(f"{f'transition family, {len(theta)} EOS per call':<40}{t_b * 1e3:>10.1f}")
