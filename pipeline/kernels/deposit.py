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

Observer times on a ballistic extension are taken relative to the track's end sample e
(time t_e, distance R_e, κ_e with the end velocity β_e): along a straight line,
    t − t_e_obs = (t′ − t_e) · (R κ + R_e κ_e)/(R + R_e)     (exactly, with κ = 1 − n·β_e),
and every factor keeps its relative precision, whereas t′ + R/c loses the digits of a
retarded time lying microseconds before the observer time (γ ≳ 10⁴). In the far field the
same holds with t − t_e_obs = (t′ − t_e) κ.

Inside the sampled track, each sample comes with a reference (the track sample starting
its interval: time t_i, position r_i) and its displacement d = r − r_i, formed without
adding r_i. Its observer time is taken relative to the reference's, T_i = t_i + R_i/c
(formed once per reference in double-double arithmetic, Dekker's error-free sum and
product): t − T_i = (t′ − t_i) + (R − R_i)/c with R − R_i = −d·(2(x − r_i) − d)/(R + R_i),
so every term keeps its relative precision (in the far field, R − R_i = −n·d).

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

from ..constants import C
from ._jit import jit
from .kappa import kappa as _kappa  # (locals here are named kappa)
from .kappa import kappa_fraction


@jit
def _deposit_segment(out_p, ta, tb, ka, kb, dp, ea, eb, w, edge0, step, n_bins):
    """Add w times the increment dp[6] of the primitive between observer times ta < tb,
    in bins ka ≤ kb, to the bins it covers; ea, eb are its slopes (pointwise fields) at
    both ends."""
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


# ------------------------------------------------------------------ the kernel (near and far)
# Per point, each block of samples goes through: `_times` (observer times and bins;
# a block that cannot reach the bins stops here), `_samples` (per-sample primitive,
# integrands, fields), `_near_increments` (per-segment increments) and `_near_deposit`
# (the only sequential pass). The first three are flat loops that LLVM vectorises (with
# fastmath off, so each element is computed exactly as a scalar loop would).
# LLVM vectorises a loop only if it can rule out overlap between the arrays it reads and
# writes; with separate 2D arrays (runtime row strides) that takes one runtime check per
# pair of streams and it gives up. So the passes read one flat array and write another,
# each made of rows at compile-time constant offsets: the dependence distances are then
# known constants and no runtime check is needed between the streams.
CHUNK = 8192  # source samples per structure-of-arrays copy, shared by all points
BLOCK = 256  # samples per block of one point: its scratch stays in the L1/L2 cache
# row strides, padded so that rows are not a multiple of 4096 bytes apart (where a load
# from one row can be held up by stores to another, "4K aliasing")
CHUNK_ROW = CHUNK + 8
ROW = BLOCK + 8
# rows of the chunk copy; HALF_H, H2_12 (h/2 and h²/12) belong to segment j → j+1
# RT, RX … DZ: each sample's reference time and position, and its displacement from it
T, X, Y, Z, BX, BY, BZ, IG2, AX, AY, AZ, HALF_H, H2_12, RT, RX, RY, RZ, DX, DY, DZ = range(20)
CHUNK_ROWS = 20
# rows of the block scratch. Per sample: bracket terms q, source-time integrands f and
# their derivatives g, pointwise fields e (E, n×E), distance, observer time, bin index
# (a float). Per segment: its increment of the primitive times the particle's scale.
# Per sample also its reference's observer time and R_i (see `_reference_rows`).
Q, F, G, E, R, T_OBS, BIN, INC, T_REF, R0 = 0, 6, 12, 18, 24, 25, 26, 27, 33, 34
BLOCK_ROWS = 35
INV_C = 1.0 / C


# columns of `ends` (M, 2, END_COLUMNS): per particle, its first (0) and last (1) sample:
# time, position, velocity, 1/γ²; outside [time of 0, time of 1] the motion is ballistic
END_T, END_X, END_BX, END_IG2 = 0, 1, 4, 7
END_COLUMNS = 8


