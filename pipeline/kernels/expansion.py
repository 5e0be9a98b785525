"""Fourier sums S(ω) = Σ_j v_j exp(−iωx_j) over a band ω = c + H·u, u ∈ [−1, 1], by the
Jacobi–Anger expansion exp(−iHux) = Σ_n (−i)^n ε_n J_n(Hx) T_n(u) (ε_0 = 1, ε_n = 2;
Abramowitz & Stegun, Handbook of Mathematical Functions, eq. 9.1.44–9.1.45, with
T_n(cos θ) = cos nθ):

    S(ω) = Σ_n (−i)^n ε_n T_n(u) D_n,   D_n = Σ_j v_j exp(−icx_j) J_n(Hx_j).

The terms past order n decay like (H|x|/2)^n / n!, so a short window (few periods of the
band's width) needs few orders whatever the number of frequencies: the cost is samples ×
orders plus frequencies × orders, not samples × frequencies. J_n for n below `orders` come
from Miller's backward recurrence J_(n−1) = (2n/z) J_n − J_(n+1), normalised by
J_0 + 2 Σ J_2k = 1 (Abramowitz & Stegun, eqs. 9.1.27 and 9.1.46), all samples in lockstep.
"""

from __future__ import annotations

import math

import numpy as np

from ._jit import jit

TAIL_TOLERANCE = 1e-15  # bound on the dropped terms, relative to Σ|v_j|
TINY_ARGUMENT = 1e-8  # below: J_0 = 1, J_1 = z/2, the rest below 1e-17
RESCALE_ABOVE = 1e200  # the backward recurrence grows; rescaled past this
VECTORS = 6  # real vectors summed at once: 3 components × 2 quadrature terms
START_MARGIN = 20  # orders above the highest kept where the recurrence starts


@jit
def orders_for(z_max):
    """Number of orders n = 0 … orders−1 keeping the dropped tail of the expansion for
    |Hx| ≤ z_max under TAIL_TOLERANCE: |J_n(z)| ≤ (z/2)^n / n! (A&S eq. 9.1.62), and the
    tail past an order above z_max is at most twice its first term."""
    half = max(z_max, 1e-300) * 0.5
    n = int(math.floor(z_max)) + 1
    while 4.0 * math.exp(n * math.log(half) - math.lgamma(n + 1.0)) > TAIL_TOLERANCE:
        n += 1
    return n + 1


@jit
def start_order(orders):
    """Even order where the backward recurrence starts: the orders kept already have
    |J_n| ≤ TAIL_TOLERANCE at the top, and the error of a start at m decays like J_m there
    (Press et al., Numerical Recipes, 3rd ed., sec. 6.5), so a fixed margin suffices for
    absolute accuracy (checked against scipy.special.jv in tests/test_expansion_sums.py)."""
    start = orders + START_MARGIN
    return start + (start % 2)


@jit
def bessel_table(z, orders, out):
    """out[n, j] = J_n(z[j]) for n < orders, z (N,) of any sign; out (≥ orders + 1, N)
    (its row `orders` is scratch)."""
    n_z = z.shape[0]
    inv_z = np.empty(n_z)
    above = np.zeros(n_z)  # J_(n+1), unnormalised
    here = np.ones(n_z)  # J_n, unnormalised
    total = np.zeros(n_z)  # J_0 + 2 Σ J_2k, unnormalised
    for j in range(n_z):
        inv_z[j] = 1.0 / z[j] if abs(z[j]) >= TINY_ARGUMENT else 0.0
    for n in range(start_order(orders), 0, -1):
        two_n = 2.0 * n
        even = 2.0 if n % 2 == 0 else 0.0
        row = min(n, orders)  # orders past the kept ones land in a spare row
        for j in range(n_z):
            below = two_n * inv_z[j] * here[j] - above[j]
            out[row, j] = here[j]
            total[j] += even * here[j]
            above[j] = here[j]
            here[j] = below
        if n % 4 == 0:
            for j in range(n_z):
                if abs(here[j]) > RESCALE_ABOVE:
                    scale = 1.0 / RESCALE_ABOVE
                    here[j] *= scale
                    above[j] *= scale
                    total[j] *= scale
                    for m in range(n, orders):
                        out[m, j] *= scale
    for j in range(n_z):
        out[0, j] = here[j]
        total[j] = 1.0 / (total[j] + here[j])
    for n in range(orders):
        for j in range(n_z):
            out[n, j] *= total[j]
    for j in range(n_z):
        if inv_z[j] == 0.0:
            for n in range(orders):
                out[n, j] = 0.0
            out[0, j] = 1.0
            if orders > 1:
                out[1, j] = 0.5 * z[j]


