"""Bin-averaged Liénard–Wiechert fields by exact primitives in observer time.

For one charge, with R, n from the retarded position to the observer, κ = 1 − n·β and
observer time t = t′ + R/c, the field integrated over observer time between the observer
times of two source times a < b is (a consequence of Feynman's form of the retarded field;
the kernels are checked against the pointwise Liénard–Wiechert formula in the tests)

    ∫E dt = q/(4πε0)     · { ∫ₐᵇ n/R² dt′ + [ n/(cR) + n×(n×β)/(cκR) ]ₐᵇ }
    ∫B dt = q/(4πε0 c)   · { −∫ₐᵇ n×β/R² dt′ − [ n×β/(cκR) ]ₐᵇ }.

The bracket terms are exact; the source-time integrals have a smooth integrand (no κ) and
are done by the trapezoid rule with its Euler–Maclaurin end correction (error O(h⁴)). So the
area ∫E dt of any pulse, however short, is kept whatever the observer step. Between two
source samples the primitive is interpolated in observer time by a cubic Hermite
polynomial whose end slopes are the pointwise fields, which places bin edges accurately.

In the far-field approximation (n and R₀ fixed per point, t = t′ + (R₀ − n·(r − O))/c, the
radiation term only) the primitive is exactly q/(4πε0 c R₀) · n×(n×β)/κ.

Outputs are accumulated per point p and bin k into out[p, k, 0:3] (∫E dt / (q/4πε0)) and
out[p, k, 3:6] (∫B dt / (q/4πε0 c)), times `scale[m]` of particle m; the caller divides by
the step and multiplies by the constants. Bins of point p have edges
edge0[p] + k·step, k = 0 … n_bins[p].
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ._jit import jit

C = 299792458.0  # m/s, scipy.constants.c (kept literal so the kernels need no import)


@jit
def _deposit_segment(out_p, ta, tb, dp, ea, eb, w, edge0, step, n_bins):
    """Add w times the increment dp[6] of the primitive between observer times ta < tb
    to the bins it covers; ea, eb are its slopes (pointwise fields) at both ends."""
    ka = math.floor((ta - edge0) / step)
    kb = math.floor((tb - edge0) / step)
    if ka == kb:
        if 0 <= ka < n_bins:
            for c in range(6):
                out_p[ka, c] += w * dp[c]
        return
    h = tb - ta
    previous_s = 0.0
    previous_h01 = 0.0
    previous_h10 = 0.0
    previous_h11 = 0.0
    for edge in range(ka + 1, kb + 1):
        s = (edge0 + edge * step - ta) / h
        if s < 0.0:
            s = 0.0
        elif s > 1.0:
            s = 1.0
        one_minus = 1.0 - s
        h01 = s * s * (3.0 - 2.0 * s)
        h10 = s * one_minus * one_minus
        h11 = -s * s * one_minus
        k = edge - 1
        if 0 <= k < n_bins:
            for c in range(6):
                out_p[k, c] += w * ((h01 - previous_h01) * dp[c]
                                    + h * ((h10 - previous_h10) * ea[c]
                                           + (h11 - previous_h11) * eb[c]))
        previous_s, previous_h01, previous_h10, previous_h11 = s, h01, h10, h11
    if 0 <= kb < n_bins and previous_s < 1.0:
        for c in range(6):
            out_p[kb, c] += w * ((1.0 - previous_h01) * dp[c]
                                 - h * (previous_h10 * ea[c] + previous_h11 * eb[c]))


# ------------------------------------------------------------------ near-field kernel
# LLVM vectorises a loop only if it can rule out overlap between the arrays it reads and
# writes; with separate 2D arrays (runtime row strides) that takes one runtime check per
# pair of streams and it gives up. So the per-sample passes read one flat array and write
# another, each made of rows at compile-time constant offsets (CHUNK, BLOCK): the
# dependence distances are then known constants and no runtime check is needed.
CHUNK = 8192  # source samples per structure-of-arrays copy, shared by all points
BLOCK = 256  # samples per per-point block: the block scratch stays in the L1 cache
# rows of the chunk copy (stride CHUNK); HALF_H, H2_12 belong to segment j → j+1
T, X, Y, Z, BX, BY, BZ, IG2, AX, AY, AZ, HALF_H, H2_12 = range(13)
CHUNK_ROWS = 13
# rows of the block scratch (stride BLOCK): primitive q, integrand f, its derivative g,
# observer time, bin index (as float), scaled segment increments
Q, F, G, T_OBS, BIN, INC = 0, 6, 12, 18, 19, 20
BLOCK_ROWS = 26
INV_C = 1.0 / C


@jit
def _copy_chunk(t, pos, beta, inv_g2, beta_dot, lo, hi, soa):
    """Copy samples lo … hi−1 into the rows of soa (and the trapezoid weights of the
    segments between them), so that every point's passes read unit-stride rows."""
    for i in range(hi - lo):
        j = lo + i
        soa[T * CHUNK + i] = t[j]
        soa[X * CHUNK + i] = pos[j, 0]
        soa[Y * CHUNK + i] = pos[j, 1]
        soa[Z * CHUNK + i] = pos[j, 2]
        soa[BX * CHUNK + i] = beta[j, 0]
        soa[BY * CHUNK + i] = beta[j, 1]
        soa[BZ * CHUNK + i] = beta[j, 2]
        soa[IG2 * CHUNK + i] = inv_g2[j]
        soa[AX * CHUNK + i] = beta_dot[j, 0]
        soa[AY * CHUNK + i] = beta_dot[j, 1]
        soa[AZ * CHUNK + i] = beta_dot[j, 2]
    for i in range(hi - lo - 1):
        h = t[lo + i + 1] - t[lo + i]
        soa[HALF_H * CHUNK + i] = 0.5 * h
        soa[H2_12 * CHUNK + i] = h * h / 12.0


