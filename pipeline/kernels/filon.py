"""Filon-type quadrature of Ẽ(ω) = ∫ E(t) e^(−iωt) dt over samples at uneven observer times.

Between two samples E is taken as its cubic Hermite interpolant (the values, and slopes
from the neighbours as in quadrature.node_slope), and the integral of that cubic against
the exponential is done exactly, whatever ω times the gap. The phase is never sampled, so
the samples need only follow E itself: their density does not grow with the frequency.
This is Filon's idea (L. N. G. Filon, Proc. R. Soc. Edinburgh 49 (1928) 38, from memory)
with a cubic Hermite in place of his quadratic.

With x = (t − t_j)/h on a gap of width h and θ = ωh, the moments μ_k(θ) = ∫₀¹ x^k e^(−iθx) dx
follow from μ_0 = (1 − e^(−iθ))/(iθ), μ_k = (k μ_(k−1) − e^(−iθ))/(iθ), or from their power
series below SERIES_BELOW (where the recurrence would cancel).
"""

from __future__ import annotations

import math

import numpy as np

from ._jit import jit
from .quadrature import node_slope

SERIES_BELOW = 0.25  # |θ| under which the weights come from their power series
RENEW_EVERY = 256  # samples between exact phases (the carried ones drift by ~1e-16 a step)
SERIES_TERMS = 12  # powers θ⁰ … θ¹¹: the next term is below 1e-17 at SERIES_BELOW