def chebyshev_weights(omega, centre, half_width, orders):
    """(re, im) (orders, K) of (−i)^n ε_n T_n(u_k), u_k = (omega[k] − centre)/half_width."""
    u = np.clip((np.asarray(omega, dtype=float) - centre) / half_width, -1.0, 1.0)
    n = np.arange(orders)
    weights = np.cos(n[:, None] * np.arccos(u)[None, :]) * np.where(n == 0, 1.0, 2.0)[:, None]
    weights = weights * ((-1j) ** n)[:, None]
    return np.ascontiguousarray(weights.real), np.ascontiguousarray(weights.imag)


@jit(inline=True)
def _moments(table, rotated, orders, n_x, width, moments):
    """moments[n, c] = Σ_j table[n, j] rotated[j, c] for c < width (a constant at each call)."""
    for n in range(orders):
        row = np.zeros(width)
        for j in range(n_x):
            bessel = table[n, j]
            for c in range(width):
                row[c] += bessel * rotated[j, c]
        moments[n] = row


@jit(inline=True)
def _sums(x, values, centre, half_width, weights_re, weights_im, table, out_re, out_im,
          n_c):
    """`expansion_sums` for n_c vectors (a constant at each call)."""
    n_x = x.shape[0]
    z = np.empty(n_x)
    z_max = 0.0
    for j in range(n_x):
        z[j] = half_width * x[j]
        z_max = max(z_max, abs(z[j]))
    orders = min(orders_for(z_max), weights_re.shape[0])
    bessel_table(z, orders, table)
    rotated = np.empty((n_x, 2 * n_c))  # values × exp(−i centre x), re | im
    for j in range(n_x):
        cos = math.cos(centre * x[j])
        sin = math.sin(centre * x[j])
        for c in range(n_c):
            rotated[j, c] = values[c, j] * cos
            rotated[j, n_c + c] = -values[c, j] * sin
    moments = np.zeros((orders, 2 * n_c))  # D_n: re (c), im (n_c + c)
    _moments(table, rotated, orders, n_x, 2 * n_c, moments)
    out_re[:n_c, :] = 0.0
    out_im[:n_c, :] = 0.0
    for c in range(n_c):
        for n in range(orders):
            m_re = moments[n, c]
            m_im = moments[n, n_c + c]
            for k in range(out_re.shape[1]):
                out_re[c, k] += weights_re[n, k] * m_re - weights_im[n, k] * m_im
                out_im[c, k] += weights_re[n, k] * m_im + weights_im[n, k] * m_re


@jit
def expansion_sums(x, values, centre, half_width, weights_re, weights_im, table, out_re,
                   out_im):
    """out_re + i out_im (rows :C of (≥ C, K)) = Σ_j values[c, j] exp(−i ω_k x[j]) for the
    band of the weights (≥ orders, K; `chebyshev_weights` of centre, half_width) and values
    (C, N), C = VECTORS or 4 (transverse far fields); table: a scratch array (≥ orders + 1,
    N). The orders used follow from max |x| alone (at most the weights' rows: callers size
    them for their longest window)."""
    if values.shape[0] == 4:  # constant counts let the compiler unroll the inner loops
        _sums(x, values, centre, half_width, weights_re, weights_im, table, out_re, out_im, 4)
    else:
        _sums(x, values, centre, half_width, weights_re, weights_im, table, out_re, out_im,
              VECTORS)