def no_extensions(offsets):
    """`ends` of particles without ballistic extensions (every sample on the track)."""
    ends = np.zeros((offsets.shape[0] - 1, 2, END_COLUMNS))
    ends[:, 0, END_T] = -np.inf
    ends[:, 1, END_T] = np.inf
    ends[:, :, END_IG2] = 1.0
    return ends


@jit
def _anchor(geometry_p, far, ends, m, e):
    """(t_e, observer time T_e, a, b) of end e of particle m seen by one point: near field
    a = R_e κ_e, b = R_e; far field a = κ_e, b = 0 (see the module's docstring)."""
    t_e = ends[m, e, END_T]
    if not math.isfinite(t_e):
        return t_e, t_e, 0.0, 1.0
    if far:
        nx = geometry_p[0]
        ny = geometry_p[1]
        nz = geometry_p[2]
        projected = (nx * (ends[m, e, END_X] - geometry_p[4])
                     + ny * (ends[m, e, END_X + 1] - geometry_p[5])
                     + nz * (ends[m, e, END_X + 2] - geometry_p[6]))
        delay = (geometry_p[3] - projected) / C
        r = 0.0
    else:
        dx = geometry_p[0] - ends[m, e, END_X]
        dy = geometry_p[1] - ends[m, e, END_X + 1]
        dz = geometry_p[2] - ends[m, e, END_X + 2]
        r = math.sqrt(dx * dx + dy * dy + dz * dz)
        nx = dx / r
        ny = dy / r
        nz = dz / r
        delay = r / C
    kappa = _kappa(nx, ny, nz, ends[m, e, END_BX], ends[m, e, END_BX + 1],
                   ends[m, e, END_BX + 2], ends[m, e, END_IG2])
    if far:
        return t_e, t_e + delay, kappa, 0.0
    t_e_obs = _light_time(t_e, _two_sum(geometry_p[0], -ends[m, e, END_X]),
                          _two_sum(geometry_p[1], -ends[m, e, END_X + 1]),
                          _two_sum(geometry_p[2], -ends[m, e, END_X + 2]), False, 0.0)
    return t_e, t_e_obs, r * kappa, r


@jit
def _two_sum(a, b):
    """s + e = a + b exactly, s = fl(a + b) (Knuth's TwoSum)."""
    s = a + b
    v = s - a
    return s, (a - (s - v)) + (b - v)


@jit
def _two_product(a, b):
    """p + e = a·b exactly, p = fl(a·b) (Dekker's product with Veltkamp's split)."""
    p = a * b
    big = 134217729.0 * a  # 2^27 + 1
    a_hi = big - (big - a)
    a_lo = a - a_hi
    big = 134217729.0 * b
    b_hi = big - (big - b)
    b_lo = b - b_hi
    return p, ((a_hi * b_hi - p) + a_hi * b_lo + a_lo * b_hi) + a_lo * b_lo


@jit
def _light_time(t, dx, dy, dz, far, far_delay):
    """t + R/c (near field: R = |(dx, dy, dz)|, each component a double-double (hi, lo)
    pair) or t + far_delay/c (far field), correct to about 1e-30 of
    the terms' size although it may be far smaller than either (the light of a sample
    microseconds before it arrives)."""
    if far:
        r_hi = far_delay
        r_lo = 0.0
    else:
        s_hi = 0.0
        s_lo = 0.0
        for hi, lo in (dx, dy, dz):
            square, error = _two_product(hi, hi)
            s_hi, sum_error = _two_sum(s_hi, square)
            s_lo += sum_error + error + 2.0 * hi * lo
        r_hi = math.sqrt(s_hi)
        square, error = _two_product(r_hi, r_hi)
        r_lo = ((s_hi - square) - error + s_lo) / (2.0 * r_hi)
    q_hi = r_hi / C
    product, error = _two_product(q_hi, C)
    q_lo = ((r_hi - product) - error + r_lo) / C
    total, sum_error = _two_sum(t, q_hi)
    return total + (sum_error + q_lo)


