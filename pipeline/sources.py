"""Per particle and observer group, the source times to sample: the span whose light the
window sees (closed form on the ballistic extensions, a retarded-time solve inside the
track), the reach check, and the adaptive source samples, refined until no step exceeds
what the observer bins, the distance and the local κ allow (kernels/refine.py,
kernels/sampling.py). `sample_motions` does all of it for a batch of particles in compiled
calls (kernels/batch.py), one block of particles per thread; `source_span` and
`source_samples` for one particle.
"""

from __future__ import annotations

import numpy as np

from . import threads
from .errors import LagfieldError, ObserverError
from .kernels import batch, refine
from .kernels import motion as motion_kernels
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
    if status != refine.OK:
        raise sampling_error(status, motion, group, point, distance_m, max_samples,
                             max_refinements)
    return t, motion_kernels.state_columns(state)


def sampling_error(status, motion: Motion, group, point, distance_m,
                   max_samples=MAX_SAMPLES_PER_PARTICLE, max_refinements=MAX_REFINEMENTS):
    """The error of a failed refinement (`kernels.refine.refine`'s status, point and
    distance_m) of `motion` for observer `group`."""
    if status == refine.TOO_MANY_SAMPLES:
        return LagfieldError(
            f"particle {motion.particle}, observer group '{group.name}': more than "
            f"{max_samples:.0e} source samples would be needed; shorten the time window or "
            "enlarge [time] step")
    if status == refine.NOT_SETTLED:
        return LagfieldError(f"particle {motion.particle}: source sampling did not settle "
                             f"after {max_refinements} refinements")
    return ObserverError(
        f"observer group '{group.name}', point {point} at {group.points_m[point].tolist()} m: "
        f"particle {motion.particle} reaches it during the time window (closest approach "
        f"{distance_m:.3g} m, extension included); the field there is singular. Move the "
        "point off the track")


def _runs(motions):
    """Lists of consecutive motions of one group of motions (`Motion.group_record`)."""
    run = []
    for motion in motions:
        if run and motion.group_record[1] is not run[0].group_record[1]:
            yield run
            run = []
        run.append(motion)
    if run:
        yield run


def _blocks(count: int, n_threads: int) -> list:
    """(first, stop) of up to n_threads contiguous blocks of count motions, none empty (a
    single heavy particle is worth a thread)."""
    pieces = max(1, min(n_threads, count))
    edges = np.linspace(0, count, pieces + 1).astype(int)
    return list(zip(edges[:-1].tolist(), edges[1:].tolist(), strict=True))


def sample_motions(motions, group, arguments, resolution_s: float, bin_s: float):
    """The source samples of many motions at the points of `group` (compiled, no Python per
    particle; `kernels.batch.sample_rows`): a list, per block of consecutive motions (of one
    group of motions, sampled in one thread), of (motions, t (N,), columns, offsets (M + 1,),
    ends (M, 2, END_COLUMNS)), the columns as `source_samples` gives them and motion i's
    samples at offsets[i]:offsets[i + 1]. arguments: `retarded.span_arguments` of the
    group's geometry and window; resolution_s, bin_s as for `source_samples`. The blocks
    are shared among numba's threads (`threads.each`). Raises the error of the first motion
    whose sampling fails, as `source_samples` would."""
    out = []
    for run in _runs(motions):
        header, values = run[0].group_record
        rows = np.array([motion.row for motion in run], dtype=np.int64)
        knots = np.ascontiguousarray(run[0].track.t_s, dtype=float)  # shared by the group

        def sample(block, rows=rows, knots=knots, header=header, values=values):
            first, stop = block
            return batch.sample_rows(
                header, values, rows[first:stop], knots, *arguments,
                SUBDIVISIONS_PER_INTERVAL, float(resolution_s), float(bin_s),
                SAMPLES_PER_BIN, ANGLE_TOLERANCE, UNIFORM_SPLIT_MAX,
                MAX_SAMPLES_PER_PARTICLE, MAX_REFINEMENTS, REACH_DISTANCE_M)

        blocks = _blocks(len(run), threads.count())
        for (first, stop), result in zip(blocks, threads.each(sample, blocks), strict=True):
            failed, status, point, distance = result[4:]
            if failed >= 0:  # blocks in order: the first failing motion
                raise sampling_error(status, run[first + failed], group, point, distance)
            out.append((run[first:stop], *result[:4]))
    return out

