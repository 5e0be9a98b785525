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
empty, and evaluate it row by row with `state_row`. The motions built together from
tracks sampled at the same times form a group (`evaluate_states`, `velocity_changes`,
`speed_suspects` take it whole): its record has the same fields, breaks, interval_of and
knots shared, every other array with a leading motion axis. `chebyshev_fit` builds the
path series of a group's pieces (`lagfield.motion.path_series`).
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
def momenta_velocity(t, p, i, breaks, knots, slip_s, u_coef, j, beta, inv_g2, beta_dot):
    """The velocity part of `momenta_row` at time t in piece p of position interval i:
    beta, inv_g2, beta_dot of row j."""
    n_coef = u_coef.shape[1]
    s = t - breaks[p]
    h = knots[i + 1] - knots[i]
    y = (t - knots[i]) / h
    bump = 30.0 * y * y * (1.0 - y) * (1.0 - y) / h  # δβ per second of slip
    bump_slope = 60.0 * y * (1.0 - y) * (1.0 - 2.0 * y) / (h * h)
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
    p = find_piece(breaks, t)
    i = interval_of[p]
    momenta_velocity(t, p, i, breaks, knots, slip_s, u_coef, j, beta, inv_g2, beta_dot)
    x = 2.0 * (t - breaks[p]) / (breaks[p + 1] - breaks[p]) - 1.0
    y = (t - knots[i]) / (knots[i + 1] - knots[i])
    bump_area = y * y * y * (10.0 + y * (6.0 * y - 15.0))
    for c in range(3):
        disp[j, c] = chebyshev(path_cheb, p, c, x) + C * chord_slip_s[i, c] * bump_area
        pos[j, c] = knot_r[i, c] + disp[j, c]
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


# ------------------------------------------------------------------ groups of motions
# A group holds the motions of tracks sampled at the same times: breaks, interval_of and
# knots are shared, every other array of the record has a leading motion axis g (the
# record of motion g is the shared arrays with the others' [g]).


@jit
def scratch(rows):
    """Output rows for `state_row`: (pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp)."""
    return (np.empty((rows, 3)), np.empty((rows, 3)), np.empty(rows), np.empty((rows, 3)),
            np.empty(rows), np.empty((rows, 3)), np.empty((rows, 3)))


@jit
def member(has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s, chord_slip_s,
           u_coef, path_cheb, start_offset, ends_r, ends_beta, ends_inv_g2, g):
    """The record of motion g of a group."""
    return (has_momentum, breaks, coef[g], interval_of, knots, knot_r[g], slip_s[g],
            chord_slip_s[g], u_coef[g], path_cheb[g], start_offset[g], ends_r[g],
            ends_beta[g], ends_inv_g2[g])


