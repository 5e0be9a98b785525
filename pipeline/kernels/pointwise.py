"""Pointwise Liénard–Wiechert fields at the source samples, for one observer point.

E = (n−β)/(γ²κ³R²) + n×((n−β)×β̇)/(cκ³R) per q/(4πε0) (near field, both terms), or the
radiation term alone with n and R₀ fixed (far field); observer time t = t′ + R/c, or
t = t′ + (R₀ − n·(r − O))/c in the far field. κ = (1/γ² + |n×β|²)/(1 + n·β) avoids the
cancellation of 1 − n·β at high γ.
"""

from __future__ import annotations

import math

from ._jit import jit

C = 299792458.0


@jit
def fields_near(t, pos, beta, inv_g2, beta_dot, observer, t_obs, e_out):
    """t_obs (N,) and e_out (N, 3) (per q/4πε0) of samples (t, pos, beta, inv_g2,
    beta_dot) seen from observer (3,)."""
    for j in range(t.shape[0]):
        dx = observer[0] - pos[j, 0]
        dy = observer[1] - pos[j, 1]
        dz = observer[2] - pos[j, 2]
        r = math.sqrt(dx * dx + dy * dy + dz * dz)
        nx = dx / r
        ny = dy / r
        nz = dz / r
        bx = beta[j, 0]
        by = beta[j, 1]
        bz = beta[j, 2]
        nb = nx * bx + ny * by + nz * bz
        cx = ny * bz - nz * by
        cy = nz * bx - nx * bz
        cz = nx * by - ny * bx
        kappa = (inv_g2[j] + cx * cx + cy * cy + cz * cz) / (1.0 + nb)
        inv_k3 = 1.0 / (kappa * kappa * kappa)
        mx = nx - bx
        my = ny - by
        mz = nz - bz
        ax = beta_dot[j, 0]
        ay = beta_dot[j, 1]
        az = beta_dot[j, 2]
        wx = my * az - mz * ay
        wy = mz * ax - mx * az
        wz = mx * ay - my * ax
        vel = inv_g2[j] * inv_k3 / (r * r)
        rad = inv_k3 / (r * C)
        e_out[j, 0] = mx * vel + (ny * wz - nz * wy) * rad
        e_out[j, 1] = my * vel + (nz * wx - nx * wz) * rad
        e_out[j, 2] = mz * vel + (nx * wy - ny * wx) * rad
        t_obs[j] = t[j] + r / C


@jit
def fields_far(t, pos, beta, inv_g2, beta_dot, direction, distance, origin, t_obs, e_out):
    """Far-field t_obs (N,) and e_out (N, 3): radiation term, n = direction (3,) and
    R₀ = distance fixed, seen from origin (3,)."""
    nx = direction[0]
    ny = direction[1]
    nz = direction[2]
    for j in range(t.shape[0]):
        bx = beta[j, 0]
        by = beta[j, 1]
        bz = beta[j, 2]
        nb = nx * bx + ny * by + nz * bz
        cx = ny * bz - nz * by
        cy = nz * bx - nx * bz
        cz = nx * by - ny * bx
        kappa = (inv_g2[j] + cx * cx + cy * cy + cz * cz) / (1.0 + nb)
        rad = 1.0 / (kappa * kappa * kappa * distance * C)
        mx = nx - bx
        my = ny - by
        mz = nz - bz
        ax = beta_dot[j, 0]
        ay = beta_dot[j, 1]
        az = beta_dot[j, 2]
        wx = my * az - mz * ay
        wy = mz * ax - mx * az
        wz = mx * ay - my * ax
        e_out[j, 0] = (ny * wz - nz * wy) * rad
        e_out[j, 1] = (nz * wx - nx * wz) * rad
        e_out[j, 2] = (nx * wy - ny * wx) * rad
        projected = (nx * (pos[j, 0] - origin[0]) + ny * (pos[j, 1] - origin[1])
                     + nz * (pos[j, 2] - origin[2]))
        t_obs[j] = t[j] + (distance - projected) / C
