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


# EOS rows written as table files (library helpers, re-exported for the tests)
from tovforge.eos._tabulated import table_rows as table_rows_of  # noqa: E402
from tovforge.eos._tabulated import write_table as write_eos_table  # noqa: E402
