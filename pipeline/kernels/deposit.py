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


BLOCK = 256  # source samples per block: scratch arrays stay in the L1/L2 cache


@jit
def _near_block(ox, oy, oz, t, pos, beta, inv_g2, beta_dot, first, count, t_obs, scratch):
    """Per-sample quantities of samples first … first+count−1, seen from (ox, oy, oz).

    t_obs[i]: observer time. scratch rows 0–5: bracket terms q (E then B parts); 6–11:
    source-time integrands f; 12–17: their source-time derivatives; 18–23: pointwise
    E and n×E, all per q/(4πε0). Written as one flat loop so that LLVM vectorises it.
    """
    for i in range(count):
        j = first + i
        dx = ox - pos[j, 0]
        dy = oy - pos[j, 1]
        dz = oz - pos[j, 2]
        r = math.sqrt(dx * dx + dy * dy + dz * dz)
        inv_r = 1.0 / r
        nx = dx * inv_r
        ny = dy * inv_r
        nz = dz * inv_r
        bx = beta[j, 0]
        by = beta[j, 1]
        bz = beta[j, 2]
        nb = nx * bx + ny * by + nz * bz
        cx = ny * bz - nz * by  # n × β
        cy = nz * bx - nx * bz
        cz = nx * by - ny * bx
        kappa = (inv_g2[j] + cx * cx + cy * cy + cz * cz) / (1.0 + nb)
        inv_ckr = inv_r / (C * kappa)
        # n×(n×β) = n(n·β) − β
        scratch[0, i] = nx * inv_r / C + (nx * nb - bx) * inv_ckr
        scratch[1, i] = ny * inv_r / C + (ny * nb - by) * inv_ckr
        scratch[2, i] = nz * inv_r / C + (nz * nb - bz) * inv_ckr
        scratch[3, i] = -cx * inv_ckr
        scratch[4, i] = -cy * inv_ckr
        scratch[5, i] = -cz * inv_ckr
        inv_r2 = inv_r * inv_r
        scratch[6, i] = nx * inv_r2
        scratch[7, i] = ny * inv_r2
        scratch[8, i] = nz * inv_r2
        scratch[9, i] = -cx * inv_r2
        scratch[10, i] = -cy * inv_r2
        scratch[11, i] = -cz * inv_r2
        # d/dt′ (n/R²) = c(3n(n·β) − β)/R³ ;  d/dt′ (n×β/R²) = 3c(n·β)(n×β)/R³ + n×β̇/R²
        ax = beta_dot[j, 0]
        ay = beta_dot[j, 1]
        az = beta_dot[j, 2]
        c_r3 = C * inv_r2 * inv_r
        scratch[12, i] = c_r3 * (3.0 * nx * nb - bx)
        scratch[13, i] = c_r3 * (3.0 * ny * nb - by)
        scratch[14, i] = c_r3 * (3.0 * nz * nb - bz)
        scratch[15, i] = -(3.0 * nb * cx * c_r3 + (ny * az - nz * ay) * inv_r2)
        scratch[16, i] = -(3.0 * nb * cy * c_r3 + (nz * ax - nx * az) * inv_r2)
        scratch[17, i] = -(3.0 * nb * cz * c_r3 + (nx * ay - ny * ax) * inv_r2)
        # pointwise field: (n−β)/(γ²κ³R²) + n×((n−β)×β̇)/(cκ³R)
        inv_k3 = 1.0 / (kappa * kappa * kappa)
        mx = nx - bx
        my = ny - by
        mz = nz - bz
        wx = my * az - mz * ay  # (n−β)×β̇
        wy = mz * ax - mx * az
        wz = mx * ay - my * ax
        vel = inv_g2[j] * inv_k3 * inv_r2
        rad = inv_k3 * inv_r / C
        ex = mx * vel + (ny * wz - nz * wy) * rad
        ey = my * vel + (nz * wx - nx * wz) * rad
        ez = mz * vel + (nx * wy - ny * wx) * rad
        scratch[18, i] = ex
        scratch[19, i] = ey
        scratch[20, i] = ez
        scratch[21, i] = ny * ez - nz * ey
        scratch[22, i] = nz * ex - nx * ez
        scratch[23, i] = nx * ey - ny * ex
        t_obs[i] = t[j] + r / C


@jit
def _near_increments(t, first, count, scratch, increments):
    """increments[c, i]: the primitive's change from sample first+i to first+i+1
    (bracket difference plus the trapezoid rule with its Euler–Maclaurin correction)."""
    for c in range(6):
        for i in range(count - 1):
            h = t[first + i + 1] - t[first + i]
            increments[c, i] = ((scratch[c, i + 1] - scratch[c, i])
                                + 0.5 * h * (scratch[6 + c, i] + scratch[6 + c, i + 1])
                                + h * h / 12.0 * (scratch[12 + c, i] - scratch[12 + c, i + 1]))


@jit
def _deposit_block(out_p, t_obs, count, increments, scratch, w, edge0, step, n_bins):
    """Deposit the count−1 segment increments of a block into the bins."""
    dp = np.empty(6)
    ea = np.empty(6)
    eb = np.empty(6)
    for i in range(count - 1):
        ta = t_obs[i]
        tb = t_obs[i + 1]
        ka = math.floor((ta - edge0) / step)
        kb = math.floor((tb - edge0) / step)
        if ka == kb:
            if 0 <= ka < n_bins:
                for c in range(6):
                    out_p[ka, c] += w * increments[c, i]
            continue
        for c in range(6):
            dp[c] = increments[c, i]
            ea[c] = scratch[18 + c, i]
            eb[c] = scratch[18 + c, i + 1]
        _deposit_segment(out_p, ta, tb, dp, ea, eb, w, edge0, step, n_bins)


@jit(parallel=True)
def deposit_near(t, pos, beta, inv_g2, beta_dot, offsets, scale, observers, edge0, step,
                 n_bins, out):
    """Full (near-field) Liénard–Wiechert bin integrals of many particles.

    t (N,) source times, s; pos (N, 3) m; beta (N, 3); inv_g2 (N,) = 1/γ²;
    beta_dot (N, 3) 1/s: the source samples of all particles back to back, particle m
    owning rows offsets[m]:offsets[m+1] (time-ordered). scale (M,) multiplies particle m.
    observers (P, 3) m; edge0 (P,) s; step s; n_bins (P,) int; out (P, max_bins, 6) += .
    """
    n_points = observers.shape[0]
    n_particles = offsets.shape[0] - 1
    for p in numba.prange(n_points):
        scratch = np.empty((24, BLOCK))
        increments = np.empty((6, BLOCK))
        t_obs = np.empty(BLOCK)
        for m in range(n_particles):
            first = offsets[m]
            last = offsets[m + 1]
            # blocks overlap by one sample so that every segment lies inside one block
            while last - first >= 2:
                count = min(BLOCK, last - first)
                _near_block(observers[p, 0], observers[p, 1], observers[p, 2], t, pos, beta,
                            inv_g2, beta_dot, first, count, t_obs, scratch)
                _near_increments(t, first, count, scratch, increments)
                _deposit_block(out[p], t_obs, count, increments, scratch, scale[m], edge0[p],
                               step, n_bins[p])
                first += count - 1


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
