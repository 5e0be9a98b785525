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

Compiled consumers take a motion as one record (a tuple, `lagfield.motion.Motion.record`):
(has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s, chord_slip_s, u_coef,
path_cheb, start_offset, ends_r, ends_beta, ends_inv_g2), the arrays of the other kind
empty, and evaluate it row by row with `state_row`.
"""

from __future__ import annotations

import math

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
def ballistic(t, breaks, ends_r, ends_beta, ends_inv_g2, j, pos, beta, inv_g2, beta_dot):
    """Write the ballistic extension at time t into row j of the outputs; True if t lies
    outside the pieces (and the row was written)."""
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
    inv_g2[j] = ends_inv_g2[end]
    return True


@jit
def positions_row(t, breaks, coef, j, pos, beta, inv_g2, beta_dot, disp):
    """Positions-only motion at time t (inside the pieces) into row j: pos m, beta,
    inv_g2 = (1 − |β|)(1 + |β|), beta_dot 1/s, disp[j] m the displacement from the row's
    reference, formed without adding the reference position; returns that reference: the
    piece p whose start (time breaks[p], position coef[p, 0]) it is. coef (P, k+1, 3),
    breaks (P+1,)."""
    n_coef = coef.shape[1]
    p = find_piece(breaks, t)
    s = t - breaks[p]
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
    return p


@jit
def chebyshev(coef, p, c, x):
    """Σ_m coef[p, m, c] T_m(x) by Clenshaw's recurrence."""
    b1 = 0.0
    b2 = 0.0
    for m in range(coef.shape[1] - 1, 0, -1):
        b1, b2 = 2.0 * x * b1 - b2 + coef[p, m, c], b1
    return x * b1 - b2 + coef[p, 0, c]


@jit
def momenta_row(t, breaks, interval_of, knots, knot_r, slip_s, chord_slip_s, u_coef,
                path_cheb, j, pos, beta, inv_g2, beta_dot, disp):
    """Motion with momenta at time t (inside the pieces) into row j; outputs as
    `positions_row`, the reference returned being the row's position interval i (its start
    at time knots[i], position knot_r[i]).

    breaks (P+1,) pieces; interval_of (P,) position interval of each piece; knots (n,)
    sample times t_i; knot_r (n, 3) m; slip_s (n−1, 3) D_i, the slip the velocity carries;
    chord_slip_s (n−1, 3) the slip the path carries (it differs from D_i by a rounding
    slip's steady part, below what β can hold); u_coef (P, k+1, 3); path_cheb (P, M, 3) m."""
    n_coef = u_coef.shape[1]
    p = find_piece(breaks, t)
    i = interval_of[p]
    s = t - breaks[p]
    x = 2.0 * s / (breaks[p + 1] - breaks[p]) - 1.0
    h = knots[i + 1] - knots[i]
    y = (t - knots[i]) / h
    bump = 30.0 * y * y * (1.0 - y) * (1.0 - y) / h  # δβ per second of slip
    bump_slope = 60.0 * y * (1.0 - y) * (1.0 - 2.0 * y) / (h * h)
    bump_area = y * y * y * (10.0 + y * (6.0 * y - 15.0))
    u0 = u1 = u2_ = 0.0
    du0 = du1 = du2 = 0.0
    for c in range(3):
        value = 0.0
        slope = 0.0
        for m in range(n_coef - 1, -1, -1):  # Horner for u and u′ together
            slope = slope * s + value
            value = value * s + u_coef[p, m, c]
        if c == 0:
            u0, du0 = value, slope
        elif c == 1:
            u1, du1 = value, slope
        else:
            u2_, du2 = value, slope
        disp[j, c] = chebyshev(path_cheb, p, c, x) + C * chord_slip_s[i, c] * bump_area
        pos[j, c] = knot_r[i, c] + disp[j, c]
    u2 = u0 * u0 + u1 * u1 + u2_ * u2_
    gamma = math.sqrt(1.0 + u2)
    u_du = (u0 * du0 + u1 * du1 + u2_ * du2) / (gamma * gamma)
    beta_d = 0.0
    d2 = 0.0
    for c in range(3):
        uc = u0 if c == 0 else (u1 if c == 1 else u2_)
        duc = du0 if c == 0 else (du1 if c == 1 else du2)
        beta_u = uc / gamma
        d = slip_s[i, c] * bump
        beta[j, c] = beta_u + d
        beta_dot[j, c] = (duc - uc * u_du) / gamma + slip_s[i, c] * bump_slope
        beta_d += beta_u * d
        d2 += d * d
    inv_g2[j] = 1.0 / (1.0 + u2) - 2.0 * beta_d - d2
    return i


@jit
def state_row(motion, t, j, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    """The motion `motion` (the record of `lagfield.motion.Motion.record`) at time t into
    row j: pos (·, 3) m, beta (·, 3), inv_g2, beta_dot (·, 3) 1/s, and the row's
    reference (time ref_t[j], position ref_r[j]) with the displacement disp[j] = r − ref
    formed without adding the reference position. On the ballistic extensions the
    reference is the track's end sample."""
    (has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s, chord_slip_s, u_coef,
     path_cheb, start_offset, ends_r, ends_beta, ends_inv_g2) = motion
    if ballistic(t, breaks, ends_r, ends_beta, ends_inv_g2, j, pos, beta, inv_g2, beta_dot):
        end = 0 if t < breaks[0] else 1
        ref_t[j] = breaks[0] if end == 0 else breaks[breaks.shape[0] - 1]
        for c in range(3):
            ref_r[j, c] = ends_r[end, c]
            disp[j, c] = pos[j, c] - ends_r[end, c]
    elif has_momentum:
        i = momenta_row(t, breaks, interval_of, knots, knot_r, slip_s, chord_slip_s, u_coef,
                        path_cheb, j, pos, beta, inv_g2, beta_dot, disp)
        ref_t[j] = knots[i]
        for c in range(3):
            ref_r[j, c] = knot_r[i, c]
            disp[j, c] += start_offset[i, c]
    else:
        p = positions_row(t, breaks, coef, j, pos, beta, inv_g2, beta_dot, disp)
        ref_t[j] = breaks[p]
        for c in range(3):
            ref_r[j, c] = coef[p, 0, c]


@jit
def evaluate_state(has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s,
                   chord_slip_s, u_coef, path_cheb, start_offset, ends_r, ends_beta,
                   ends_inv_g2, t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    """`state_row` for every time of t (K,); the record's fields passed one by one (a
    call from Python types a tuple argument slowly)."""
    motion = (has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s, chord_slip_s,
              u_coef, path_cheb, start_offset, ends_r, ends_beta, ends_inv_g2)
    for j in range(t.shape[0]):
        state_row(motion, t[j], j, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp)
