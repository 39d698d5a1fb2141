"""Shared test data: published EOS fits and random points of each default box."""

from __future__ import annotations

import numpy as np
from tovforge import eos

# Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III (best-fit
# piecewise polytropes; values as collected in ../shared/checks, from memory).
READ2009 = {
    "SLy": dict(log_p1=34.384, gamma1=3.005, gamma2=2.988, gamma3=2.851),
    "APR4": dict(log_p1=34.269, gamma1=2.830, gamma2=3.445, gamma3=3.348),
    "MPA1": dict(log_p1=34.495, gamma1=3.446, gamma2=3.572, gamma3=2.887),
}

NUMERIC_FAMILIES = ["piecewise-polytrope", "spectral", "sound-speed", "polytrope", "uniform-density"]
BOX_FAMILIES = ["piecewise-polytrope", "spectral", "sound-speed"]


def valid_box_points(family: str, n: int, seed: int) -> np.ndarray:
    """``n`` valid parameter rows drawn uniformly from the family's default box."""
    fam = eos.get_family(family)
    rng = np.random.default_rng(seed)
    box = fam.box
    rows = []
    while len(rows) < n:
        theta = box[:, 0] + rng.random((64, len(box))) * (box[:, 1] - box[:, 0])
        for row, msg in zip(theta, fam.validate_rows(theta)):
            if not msg:
                rows.append(row)
    return np.array(rows[:n])


def table_rows_of(E, n: int, rho_lo: float = 1.0, rho_hi: float = 1e16):
    """``n`` exact EOS points of ``E`` log-spaced in rest-mass density (g/cm^3), as an EOSPoint.

    The positions come from interpolating a fine sample in ``ln h``; the values are
    evaluated exactly at those positions.
    """
    h_max = min(E.h_max * 0.999, 3.0)
    hf = np.geomspace(1e-12, h_max, 200001)
    rf = E.evaluate(hf).rest_mass_density_g_cm3
    target = np.geomspace(rho_lo, min(rho_hi, rf[-1]), n)
    return E.evaluate(np.exp(np.interp(np.log(target), np.log(rf), np.log(hf))))


def write_eos_table(path, columns, rest_mass: bool = True):
    """Write EOS rows (an EOSPoint, or a tuple p, e[, rho] in cgs) as a table file with a header."""
    if hasattr(columns, "pressure_dyn_cm2"):
        columns = (columns.pressure_dyn_cm2, columns.energy_density_g_cm3, columns.rest_mass_density_g_cm3)
    cols = list(columns[:3] if rest_mass else columns[:2])
    head = "# pressure[dyn/cm^2], energy_density[g/cm^3]" + (", rest_mass_density[g/cm^3]" if rest_mass else "")
    lines = [head] + [", ".join(f"{v:.17e}" for v in row) for row in zip(*cols)]
    path.write_text("\n".join(lines) + "\n")
    return path
