"""How far apart source samples may lie, so that the bin integrals stay accurate.

At a source sample the allowed source-time step is the smallest, over the observer
points, of
  - step_s / (per_bin · κ): at least `per_bin` samples per observer bin (dt = κ dt′);
  - tolerance · R / c (near field): n turns and R changes by at most `tolerance` of itself;
  - tolerance · √(2κ) / |β̇|: the angle between n and β changes by at most `tolerance`
    of √(2κ) ≥ that angle, so a dip of κ (a beam pointing at the observer) cannot be
    stepped over and κ changes by at most about 2·tolerance per sample.
"""

from __future__ import annotations

import math

import numba

from ._jit import jit

C = 299792458.0


@jit(parallel=True)
def source_step_limits(pos, beta, inv_g2, beta_dot, observers, far_field, step, per_bin,
                       tolerance, out):
    """out[j] = allowed source-time step (s) at sample j, the minimum over the points.

    pos (N, 3) m; beta (N, 3); inv_g2 (N,); beta_dot (N, 3) 1/s; observers (P, 3): points
    in m, or unit directions when far_field is True; step s; out (N,).
    """
    n_samples = pos.shape[0]
    n_points = observers.shape[0]
    for j in numba.prange(n_samples):
        bx = beta[j, 0]
        by = beta[j, 1]
        bz = beta[j, 2]
        accel = math.sqrt(beta_dot[j, 0] ** 2 + beta_dot[j, 1] ** 2 + beta_dot[j, 2] ** 2)
        limit = math.inf
        for p in range(n_points):
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
            nb = nx * bx + ny * by + nz * bz
            cx = ny * bz - nz * by
            cy = nz * bx - nx * bz
            cz = nx * by - ny * bx
            kappa = (inv_g2[j] + cx * cx + cy * cy + cz * cz) / (1.0 + nb)
            limit = min(limit, step / (per_bin * kappa), tolerance * r / C)
            if accel > 0.0:
                limit = min(limit, tolerance * math.sqrt(2.0 * kappa) / accel)
        out[j] = limit


@jit(parallel=True)
def closest_approach(pos, observers, out):
    """out[p] = smallest distance (m) from point p to the polyline through pos (N, 3)."""
    n_samples = pos.shape[0]
    for p in numba.prange(observers.shape[0]):
        best = math.inf
        ox = observers[p, 0]
        oy = observers[p, 1]
        oz = observers[p, 2]
        for j in range(n_samples - 1):
            ax = pos[j, 0]
            ay = pos[j, 1]
            az = pos[j, 2]
            sx = pos[j + 1, 0] - ax
            sy = pos[j + 1, 1] - ay
            sz = pos[j + 1, 2] - az
            length2 = sx * sx + sy * sy + sz * sz
            u = 0.0
            if length2 > 0.0:
                u = ((ox - ax) * sx + (oy - ay) * sy + (oz - az) * sz) / length2
                u = min(1.0, max(0.0, u))
            dx = ox - (ax + u * sx)
            dy = oy - (ay + u * sy)
            dz = oz - (az + u * sz)
            best = min(best, math.sqrt(dx * dx + dy * dy + dz * dz))
        out[p] = best