@jit
def _copy_chunk(t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp, lo, hi, soa):
    """Copy samples lo … hi−1 into the rows of soa (and the trapezoid weights of the
    segments between them), so that every point's passes read unit-stride rows."""
    t = t[lo:hi]
    pos = pos[lo:hi].reshape(-1)
    beta = beta[lo:hi].reshape(-1)
    inv_g2 = inv_g2[lo:hi]
    beta_dot = beta_dot[lo:hi].reshape(-1)
    ref_t = ref_t[lo:hi]
    ref_r = ref_r[lo:hi].reshape(-1)
    disp = disp[lo:hi].reshape(-1)
    for i in range(hi - lo):
        soa[RT * CHUNK_ROW + i] = ref_t[i]
        for c in range(3):
            soa[(RX + c) * CHUNK_ROW + i] = ref_r[3 * i + c]
            soa[(DX + c) * CHUNK_ROW + i] = disp[3 * i + c]
        soa[T * CHUNK_ROW + i] = t[i]
        soa[X * CHUNK_ROW + i] = pos[3 * i]
        soa[Y * CHUNK_ROW + i] = pos[3 * i + 1]
        soa[Z * CHUNK_ROW + i] = pos[3 * i + 2]
        soa[BX * CHUNK_ROW + i] = beta[3 * i]
        soa[BY * CHUNK_ROW + i] = beta[3 * i + 1]
        soa[BZ * CHUNK_ROW + i] = beta[3 * i + 2]
        soa[IG2 * CHUNK_ROW + i] = inv_g2[i]
        soa[AX * CHUNK_ROW + i] = beta_dot[3 * i]
        soa[AY * CHUNK_ROW + i] = beta_dot[3 * i + 1]
        soa[AZ * CHUNK_ROW + i] = beta_dot[3 * i + 2]
    for i in range(hi - lo - 1):
        h = t[i + 1] - t[i]
        soa[HALF_H * CHUNK_ROW + i] = 0.5 * h
        soa[H2_12 * CHUNK_ROW + i] = h * h / 12.0


@jit
def _reference(geometry_p, far, soa, i):
    """(observer time T_i of sample i's reference, R_i; 0 in the far field) for one point
    (see `_times`)."""
    t_ref = soa[RT * CHUNK_ROW + i]
    if far:
        projected = (geometry_p[0] * (soa[RX * CHUNK_ROW + i] - geometry_p[4])
                     + geometry_p[1] * (soa[RY * CHUNK_ROW + i] - geometry_p[5])
                     + geometry_p[2] * (soa[RZ * CHUNK_ROW + i] - geometry_p[6]))
        delay = geometry_p[3] - projected
        return _light_time(t_ref, (0.0, 0.0), (0.0, 0.0), (0.0, 0.0), True, delay), 0.0
    x0, x0_lo = _two_sum(geometry_p[0], -soa[RX * CHUNK_ROW + i])
    y0, y0_lo = _two_sum(geometry_p[1], -soa[RY * CHUNK_ROW + i])
    z0, z0_lo = _two_sum(geometry_p[2], -soa[RZ * CHUNK_ROW + i])
    r0 = math.sqrt(x0 * x0 + y0 * y0 + z0 * z0)
    return _light_time(t_ref, (x0, x0_lo), (y0, y0_lo), (z0, z0_lo), False, 0.0), r0


@jit
def _reference_rows(geometry_p, far, soa, count, scratch):
    """Rows T_REF, R0 of the block's samples: `_reference` of each sample's reference,
    formed once per reference (consecutive samples share it)."""
    held = math.nan  # the reference time whose values are held
    t_ref = r0 = 0.0
    for i in range(count):
        ref = soa[RT * CHUNK_ROW + i]
        if ref != held:
            held = ref
            t_ref, r0 = _reference(geometry_p, far, soa, i)
        scratch[T_REF * ROW + i] = t_ref
        scratch[R0 * ROW + i] = r0


