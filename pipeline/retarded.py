"""The retarded-time condition t = t′ + |r_obs − r(t′)|/c, solved for t′, and the source
span of a particle; the solves are the compiled kernels of `lagfield.kernels.retarded`.

g(t′) = t′ + R(t′)/c − t is increasing (g′ = κ = 1 − n·β > 0 for |β| < 1), so a root is
bracketed by t′ = t (where g = R/c ≥ 0) and a point found by stepping back in growing
steps; a Newton step is taken when it stays inside the bracket and a bisection otherwise,
so the root cannot be lost even where κ is as small as 1/(2γ²). For an ultra-relativistic
charge the root may lie far before the sampled track (about 2γ² × distance / c): the
search does not assume the root is inside the track's span.
"""

from __future__ import annotations

import numpy as np

from .kernels import retarded as kernels

_NO_DISTANCES = np.zeros(0)


def retarded_time(motion, observer_m, t_obs_s, *, far_direction=None, far_distance_m=None,
                  origin_m=(0.0, 0.0, 0.0)):
    """Source times t′ (array like t_obs_s) at which light reaching `observer_m` (3,), or
    one observer per time (K, 3), at t_obs_s left the charge. With `far_direction` n ((3,)
    or (K, 3)) and `far_distance_m` R₀ the far-field condition
    t = t′ + (R₀ − n·(r(t′) − origin))/c is solved instead."""
    t_obs = np.atleast_1d(np.asarray(t_obs_s, dtype=float))
    far = far_direction is not None
    target = np.asarray(far_direction if far else observer_m, dtype=float)
    distance = np.asarray(far_distance_m if far else 0.0, dtype=float)
    count = np.broadcast_shapes(t_obs.shape, target.shape[:-1], distance.shape)
    t_obs = np.ascontiguousarray(np.broadcast_to(t_obs, count))
    targets = np.ascontiguousarray(np.broadcast_to(target, count + (3,)))
    distances = np.ascontiguousarray(np.broadcast_to(distance, count))
    out = np.empty(count)
    kernels.retarded_rows(*motion.record, targets, distances,
                          np.asarray(origin_m, dtype=float), far, t_obs, out)
    return out


def span_arguments(geometry, edge_lo, edge_hi, extend: str) -> tuple:
    """The arguments of `span_times` that do not depend on the particle, as the kernel takes
    them (made once per group and window: per particle they cost more than the solve)."""
    count = geometry.targets.shape[0]
    distances = geometry.distance_m if geometry.far else _NO_DISTANCES
    return (np.ascontiguousarray(geometry.targets, dtype=float),
            np.ascontiguousarray(distances, dtype=float),
            np.ascontiguousarray(geometry.origin_m, dtype=float), bool(geometry.far),
            np.ascontiguousarray(np.broadcast_to(np.asarray(edge_lo, dtype=float), count)),
            np.ascontiguousarray(np.broadcast_to(np.asarray(edge_hi, dtype=float), count)),
            extend == "none")


def span_times(motion, geometry, edge_lo, edge_hi, extend: str, arguments=None):
    """Per point of the group, the source times (lo (P,), hi (P,)) whose light reaches it at
    observer times edge_lo, edge_hi ((P,) or scalars): the closed form on the ballistic
    extensions, the solver where that root lies within the sampled track; with
    extend = "none" clipped to the track's span. geometry: the group's
    `observers.Geometry` (its targets are the points, or the far-field directions);
    arguments: `span_arguments` of the same, if made already."""
    if arguments is None:
        arguments = span_arguments(geometry, edge_lo, edge_hi, extend)
    count = geometry.targets.shape[0]
    lo = np.empty(count)
    hi = np.empty(count)
    kernels.source_span(*motion.record, *arguments, lo, hi)
    return lo, hi
