"""Per particle and observer group, the source times to sample: the span whose light the
window sees (closed form on the ballistic extensions, a retarded-time solve inside the
track), the reach check, and the adaptive source samples, refined until no step exceeds
what the observer bins, the distance and the local κ allow (kernels/refine.py,
kernels/sampling.py).
"""

from __future__ import annotations

import numpy as np

from .errors import LagfieldError, ObserverError
from .kernels import motion as motion_kernels
from .kernels import refine
from .motion import Motion
from .retarded import span_times

SAMPLES_PER_BIN = 4.0  # source samples per observer bin, where the field varies fast
ANGLE_TOLERANCE = 0.02  # fraction of R/c or of √(2κ)/|β̇| one source step may span
SUBDIVISIONS_PER_INTERVAL = 4  # initial source samples between two track samples
REACH_DISTANCE_M = 1e-9  # a track this close to a point reaches it
MAX_REFINEMENTS = 200
UNIFORM_SPLIT_MAX = 64  # pieces an interval is split into evenly in one refinement
MAX_SAMPLES_PER_PARTICLE = 50_000_000


def source_span(motion: Motion, geometry, edge_lo, edge_hi, extend: str, arguments=None):
    """(span, seen): the source-time interval (t_lo, t_hi) whose light covers observer
    times [edge_lo, edge_hi] at every point (conservative: it may be wider), and per point
    the source times (seen_lo (P,), seen_hi (P,)) whose light reaches it in its window
    (compiled: a closed form on the ballistic extensions, the retarded-time solve where
    that root lies within the sampled track; see `retarded.span_times`, and for
    `arguments` `retarded.span_arguments`). geometry: the group's observers.Geometry."""
    lo, hi = span_times(motion, geometry, edge_lo, edge_hi, extend, arguments)
    return (float(lo.min()), float(hi.max())), (lo, hi)


def source_samples(motion: Motion, group, geometry, span, resolution_s: float, seen, *,
                   bin_s: float | None = None, per_bin=SAMPLES_PER_BIN, tolerance=ANGLE_TOLERANCE,
                   subdivisions=SUBDIVISIONS_PER_INTERVAL, uniform_split_max=UNIFORM_SPLIT_MAX,
                   max_samples=MAX_SAMPLES_PER_PARTICLE, max_refinements=MAX_REFINEMENTS,
                   reach_m=REACH_DISTANCE_M):
    """(t (N,), (pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp)): source times, refined
    until no step exceeds what the observer bins, the distance and the local κ allow
    (kernels/refine.py), and the motion at them with its references (as
    `Motion.evaluate_referenced`), resolving observer times resolution_s (inf: none; see
    `engine.FieldSettings.sampling_resolution_s`) and bins of bin_s (default resolution_s;
    see `kernels.sampling`) at the points of `geometry` over span (t_lo, t_hi).
    `seen` (seen_lo (P,), seen_hi (P,)): the source times whose light each point sees in
    its window; only there does a point's distance limit the step and count for the reach
    check. Where the sampled track meets its extension the sample is doubled (zero
    acceleration on the extension side). LagfieldError when more than max_samples samples
    would be needed or the sampling does not settle in max_refinements levels;
    ObserverError when the track comes within reach_m of a point (near field)."""
    status, t, state, point, distance_m = refine.refine(
        *motion.record, np.ascontiguousarray(motion.track.t_s, dtype=float), float(span[0]),
        float(span[1]), int(subdivisions), np.ascontiguousarray(geometry.targets, dtype=float),
        np.ascontiguousarray(seen[0], dtype=float), np.ascontiguousarray(seen[1], dtype=float),
        bool(geometry.far), float(resolution_s),
        float(resolution_s if bin_s is None else bin_s), float(per_bin), float(tolerance),
        int(uniform_split_max), int(max_samples), int(max_refinements), float(reach_m))
    if status == refine.OK:
        return t, motion_kernels.state_columns(state)
    if status == refine.TOO_MANY_SAMPLES:
        raise LagfieldError(
            f"particle {motion.particle}, observer group '{group.name}': more than "
            f"{max_samples:.0e} source samples would be needed; shorten the time window or "
            "enlarge [time] step")
    if status == refine.NOT_SETTLED:
        raise LagfieldError(f"particle {motion.particle}: source sampling did not settle "
                            f"after {max_refinements} refinements")
    raise ObserverError(
        f"observer group '{group.name}', point {point} at {group.points_m[point].tolist()} m: "
        f"particle {motion.particle} reaches it during the time window (closest approach "
        f"{distance_m:.3g} m, extension included); the field there is singular. Move the "
        "point off the track")


def _insert_stops(t, state, where, source):
    """Copies of the samples `source` (same time, position, velocity and references; zero
    acceleration) inserted before the indices `where`."""
    inserted = tuple(np.insert(a, where, np.zeros_like(a[source]) if i == 3 else a[source],
                               axis=0) for i, a in enumerate(state))
    return np.insert(t, where, t[source]), inserted


def accelerated_part(span, seen, motion: Motion):
    """Far field: the part of `span` (and of each point's `seen` window) on the sampled
    track, or (None, None). The radiation term vanishes where β̇ = 0, so the ballistic
    extensions send no far field (their primitive n×(n×β)/κ is constant)."""
    t_lo, t_hi = max(span[0], motion.t_first), min(span[1], motion.t_last)
    if not t_lo < t_hi:
        return None, None
    return (t_lo, t_hi), (np.clip(seen[0], t_lo, t_hi), np.clip(seen[1], t_lo, t_hi))


def radiation_stops(t, state, motion: Motion):
    """Far field: where the samples start at the track's first sample (end at its last),
    a copy with β̇ = 0 goes before (after) it, so that the field drops to zero there rather
    than its end value being held to the window's edge (bins and spectra stay exact)."""
    head = t.size > 0 and t[0] == motion.t_first
    tail = t.size > 0 and t[-1] == motion.t_last
    if not (head or tail):
        return t, state
    where = ([0] if head else []) + ([t.size] if tail else [])
    source = ([0] if head else []) + ([t.size - 1] if tail else [])
    return _insert_stops(t, state, where, source)
