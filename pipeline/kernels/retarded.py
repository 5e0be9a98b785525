"""The retarded-time condition t = t′ + R(t′)/c solved for t′, one observer at a time, and
the source span of one particle (the source times whose light reaches each point at its
window's edges), on a motion record (header, values) (`lagfield.kernels.motion`).

g(t′) = t′ + R(t′)/c − t is increasing (g′ = κ > 0 for |β| < 1), so a root is bracketed by
t′ = t (where g = R/c ≥ 0 in the near field) and a point found by stepping back in steps
growing fourfold; a Newton step is taken when it stays inside the bracket and a bisection
otherwise, so the root cannot be lost even where κ is as small as 1/(2γ²). In the far field
g = t′ + (R₀ − n·(r(t′) − O))/c − t, and the bracket may first have to grow forwards.
κ = (1/γ² + |n×β|²)/(1 + n·β) avoids the cancellation of 1 − n·β at high γ.

Outside the sampled track the motion is ballistic, and the root of the window's edges there
has a closed form (the smaller root of the light-cone quadratic, or the far field's linear
condition); `source_span` uses it and solves only where that root falls on the wrong side
of the track's end, i.e. where the true root lies within the sampled span.
"""

from __future__ import annotations

import math

import numpy as np

from ..constants import C
from ._jit import jit
from .kappa import kappa
from .motion import BREAKS, ENDS_BETA, ENDS_INV_G2, ENDS_R, PIECES, motion_state

MAX_ITERATIONS = 400  # bracket growths, and Newton/bisection steps, per solve
TOLERANCE = 4.0 * np.finfo(np.float64).eps  # of max(|t′|, |t|): a solve is converged
SMALLEST_REACH_S = 1e-30  # first bracket step when the delay at t′ = t is zero


@jit
def delay_and_kappa(header, values, t_src, target, far_distance, origin, far):
    """(delay s, κ) of the light leaving the charge of the motion (header, values) at
    t_src: near field, target is the observer (3,) and delay = R/c; far field, target is
    the direction n (3,) and delay = (R₀ − n·(r − O))/c with R₀ = far_distance."""
    x, y, z, bx, by, bz, inv_g2 = motion_state(header, values, t_src)[:7]
    if far:
        nx, ny, nz = target[0], target[1], target[2]
        projected = nx * (x - origin[0]) + ny * (y - origin[1]) + nz * (z - origin[2])
        delay = (far_distance - projected) / C
    else:
        dx = target[0] - x
        dy = target[1] - y
        dz = target[2] - z
        distance = math.sqrt(dx * dx + dy * dy + dz * dz)
        nx, ny, nz = dx / distance, dy / distance, dz / distance
        delay = distance / C
    return delay, kappa(nx, ny, nz, bx, by, bz, inv_g2)


@jit
def _excess(header, values, t_src, target, far_distance, origin, far, t_obs):
    """g(t_src) = t_src + delay − t_obs."""
    return t_src + delay_and_kappa(header, values, t_src, target, far_distance, origin,
                                   far)[0] - t_obs


@jit
def retarded_row(header, values, target, far_distance, origin, far, t_obs):
    """The source time t′ whose light reaches `target` (observer (3,), or far-field direction
    (3,) at distance far_distance from origin (3,) when `far`) at t_obs, of the motion
    (header, values). RuntimeError when no bracket is found within MAX_ITERATIONS steps."""
    high = t_obs
    delay = delay_and_kappa(header, values, high, target, far_distance, origin, far)[0]
    g_high = delay  # g(t) = R/c ≥ 0 (near field); the far-field delay may be negative
    first_reach = max(abs(delay), SMALLEST_REACH_S)
    reach = first_reach
    for _ in range(MAX_ITERATIONS):
        if not g_high < 0.0:
            break
        high = high + reach
        g_high = _excess(header, values, high, target, far_distance, origin, far, t_obs)
        reach = reach * 4.0
    reach = first_reach
    low = high - reach
    found = False
    for _ in range(MAX_ITERATIONS):
        g_low = _excess(header, values, low, target, far_distance, origin, far, t_obs)
        if not g_low > 0.0:
            found = True
            break
        reach = reach * 4.0
        high = low
        g_high = g_low
        low = high - reach
    if not found:
        raise RuntimeError("retarded time: no bracket found")
    x = high if g_high == 0.0 else low
    done = g_high == 0.0
    for _ in range(MAX_ITERATIONS):
        delay, slope = delay_and_kappa(header, values, x, target, far_distance, origin, far)
        g = x + delay - t_obs
        if g <= 0.0:
            low = x
        if g >= 0.0:
            high = x
        newton = x - g / slope
        tolerance = TOLERANCE * max(abs(x), abs(t_obs))
        if done or abs(g) <= tolerance or high - low <= tolerance:
            return x
        x = newton if low < newton < high else 0.5 * (low + high)
    return x