@jit
def _near_samples(ox, oy, oz, soa, count, edge0, step, scratch):
    """Per-sample primitive, integrand and derivative of the first `count` samples of soa
    (a chunk copy, viewed from the block's first sample) seen from (ox, oy, oz), with
    observer time and bin index, into the block scratch (all per q/(4πε0)). One flat loop
    with non-negative indices only (no gathers) and few divisions, so it vectorises."""
    for i in range(count):
        j = i
        dx = ox - soa[X * CHUNK + j]
        dy = oy - soa[Y * CHUNK + j]
        dz = oz - soa[Z * CHUNK + j]
        r = math.sqrt(dx * dx + dy * dy + dz * dz)
        inv_r = 1.0 / r
        nx = dx * inv_r
        ny = dy * inv_r
        nz = dz * inv_r
        bx = soa[BX * CHUNK + j]
        by = soa[BY * CHUNK + j]
        bz = soa[BZ * CHUNK + j]
        nb = nx * bx + ny * by + nz * bz
        cx = ny * bz - nz * by  # n × β
        cy = nz * bx - nx * bz
        cz = nx * by - ny * bx
        # κ = 1 − n·β = (1/γ² + |n×β|²)/(1 + n·β), without cancellation
        inv_kappa = (1.0 + nb) / (soa[IG2 * CHUNK + j] + cx * cx + cy * cy + cz * cz)
        inv_cr = inv_r * INV_C
        inv_ckr = inv_cr * inv_kappa
        # bracket terms: n/(cR) + n×(n×β)/(cκR) with n×(n×β) = n(n·β) − β; −n×β/(cκR)
        scratch[(Q + 0) * BLOCK + i] = nx * inv_cr + (nx * nb - bx) * inv_ckr
        scratch[(Q + 1) * BLOCK + i] = ny * inv_cr + (ny * nb - by) * inv_ckr
        scratch[(Q + 2) * BLOCK + i] = nz * inv_cr + (nz * nb - bz) * inv_ckr
        scratch[(Q + 3) * BLOCK + i] = -cx * inv_ckr
        scratch[(Q + 4) * BLOCK + i] = -cy * inv_ckr
        scratch[(Q + 5) * BLOCK + i] = -cz * inv_ckr
        inv_r2 = inv_r * inv_r
        scratch[(F + 0) * BLOCK + i] = nx * inv_r2
        scratch[(F + 1) * BLOCK + i] = ny * inv_r2
        scratch[(F + 2) * BLOCK + i] = nz * inv_r2
        scratch[(F + 3) * BLOCK + i] = -cx * inv_r2
        scratch[(F + 4) * BLOCK + i] = -cy * inv_r2
        scratch[(F + 5) * BLOCK + i] = -cz * inv_r2
        # d/dt′ (n/R²) = c(3n(n·β) − β)/R³ ;  d/dt′ (n×β/R²) = 3c(n·β)(n×β)/R³ + n×β̇/R²
        ax = soa[AX * CHUNK + j]
        ay = soa[AY * CHUNK + j]
        az = soa[AZ * CHUNK + j]
        c_r3 = C * inv_r2 * inv_r
        scratch[(G + 0) * BLOCK + i] = c_r3 * (3.0 * nx * nb - bx)
        scratch[(G + 1) * BLOCK + i] = c_r3 * (3.0 * ny * nb - by)
        scratch[(G + 2) * BLOCK + i] = c_r3 * (3.0 * nz * nb - bz)
        scratch[(G + 3) * BLOCK + i] = -(3.0 * nb * cx * c_r3 + (ny * az - nz * ay) * inv_r2)
        scratch[(G + 4) * BLOCK + i] = -(3.0 * nb * cy * c_r3 + (nz * ax - nx * az) * inv_r2)
        scratch[(G + 5) * BLOCK + i] = -(3.0 * nb * cz * c_r3 + (nx * ay - ny * ax) * inv_r2)
        t_obs = soa[T * CHUNK + j] + r / C
        scratch[T_OBS * BLOCK + i] = t_obs
        scratch[BIN * BLOCK + i] = np.floor((t_obs - edge0) / step)


