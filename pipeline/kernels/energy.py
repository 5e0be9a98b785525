"""∫|E|² dt over each point's observer-time window, from the source samples, in one
compiled call over a group's points (one thread per point): as `fluence.window_energy`,
∫|E|² κ dt′ by the corrected trapezoid rule in source time (`quadrature`), a window edge between two
samples becoming a sample of its own (source time and integrand linear in observer time).
"""

from __future__ import annotations

import numba
import numpy as np

from ._jit import jit
from .pointwise import fields_kappa
from .quadrature import node_slope, node_terms


@jit(inline=True)
def _node(i, count, head, tail, first, t_src, t_obs, e, kappa, start, stop):
    """(source time, |E|² κ) of node i of the window's count nodes: the samples from
    `first` on, after a node at the window's start when `head` and before one at its stop
    when `tail` (both interpolated linearly in observer time)."""
    edge = head == 1 and i == 0
    if edge or (tail == 1 and i == count - 1):
        j = first - 1 if edge else first + count - head - tail - 1
        fraction = ((start if edge else stop) - t_obs[j]) / (t_obs[j + 1] - t_obs[j])
        low = (e[j, 0] ** 2 + e[j, 1] ** 2 + e[j, 2] ** 2) * kappa[j]
        high = (e[j + 1, 0] ** 2 + e[j + 1, 1] ** 2 + e[j + 1, 2] ** 2) * kappa[j + 1]
        return (t_src[j] + fraction * (t_src[j + 1] - t_src[j]),
                low + fraction * (high - low))
    j = first + i - head
    return t_src[j], (e[j, 0] ** 2 + e[j, 1] ** 2 + e[j, 2] ** 2) * kappa[j]


@jit
def window_energy(t_src, t_obs, e, kappa, start, stop):
    """∫|E|² dt over observer times [start, stop] (see the module docstring): the
    corrected trapezoid rule of `quadrature`, node by node, without arrays."""
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
    total = 0.0
    t_prev, f_prev = 0.0, 0.0
    t_here, f_here = _node(0, count, head, tail, first, t_src, t_obs, e, kappa, start, stop)
    for i in range(count):
        t_next, f_next = t_here, f_here
        if i < count - 1:
            t_next, f_next = _node(i + 1, count, head, tail, first, t_src, t_obs, e, kappa,
                                   start, stop)
        h_left = t_here - t_prev if i > 0 else 0.0
        h_right = t_next - t_here if i < count - 1 else 0.0
        weight, correction = node_terms(h_left, h_right)
        total += weight * f_here + correction * node_slope(h_left, h_right, f_prev, f_here,
                                                           f_next)
        t_prev, f_prev = t_here, f_here
        t_here, f_here = t_next, f_next
    return total


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
