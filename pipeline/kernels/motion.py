"""Evaluation of piecewise-polynomial motion: r, β, 1/γ², β̇ at source times.

Two kinds of motion, both built by `lagfield.motion`:

- positions only: per piece p (times breaks[p] … breaks[p+1]) a polynomial of the position
  in σ = t − breaks[p], coefficients ascending, coef[p, m, :] (m), so β = r′/c, β̇ = r″/c;
- with momenta: per piece a polynomial of u = γβ in σ (u_coef[p, m, :]) and a Chebyshev
  series, in x = 2σ/w − 1 over the piece's width w, of c·∫β_u dt′ from the start of the
  position interval i = interval_of[p] (path_cheb[p, m, :], m); per position interval the
  slip D_i (s) that the velocity correction δβ = 30·D·y²(1 − y)²/h (y = τ/h, τ = t − t_i,
  h = t_{i+1} − t_i) adds over the interval, so r = r_i + c·∫β_u + c·D·(10y³ − 15y⁴ + 6y⁵).

Outside [breaks[0], breaks[-1]] the motion is ballistic: end position, velocity and 1/γ²
(ends_r (2, 3), ends_beta (2, 3), ends_inv_g2 (2,)), β̇ = 0.

Compiled consumers take a motion as one record of two arrays, (header, values)
(`lagfield.motion.Motion.record`, built by `pack`): values (L,) float64 holds the FIELDS
one after the other, each in C order, and header (int64) their layout: the kind, the
counts of pieces, polynomial terms, series terms and samples, the offset of each field in
values, the length L, then interval_of (P,) (empty for positions only). Few arrays make a
compiled call cheap (each array argument costs several words and reference counting). A
motion is evaluated row by row with `state_into` (into row j of a state array
(N, STATE_WIDTH): columns POS, BETA, INV_G2, BETA_DOT, REF_T, REF_R, DISP; the fastest)
or `state_row` (into seven arrays), both inlined into their callers, or as 17 numbers by
`motion_state`. The motions built together from tracks sampled at the same times form a
group: one header, values (G, L) (`evaluate_states`, `velocity_changes`, `speed_suspects`
take it whole).
`chebyshev_fit` builds the path series of a group's pieces (`lagfield.motion.path_series`).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..constants import C
from ._jit import jit

# the evaluators of a row are inlined into their callers (numba IR): a call passing arrays
# costs more than the row's arithmetic
inline = jit(inline=True)

# work (motions × items) below which the group kernels run serially: a parallel region's
# fork and join cost more than a small group's arithmetic
PARALLEL_MIN_WORK = 20_000

# record header: kind, counts, then the offset in values of each field of FIELDS
KIND, PIECES, TERMS, SERIES, SAMPLES = 0, 1, 2, 3, 4
FIELDS = ("breaks", "coef", "knots", "knot_r", "slip_s", "chord_slip_s", "u_coef",
          "path_cheb", "start_offset", "ends_r", "ends_beta", "ends_inv_g2")
(BREAKS, COEF, KNOTS, KNOT_R, SLIP, CHORD_SLIP, U_COEF, PATH, START_OFFSET, ENDS_R,
 ENDS_BETA, ENDS_INV_G2) = range(5, 5 + len(FIELDS))
LENGTH = 5 + len(FIELDS)  # the length L of values
INTERVAL_OF = LENGTH + 1  # interval_of starts here
# columns of a state array (N, STATE_WIDTH)
POS, BETA, INV_G2, BETA_DOT, REF_T, REF_R, DISP = 0, 3, 6, 7, 10, 11, 14
STATE_WIDTH = 17


def pack(has_momentum: bool, interval_of, fields: dict, n_motions: int) -> tuple:
    """(header, values (G, L)) of G motions built together from `fields` (name of FIELDS:
    array with a leading motion axis of n_motions, or shared by all without it; a missing
    field is zeros: the ends, filled once evaluated), C-contiguous, one row per motion."""
    header = np.zeros(INTERVAL_OF + len(interval_of), dtype=np.int64)
    header[KIND] = int(has_momentum)
    header[PIECES] = fields["breaks"].shape[-1] - 1
    header[TERMS] = fields["u_coef" if has_momentum else "coef"].shape[-2]
    header[SERIES] = fields["path_cheb"].shape[-2] if has_momentum else 0
    header[SAMPLES] = fields["knots"].shape[-1] if has_momentum else 0
    header[INTERVAL_OF:] = interval_of
    blocks = []
    offset = 0
    for slot, name in enumerate(FIELDS, start=BREAKS):
        size = math.prod(field_shape(header, name))
        array = np.asarray(fields[name], dtype=float) if name in fields else np.zeros(size)
        rows = 1 if array.size == size else n_motions  # shared, or one per motion
        blocks.append(np.broadcast_to(array.reshape(rows, size), (n_motions, size)))
        header[slot] = offset
        offset += size
    header[LENGTH] = offset
    return header, np.ascontiguousarray(np.concatenate(blocks, axis=1))


def field_shape(header, name: str) -> tuple:
    """The shape of field `name` (FIELDS) of one motion of a record with this header."""
    pieces, terms, series = int(header[PIECES]), int(header[TERMS]), int(header[SERIES])
    samples = int(header[SAMPLES])
    intervals = max(samples - 1, 0)
    momenta = bool(header[KIND])
    return {"breaks": (pieces + 1,), "coef": (0 if momenta else pieces, terms, 3),
            "knots": (samples,), "knot_r": (samples, 3), "slip_s": (intervals, 3),
            "chord_slip_s": (intervals, 3), "u_coef": (pieces if momenta else 0, terms, 3),
            "path_cheb": (pieces if momenta else 0, series, 3), "start_offset": (samples, 3),
            "ends_r": (2, 3), "ends_beta": (2, 3), "ends_inv_g2": (2,)}[name]


def field(record, name: str) -> np.ndarray:
    """A view of field `name` of a record (header, values (L,) or (G, L)), shaped as in
    the module docstring, with the leading motion axis of a group's values."""
    header, values = record
    shape = field_shape(header, name)
    start = int(header[BREAKS + FIELDS.index(name)])
    part = values[..., start:start + math.prod(shape)]
    return part.reshape(values.shape[:-1] + shape)


