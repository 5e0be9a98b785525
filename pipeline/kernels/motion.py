"""Evaluation of piecewise-polynomial motion: r, β, 1/γ², β̇ at source times.

Two kinds of motion, both held as arrays built by `lagfield.motion`:

- positions only: per piece p (times breaks[p] … breaks[p+1]) a polynomial of the position
  in σ = t − breaks[p], coefficients ascending, coef[p, m, :] (m), so β = r′/c, β̇ = r″/c;
- with momenta: per piece a polynomial of u = γβ in σ (u_coef[p, m, :]) and a Chebyshev
  series, in x = 2σ/w − 1 over the piece's width w, of c·∫β_u dt′ from the start of the
  position interval i = interval_of[p] (path_cheb[p, m, :], m); per position interval the
  slip D_i (s) that the velocity correction δβ = 30·D·y²(1 − y)²/h (y = τ/h, τ = t − t_i,
  h = t_{i+1} − t_i) adds over the interval, so r = r_i + c·∫β_u + c·D·(10y³ − 15y⁴ + 6y⁵).

Outside [breaks[0], breaks[-1]] the motion is ballistic: end position, velocity and 1/γ²
(ends_r (2, 3), ends_beta (2, 3), ends_inv_g2 (2,)), β̇ = 0.
"""

from __future__ import annotations

import math

import numpy as np

from ._jit import jit
from .pointwise import C


@jit
def find_piece(breaks, t):
    """Index p of the piece holding t: breaks[p] ≤ t < breaks[p+1], clipped to the pieces."""
    low = 0
    high = breaks.shape[0] - 2
    while low < high:
        middle = (low + high + 1) // 2
        if breaks[middle] <= t:
            low = middle
        else:
            high = middle - 1
    return low


@jit
def ballistic(t, breaks, ends_r, ends_beta, ends_inv_g2, j, pos, beta, inv_g2, beta_dot, ref,
              disp):
    """Write the ballistic extension at time t into row j of the outputs (reference −1,
    displacement 0); True if t lies outside the pieces (and the row was written)."""
    if t < breaks[0]:
        end = 0
    elif t > breaks[breaks.shape[0] - 1]:
        end = 1
    else:
        return False
    dt = t - breaks[0] if end == 0 else t - breaks[breaks.shape[0] - 1]
    for c in range(3):
        pos[j, c] = ends_r[end, c] + C * ends_beta[end, c] * dt
        beta[j, c] = ends_beta[end, c]
        beta_dot[j, c] = 0.0
        disp[j, c] = 0.0
    inv_g2[j] = ends_inv_g2[end]
    ref[j] = -1
    return True


@jit
def evaluate_positions(t, breaks, coef, ends_r, ends_beta, ends_inv_g2, pos, beta, inv_g2,
                       beta_dot, ref, disp):
    """Positions-only motion at times t (K,): pos (K, 3) m, beta (K, 3), inv_g2 (K,) =
    (1 − |β|)(1 + |β|), beta_dot (K, 3) 1/s; ref (K,) the piece p whose start (time
    breaks[p], position coef[p, 0]) is the sample's reference, and disp (K, 3) m the
    displacement from it, formed without adding the reference position (−1 and 0 on the
    ballistic extensions). coef (P, k+1, 3), breaks (P+1,)."""
    n_coef = coef.shape[1]
    for j in range(t.shape[0]):
        if ballistic(t[j], breaks, ends_r, ends_beta, ends_inv_g2, j, pos, beta, inv_g2,
                     beta_dot, ref, disp):
            continue
        p = find_piece(breaks, t[j])
        ref[j] = p
        s = t[j] - breaks[p]
        speed2 = 0.0
        for c in range(3):
            r = 0.0
            v = 0.0
            a = 0.0
            for m in range(n_coef - 1, 0, -1):  # Horner for r − r_p, r′, r″ together
                a = a * s + 2.0 * v
                v = v * s + r
                r = r * s + coef[p, m, c]
            a = a * s + 2.0 * v
            v = v * s + r
            disp[j, c] = r * s
            pos[j, c] = r * s + coef[p, 0, c]
            beta[j, c] = v / C
            beta_dot[j, c] = a / C
            speed2 += beta[j, c] * beta[j, c]
        speed = math.sqrt(speed2)
        inv_g2[j] = (1.0 - speed) * (1.0 + speed)


@jit
def chebyshev(coef, p, c, x):
    """Σ_m coef[p, m, c] T_m(x) by Clenshaw's recurrence."""
    b1 = 0.0
    b2 = 0.0
    for m in range(coef.shape[1] - 1, 0, -1):
        b1, b2 = 2.0 * x * b1 - b2 + coef[p, m, c], b1
    return x * b1 - b2 + coef[p, 0, c]


@jit
def evaluate_momenta(t, breaks, interval_of, knots, knot_r, slip_s, chord_slip_s, u_coef,
                     path_cheb, ends_r, ends_beta, ends_inv_g2, pos, beta, inv_g2, beta_dot,
                     ref, disp):
    """Motion with momenta at times t (K,); outputs as `evaluate_positions`, the reference
    of a sample being the start of its position interval (time knots[i], knot_r[i]).

    breaks (P+1,) pieces; interval_of (P,) position interval of each piece; knots (n,)
    sample times t_i; knot_r (n, 3) m; slip_s (n−1, 3) D_i, the slip the velocity carries;
    chord_slip_s (n−1, 3) the slip the path carries (it differs from D_i by a rounding
    slip's steady part, below what β can hold); u_coef
    (P, k+1, 3); path_cheb (P, M, 3) m."""
    n_coef = u_coef.shape[1]
    u = np.empty(3)
    du = np.empty(3)
    for j in range(t.shape[0]):
        if ballistic(t[j], breaks, ends_r, ends_beta, ends_inv_g2, j, pos, beta, inv_g2,
                     beta_dot, ref, disp):
            continue
        p = find_piece(breaks, t[j])
        i = interval_of[p]
        ref[j] = i
        s = t[j] - breaks[p]
        x = 2.0 * s / (breaks[p + 1] - breaks[p]) - 1.0
        h = knots[i + 1] - knots[i]
        y = (t[j] - knots[i]) / h
        bump = 30.0 * y * y * (1.0 - y) * (1.0 - y) / h  # δβ per second of slip
        bump_slope = 60.0 * y * (1.0 - y) * (1.0 - 2.0 * y) / (h * h)
        bump_area = y * y * y * (10.0 + y * (6.0 * y - 15.0))
        for c in range(3):
            value = 0.0
            slope = 0.0
            for m in range(n_coef - 1, -1, -1):  # Horner for u and u′ together
                slope = slope * s + value
                value = value * s + u_coef[p, m, c]
            u[c] = value
            du[c] = slope
            disp[j, c] = chebyshev(path_cheb, p, c, x) + C * chord_slip_s[i, c] * bump_area
            pos[j, c] = knot_r[i, c] + disp[j, c]
        u2 = u[0] * u[0] + u[1] * u[1] + u[2] * u[2]
        gamma = math.sqrt(1.0 + u2)
        u_du = (u[0] * du[0] + u[1] * du[1] + u[2] * du[2]) / (gamma * gamma)
        beta_d = 0.0
        d2 = 0.0
        for c in range(3):
            beta_u = u[c] / gamma
            d = slip_s[i, c] * bump
            beta[j, c] = beta_u + d
            beta_dot[j, c] = (du[c] - u[c] * u_du) / gamma + slip_s[i, c] * bump_slope
            beta_d += beta_u * d
            d2 += d * d
        inv_g2[j] = 1.0 / (1.0 + u2) - 2.0 * beta_d - d2