@jit
def _times(geometry_p, far, soa, count, edge0, inv_step, n_bins, scratch, first, last):
    """Rows R, T_OBS, BIN of the first `count` samples of soa (a chunk copy viewed from
    the block's first sample) seen by one point (see `_point`); first, last: the
    particle's end anchors (see `_anchor`). Returns whether any segment of the block can
    reach the bins: if not, the block needs no further work."""
    _reference_rows(geometry_p, far, soa, count, scratch)
    before = 0
    after = 0
    for i in range(count):
        t_src = soa[T * CHUNK_ROW + i]
        ref = soa[RT * CHUNK_ROW + i]
        extension = t_src < first[0] or t_src > last[0]
        t_ref = scratch[T_REF * ROW + i]
        ddx = soa[DX * CHUNK_ROW + i]
        ddy = soa[DY * CHUNK_ROW + i]
        ddz = soa[DZ * CHUNK_ROW + i]
        anchor = first if t_src < first[0] else last
        if far:
            nx = geometry_p[0]
            ny = geometry_p[1]
            nz = geometry_p[2]
            r = geometry_p[3]
            if extension:
                t_obs = anchor[1] + (t_src - anchor[0]) * anchor[2]
            else:
                t_obs = t_ref + ((t_src - ref) - (nx * ddx + ny * ddy + nz * ddz) / C)
        else:
            x0 = geometry_p[0] - soa[RX * CHUNK_ROW + i]  # x − r_i
            y0 = geometry_p[1] - soa[RY * CHUNK_ROW + i]
            z0 = geometry_p[2] - soa[RZ * CHUNK_ROW + i]
            dx = x0 - ddx
            dy = y0 - ddy
            dz = z0 - ddz
            r = math.sqrt(dx * dx + dy * dy + dz * dz)
            if extension:
                kappa = _kappa(dx / r, dy / r, dz / r, soa[BX * CHUNK_ROW + i],
                               soa[BY * CHUNK_ROW + i], soa[BZ * CHUNK_ROW + i],
                               soa[IG2 * CHUNK_ROW + i])
                t_obs = anchor[1] + (t_src - anchor[0]) * ((r * kappa + anchor[2])
                                                           / (r + anchor[3]))
            else:
                # (R − R_i)/c = −d·(2(x − r_i) − d)/(c(R + R_i)), by a true division
                closer = ((ddx * (2.0 * x0 - ddx) + ddy * (2.0 * y0 - ddy)
                           + ddz * (2.0 * z0 - ddz)) / ((r + scratch[R0 * ROW + i]) * C))
                t_obs = t_ref + ((t_src - ref) - closer)
        # a time within rounding of an edge may fall on either side: harmless, the split
        # of a segment at an edge is continuous in the edge's position
        k = np.floor((t_obs - edge0) * inv_step)
        scratch[R * ROW + i] = r
        scratch[T_OBS * ROW + i] = t_obs
        scratch[BIN * ROW + i] = k
        before += k < 0.0
        after += k >= n_bins
    return before < count and after < count