@inline
def find_piece(values, first, count, t):
    """Index p of the piece holding t among the count breaks values[first:first + count]:
    break p ≤ t < break p+1, clipped to the pieces."""
    low = 0
    high = count - 2
    while low < high:
        middle = (low + high + 1) // 2
        if values[first + middle] <= t:
            low = middle
        else:
            high = middle - 1
    return low


@inline
def ballistic_state(header, values, t, end):
    """The state (module docstring: 17 numbers, STATE_WIDTH) on the ballistic extension
    past end 0 (first sample) or 1 (last): reference the end sample."""
    first = header[BREAKS]
    t_end = values[first] if end == 0 else values[first + header[PIECES]]
    dt = t - t_end
    r0 = header[ENDS_R] + 3 * end
    b0 = header[ENDS_BETA] + 3 * end
    x = values[r0] + C * values[b0] * dt
    y = values[r0 + 1] + C * values[b0 + 1] * dt
    z = values[r0 + 2] + C * values[b0 + 2] * dt
    return (x, y, z, values[b0], values[b0 + 1], values[b0 + 2],
            values[header[ENDS_INV_G2] + end], 0.0, 0.0, 0.0, t_end,
            values[r0], values[r0 + 1], values[r0 + 2],
            x - values[r0], y - values[r0 + 1], z - values[r0 + 2])


@inline
def _position_terms(values, base, terms, s):
    """Horner at σ = s for r − r_p, r′, r″ of the polynomial with coefficients
    values[base + 3m] (m = 0 … terms − 1)."""
    r = 0.0
    v = 0.0
    a = 0.0
    for m in range(terms - 1, 0, -1):
        a = a * s + 2.0 * v
        v = v * s + r
        r = r * s + values[base + 3 * m]
    a = a * s + 2.0 * v
    v = v * s + r
    return r * s, v, a


@inline
def positions_state(header, values, t):
    """The state of a positions-only motion at time t inside the pieces: inv_g2 =
    (1 − |β|)(1 + |β|), beta_dot 1/s, reference the start of the piece p holding t (time
    breaks[p], position coef[p, 0]), the displacement formed without adding it."""
    first = header[BREAKS]
    terms = header[TERMS]
    p = find_piece(values, first, header[PIECES] + 1, t)
    s = t - values[first + p]
    base = header[COEF] + 3 * terms * p
    dx, vx, ax = _position_terms(values, base, terms, s)
    dy, vy, ay = _position_terms(values, base + 1, terms, s)
    dz, vz, az = _position_terms(values, base + 2, terms, s)
    bx, by, bz = vx / C, vy / C, vz / C
    speed2 = 0.0
    speed2 += bx * bx
    speed2 += by * by
    speed2 += bz * bz
    speed = math.sqrt(speed2)
    return (dx + values[base], dy + values[base + 1], dz + values[base + 2], bx, by, bz,
            (1.0 - speed) * (1.0 + speed), ax / C, ay / C, az / C, values[first + p],
            values[base], values[base + 1], values[base + 2], dx, dy, dz)


