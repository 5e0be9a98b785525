"""How far apart source samples may lie, so that the bin integrals stay accurate, and how
close a track comes to the points that see it.

At a source sample the allowed source-time step is the smallest, over the observer
points, of
  - resolution_s / (per_bin · κ): at least `per_bin` samples per observer-time scale
    resolution_s (dt = κ dt′): the phase of the top frequency when spectra are asked (their
    quadrature needs it); inf for fields alone;
  - bin_s / (per_bin · κ): `per_bin` samples per observer bin, relaxed where the point
    sees the sample's neighbourhood to (BIN_ACCURACY · bin_s / κ)^¼ · τ^¾ when that is
    larger, τ the smaller of the source-time scales R/c and √(2κ)/|β̇| of the next two
    limits. A bin average is the difference of the primitive, interpolated by a cubic
    Hermite polynomial between samples, at two bin edges, divided by the bin bin_s; with
    a field varying on the observer-time scale κτ that interpolation errs by about
    (κh)⁴/(384 (κτ)³ bin_s) of the field for a source step h, which the relaxed limit
    keeps below BIN_ACCURACY/384 however many bins a step spans: slowly varying fields,
    such as the Coulomb field of a distant extension, need few samples;
  - tolerance · R / c (near field), where the point sees the sample's neighbourhood within
    its time window: n turns and R changes by at most `tolerance` of itself;
  - tolerance · √(2κ) / |β̇|: the angle between n and β changes by at most `tolerance`
    of √(2κ) ≥ that angle, so a dip of κ (a beam pointing at the observer) cannot be
    stepped over and κ changes by at most about 2·tolerance per sample.
A point's window [seen_lo[p], seen_hi[p]] (source times) missing the interval between a
sample's neighbours [t_before[j], t_after[j]] lifts the R/c limit there: a point the track
passes through before or after the light it sees left asks for no steps shrinking to 0.

Each kernel has a serial and a parallel driver sharing one per-item function: per-particle
calls on small arrays run serially (a parallel region's fork and join cost more than the
work). Items are independent, so results do not depend on the driver or thread count.
"""

from __future__ import annotations

import math

import numba

from ..constants import C
from ._jit import jit
from .kappa import kappa

PARALLEL_MIN_WORK = 200_000  # samples × points below which the serial drivers run
BIN_ACCURACY = 1e-9  # see the module docstring


@jit
def _step_limit(j, pos, beta, inv_g2, beta_dot, t_before, t_after, observers, seen_lo,
                seen_hi, far_field, resolution_s, bin_s, per_bin, tolerance):
    """Allowed source-time step (s) at sample j: the minimum over the points seeing it."""
    bx = beta[j, 0]
    by = beta[j, 1]
    bz = beta[j, 2]
    accel = math.sqrt(beta_dot[j, 0] ** 2 + beta_dot[j, 1] ** 2 + beta_dot[j, 2] ** 2)
    limit = math.inf
    for p in range(observers.shape[0]):
        if far_field:
            nx = observers[p, 0]
            ny = observers[p, 1]
            nz = observers[p, 2]
            r = math.inf
        else:
            dx = observers[p, 0] - pos[j, 0]
            dy = observers[p, 1] - pos[j, 1]
            dz = observers[p, 2] - pos[j, 2]
            r = math.sqrt(dx * dx + dy * dy + dz * dz)
            nx = dx / r
            ny = dy / r
            nz = dz / r
        k = kappa(nx, ny, nz, bx, by, bz, inv_g2[j])
        limit = min(limit, resolution_s / (per_bin * k))
        scale = math.inf  # τ, the source-time scale of the field's variation
        if accel > 0.0:
            scale = math.sqrt(2.0 * k) / accel
        per_bin_limit = bin_s / (per_bin * k)
        if t_after[j] >= seen_lo[p] and t_before[j] <= seen_hi[p]:
            scale = min(scale, r / C)
            limit = min(limit, tolerance * scale)
            if per_bin_limit < limit:  # else the relaxed limit (≥ per_bin_limit) cannot bind
                relaxed = math.sqrt(math.sqrt(BIN_ACCURACY * bin_s * scale * scale * scale / k))
                limit = min(limit, max(per_bin_limit, relaxed))
        else:
            limit = min(limit, tolerance * scale, per_bin_limit)
    return limit