@jit
def _samples(geometry_p, far, soa, count, scratch):
    """Per-sample quantities of the block's samples (after `_times`), all per q/(4πε0).
    One flat loop with non-negative indices only (no gathers) and two divisions (1/R,
    1/κ): LLVM vectorises it. In the far field n and R₀ are fixed and the terms of the
    velocity field (near = 0) drop out: the source-time integrals vanish and the bracket
    is n×(n×β)/(cκR₀)."""
    near = 0.0 if far else 1.0
    for i in range(count):
        if far:
            nx = geometry_p[0]
            ny = geometry_p[1]
            nz = geometry_p[2]
            inv_r = 1.0 / geometry_p[3]
        else:
            inv_r = 1.0 / scratch[R * ROW + i]
            nx = (geometry_p[0] - soa[X * CHUNK_ROW + i]) * inv_r
            ny = (geometry_p[1] - soa[Y * CHUNK_ROW + i]) * inv_r
            nz = (geometry_p[2] - soa[Z * CHUNK_ROW + i]) * inv_r
        bx = soa[BX * CHUNK_ROW + i]
        by = soa[BY * CHUNK_ROW + i]
        bz = soa[BZ * CHUNK_ROW + i]
        inv_g2 = soa[IG2 * CHUNK_ROW + i]
        nb = nx * bx + ny * by + nz * bz
        cx = ny * bz - nz * by  # n × β
        cy = nz * bx - nx * bz
        cz = nx * by - ny * bx
        numerator, denominator = kappa_fraction(nx, ny, nz, bx, by, bz, inv_g2)
        inv_kappa = denominator / numerator  # 1/κ, without cancellation
        inv_cr = inv_r * INV_C
        inv_ckr = inv_cr * inv_kappa
        # bracket terms: n/(cR) + n×(n×β)/(cκR) with n×(n×β) = n(n·β) − β; −n×β/(cκR)
        along = near * inv_cr + nb * inv_ckr
        scratch[(Q + 0) * ROW + i] = nx * along - bx * inv_ckr
        scratch[(Q + 1) * ROW + i] = ny * along - by * inv_ckr
        scratch[(Q + 2) * ROW + i] = nz * along - bz * inv_ckr
        minus_inv_ckr = -inv_ckr  # one negation instead of three
        scratch[(Q + 3) * ROW + i] = cx * minus_inv_ckr
        scratch[(Q + 4) * ROW + i] = cy * minus_inv_ckr
        scratch[(Q + 5) * ROW + i] = cz * minus_inv_ckr
        inv_r2 = near * inv_r * inv_r  # the velocity field's 1/R², 0 in the far field
        minus_inv_r2 = -inv_r2
        scratch[(F + 0) * ROW + i] = nx * inv_r2
        scratch[(F + 1) * ROW + i] = ny * inv_r2
        scratch[(F + 2) * ROW + i] = nz * inv_r2
        scratch[(F + 3) * ROW + i] = cx * minus_inv_r2
        scratch[(F + 4) * ROW + i] = cy * minus_inv_r2
        scratch[(F + 5) * ROW + i] = cz * minus_inv_r2
        # d/dt′ (n/R²) = c(3n(n·β) − β)/R³ ;  d/dt′ (n×β/R²) = 3c(n·β)(n×β)/R³ + n×β̇/R²
        ax = soa[AX * CHUNK_ROW + i]
        ay = soa[AY * CHUNK_ROW + i]
        az = soa[AZ * CHUNK_ROW + i]
        c_r3 = C * inv_r2 * inv_r
        three_nb = 3.0 * nb * c_r3
        scratch[(G + 0) * ROW + i] = nx * three_nb - bx * c_r3
        scratch[(G + 1) * ROW + i] = ny * three_nb - by * c_r3
        scratch[(G + 2) * ROW + i] = nz * three_nb - bz * c_r3
        minus_three_nb = -three_nb
        scratch[(G + 3) * ROW + i] = cx * minus_three_nb - (ny * az - nz * ay) * inv_r2
        scratch[(G + 4) * ROW + i] = cy * minus_three_nb - (nz * ax - nx * az) * inv_r2
        scratch[(G + 5) * ROW + i] = cz * minus_three_nb - (nx * ay - ny * ax) * inv_r2
        # pointwise field (n−β)/(γ²κ³R²) + n×((n−β)×β̇)/(cκ³R), the primitive's slope,
        # used where a segment crosses a bin edge; n×((n−β)×β̇) = (n−β)(n·β̇) − κβ̇
        inv_k2 = inv_kappa * inv_kappa
        inv_k3 = inv_k2 * inv_kappa
        rad = inv_k3 * inv_cr
        towards = inv_g2 * inv_k3 * inv_r2 + (nx * ax + ny * ay + nz * az) * rad
        back = inv_k2 * inv_cr
        ex = (nx - bx) * towards - ax * back
        ey = (ny - by) * towards - ay * back
        ez = (nz - bz) * towards - az * back
        scratch[(E + 0) * ROW + i] = ex
        scratch[(E + 1) * ROW + i] = ey
        scratch[(E + 2) * ROW + i] = ez
        scratch[(E + 3) * ROW + i] = ny * ez - nz * ey
        scratch[(E + 4) * ROW + i] = nz * ex - nx * ez
        scratch[(E + 5) * ROW + i] = nx * ey - ny * ex