@inline
def _momentum_terms(values, base, terms, s):
    """Horner at σ = s for u and u′ of the coefficients values[base + 3m]."""
    value = 0.0
    slope = 0.0
    for m in range(terms - 1, -1, -1):
        slope = slope * s + value
        value = value * s + values[base + 3 * m]
    return value, slope


@inline
def momenta_velocity(header, values, t, p, i):
    """(βx, βy, βz, 1/γ², β̇x, β̇y, β̇z) of a motion with momenta at time t in piece p of
    position interval i."""
    first = header[BREAKS]
    knots = header[KNOTS]
    terms = header[TERMS]
    s = t - values[first + p]
    h = values[knots + i + 1] - values[knots + i]
    y = (t - values[knots + i]) / h
    bump = 30.0 * y * y * (1.0 - y) * (1.0 - y) / h  # δβ per second of slip
    bump_slope = 60.0 * y * (1.0 - y) * (1.0 - 2.0 * y) / (h * h)
    base = header[U_COEF] + 3 * terms * p
    u0, du0 = _momentum_terms(values, base, terms, s)
    u1, du1 = _momentum_terms(values, base + 1, terms, s)
    u2_, du2 = _momentum_terms(values, base + 2, terms, s)
    u2 = u0 * u0 + u1 * u1 + u2_ * u2_
    gamma = math.sqrt(1.0 + u2)
    u_du = (u0 * du0 + u1 * du1 + u2_ * du2) / (gamma * gamma)
    slip = header[SLIP] + 3 * i
    bx, bdx, cross_x, dd_x = _corrected(u0, du0, u_du, gamma, values[slip], bump, bump_slope)
    by, bdy, cross_y, dd_y = _corrected(u1, du1, u_du, gamma, values[slip + 1], bump,
                                        bump_slope)
    bz, bdz, cross_z, dd_z = _corrected(u2_, du2, u_du, gamma, values[slip + 2], bump,
                                        bump_slope)
    beta_d = 0.0
    beta_d += cross_x
    beta_d += cross_y
    beta_d += cross_z
    d2 = 0.0
    d2 += dd_x
    d2 += dd_y
    d2 += dd_z
    return bx, by, bz, 1.0 / (1.0 + u2) - 2.0 * beta_d - d2, bdx, bdy, bdz


@inline
def _corrected(uc, duc, u_du, gamma, slip_c, bump, bump_slope):
    """One component: (β, β̇, β_u·δβ, δβ²) of β = β_u + δβ."""
    beta_u = uc / gamma
    d = slip_c * bump
    return (beta_u + d, (duc - uc * u_du) / gamma + slip_c * bump_slope, beta_u * d, d * d)


@inline
def chebyshev(values, base, terms, x):
    """Σ_m values[base + 3m] T_m(x) (m < terms) by Clenshaw's recurrence."""
    b1 = 0.0
    b2 = 0.0
    for m in range(terms - 1, 0, -1):
        b1, b2 = 2.0 * x * b1 - b2 + values[base + 3 * m], b1
    return x * b1 - b2 + values[base]


@inline
def momenta_state(header, values, t):
    """The state of a motion with momenta at time t inside the pieces; the reference is
    the row's position interval i (its start at time knots[i], position knot_r[i]), the
    displacement including start_offset[i]. knot_r (n, 3) m; slip_s (n−1, 3) D_i, the slip
    the velocity carries; chord_slip_s (n−1, 3) the slip the path carries (it differs from
    D_i by a rounding slip's steady part, below what β can hold); path_cheb (P, M, 3) m."""
    first = header[BREAKS]
    p = find_piece(values, first, header[PIECES] + 1, t)
    i = header[INTERVAL_OF + p]
    bx, by, bz, inv_g2, bdx, bdy, bdz = momenta_velocity(header, values, t, p, i)
    x = 2.0 * (t - values[first + p]) / (values[first + p + 1] - values[first + p]) - 1.0
    knots = header[KNOTS]
    y = (t - values[knots + i]) / (values[knots + i + 1] - values[knots + i])
    bump_area = y * y * y * (10.0 + y * (6.0 * y - 15.0))
    series = header[SERIES]
    path = header[PATH] + 3 * series * p
    chord = header[CHORD_SLIP] + 3 * i
    dx = chebyshev(values, path, series, x) + C * values[chord] * bump_area
    dy = chebyshev(values, path + 1, series, x) + C * values[chord + 1] * bump_area
    dz = chebyshev(values, path + 2, series, x) + C * values[chord + 2] * bump_area
    r = header[KNOT_R] + 3 * i
    offset = header[START_OFFSET] + 3 * i
    return (values[r] + dx, values[r + 1] + dy, values[r + 2] + dz, bx, by, bz, inv_g2,
            bdx, bdy, bdz, values[knots + i], values[r], values[r + 1], values[r + 2],
            dx + values[offset], dy + values[offset + 1], dz + values[offset + 2])