def _series_table() -> tuple[np.ndarray, np.ndarray]:
    """(even, odd) (6, SERIES_TERMS/2): the power series of ∫₀¹ b(x) e^(−iθx) dx for
    b = 1 (μ_0) and the four Hermite basis cubics, and of e^(−iθ) (row PHASE_ROW), as
    Re = Σ_i even[b, i] θ^(2i) and Im = θ Σ_i odd[b, i] θ^(2i) (the term of θ^m is
    (−i)^m/m! ∫₀¹ b(x) x^m dx, or (−i)^m/m!)."""
    basis = [{0: 1.0}, {0: 1.0, 2: -3.0, 3: 2.0}, {2: 3.0, 3: -2.0},
             {1: 1.0, 2: -2.0, 3: 1.0}, {2: -1.0, 3: 1.0}]  # power: coefficient
    even = np.zeros((len(basis) + 1, SERIES_TERMS // 2))
    odd = np.zeros_like(even)
    for b, cubic in enumerate([*basis, None]):
        for m in range(SERIES_TERMS):
            if cubic is None:  # the last row: e^(−iθ) itself
                integral = 1.0
            else:
                integral = sum(a / (power + m + 1) for power, a in cubic.items())
            value = integral / math.factorial(m) * (-1.0) ** (m // 2)
            if m % 2:
                odd[b, m // 2] = -value
            else:
                even[b, m // 2] = value
    return even, odd


SERIES_EVEN, SERIES_ODD = _series_table()
PHASE_ROW = 5


@jit(inline=True)
def phase_of(theta):
    """e^(−iθ), by its series below SERIES_BELOW (cheaper than a cosine and a sine)."""
    if abs(theta) < SERIES_BELOW:
        return _series(PHASE_ROW, theta)
    return complex(math.cos(theta), -math.sin(theta))


@jit(inline=True)
def _series(b, theta):
    """Row b of the series table at θ (Horner in θ²)."""
    square = theta * theta
    re = 0.0
    im = 0.0
    for i in range(SERIES_TERMS // 2 - 1, -1, -1):
        re = re * square + SERIES_EVEN[b, i]
        im = im * square + SERIES_ODD[b, i]
    return complex(re, theta * im)


@jit(inline=True)
def first_moment(theta, phase):
    """μ_0 = ∫₀¹ e^(−iθx) dx, given phase = e^(−iθ)."""
    if abs(theta) < SERIES_BELOW:
        return _series(0, theta)
    return (1.0 - phase) * (-1j / theta)


@jit(inline=True)
def hermite_weights(theta, phase):
    """∫₀¹ b(x) e^(−iθx) dx of the cubic Hermite basis: (value at 0, value at 1, slope at 0,
    slope at 1), b = 1 − 3x² + 2x³, 3x² − 2x³, x − 2x² + x³, x³ − x²; phase = e^(−iθ)."""
    if abs(theta) < SERIES_BELOW:
        return _series(1, theta), _series(2, theta), _series(3, theta), _series(4, theta)
    inverse = -1j / theta  # 1/(iθ)
    m0 = (1.0 - phase) * inverse
    m1 = (m0 - phase) * inverse
    m2 = (2.0 * m1 - phase) * inverse
    m3 = (3.0 * m2 - phase) * inverse
    return m0 - 3.0 * m2 + 2.0 * m3, 3.0 * m2 - 2.0 * m3, m1 - 2.0 * m2 + m3, m3 - m2


@jit
def node_slopes(x, e, slopes):
    """slopes (N, 3): E′ at the samples x (N,) (non-decreasing; a repeated time marks a
    jump of E, with one-sided slopes) of e (N, 3), as the corrected trapezoid takes them."""
    n = x.shape[0]
    for j in range(n):
        h_left = x[j] - x[j - 1] if j > 0 else 0.0
        h_right = x[j + 1] - x[j] if j < n - 1 else 0.0
        for c in range(3):
            slopes[j, c] = node_slope(h_left, h_right, e[max(j - 1, 0), c], e[j, c],
                                      e[min(j + 1, n - 1), c])


@jit
def filon_sums(x, e, lo, hi, omega, out):
    """Add to out (K, 3) complex ∫ E(x) e^(−iω_k x) dx over [lo, hi] for samples x (N,)
    (non-decreasing, inside [lo, hi]; keep them centred on the window so that the phases
    stay short) and e (N, 3): the cubic Hermite interpolant between samples, held constant
    from the end samples to lo and hi (as the corrected trapezoid does). The phase of each
    frequency is carried from sample to sample by the gap's own e^(−iωh), which the
    weights need anyway, and recomputed every RENEW_EVERY samples."""
    n = x.shape[0]
    n_k = omega.shape[0]
    if n == 0:
        return
    slopes = np.empty((n, 3))
    node_slopes(x, e, slopes)
    here = np.empty(n_k, dtype=np.complex128)  # e^(−iω x_j) of each frequency
    acc = np.zeros((n_k, 3), dtype=np.complex128)
    gap = x[0] - lo
    for k in range(n_k):
        here[k] = complex(math.cos(omega[k] * x[0]), -math.sin(omega[k] * x[0]))
        if gap > 0.0:
            theta = omega[k] * gap
            edge = complex(math.cos(omega[k] * lo), -math.sin(omega[k] * lo))
            weight = edge * gap * first_moment(theta, phase_of(theta))
            for c in range(3):
                acc[k, c] += weight * e[0, c]
    for j in range(n - 1):
        h = x[j + 1] - x[j]
        if h <= 0.0:
            continue
        if (j + 1) % RENEW_EVERY == 0:
            for k in range(n_k):
                here[k] = complex(math.cos(omega[k] * x[j]), -math.sin(omega[k] * x[j]))
        e0x, e0y, e0z = e[j, 0], e[j, 1], e[j, 2]
        e1x, e1y, e1z = e[j + 1, 0], e[j + 1, 1], e[j + 1, 2]
        d0x, d0y, d0z = slopes[j, 0] * h, slopes[j, 1] * h, slopes[j, 2] * h
        d1x, d1y, d1z = slopes[j + 1, 0] * h, slopes[j + 1, 1] * h, slopes[j + 1, 2] * h
        for k in range(n_k):
            theta = omega[k] * h
            step = phase_of(theta)
            f0, f1, s0, s1 = hermite_weights(theta, step)
            scale = h * here[k]
            a0, a1, b0, b1 = scale * f0, scale * f1, scale * s0, scale * s1
            acc[k, 0] += a0 * e0x + a1 * e1x + b0 * d0x + b1 * d1x
            acc[k, 1] += a0 * e0y + a1 * e1y + b0 * d0y + b1 * d1y
            acc[k, 2] += a0 * e0z + a1 * e1z + b0 * d0z + b1 * d1z
            here[k] *= step
    gap = hi - x[n - 1]
    for k in range(n_k):
        if gap > 0.0:
            phase = complex(math.cos(omega[k] * x[n - 1]), -math.sin(omega[k] * x[n - 1]))
            theta = omega[k] * gap
            weight = phase * gap * first_moment(theta, phase_of(theta))
            for c in range(3):
                acc[k, c] += weight * e[n - 1, c]
        for c in range(3):
            out[k, c] += acc[k, c]