@jit
def _increment(scratch, c, i, half_h, h2_12):
    """Component c of the primitive's change over segment i → i+1: bracket difference
    plus the trapezoid rule (half_h = h/2) with its Euler–Maclaurin correction
    (h2_12 = h²/12)."""
    a = c * ROW + i
    return ((scratch[Q * ROW + a + 1] - scratch[Q * ROW + a])
            + half_h * (scratch[F * ROW + a] + scratch[F * ROW + a + 1])
            + h2_12 * (scratch[G * ROW + a] - scratch[G * ROW + a + 1]))


@jit
def _near_increments(soa, count, w, scratch):
    """Rows INC + c: w times the increments of the block's segments. The six components
    are written out rather than looped over: LLVM vectorises innermost loops only."""
    for i in range(count - 1):
        half_h = soa[HALF_H * CHUNK_ROW + i]
        h2_12 = soa[H2_12 * CHUNK_ROW + i]
        scratch[(INC + 0) * ROW + i] = w * _increment(scratch, 0, i, half_h, h2_12)
        scratch[(INC + 1) * ROW + i] = w * _increment(scratch, 1, i, half_h, h2_12)
        scratch[(INC + 2) * ROW + i] = w * _increment(scratch, 2, i, half_h, h2_12)
        scratch[(INC + 3) * ROW + i] = w * _increment(scratch, 3, i, half_h, h2_12)
        scratch[(INC + 4) * ROW + i] = w * _increment(scratch, 4, i, half_h, h2_12)
        scratch[(INC + 5) * ROW + i] = w * _increment(scratch, 5, i, half_h, h2_12)


@jit
def _load6(out_p, k):
    """The six components of bin k."""
    return out_p[k, 0], out_p[k, 1], out_p[k, 2], out_p[k, 3], out_p[k, 4], out_p[k, 5]


@jit
def _store6(out_p, k, a0, a1, a2, a3, a4, a5):
    """Set the six components of bin k."""
    out_p[k, 0] = a0
    out_p[k, 1] = a1
    out_p[k, 2] = a2
    out_p[k, 3] = a3
    out_p[k, 4] = a4
    out_p[k, 5] = a5


@jit
def _split(scratch, c, i, w, h, h01, h10, h11):
    """Component c of what segment i, crossing one edge, adds to its first bin and to the
    next: the arithmetic of `_deposit_segment`, with w applied to the increment first."""
    slopes = w * (h * (h10 * scratch[(E + c) * ROW + i] + h11 * scratch[(E + c) * ROW + i + 1]))
    inc = scratch[(INC + c) * ROW + i]
    return h01 * inc + slopes, (1.0 - h01) * inc - slopes


