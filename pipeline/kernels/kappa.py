"""κ = dt/dt′ = 1 − n·β, the compression of source time into observer time, in the form
(1/γ² + |n×β|²)/(1 + n·β): equal to it for a unit vector n, since |n×β|² = |β|² − (n·β)²
and |β|² = 1 − 1/γ², and free of the cancellation of 1 − n·β when β is close to n (high γ).
Where n·β < 0 (light sent backwards) 1 − n·β has no cancellation while 1 + n·β may: there
κ is taken as it is.

`kappa_fraction` is the one place the formula is written: compiled callers take the
numerator and denominator (some need 1/κ), Python callers `kappa_array`.
"""

from __future__ import annotations

import numpy as np

from ._jit import jit


@jit
def kappa_fraction(nx, ny, nz, bx, by, bz, inv_g2):
    """(numerator, denominator) for unit vector n and β: κ is their ratio, (1/γ² + |n×β|²,
    1 + n·β) where n·β ≥ 0, else (1 − n·β, 1)."""
    nb = nx * bx + ny * by + nz * bz
    if nb < 0.0:
        return 1.0 - nb, 1.0
    cx = ny * bz - nz * by
    cy = nz * bx - nx * bz
    cz = nx * by - ny * bx
    return inv_g2 + cx * cx + cy * cy + cz * cz, 1.0 + nb


@jit
def kappa(nx, ny, nz, bx, by, bz, inv_g2):
    """κ = 1 − n·β for unit vector n, β and 1/γ², without cancellation."""
    numerator, denominator = kappa_fraction(nx, ny, nz, bx, by, bz, inv_g2)
    return numerator / denominator


def kappa_array(n, beta, inv_g2):
    """κ of unit vectors n (..., 3), velocities beta (..., 3) and 1/γ² (...), broadcast."""
    n = np.asarray(n, dtype=float)
    beta = np.asarray(beta, dtype=float)
    cross = np.cross(n, beta)
    nb = np.einsum("...i,...i->...", n, beta)
    with np.errstate(divide="ignore", invalid="ignore"):
        forward = (inv_g2 + np.einsum("...i,...i->...", cross, cross)) / (1.0 + nb)
    return np.where(nb < 0.0, 1.0 - nb, forward)