@jit
def _limits_serial(pos, beta, inv_g2, beta_dot, t_before, t_after, observers, seen_lo,
                   seen_hi, far_field, resolution_s, bin_s, per_bin, tolerance, out):
    for j in range(pos.shape[0]):
        out[j] = _step_limit(j, pos, beta, inv_g2, beta_dot, t_before, t_after, observers,
                             seen_lo, seen_hi, far_field, resolution_s, bin_s, per_bin,
                             tolerance)


@jit(parallel=True)
def _limits_parallel(pos, beta, inv_g2, beta_dot, t_before, t_after, observers, seen_lo,
                     seen_hi, far_field, resolution_s, bin_s, per_bin, tolerance, out):
    for j in numba.prange(pos.shape[0]):
        out[j] = _step_limit(j, pos, beta, inv_g2, beta_dot, t_before, t_after, observers,
                             seen_lo, seen_hi, far_field, resolution_s, bin_s, per_bin,
                             tolerance)


def source_step_limits(pos, beta, inv_g2, beta_dot, t_before, t_after, observers, seen_lo,
                       seen_hi, far_field, resolution_s, bin_s, per_bin, tolerance, out):
    """out[j] = allowed source-time step (s) at sample j, the minimum over the points that
    see it.

    pos (N, 3) m; beta (N, 3); inv_g2 (N,); beta_dot (N, 3) 1/s; t_before, t_after (N,) s:
    the source times of sample j's neighbours (or its own at an end); observers (P, 3):
    points in m, or unit directions when far_field is True; seen_lo, seen_hi (P,) s: the
    source times whose light reaches point p within its window; resolution_s, bin_s s (see
    the module docstring); out (N,).
    """
    driver = (_limits_parallel if pos.shape[0] * observers.shape[0] >= PARALLEL_MIN_WORK
              else _limits_serial)
    driver(pos, beta, inv_g2, beta_dot, t_before, t_after, observers, seen_lo, seen_hi,
           far_field, resolution_s, bin_s, per_bin, tolerance, out)


@jit
def _closest(p, t, pos, observers, seen_lo, seen_hi):
    """Smallest distance (m) from point p to the polyline through (t (N,), pos (N, 3)),
    cut to the source times [seen_lo[p], seen_hi[p]] (positions interpolated linearly)."""
    best = math.inf
    ox = observers[p, 0]
    oy = observers[p, 1]
    oz = observers[p, 2]
    lo = seen_lo[p]
    hi = seen_hi[p]
    for j in range(t.shape[0] - 1):
        ta = t[j]
        tb = t[j + 1]
        if tb < lo or ta > hi:
            continue
        sx = pos[j + 1, 0] - pos[j, 0]
        sy = pos[j + 1, 1] - pos[j, 1]
        sz = pos[j + 1, 2] - pos[j, 2]
        # the part of the segment inside the window, as fractions u0 ≤ u ≤ u1 of it
        u0 = 0.0
        u1 = 1.0
        if tb > ta:
            u0 = max(0.0, (lo - ta) / (tb - ta))
            u1 = min(1.0, (hi - ta) / (tb - ta))
        ax = pos[j, 0]
        ay = pos[j, 1]
        az = pos[j, 2]
        length2 = sx * sx + sy * sy + sz * sz
        u = u0
        if length2 > 0.0:
            u = ((ox - ax) * sx + (oy - ay) * sy + (oz - az) * sz) / length2
            u = min(u1, max(u0, u))
        dx = ox - (ax + u * sx)
        dy = oy - (ay + u * sy)
        dz = oz - (az + u * sz)
        best = min(best, math.sqrt(dx * dx + dy * dy + dz * dz))
    return best


@jit
def _closest_serial(t, pos, observers, seen_lo, seen_hi, out):
    for p in range(observers.shape[0]):
        out[p] = _closest(p, t, pos, observers, seen_lo, seen_hi)


@jit(parallel=True)
def _closest_parallel(t, pos, observers, seen_lo, seen_hi, out):
    for p in numba.prange(observers.shape[0]):
        out[p] = _closest(p, t, pos, observers, seen_lo, seen_hi)


def closest_approach(t, pos, observers, seen_lo, seen_hi, out):
    """out[p] = smallest distance (m) from point p to the polyline through the source
    samples (t (N,) s, pos (N, 3) m) whose source times lie in [seen_lo[p], seen_hi[p]]:
    the part of the track whose light point p sees in its window (inf if none)."""
    driver = (_closest_parallel if pos.shape[0] * observers.shape[0] >= PARALLEL_MIN_WORK
              else _closest_serial)
    driver(t, pos, observers, seen_lo, seen_hi, out)
