"""The DOP853 tableau typed into solve/_tableau.py equals SciPy's copy.

Both come from Hairer, Norsett & Wanner, Solving ODE I (2nd ed. 1993), Sec. II.10.
SciPy's module is private, so the test is skipped where it cannot be imported.
"""

from __future__ import annotations

import numpy as np
import pytest

from tovforge.solve import _tableau

scipy_dop853 = pytest.importorskip("scipy.integrate._ivp.dop853_coefficients")


def test_tableau_equals_scipy_bit_for_bit():
    n = _tableau.N_STAGES
    assert n == scipy_dop853.N_STAGES == 12
    # SciPy's arrays also hold the stages of the dense output (rows 12-15); the method itself is the first 12
    np.testing.assert_array_equal(_tableau.C, scipy_dop853.C[:n])
    np.testing.assert_array_equal(_tableau.A, scipy_dop853.A[:n, :n])
    np.testing.assert_array_equal(_tableau.B, scipy_dop853.B)


def test_tableau_is_consistent():
    # row sums of A equal C (the stages are consistent) and the weights sum to 1 (order >= 1)
    np.testing.assert_allclose(_tableau.A.sum(axis=1), _tableau.C, atol=1e-15)
    assert _tableau.B.sum() == pytest.approx(1.0, abs=1e-15)
