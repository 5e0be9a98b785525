"""Weights of the corrected trapezoid rule for ∫ E(t) e^(−iωt) dt over samples at uneven
observer times, split into two sums that a nonuniform FFT evaluates for any ω:
    ∫ ≈ Σ_j (w_j E_j + c_j E′_j) e^(−iωt_j) − iω Σ_j c_j E_j e^(−iωt_j),
with trapezoid weights w_j and Euler–Maclaurin end corrections c_j = (h_j² − h_(j−1)²)/12.
"""

from __future__ import annotations

from ._jit import jit


@jit(inline=True)
def node_terms(h_left, h_right):
    """(w, c) of a node with gaps h_left, h_right to its neighbours (0 at an end): the
    trapezoid weight and the Euler–Maclaurin end correction (h_right² − h_left²)/12."""
    return 0.5 * (h_left + h_right), (h_right * h_right - h_left * h_left) / 12.0


@jit(inline=True)
def node_slope(h_left, h_right, previous, here, following):
    """E′ at a node from its neighbours' values: the mean of the two one-sided slopes
    weighted by the opposite gaps, or the one slope there is (a gap of 0: an end, or a
    repeated time marking a jump of E)."""
    if h_left > 0.0 and h_right > 0.0:
        left = (here - previous) / h_left
        right = (following - here) / h_right
        return (h_right * left + h_left * right) / (h_left + h_right)
    if h_left > 0.0:
        return (here - previous) / h_left
    if h_right > 0.0:
        return (following - here) / h_right
    return 0.0


@jit
def corrected_trapezoid(t, e, start, stop, a, b):
    """Fill a (3, N) and b (3, N) for samples t (N,) (non-decreasing; a repeated time
    marks a jump of E, handled with one-sided slopes), e (N, 3), integral over
    [start, stop] with t[0] >= start and t[-1] <= stop."""
    n = t.shape[0]
    for j in range(n):
        h_left = t[j] - t[j - 1] if j > 0 else 0.0
        h_right = t[j + 1] - t[j] if j < n - 1 else 0.0
        weight, correction = node_terms(h_left, h_right)
        if j == 0:
            weight += t[0] - start
        if j == n - 1:
            weight += stop - t[n - 1]
        for c in range(3):
            slope = node_slope(h_left, h_right, e[max(j - 1, 0), c], e[j, c],
                               e[min(j + 1, n - 1), c])
            a[c, j] = weight * e[j, c] + correction * slope
            b[c, j] = correction * e[j, c]
