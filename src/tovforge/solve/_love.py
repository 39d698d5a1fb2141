"""Love number k2 from compactness and the surface value of y = r H'/H."""

from __future__ import annotations

import numpy as np

__all__ = ["love_k2", "tidal_deformability"]

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
    C = np.asarray(compactness, float)
    y = np.asarray(y, float)
    C, y = np.broadcast_arrays(C, y)
    num = 1.6 * (1.0 - 2.0 * C) ** 2 * (2.0 + 2.0 * C * (y - 1.0) - y)
    out = np.empty(C.shape)
    small = C < _C_SERIES
    if np.any(small):
        Cs, ys = C[small], y[small]
        den = np.zeros(Cs.shape)
        for d in reversed(_denominator_series_coefficients(ys)):
            den = den * Cs + d
        out[small] = num[small] / den
    big = ~small
    if np.any(big):
        Cb, yb = C[big], y[big]
        den = (
            2.0 * Cb * (6.0 - 3.0 * yb + 3.0 * Cb * (5.0 * yb - 8.0))
            + 4.0 * Cb**3 * (13.0 - 11.0 * yb + Cb * (3.0 * yb - 2.0) + 2.0 * Cb**2 * (1.0 + yb))
            + 3.0 * (1.0 - 2.0 * Cb) ** 2 * (2.0 - yb + 2.0 * Cb * (yb - 1.0)) * np.log1p(-2.0 * Cb)
        )
        out[big] = num[big] * Cb**5 / den
    return out


def tidal_deformability(compactness, k2):
    """Dimensionless tidal deformability ``Lambda = (2/3) k2 / C^5``."""
    C = np.asarray(compactness, float)
    return 2.0 / 3.0 * np.asarray(k2, float) / C**5