@jit
def _near_deposit(out_p, soa, count, scratch, w, edge0, step, n_bins, dp, ea, eb):
    """Add the block's count−1 segments to the bins, in order.

    The bin being filled is held in six local accumulators, loaded from out_p when the
    bin changes and stored back when it is left: the same additions in the same order as
    adding to out_p one by one, without a store and reload per segment. A segment that
    crosses one edge between two valid bins is split here; any other crossing segment
    goes to `_deposit_segment`.
    """
    current = -1  # the bin held in the accumulators, or −1
    held = -1.0  # the same as a float
    a0 = a1 = a2 = a3 = a4 = a5 = 0.0
    for i in range(count - 1):
        ka = scratch[BIN * ROW + i]
        kb = scratch[BIN * ROW + i + 1]
        if ka == kb:
            if ka != held:
                if not 0.0 <= ka < n_bins:
                    continue
                if current >= 0:
                    _store6(out_p, current, a0, a1, a2, a3, a4, a5)
                current = int(ka)
                held = ka
                a0, a1, a2, a3, a4, a5 = _load6(out_p, current)
            a0 += scratch[(INC + 0) * ROW + i]
            a1 += scratch[(INC + 1) * ROW + i]
            a2 += scratch[(INC + 2) * ROW + i]
            a3 += scratch[(INC + 3) * ROW + i]
            a4 += scratch[(INC + 4) * ROW + i]
            a5 += scratch[(INC + 5) * ROW + i]
            continue
        if kb < 0.0 or (ka >= n_bins and kb >= n_bins):
            continue  # nothing of the segment lies inside the bins
        ta = scratch[T_OBS * ROW + i]
        tb = scratch[T_OBS * ROW + i + 1]
        if kb == ka + 1.0 and 0.0 <= ka and kb < n_bins:
            h = tb - ta
            s = min(max((edge0 + kb * step - ta) / h, 0.0), 1.0)
            one_minus = 1.0 - s
            h01 = s * s * (3.0 - 2.0 * s)
            h10 = s * one_minus * one_minus
            h11 = -s * s * one_minus
            k = int(ka)
            if ka != held:
                if current >= 0:
                    _store6(out_p, current, a0, a1, a2, a3, a4, a5)
                a0, a1, a2, a3, a4, a5 = _load6(out_p, k)
            l0, u0 = _split(scratch, 0, i, w, h, h01, h10, h11)
            l1, u1 = _split(scratch, 1, i, w, h, h01, h10, h11)
            l2, u2 = _split(scratch, 2, i, w, h, h01, h10, h11)
            l3, u3 = _split(scratch, 3, i, w, h, h01, h10, h11)
            l4, u4 = _split(scratch, 4, i, w, h, h01, h10, h11)
            l5, u5 = _split(scratch, 5, i, w, h, h01, h10, h11)
            _store6(out_p, k, a0 + l0, a1 + l1, a2 + l2, a3 + l3, a4 + l4, a5 + l5)
            current = k + 1
            held = kb
            a0, a1, a2, a3, a4, a5 = _load6(out_p, current)
            if s < 1.0:
                a0 += u0
                a1 += u1
                a2 += u2
                a3 += u3
                a4 += u4
                a5 += u5
            continue
        if current >= 0:
            _store6(out_p, current, a0, a1, a2, a3, a4, a5)
            current = -1
            held = -1.0
        for c in range(6):
            dp[c] = _increment(scratch, c, i, soa[HALF_H * CHUNK_ROW + i],
                               soa[H2_12 * CHUNK_ROW + i])
            ea[c] = scratch[(E + c) * ROW + i]
            eb[c] = scratch[(E + c) * ROW + i + 1]
        _deposit_segment(out_p, ta, tb, int(ka), int(kb), dp, ea, eb, w, edge0, step, n_bins)
    if current >= 0:
        _store6(out_p, current, a0, a1, a2, a3, a4, a5)


@jit
def _point(out_p, geometry_p, far, offsets, scale, ends, m0, lo, hi, soa, edge0, step,
           n_bins):
    """All segments of samples lo … hi−1 (the current chunk) seen by one point, particle
    by particle and in time order, in blocks of BLOCK samples overlapping by one.
    geometry_p (7,): the point (near field), or direction n, R₀ and origin (far field)."""
    scratch = np.empty(BLOCK_ROWS * ROW)
    dp = np.empty(6)
    ea = np.empty(6)
    eb = np.empty(6)
    m = m0
    while m < offsets.shape[0] - 1 and offsets[m] < hi:
        first = max(offsets[m], lo) - lo
        last = min(offsets[m + 1], hi) - lo
        w = scale[m]
        anchor_first = _anchor(geometry_p, far, ends, m, 0)
        anchor_last = _anchor(geometry_p, far, ends, m, 1)
        while last - first >= 2:
            count = min(BLOCK, last - first)
            block = soa[first:]
            if _times(geometry_p, far, block, count, edge0, 1.0 / step, n_bins, scratch,
                      anchor_first, anchor_last):
                _samples(geometry_p, far, block, count, scratch)
                _near_increments(block, count, w, scratch)
                _near_deposit(out_p, block, count, scratch, w, edge0, step, n_bins, dp, ea,
                              eb)
            first += count - 1
        m += 1