@jit
def evaluate_states(has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s,
                    chord_slip_s, u_coef, path_cheb, start_offset, ends_r, ends_beta,
                    ends_inv_g2, t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    """`evaluate_state` of every motion g of a group at the times t (K,): outputs with a
    leading motion axis, pos (G, K, 3), inv_g2 (G, K), ..."""
    for g in range(ends_r.shape[0]):
        motion = member(has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s,
                        chord_slip_s, u_coef, path_cheb, start_offset, ends_r, ends_beta,
                        ends_inv_g2, g)
        for j in range(t.shape[0]):
            state_row(motion, t[j], j, pos[g], beta[g], inv_g2[g], beta_dot[g], ref_t[g],
                      ref_r[g], disp[g])


@jit
def velocity_changes(has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s,
                     chord_slip_s, u_coef, path_cheb, start_offset, ends_r, ends_beta,
                     ends_inv_g2, t, change):
    """change[g, i] = β(t[i+1]) − β(t[i]) of every motion g of a group, t (K,) ascending
    within the samples; change (G, K−1, 3)."""
    pos, beta, inv_g2, beta_dot, _, _, disp = scratch(2)
    for g in range(ends_r.shape[0]):
        p = 0
        for j in range(t.shape[0]):
            p = velocity_in(has_momentum, breaks, coef, interval_of, knots, slip_s, u_coef,
                            g, p, t[j], j % 2, pos, beta, inv_g2, beta_dot, disp)
            for c in range(3):
                if j > 0:
                    change[g, j - 1, c] = beta[j % 2, c] - beta[1 - j % 2, c]


@jit
def velocity_in(has_momentum, breaks, coef, interval_of, knots, slip_s, u_coef, g, p, t,
                j, pos, beta, inv_g2, beta_dot, disp):
    """β, 1/γ², β̇ of motion g of a group at time t within the samples into row j, as
    `state_row` gives them, the piece found from p on (times taken in ascending order);
    returns the piece."""
    last = breaks.shape[0] - 2
    while p < last and breaks[p + 1] <= t:  # the piece of find_piece
        p += 1
    if has_momentum:
        momenta_velocity(t, p, interval_of[p], breaks, knots, slip_s[g], u_coef[g], j, beta,
                         inv_g2, beta_dot)
    else:
        positions_row(t, breaks, coef[g], j, pos, beta, inv_g2, beta_dot, disp)
    return p


@jit
def speed_suspects(has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s,
                   chord_slip_s, u_coef, path_cheb, start_offset, ends_r, ends_beta,
                   ends_inv_g2, t, margin, out):
    """out[g] = True where motion g of a group may reach c at a time of t (ascending,
    within the samples): 1/γ² ≤ 0, or |β|² ≥ 1 − margin (a wider net than the exact
    check, which the caller then makes)."""
    pos, beta, inv_g2, beta_dot, _, _, disp = scratch(1)
    for g in range(ends_r.shape[0]):
        out[g] = False
        p = 0
        for j in range(t.shape[0]):
            p = velocity_in(has_momentum, breaks, coef, interval_of, knots, slip_s, u_coef,
                            g, p, t[j], 0, pos, beta, inv_g2, beta_dot, disp)
            speed2 = beta[0, 0] * beta[0, 0] + beta[0, 1] * beta[0, 1] + beta[0, 2] * beta[0, 2]
            if not (inv_g2[0] > 0.0) or not (speed2 < 1.0 - margin):
                out[g] = True
                break


@jit
def velocity_at(u_coef, g, p, sigma, beta, j):
    """β = u/√(1 + u²) of piece p of motion g (u_coef (G, P, k+1, 3)) at σ into beta[j]."""
    u2 = 0.0
    for c in range(3):
        value = 0.0
        for m in range(u_coef.shape[2] - 1, -1, -1):
            value = value * sigma + u_coef[g, p, m, c]
        beta[j, c] = value
        u2 += value * value
    root = math.sqrt(1.0 + u2)
    for c in range(3):
        beta[j, c] /= root


@jit
def chebyshev_fit(u_coef, width_s, node_x, basis, check_x, vander, path, error, size):
    """c·∫β_u dt′ from each piece's start, β_u = u/√(1 + u²), on every piece p of every
    motion g of a group, as a Chebyshev series in x = 2σ/w − 1: u_coef (G, P, k+1, 3) of
    u in σ; width_s (P,) w; basis (M, M) the series coefficients of the values at the M
    Chebyshev nodes node_x (x_j = cos(π(j + ½)/M)); into path (G, P, M+1, 3) m. With the series of
    β_u, at the points check_x (J,), where vander (J, M) gives its values: the largest
    error |fit − β_u| (error (G, P)) and the largest |β_u| (size (G, P))."""
    nodes = basis.shape[0]
    beta = np.empty((nodes, 3))
    series = np.empty((1, nodes, 3))
    exact = np.empty((1, 3))
    for g in range(u_coef.shape[0]):
        for p in range(u_coef.shape[1]):
            w = width_s[p]
            for j in range(nodes):
                velocity_at(u_coef, g, p, 0.5 * (node_x[j] + 1.0) * w, beta, j)
            for m in range(nodes):
                for c in range(3):
                    total = 0.0
                    for j in range(nodes):
                        total += basis[m, j] * beta[j, c]
                    series[0, m, c] = total
            worst = 0.0
            largest = 0.0
            for j in range(check_x.shape[0]):
                velocity_at(u_coef, g, p, 0.5 * (check_x[j] + 1.0) * w, exact, 0)
                for c in range(3):
                    fitted = 0.0
                    for m in range(nodes):
                        fitted += vander[j, m] * series[0, m, c]
                    worst = max(worst, abs(fitted - exact[0, c]))
                    largest = max(largest, abs(exact[0, c]))
            error[g, p] = worst
            size[g, p] = largest
            integrate(series, path[g], p, 0.5 * C * w)


@jit
def integrate(series, out, p, scale):
    """out[p] = scale × the integral from x = −1 of the Chebyshev series series[0] (M, 3):
    (M+1, 3), by ∫T_m = T_{m+1}/(2(m+1)) − T_{m−1}/(2(m−1)) (∫T_0 = T_1, ∫T_1 = T_2/4)."""
    nodes = series.shape[1]
    for c in range(3):
        for m in range(nodes + 1):
            out[p, m, c] = 0.0
        out[p, 1, c] = series[0, 0, c]
        if nodes > 1:
            out[p, 2, c] = series[0, 1, c] / 4.0
        for m in range(2, nodes):
            out[p, m + 1, c] = series[0, m, c] / (2.0 * (m + 1))
            out[p, m - 1, c] -= series[0, m, c] / (2.0 * (m - 1))
        out[p, 0, c] = -chebyshev(out, p, c, -1.0)
        for m in range(nodes + 1):
            out[p, m, c] *= scale
