"""The retarded-time condition t = t′ + |r_obs − r(t′)|/c, solved for t′.

g(t′) = t′ + R(t′)/c − t is increasing (g′ = κ = 1 − n·β > 0 for |β| < 1), so a root is
bracketed by t′ = t (where g = R/c ≥ 0) and a point found by stepping back in growing
steps; a Newton step is taken when it stays inside the bracket and a bisection otherwise,
so the root cannot be lost even where κ is as small as 1/(2γ²). For an ultra-relativistic
charge the root may lie far before the sampled track (about 2γ² × distance / c): the
search does not assume the root is inside the track's span.
"""

from __future__ import annotations

import numpy as np
from scipy import constants

C = constants.c
MAX_ITERATIONS = 400


def retarded_time(motion, observer_m, t_obs_s, *, far_direction=None, far_distance_m=None,
                  origin_m=(0.0, 0.0, 0.0)):
    """Source times t′ (array like t_obs_s) at which light reaching `observer_m` (3,), or
    one observer per time (K, 3), at t_obs_s left the charge. With `far_direction` n ((3,)
    or (K, 3)) and `far_distance_m` R₀ the far-field condition
    t = t′ + (R₀ − n·(r(t′) − origin))/c is solved instead."""
    t_obs = np.atleast_1d(np.asarray(t_obs_s, dtype=float))
    observer = None if observer_m is None else np.asarray(observer_m, dtype=float)
    origin = np.asarray(origin_m, dtype=float)

    def delay_and_slope(t_src):
        r, beta, inv_g2, _ = motion.evaluate(t_src)
        if far_direction is None:
            d = observer - r
            distance = np.sqrt(np.einsum("ij,ij->i", d, d))
            n = d / distance[:, None]
            delay = distance / C
        else:
            n = np.broadcast_to(np.asarray(far_direction, dtype=float), r.shape)
            delay = (far_distance_m - np.einsum("ij,ij->i", n, r - origin)) / C
        nb = np.einsum("ij,ij->i", n, beta)
        cross = np.cross(n, beta)
        kappa = (inv_g2 + np.einsum("ij,ij->i", cross, cross)) / (1.0 + nb)
        return delay, kappa

    high = t_obs.copy()
    delay, _ = delay_and_slope(high)
    g_high = delay  # g(t) = R/c >= 0 (near field); the far-field delay may be negative
    reach = np.maximum(np.abs(delay), 1e-30)
    for _ in range(MAX_ITERATIONS):
        below = g_high < 0.0
        if not below.any():
            break
        high = np.where(below, high + reach, high)
        g_high = np.where(below, high + delay_and_slope(high)[0] - t_obs, g_high)
        reach = np.where(below, reach * 4.0, reach)
    reach = np.maximum(np.abs(delay), 1e-30)
    low = high - reach
    for _ in range(MAX_ITERATIONS):
        g_low = low + delay_and_slope(low)[0] - t_obs
        above = g_low > 0.0
        if not above.any():
            break
        reach = np.where(above, reach * 4.0, reach)
        high = np.where(above, low, high)
        g_high = np.where(above, g_low, g_high)
        low = np.where(above, high - reach, low)
    else:
        raise RuntimeError("retarded time: no bracket found")
    x = np.where(g_high == 0.0, high, low)
    done = g_high == 0.0
    for _ in range(MAX_ITERATIONS):
        delay, kappa = delay_and_slope(x)
        g = x + delay - t_obs
        low = np.where(g <= 0.0, x, low)
        high = np.where(g >= 0.0, x, high)
        newton = x - g / kappa
        inside = (newton > low) & (newton < high)
        x_new = np.where(inside, newton, 0.5 * (low + high))
        tolerance = 4.0 * np.finfo(float).eps * np.maximum(np.abs(x), np.abs(t_obs))
        converged = (np.abs(g) <= tolerance) | (high - low <= tolerance)
        done = done | converged
        if done.all():
            return x
        x = np.where(done, x, x_new)
    return x