@jit(parallel=True)
def _deposit(t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp, offsets, scale, ends,
             geometry, far, edge0, step, n_bins, out):
    """Bin integrals of many particles at the points of `geometry` (P, 7).

    t (N,) source times, s; pos (N, 3) m; beta (N, 3); inv_g2 (N,) = 1/γ²;
    beta_dot (N, 3) 1/s; ref_t (N,) s, ref_r (N, 3) m, disp (N, 3) m: each sample's
    reference and its displacement from it (see the module's docstring): the source
    samples of all particles back to back, particle m
    owning rows offsets[m]:offsets[m+1] (time-ordered). scale (M,) multiplies particle m.
    ends (M, 2, END_COLUMNS): where the particles' ballistic extensions start.
    edge0 (P,) s; step s; n_bins (P,) int; out (P, max_bins, 6) += .

    The samples are taken in chunks (overlapping by one sample) copied once into a
    structure of arrays, and the points of each chunk run in parallel. Every point still
    adds its segments in the global sample order, so results do not depend on the number
    of threads.
    """
    n_samples = offsets[offsets.shape[0] - 1]
    soa = np.empty(CHUNK_ROWS * CHUNK_ROW)
    m0 = 0
    lo = offsets[0]
    while n_samples - lo >= 2:
        hi = min(lo + CHUNK, n_samples)
        while offsets[m0 + 1] <= lo:
            m0 += 1
        _copy_chunk(t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp, lo, hi, soa)
        for p in numba.prange(geometry.shape[0]):
            _point(out[p], geometry[p], far, offsets, scale, ends, m0, lo, hi, soa, edge0[p],
                   step, n_bins[p])
        lo = hi - 1


def _references(t, pos, offsets, reference):
    """(ref_t, ref_r, disp) given, or the first sample of each particle for all its
    samples (observer times then keep no more digits than t′ + R/c would)."""
    if reference is not None:
        return reference
    first = np.repeat(offsets[:-1], np.diff(offsets))
    ref_r = pos[first]
    return t[first], ref_r, pos - ref_r


def deposit_near(t, pos, beta, inv_g2, beta_dot, offsets, scale, observers, edge0, step,
                 n_bins, out, ends=None, reference=None):
    """Full (near-field) Liénard–Wiechert bin integrals of many particles at observers
    (P, 3) m; ends: where the particles' ballistic extensions start (default: none);
    reference: (ref_t, ref_r, disp) of the samples (default: see `_references`). Other
    arguments as for `_deposit`."""
    if ends is None:
        ends = no_extensions(offsets)
    geometry = np.zeros((observers.shape[0], 7))
    geometry[:, :3] = observers
    _deposit(t, pos, beta, inv_g2, beta_dot, *_references(t, pos, offsets, reference), offsets,
             scale, ends, geometry, False, edge0, step, n_bins, out)


def deposit_far(t, pos, beta, inv_g2, beta_dot, offsets, scale, directions, distance,
                origins, edge0, step, n_bins, out, ends=None, reference=None):
    """Far-field (radiation term, fixed n and R₀) bin integrals of many particles:
    directions (P, 3) unit vectors n from origins (P, 3) to the points; distance (P,) R₀ m.
    Other arguments as for `deposit_near`."""
    if ends is None:
        ends = no_extensions(offsets)
    geometry = np.concatenate([directions, np.reshape(distance, (-1, 1)), origins], axis=1)
    _deposit(t, pos, beta, inv_g2, beta_dot, *_references(t, pos, offsets, reference), offsets,
             scale, ends, geometry, True, edge0, step, n_bins, out)