@jit
def _near_increments(soa, count, w, scratch):
    """Row INC + c: w times the primitive's change over segment i → i+1 (bracket
    difference plus the trapezoid rule with its Euler–Maclaurin correction)."""
    for i in range(count - 1):
        half_h = soa[HALF_H * CHUNK + i]
        h2_12 = soa[H2_12 * CHUNK + i]
        for c in range(6):
            a = c * BLOCK + i
            scratch[(INC + c) * BLOCK + i] = w * (
                (scratch[Q * BLOCK + a + 1] - scratch[Q * BLOCK + a])
                + half_h * (scratch[F * BLOCK + a] + scratch[F * BLOCK + a + 1])
                + h2_12 * (scratch[G * BLOCK + a] - scratch[G * BLOCK + a + 1]))


@jit
def _near_field(ox, oy, oz, soa, j, e):
    """Pointwise field at chunk sample j, e[0:3] = E, e[3:6] = n×E, per q/(4πε0): the
    slopes of the primitive, needed only where a segment crosses a bin edge."""
    dx = ox - soa[X * CHUNK + j]
    dy = oy - soa[Y * CHUNK + j]
    dz = oz - soa[Z * CHUNK + j]
    r = math.sqrt(dx * dx + dy * dy + dz * dz)
    inv_r = 1.0 / r
    nx = dx * inv_r
    ny = dy * inv_r
    nz = dz * inv_r
    bx = soa[BX * CHUNK + j]
    by = soa[BY * CHUNK + j]
    bz = soa[BZ * CHUNK + j]
    ax = soa[AX * CHUNK + j]
    ay = soa[AY * CHUNK + j]
    az = soa[AZ * CHUNK + j]
    inv_g2 = soa[IG2 * CHUNK + j]
    nb = nx * bx + ny * by + nz * bz
    cx = ny * bz - nz * by
    cy = nz * bx - nx * bz
    cz = nx * by - ny * bx
    inv_kappa = (1.0 + nb) / (inv_g2 + cx * cx + cy * cy + cz * cz)
    # (n−β)/(γ²κ³R²) + n×((n−β)×β̇)/(cκ³R)
    inv_k3 = inv_kappa * inv_kappa * inv_kappa
    mx = nx - bx
    my = ny - by
    mz = nz - bz
    wx = my * az - mz * ay  # (n−β)×β̇
    wy = mz * ax - mx * az
    wz = mx * ay - my * ax
    vel = inv_g2 * inv_k3 * inv_r * inv_r
    rad = inv_k3 * inv_r * INV_C
    e[0] = mx * vel + (ny * wz - nz * wy) * rad
    e[1] = my * vel + (nz * wx - nx * wz) * rad
    e[2] = mz * vel + (nx * wy - ny * wx) * rad
    e[3] = ny * e[2] - nz * e[1]
    e[4] = nz * e[0] - nx * e[2]
    e[5] = nx * e[1] - ny * e[0]