@inline
def motion_state(header, values, t):
    """The motion (header, values) at time t: (pos (3) m, beta (3), inv_g2, beta_dot (3)
    1/s, ref_t s, ref_r (3) m, disp (3) m) as 17 numbers in the columns of a state array,
    the row's reference (time ref_t, position ref_r) with the displacement disp = r − ref
    formed without adding the reference position. On the ballistic extensions the
    reference is the track's end sample."""
    first = header[BREAKS]
    if t < values[first]:
        return ballistic_state(header, values, t, 0)
    if t > values[first + header[PIECES]]:
        return ballistic_state(header, values, t, 1)
    if header[KIND]:
        return momenta_state(header, values, t)
    return positions_state(header, values, t)


@inline
def _put_state(row, state, j):
    """The 17 numbers `row` (`motion_state`) into row j of a state array."""
    for k in range(STATE_WIDTH):
        state[j, k] = row[k]


@inline
def _put_rows(row, j, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    """The 17 numbers `row` (`motion_state`) into row j of the outputs of `state_row`."""
    for c in range(3):
        pos[j, c] = row[POS + c]
        beta[j, c] = row[BETA + c]
        beta_dot[j, c] = row[BETA_DOT + c]
        ref_r[j, c] = row[REF_R + c]
        disp[j, c] = row[DISP + c]
    inv_g2[j] = row[INV_G2]
    ref_t[j] = row[REF_T]


@inline
def state_into(header, values, t, state, j):
    """The motion (header, values) at time t (`motion_state`) into row j of a state array
    (N, STATE_WIDTH). Inlined into its caller: a row costs its arithmetic only."""
    _put_state(motion_state(header, values, t), state, j)


@inline
def state_row(record, t, j, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    """The motion `record` ((header, values) of `lagfield.motion.Motion.record`) at time t
    into row j: pos (·, 3) m, beta (·, 3), inv_g2, beta_dot (·, 3) 1/s, ref_t, ref_r (·, 3),
    disp (·, 3) (see `motion_state`). Inlined into its caller, as `state_into`."""
    _put_rows(motion_state(record[0], record[1], t), j, pos, beta, inv_g2, beta_dot, ref_t,
              ref_r, disp)


@jit
def evaluate_state(header, values, t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    """`state_row` for every time of t (K,)."""
    for j in range(t.shape[0]):
        _put_rows(motion_state(header, values, t[j]), j, pos, beta, inv_g2, beta_dot, ref_t,
                  ref_r, disp)


@jit
def state_columns(state):
    """A state array (N, STATE_WIDTH) as the seven outputs of `state_row`: (pos (N, 3),
    beta (N, 3), inv_g2 (N,), beta_dot (N, 3), ref_t (N,), ref_r (N, 3), disp (N, 3)),
    each a contiguous copy."""
    rows = state.shape[0]
    pos, beta, beta_dot = np.empty((rows, 3)), np.empty((rows, 3)), np.empty((rows, 3))
    inv_g2, ref_t = np.empty(rows), np.empty(rows)
    ref_r, disp = np.empty((rows, 3)), np.empty((rows, 3))
    for j in range(rows):
        _put_rows(state[j], j, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp)
    return pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp


# ------------------------------------------------------------------ groups of motions
# A group holds the motions of tracks sampled at the same times: one header, values (G, L),
# the record of motion g being (header, values[g]).


@jit
def evaluate_states(header, values, t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    """`evaluate_state` of every motion g of a group at the times t (K,): outputs with a
    leading motion axis, pos (G, K, 3), inv_g2 (G, K), ..."""
    for g in range(values.shape[0]):
        evaluate_state(header, values[g], t, pos[g], beta[g], inv_g2[g], beta_dot[g],
                       ref_t[g], ref_r[g], disp[g])


@jit
def velocity_in(header, values, p, t):
    """(piece, βx, βy, βz, 1/γ²) of a motion at time t within the samples, as `state_row`
    gives them, the piece found from p on (times taken in ascending order)."""
    first = header[BREAKS]
    last = header[PIECES] - 1
    while p < last and values[first + p + 1] <= t:  # the piece of find_piece
        p += 1
    if header[KIND]:
        bx, by, bz, inv_g2 = momenta_velocity(header, values, t, p, header[INTERVAL_OF + p])[:4]
    else:
        bx, by, bz, inv_g2 = positions_state(header, values, t)[3:7]
    return p, bx, by, bz, inv_g2


@jit
def velocity_changes(header, values, t, change):
    """change[g, i] = β(t[i+1]) − β(t[i]) of every motion g of a group, t (K,) ascending
    within the samples; change (G, K−1, 3)."""
    for g in range(values.shape[0]):
        motion = values[g]
        p, bx, by, bz, _ = velocity_in(header, motion, 0, t[0])
        for j in range(1, t.shape[0]):
            p, nx, ny, nz, _ = velocity_in(header, motion, p, t[j])
            change[g, j - 1, 0] = nx - bx
            change[g, j - 1, 1] = ny - by
            change[g, j - 1, 2] = nz - bz
            bx, by, bz = nx, ny, nz


@jit
def _suspect(header, motion, t, margin):
    """True where the motion may reach c at a time of t (see `speed_suspects`)."""
    p = 0
    for j in range(t.shape[0]):
        p, bx, by, bz, inv_g2 = velocity_in(header, motion, p, t[j])
        speed2 = bx * bx + by * by + bz * bz
        if not (inv_g2 > 0.0) or not (speed2 < 1.0 - margin):
            return True
    return False


@jit
def _suspects_serial(header, values, t, margin, out):
    for g in range(values.shape[0]):
        out[g] = _suspect(header, values[g], t, margin)


@jit(parallel=True)
def _suspects_parallel(header, values, t, margin, out):
    for g in numba.prange(values.shape[0]):
        out[g] = _suspect(header, values[g], t, margin)


def speed_suspects(header, values, t, margin, out):
    """out[g] = True where motion g of a group may reach c at a time of t (ascending,
    within the samples): 1/γ² ≤ 0, or |β|² ≥ 1 − margin (a wider net than the exact
    check, which the caller then makes). In parallel over the motions of a large group."""
    driver = (_suspects_parallel if values.shape[0] * t.shape[0] >= PARALLEL_MIN_WORK
              else _suspects_serial)
    driver(header, values, t, margin, out)


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
def _fit_motion(u_coef, g, width_s, node_x, basis, check_x, vander, path, error, size):
    """`chebyshev_fit` of motion g."""
    nodes = basis.shape[0]
    beta = np.empty((nodes, 3))
    series = np.empty((1, nodes, 3))
    exact = np.empty((1, 3))
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
def _fit_serial(u_coef, width_s, node_x, basis, check_x, vander, path, error, size):
    for g in range(u_coef.shape[0]):
        _fit_motion(u_coef, g, width_s, node_x, basis, check_x, vander, path, error, size)


@jit(parallel=True)
def _fit_parallel(u_coef, width_s, node_x, basis, check_x, vander, path, error, size):
    for g in numba.prange(u_coef.shape[0]):
        _fit_motion(u_coef, g, width_s, node_x, basis, check_x, vander, path, error, size)


def chebyshev_fit(u_coef, width_s, node_x, basis, check_x, vander, path, error, size):
    """c·∫β_u dt′ from each piece's start, β_u = u/√(1 + u²), on every piece p of every
    motion g of a group, as a Chebyshev series in x = 2σ/w − 1: u_coef (G, P, k+1, 3) of
    u in σ; width_s (P,) w; basis (M, M) the series coefficients of the values at the M
    Chebyshev nodes node_x (x_j = cos(π(j + ½)/M)); into path (G, P, M+1, 3) m. With the series of
    β_u, at the points check_x (J,), where vander (J, M) gives its values: the largest
    error |fit − β_u| (error (G, P)) and the largest |β_u| (size (G, P)). In parallel over
    the motions of a large group (each motion's result is the same either way)."""
    work = u_coef.shape[0] * u_coef.shape[1] * basis.shape[0] * basis.shape[0]
    driver = _fit_parallel if work >= PARALLEL_MIN_WORK else _fit_serial
    driver(u_coef, width_s, node_x, basis, check_x, vander, path, error, size)


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
        out[p, 0, c] = -chebyshev(out[p].reshape(-1), c, nodes + 1, -1.0)
        for m in range(nodes + 1):
            out[p, m, c] *= scale
