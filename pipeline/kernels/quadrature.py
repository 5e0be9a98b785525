"""Weights of the corrected trapezoid rule for ∫ E(t) e^(−iωt) dt over samples at uneven
observer times, split into two sums that a nonuniform FFT evaluates for any ω:
    ∫ ≈ Σ_j (w_j E_j + c_j E′_j) e^(−iωt_j) − iω Σ_j c_j E_j e^(−iωt_j),
with trapezoid weights w_j and Euler–Maclaurin end corrections c_j = (h_j² − h_(j−1)²)/12.
"""

from __future__ import annotations

from ._jit import jit


@jit
def corrected_trapezoid(t, e, start, stop, a, b):
    """Fill a (3, N) and b (3, N) for samples t (N,) (non-decreasing; a repeated time
    marks a jump of E, handled with one-sided slopes), e (N, 3), integral over
    [start, stop] with t[0] >= start and t[-1] <= stop."""
    n = t.shape[0]
    for j in range(n):
        h_left = t[j] - t[j - 1] if j > 0 else 0.0
        h_right = t[j + 1] - t[j] if j < n - 1 else 0.0
        weight = 0.5 * (h_left + h_right)
        if j == 0:
            weight += t[0] - start
        if j == n - 1:
            weight += stop - t[n - 1]
        correction = (h_right * h_right - h_left * h_left) / 12.0
        for c in range(3):
            has_left = h_left > 0.0
            has_right = h_right > 0.0
            slope = 0.0
            if has_left and has_right:
                left = (e[j, c] - e[j - 1, c]) / h_left
                right = (e[j + 1, c] - e[j, c]) / h_right
                slope = (h_right * left + h_left * right) / (h_left + h_right)
            elif has_left:
                slope = (e[j, c] - e[j - 1, c]) / h_left
            elif has_right:
                slope = (e[j + 1, c] - e[j, c]) / h_right
            a[c, j] = weight * e[j, c] + correction * slope
            b[c, j] = correction * e[j, c]