@jit
def _near_deposit(out_p, ox, oy, oz, soa, count, scratch, w, edge0, step, n_bins,
                  dp, ea, eb):
    """Add the block's count−1 segments to the bins, in order. Runs of segments inside one
    bin are summed in six local accumulators (the same additions in the same order as
    adding to out_p one by one, without a store and reload per segment); a segment
    crossing an edge is split by `_deposit_segment`."""
    current = -1
    a0 = a1 = a2 = a3 = a4 = a5 = 0.0
    for i in range(count - 1):
        ka = scratch[BIN * BLOCK + i]
        if ka == scratch[BIN * BLOCK + i + 1]:
            if 0.0 <= ka < n_bins:
                k = int(ka)
                if k != current:
                    if current >= 0:
                        out_p[current, 0] = a0
                        out_p[current, 1] = a1
                        out_p[current, 2] = a2
                        out_p[current, 3] = a3
                        out_p[current, 4] = a4
                        out_p[current, 5] = a5
                    current = k
                    a0 = out_p[k, 0]
                    a1 = out_p[k, 1]
                    a2 = out_p[k, 2]
                    a3 = out_p[k, 3]
                    a4 = out_p[k, 4]
                    a5 = out_p[k, 5]
                a0 += scratch[(INC + 0) * BLOCK + i]
                a1 += scratch[(INC + 1) * BLOCK + i]
                a2 += scratch[(INC + 2) * BLOCK + i]
                a3 += scratch[(INC + 3) * BLOCK + i]
                a4 += scratch[(INC + 4) * BLOCK + i]
                a5 += scratch[(INC + 5) * BLOCK + i]
            continue
        if current >= 0:
            out_p[current, 0] = a0
            out_p[current, 1] = a1
            out_p[current, 2] = a2
            out_p[current, 3] = a3
            out_p[current, 4] = a4
            out_p[current, 5] = a5
            current = -1
        half_h = soa[HALF_H * CHUNK + i]
        h2_12 = soa[H2_12 * CHUNK + i]
        for c in range(6):
            a = c * BLOCK + i
            dp[c] = ((scratch[Q * BLOCK + a + 1] - scratch[Q * BLOCK + a])
                     + half_h * (scratch[F * BLOCK + a] + scratch[F * BLOCK + a + 1])
                     + h2_12 * (scratch[G * BLOCK + a] - scratch[G * BLOCK + a + 1]))
        _near_field(ox, oy, oz, soa, i, ea)
        _near_field(ox, oy, oz, soa, i + 1, eb)
        _deposit_segment(out_p, scratch[T_OBS * BLOCK + i], scratch[T_OBS * BLOCK + i + 1],
                         dp, ea, eb, w, edge0, step, n_bins)
    if current >= 0:
        out_p[current, 0] = a0
        out_p[current, 1] = a1
        out_p[current, 2] = a2
        out_p[current, 3] = a3
        out_p[current, 4] = a4
        out_p[current, 5] = a5


@jit
def _near_point(out_p, ox, oy, oz, offsets, scale, m0, lo, hi, soa, edge0, step, n_bins):
    """All segments of samples lo … hi−1 (the current chunk) seen from one point, particle
    by particle and in time order, in blocks of BLOCK samples overlapping by one."""
    scratch = np.empty(BLOCK_ROWS * BLOCK)
    dp = np.empty(6)
    ea = np.empty(6)
    eb = np.empty(6)
    m = m0
    while m < offsets.shape[0] - 1 and offsets[m] < hi:
        first = max(offsets[m], lo) - lo
        last = min(offsets[m + 1], hi) - lo
        w = scale[m]
        while last - first >= 2:
            count = min(BLOCK, last - first)
            block = soa[first:]
            _near_samples(ox, oy, oz, block, count, edge0, step, scratch)
            _near_increments(block, count, w, scratch)
            _near_deposit(out_p, ox, oy, oz, block, count, scratch, w, edge0, step,
                          n_bins, dp, ea, eb)
            first += count - 1
        m += 1


@jit(parallel=True)
def deposit_near(t, pos, beta, inv_g2, beta_dot, offsets, scale, observers, edge0, step,
                 n_bins, out):
    """Full (near-field) Liénard–Wiechert bin integrals of many particles.

    t (N,) source times, s; pos (N, 3) m; beta (N, 3); inv_g2 (N,) = 1/γ²;
    beta_dot (N, 3) 1/s: the source samples of all particles back to back, particle m
    owning rows offsets[m]:offsets[m+1] (time-ordered). scale (M,) multiplies particle m.
    observers (P, 3) m; edge0 (P,) s; step s; n_bins (P,) int; out (P, max_bins, 6) += .

    The samples are taken in chunks (overlapping by one sample) copied once into a
    structure of arrays, and the points of each chunk run in parallel. Every point still
    adds its segments in the global sample order, so results do not depend on the number
    of threads.
    """
    n_samples = offsets[offsets.shape[0] - 1]
    soa = np.empty(CHUNK_ROWS * CHUNK)
    m0 = 0
    lo = offsets[0]
    while n_samples - lo >= 2:
        hi = min(lo + CHUNK, n_samples)
        while offsets[m0 + 1] <= lo:
            m0 += 1
        _copy_chunk(t, pos, beta, inv_g2, beta_dot, lo, hi, soa)
        for p in numba.prange(observers.shape[0]):
            _near_point(out[p], observers[p, 0], observers[p, 1], observers[p, 2], offsets,
                        scale, m0, lo, hi, soa, edge0[p], step, n_bins[p])
        lo = hi - 1


