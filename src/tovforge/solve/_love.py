"""Love number k2 from compactness and the surface value of y = r H'/H."""

from __future__ import annotations

import numpy as np

__all__ = ["love_k2", "tidal_deformability", "k2_series", "k2_closed_form"]

# Below this compactness the closed form loses digits to cancellation (its
# denominator is O(C^5) built from O(1) terms); use the series there.
_C_SERIES = 0.1
_N_SERIES = 36


def _denominator_series_coefficients(y):
    """Coefficients d_k(y), k = 5 .. 5 + _N_SERIES - 1, of the k2 denominator.

    The denominator is A(C) + B(C) ln(1 - 2C) with a quintic A and the cubic
    B = 3 (1 - 2C)^2 [2 - y + 2C (y - 1)]; every power below C^5 cancels.
    With ln(1 - 2C) = -sum_n (2C)^n / n the coefficient of C^k (k >= 6) is
    -sum_j B_j 2^(k-j) / (k - j); at k = 5 the term 8 (1 + y) of A adds.
    """
    b0, b1 = 2.0 - y, 2.0 * (y - 1.0)
    B = (3.0 * b0, 3.0 * (b1 - 4.0 * b0), 12.0 * (b0 - b1), 12.0 * b1)
    coeffs = []
    for k in range(5, 5 + _N_SERIES):
        d = 8.0 * (1.0 + y) if k == 5 else 0.0
        for j, Bj in enumerate(B):
            d = d - Bj * 2.0 ** (k - j) / (k - j)
        coeffs.append(d)
    return coeffs


def _numerator(C, y):
    return 1.6 * (1.0 - 2.0 * C) ** 2 * (2.0 + 2.0 * C * (y - 1.0) - y)


def k2_series(C, y):
    """k2 from the power series of the denominator in C (accurate for C < 0.2)."""
    den = np.zeros(np.broadcast(C, y).shape)
    for d in reversed(_denominator_series_coefficients(y)):
        den = den * C + d
    return _numerator(C, y) / den


def k2_closed_form(C, y):
    """k2 from the closed form of Hinderer (2008); loses digits as C^-5 for small C."""
    den = (
        2.0 * C * (6.0 - 3.0 * y + 3.0 * C * (5.0 * y - 8.0))
        + 4.0 * C**3 * (13.0 - 11.0 * y + C * (3.0 * y - 2.0) + 2.0 * C**2 * (1.0 + y))
        + 3.0 * (1.0 - 2.0 * C) ** 2 * (2.0 - y + 2.0 * C * (y - 1.0)) * np.log1p(-2.0 * C)
    )
    return _numerator(C, y) * C**5 / den


def love_k2(compactness, y):
    """Quadrupolar tidal Love number k2.

    Parameters
    ----------
    compactness : array_like
        ``C = M / R`` (G = c = 1), in (0, 1/2).
    y : array_like
        ``y = R H'(R) / H(R)`` at the surface, after any density-jump correction.

    Returns
    -------
    ndarray
        k2 from Hinderer (2008, ApJ 677, 1216, Eq. 23; erratum 2009).  For
        ``C < 0.1`` the same expression is evaluated as a power series in ``C``
        (36 terms), which avoids the cancellation of the closed form; the
        leading term is the Newtonian ``(2 - y) / (2 (y + 3))``.
    """
    C, y = np.broadcast_arrays(np.asarray(compactness, float), np.asarray(y, float))
    out = np.empty(C.shape)
    small = C < _C_SERIES
    if np.any(small):
        out[small] = k2_series(C[small], y[small])
    if np.any(~small):
        out[~small] = k2_closed_form(C[~small], y[~small])
    return out


def tidal_deformability(compactness, k2):
    """Dimensionless tidal deformability ``Lambda = (2/3) k2 / C^5``."""
    C = np.asarray(compactness, float)
    return 2.0 / 3.0 * np.asarray(k2, float) / C**5
