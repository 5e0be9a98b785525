"""Pointwise Liénard–Wiechert fields at the source samples, for one observer point.

E = (n−β)/(γ²κ³R²) + n×((n−β)×β̇)/(cκ³R) per q/(4πε0) (near field, both terms), or the
radiation term alone with n and R₀ fixed (far field); observer time t = t′ + R/c, or
t = t′ + (R₀ − n·(r − O))/c in the far field. κ = (1/γ² + |n×β|²)/(1 + n·β) avoids the
cancellation of 1 − n·β at high γ (kernels/kappa.py).
"""

from __future__ import annotations

import math

import numpy as np

from ..constants import C
from ._jit import jit
from .kappa import kappa


@jit
def field_at(nx, ny, nz, bx, by, bz, inv_g2, ax, ay, az, inv_r, velocity_term):
    """(Ex, Ey, Ez, κ) per q/(4πε0) for unit vector n, β, 1/γ², β̇ (1/s) and 1/R (1/m);
    the velocity term only when `velocity_term` (else the radiation term alone)."""
    k = kappa(nx, ny, nz, bx, by, bz, inv_g2)
    inv_k3 = 1.0 / (k * k * k)
    mx = nx - bx
    my = ny - by
    mz = nz - bz
    wx = my * az - mz * ay  # (n−β)×β̇
    wy = mz * ax - mx * az
    wz = mx * ay - my * ax
    vel = inv_g2 * inv_k3 * inv_r * inv_r if velocity_term else 0.0
    rad = inv_k3 * inv_r / C
    return (mx * vel + (ny * wz - nz * wy) * rad, my * vel + (nz * wx - nx * wz) * rad,
            mz * vel + (nx * wy - ny * wx) * rad, k)


@jit
def fields_near(t, pos, beta, inv_g2, beta_dot, observer, t_obs, e_out):
    """t_obs (N,) and e_out (N, 3) (per q/4πε0) of samples (t, pos, beta, inv_g2,
    beta_dot) seen from observer (3,)."""
    fields_near_kappa(t, pos, beta, inv_g2, beta_dot, observer, t_obs, e_out,
                      np.empty(t.shape[0]))


@jit
def fields_near_kappa(t, pos, beta, inv_g2, beta_dot, observer, t_obs, e_out, kappa_out):
    """As `fields_near`, and κ = dt/dt′ (N,) of each sample in kappa_out."""
    for j in range(t.shape[0]):
        dx = observer[0] - pos[j, 0]
        dy = observer[1] - pos[j, 1]
        dz = observer[2] - pos[j, 2]
        r = math.sqrt(dx * dx + dy * dy + dz * dz)
        e_out[j, 0], e_out[j, 1], e_out[j, 2], kappa_out[j] = field_at(
            dx / r, dy / r, dz / r, beta[j, 0], beta[j, 1], beta[j, 2], inv_g2[j],
            beta_dot[j, 0], beta_dot[j, 1], beta_dot[j, 2], 1.0 / r, True)
        t_obs[j] = t[j] + r / C


@jit
def fields_far(t, pos, beta, inv_g2, beta_dot, direction, distance, origin, t_obs, e_out):
    """Far-field t_obs (N,) and e_out (N, 3): radiation term, n = direction (3,) and
    R₀ = distance fixed, seen from origin (3,)."""
    fields_far_kappa(t, pos, beta, inv_g2, beta_dot, direction, distance, origin, t_obs,
                     e_out, np.empty(t.shape[0]))


@jit
def fields_far_kappa(t, pos, beta, inv_g2, beta_dot, direction, distance, origin, t_obs,
                     e_out, kappa_out):
    """As `fields_far`, and κ = dt/dt′ (N,) of each sample in kappa_out."""
    nx = direction[0]
    ny = direction[1]
    nz = direction[2]
    for j in range(t.shape[0]):
        e_out[j, 0], e_out[j, 1], e_out[j, 2], kappa_out[j] = field_at(
            nx, ny, nz, beta[j, 0], beta[j, 1], beta[j, 2], inv_g2[j], beta_dot[j, 0],
            beta_dot[j, 1], beta_dot[j, 2], 1.0 / distance, False)
        projected = (nx * (pos[j, 0] - origin[0]) + ny * (pos[j, 1] - origin[1])
                     + nz * (pos[j, 2] - origin[2]))
        t_obs[j] = t[j] + (distance - projected) / C


@jit
def fields_kappa(t, pos, beta, inv_g2, beta_dot, far, target, distance, origin, t_obs, e_out,
                 kappa_out):
    """Fill t_obs, e_out (per q/4πε0) and kappa_out of the samples (t, pos, beta, inv_g2,
    beta_dot) at one point: near field at target (3,) m, or, when `far`, the far field in
    direction target at `distance` (m) from origin (3,)."""
    if far:
        fields_far_kappa(t, pos, beta, inv_g2, beta_dot, target, distance, origin, t_obs,
                         e_out, kappa_out)
    else:
        fields_near_kappa(t, pos, beta, inv_g2, beta_dot, target, t_obs, e_out, kappa_out)
