"""∫|E|² dt over each point's observer-time window, from the source samples, in one
compiled call over a group's points (one thread per point): as `fluence.window_energy`,
∫|E|² κ dt′ by the corrected trapezoid rule in source time, a window edge between two
samples becoming a sample of its own (source time and integrand linear in observer time).
"""

from __future__ import annotations

import numba
import numpy as np

from ._jit import jit
from .pointwise import fields_kappa
from .quadrature import corrected_trapezoid


@jit
def window_energy(t_src, t_obs, e, kappa, start, stop):
    """∫|E|² dt over observer times [start, stop] (see the module docstring)."""
    n = t_src.shape[0]
    first = np.searchsorted(t_obs, start, side="left")
    last = np.searchsorted(t_obs, stop, side="right")
    if last <= first:
        return 0.0
    head = 1 if first > 0 else 0
    tail = 1 if last < n else 0
    count = last - first + head + tail
    if count < 2:
        return 0.0
    times = np.empty(count)
    density = np.empty((count, 3))
    for j in range(first, last):
        times[head + j - first] = t_src[j]
        for c in range(3):
            density[head + j - first, c] = e[j, c] * e[j, c] * kappa[j]
    for is_tail in range(2):
        if (head if is_tail == 0 else tail) == 0:
            continue
        j = first - 1 if is_tail == 0 else last - 1
        edge = start if is_tail == 0 else stop
        row = 0 if is_tail == 0 else count - 1
        fraction = (edge - t_obs[j]) / (t_obs[j + 1] - t_obs[j])
        times[row] = t_src[j] + fraction * (t_src[j + 1] - t_src[j])
        for c in range(3):
            low = e[j, c] * e[j, c] * kappa[j]
            high = e[j + 1, c] * e[j + 1, c] * kappa[j + 1]
            density[row, c] = low + fraction * (high - low)
    weights = np.empty((3, count))
    corrections = np.empty((3, count))
    corrected_trapezoid(times, density, times[0], times[count - 1], weights, corrections)
    return weights.sum()


@jit(parallel=True)
def window_energies(t, pos, beta, inv_g2, beta_dot, far, targets, distance_m, origin_m,
                    start, stop, factor, out):
    """out[p] += factor × ∫|E|² dt (per (q/4πε0)²) over [start[p], stop[p]] at every point
    of targets (P, 3) (far: directions at distance_m (P,) from origin_m (3,))."""
    n = t.shape[0]
    for p in numba.prange(targets.shape[0]):
        t_obs = np.empty(n)
        e = np.empty((n, 3))
        kappa = np.empty(n)
        fields_kappa(t, pos, beta, inv_g2, beta_dot, far, targets[p], distance_m[p], origin_m,
                     t_obs, e, kappa)
        out[p] += factor * window_energy(t, t_obs, e, kappa, start[p], stop[p])