@jit
def retarded_rows(header, values, targets, far_distance, origin, far, t_obs, out):
    """`retarded_row` for every k: targets (K, 3), far_distance (K,) (far field only), t_obs
    (K,) into out (K,)."""
    for k in range(t_obs.shape[0]):
        out[k] = retarded_row(header, values, targets[k], far_distance[k] if far else 0.0,
                              origin, far, t_obs[k])


@jit
def ballistic_root(t_obs, target, far_distance, origin, far, r_end, beta_end, inv_g2,
                   t_end):
    """The retarded time of t_obs on the straight line through r_end (3,) at t_end with
    velocity c·beta_end (3,), in closed form: near field the smaller root of the light-cone
    quadratic, far field the root of the linear condition, slope κ."""
    big_t = t_obs - t_end
    if far:
        projected = (target[0] * (r_end[0] - origin[0]) + target[1] * (r_end[1] - origin[1])
                     + target[2] * (r_end[2] - origin[2]))
        delay = (far_distance - projected) / C
        return t_end + (big_t - delay) / kappa(target[0], target[1], target[2], beta_end[0],
                                               beta_end[1], beta_end[2], inv_g2)
    dx = target[0] - r_end[0]
    dy = target[1] - r_end[1]
    dz = target[2] - r_end[2]
    b = C * C * big_t - (dx * (C * beta_end[0]) + dy * (C * beta_end[1])
                         + dz * (C * beta_end[2]))
    c0 = C * C * big_t * big_t - (dx * dx + dy * dy + dz * dz)
    a = C * C * inv_g2
    return t_end + c0 / (b + math.sqrt(b * b - a * c0))


@jit
def source_span(header, values, targets, far_distance, origin, far, edge_lo, edge_hi,
                extend_none, seen_lo_out, seen_hi_out):
    """Per point p of targets (P, 3) (observers, or far-field directions at far_distance (P,)
    from origin (3,)), the source times seen_lo_out[p], seen_hi_out[p] whose light reaches
    it at edge_lo[p], edge_hi[p]: the closed form on the ballistic extension before the
    motion's first break t_first (after its last, t_last), solved on the motion (header,
    values) where that root lies after t_first (before t_last); with extend_none clipped to
    [t_first, t_last]."""
    t_first = values[header[BREAKS]]
    t_last = values[header[BREAKS] + header[PIECES]]
    r_first, r_last = values[header[ENDS_R]:header[ENDS_R] + 3], values[header[ENDS_R] + 3:]
    b_first = values[header[ENDS_BETA]:header[ENDS_BETA] + 3]
    b_last = values[header[ENDS_BETA] + 3:]
    inv_g2 = header[ENDS_INV_G2]
    for p in range(targets.shape[0]):
        target = targets[p]
        distance = far_distance[p] if far else 0.0
        lo = ballistic_root(edge_lo[p], target, distance, origin, far, r_first, b_first,
                            values[inv_g2], t_first)
        if lo > t_first:
            lo = retarded_row(header, values, target, distance, origin, far, edge_lo[p])
        hi = ballistic_root(edge_hi[p], target, distance, origin, far, r_last, b_last,
                            values[inv_g2 + 1], t_last)
        if hi < t_last:
            hi = retarded_row(header, values, target, distance, origin, far, edge_hi[p])
        if extend_none:
            if lo < t_first:
                lo = t_first
            if hi > t_last:
                hi = t_last
        seen_lo_out[p] = lo
        seen_hi_out[p] = hi