@jit
def _far_sample(nx, ny, nz, r0, ox, oy, oz, t, pos, beta, inv_g2, beta_dot, j, q, e):
    """Far-field observer time of sample j; fills q (primitive) and e (pointwise field)."""
    bx = beta[j, 0]
    by = beta[j, 1]
    bz = beta[j, 2]
    nb = nx * bx + ny * by + nz * bz
    cx = ny * bz - nz * by
    cy = nz * bx - nx * bz
    cz = nx * by - ny * bx
    kappa = (inv_g2[j] + cx * cx + cy * cy + cz * cz) / (1.0 + nb)
    inv_ckr = 1.0 / (C * kappa * r0)
    q[0] = (nx * nb - bx) * inv_ckr
    q[1] = (ny * nb - by) * inv_ckr
    q[2] = (nz * nb - bz) * inv_ckr
    ax = beta_dot[j, 0]
    ay = beta_dot[j, 1]
    az = beta_dot[j, 2]
    mx = nx - bx
    my = ny - by
    mz = nz - bz
    wx = my * az - mz * ay
    wy = mz * ax - mx * az
    wz = mx * ay - my * ax
    rad = 1.0 / (kappa * kappa * kappa * r0 * C)
    e[0] = (ny * wz - nz * wy) * rad
    e[1] = (nz * wx - nx * wz) * rad
    e[2] = (nx * wy - ny * wx) * rad
    # n × (E or primitive): the B parts, per q/(4πε0 c)
    q[3] = ny * q[2] - nz * q[1]
    q[4] = nz * q[0] - nx * q[2]
    q[5] = nx * q[1] - ny * q[0]
    e[3] = ny * e[2] - nz * e[1]
    e[4] = nz * e[0] - nx * e[2]
    e[5] = nx * e[1] - ny * e[0]
    projected = nx * (pos[j, 0] - ox) + ny * (pos[j, 1] - oy) + nz * (pos[j, 2] - oz)
    return t[j] + (r0 - projected) / C


@jit(parallel=True)
def deposit_far(t, pos, beta, inv_g2, beta_dot, offsets, scale, directions, distance,
                origins, edge0, step, n_bins, out):
    """Far-field (radiation term, fixed n and R₀) bin integrals of many particles.

    directions (P, 3) unit vectors n from origins (P, 3) to the points; distance (P,) R₀ m.
    Other arguments as for `deposit_near`.
    """
    n_points = directions.shape[0]
    n_particles = offsets.shape[0] - 1
    for p in numba.prange(n_points):
        nx = directions[p, 0]
        ny = directions[p, 1]
        nz = directions[p, 2]
        r0 = distance[p]
        ox = origins[p, 0]
        oy = origins[p, 1]
        oz = origins[p, 2]
        out_p = out[p]
        qa = np.empty(6)
        qb = np.empty(6)
        ea = np.empty(6)
        eb = np.empty(6)
        dp = np.empty(6)
        for m in range(n_particles):
            first = offsets[m]
            last = offsets[m + 1]
            if last - first < 2:
                continue
            w = scale[m]
            ta = _far_sample(nx, ny, nz, r0, ox, oy, oz, t, pos, beta, inv_g2, beta_dot,
                             first, qa, ea)
            for j in range(first + 1, last):
                tb = _far_sample(nx, ny, nz, r0, ox, oy, oz, t, pos, beta, inv_g2,
                                 beta_dot, j, qb, eb)
                for c in range(6):
                    dp[c] = qb[c] - qa[c]
                _deposit_segment(out_p, ta, tb, dp, ea, eb, w, edge0[p], step, n_bins[p])
                for c in range(6):
                    qa[c] = qb[c]
                    ea[c] = eb[c]
                ta = tb
