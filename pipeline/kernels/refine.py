"""Adaptive source sampling of one particle, compiled: the source times and the motion at them.

The initial samples are the span's ends, the last track sample and `subdivisions` equal
parts of every interval between the track samples inside the span. An interval [a, b] is
then refined while its step limits (`sampling._step_limit`; the smaller of its two ends')
ask for pieces = ⌈(b − a)/limit·(1 − 1e-12)⌉ > 1: into `pieces` equal parts when pieces ≤
`uniform_split_max`, else halved, so that an interval whose limit is small at one end only
(a ballistic extension towards a point) ends up graded rather than uniformly fine. A new
sample's limit uses neighbours at ± the width of its part; a sample's limit never changes
after it is made. Each decision therefore depends on its interval alone, and a depth-first
walk (an explicit stack of pending right ends, left to right) makes the samples in order,
without sorting. Refining level by level until nothing is left gives the same samples; the
failures are decided as that would: "too many samples" once the samples made, counting the
parts an interval at the last level would be cut into, exceed `max_samples`; "did not settle"
when an interval at level max_depth − 1 still asks to be cut.

The track reaching a point (within `reach_m` of the polyline through the samples whose light
it sees, `sampling._closest`) is checked on the initial and on the final samples (near field
only). Last, where the samples meet the ballistic extensions at the track's first or last
sample, that sample is doubled (same state; zero β̇ on the extension side).

`refine` takes the motion record's arrays (header, values) (`lagfield.motion.Motion.record`)
and is callable from other compiled code. The samples' states are rows of one array
(N, STATE_WIDTH) (`lagfield.kernels.motion`: columns POS, BETA, INV_G2, BETA_DOT, REF_T,
REF_R, DISP), so that evaluating, copying and limiting a sample pass few arrays.
"""

from __future__ import annotations

import numpy as np

from ._jit import jit
from .motion import BETA, BETA_DOT, INV_G2, POS, STATE_WIDTH, state_into
from .sampling import _closest, _step_limit

# the step limit of one sample, inlined here: a call passing its dozen arrays costs as much
# as its arithmetic
_step_limit_here = jit(inline=True)(_step_limit.py_func)

OK = 0
TOO_MANY_SAMPLES = 1
NOT_SETTLED = 2
REACHES_POINT = 3
SPLIT_MARGIN = 1.0 - 1e-12  # an interval this close to a whole number of limits is not cut


@jit
def initial_times(knots, t_lo, t_hi, subdivisions):
    """Sorted distinct initial source times in [t_lo, t_hi]: the ends, the last knot, and
    `subdivisions` equal parts of each interval between the knots strictly inside."""
    first = np.searchsorted(knots, t_lo, side="right")
    stop = np.searchsorted(knots, t_hi, side="left")
    inner = max(stop - first, 0)
    parts = (inner - 1) * subdivisions if inner >= 2 else inner
    candidates = np.empty(parts + 3)
    candidates[0] = t_lo
    if inner >= 2:
        for i in range(inner - 1):
            start = knots[first + i]
            width = knots[first + i + 1] - start
            for k in range(subdivisions):
                candidates[1 + i * subdivisions + k] = start + width * (k / subdivisions)
    elif inner == 1:
        candidates[1] = knots[first]
    candidates[parts + 1] = knots[knots.shape[0] - 1]
    candidates[parts + 2] = t_hi
    times = np.unique(candidates)
    return times[(times >= t_lo) & (times <= t_hi)]


@jit
def _grown(array, used, capacity):
    """A copy of `array` with room for `capacity` rows, its first `used` rows kept."""
    out = np.empty((capacity,) + array.shape[1:], array.dtype)
    out[:used] = array[:used]
    return out


@jit
def _new_state(n):
    """An empty state array for n rows."""
    return np.empty((n, STATE_WIDTH))


@jit
def _copy_row(source, i, target, j):
    """Row i of the state array `source` into row j of `target` (element by element: a
    slice assignment would allocate)."""
    for k in range(STATE_WIDTH):
        target[j, k] = source[i, k]


@jit
def _zero_acceleration(state, j):
    for c in range(3):
        state[j, BETA_DOT + c] = 0.0


@jit(inline=True)
def _limit(j, state, before, after, targets, seen_lo, seen_hi, far_field, resolution_s,
           bin_s, per_bin, tolerance):
    return _step_limit_here(j, state[:, POS:POS + 3], state[:, BETA:BETA + 3],
                            state[:, INV_G2], state[:, BETA_DOT:BETA_DOT + 3], before, after,
                            targets, seen_lo, seen_hi, far_field, resolution_s, bin_s,
                            per_bin, tolerance)


@jit
def _pieces(width, limit_a, limit_b):
    """Parts the interval [a, b] of `width` needs (1 when its limits say nothing)."""
    if limit_a != limit_a or limit_b != limit_b:
        return 1.0
    pieces = np.ceil(width / min(limit_a, limit_b) * SPLIT_MARGIN)
    return pieces if np.isfinite(pieces) else 1.0


@jit
def _nearest_reached(t, pos, n, targets, seen_lo, seen_hi, reach_m):
    """(point, distance m) of the point the polyline through the first n samples comes
    closest to, when within reach_m of it; (-1, inf) otherwise."""
    best = np.inf
    point = -1
    for p in range(targets.shape[0]):
        distance = _closest(p, t[:n], pos[:n], targets, seen_lo, seen_hi)
        if distance != distance:
            return -1, np.inf  # as a minimum taken over a NaN: nothing is reached
        if distance < best:
            best = distance
            point = p
    if best < reach_m:
        return point, best
    return -1, np.inf


@jit
def _double_track_ends(t, state, n, t_first, t_last):
    """Rows after the track's first sample t_first (if it is a sample, not the first row)
    and after its last t_last (if a sample, not the last row) shifted to make room for a
    copy of it with zero β̇ on the extension side: before the first, after the last. The
    arrays need room for n + 2 rows; returns the new row count."""
    first = np.searchsorted(t[:n], t_first)
    last = np.searchsorted(t[:n], t_last)
    at_first = 0 < first < n and t[first] == t_first
    at_last = last < n - 1 and t[last] == t_last
    # copies go before (original) rows `first` and `last + 1`; move rows from the end
    shift = int(at_first) + int(at_last)
    for i in range(n - 1, -1, -1):
        if shift == 0:
            break
        t[i + shift] = t[i]
        _copy_row(state, i, state, i + shift)
        if at_last and i == last + 1:
            shift -= 1
            t[i + shift] = t[last]
            _copy_row(state, last, state, i + shift)
            _zero_acceleration(state, i + shift)
        if at_first and i == first:
            shift -= 1
            t[i + shift] = t[first]
            _copy_row(state, first + 1, state, i + shift)  # row `first` now sits at first+1
            _zero_acceleration(state, i + shift)
    return n + int(at_first) + int(at_last)


@jit
def refine(header, values, knots_s, t_lo, t_hi, subdivisions, targets, seen_lo, seen_hi,
           far_field, resolution_s, bin_s, per_bin, tolerance, uniform_split_max, max_samples,
           max_depth, reach_m):
    """Refined source times over [t_lo, t_hi] of the motion (header, values) (of the track
    sampled at knots_s (n,) s) and the motion at them:
    (status, t (N,), state (N, STATE_WIDTH), point, distance_m).

    targets (P, 3): points in m, or unit directions when far_field; seen_lo, seen_hi (P,) s:
    the source times whose light reaches point p within its window; resolution_s: the
    observer-time scale to resolve (inf: none); bin_s: the observer bin; per_bin,
    tolerance: see `sampling`. status: OK,
    TOO_MANY_SAMPLES, NOT_SETTLED or REACHES_POINT (point and its closest approach
    distance_m given; -1 and inf otherwise). On a failure the arrays are empty."""
    start = initial_times(knots_s, t_lo, t_hi, subdivisions)
    n_start = start.shape[0]
    initial = _new_state(n_start)
    before = np.empty(n_start)
    after = np.empty(n_start)
    limits = np.empty(n_start)
    for j in range(n_start):
        state_into(header, values, start[j], initial, j)
        before[j] = start[max(j - 1, 0)]
        after[j] = start[min(j + 1, n_start - 1)]
    for j in range(n_start):
        limits[j] = _limit(j, initial, before, after, targets, seen_lo, seen_hi, far_field,
                           resolution_s, bin_s, per_bin, tolerance)
    empty = start[:0]
    empty_state = _new_state(0)
    if not far_field:
        point, distance = _nearest_reached(start, initial[:, POS:POS + 3], n_start, targets,
                                           seen_lo, seen_hi, reach_m)
        if point >= 0:
            return REACHES_POINT, empty, empty_state, point, distance
    if n_start == 0:
        return OK, empty, empty_state, -1, np.inf

    # the stack holds the pending right ends, the next one on top, each with the level of
    # the interval that ends there
    capacity = n_start + 64
    stack_t = np.empty(capacity)
    stack_limit = np.empty(capacity)
    stack_level = np.empty(capacity, np.int64)
    stack_before = np.empty(capacity)
    stack_after = np.empty(capacity)
    stack = _new_state(capacity)
    top = 0
    for j in range(n_start - 1, 0, -1):
        stack_t[top] = start[j]
        stack_limit[top] = limits[j]
        stack_level[top] = 0
        _copy_row(initial, j, stack, top)
        top += 1
    size = max(2 * n_start, 64)
    t = np.empty(size)
    out = _new_state(size)
    t[0] = start[0]
    _copy_row(initial, 0, out, 0)
    n = 1
    a_t = start[0]
    a_limit = limits[0]
    total = n_start
    settled = True
    while top > 0:
        b = top - 1
        width = stack_t[b] - a_t
        pieces = _pieces(width, a_limit, stack_limit[b])
        level = stack_level[b]
        cut = pieces > 1.0
        if cut:
            count = int(pieces) - 1 if pieces <= uniform_split_max else 1
            total += count
            if total > max_samples:
                return TOO_MANY_SAMPLES, empty, empty_state, -1, np.inf
            if level >= max_depth - 1:
                settled = False  # the last level still cuts: count on, keep nothing
                cut = False
        if not cut:
            if settled:
                if n == t.shape[0]:
                    t = _grown(t, n, 2 * n)
                    out = _grown(out, n, 2 * n)
                t[n] = stack_t[b]
                _copy_row(stack, b, out, n)
                n += 1
            a_t = stack_t[b]
            a_limit = stack_limit[b]
            top -= 1
            continue
        part = width / (count + 1)
        if top + count > stack_t.shape[0]:
            capacity = 2 * (top + count)
            stack_t = _grown(stack_t, top, capacity)
            stack_limit = _grown(stack_limit, top, capacity)
            stack_level = _grown(stack_level, top, capacity)
            stack_before = _grown(stack_before, top, capacity)
            stack_after = _grown(stack_after, top, capacity)
            stack = _grown(stack, top, capacity)
        stack_level[b] = level + 1
        for rank in range(count, 0, -1):
            t_new = a_t + part * rank
            stack_t[top] = t_new
            stack_level[top] = level + 1
            stack_before[top] = t_new - part
            stack_after[top] = t_new + part
            state_into(header, values, t_new, stack, top)
            stack_limit[top] = _limit(top, stack, stack_before, stack_after, targets, seen_lo,
                                      seen_hi, far_field, resolution_s, bin_s, per_bin,
                                      tolerance)
            top += 1
    if not settled:
        return NOT_SETTLED, empty, empty_state, -1, np.inf
    if not far_field:
        point, distance = _nearest_reached(t, out[:, POS:POS + 3], n, targets, seen_lo,
                                           seen_hi, reach_m)
        if point >= 0:
            return REACHES_POINT, empty, empty_state, point, distance
    if n + 2 > t.shape[0]:
        t = _grown(t, n, n + 2)
        out = _grown(out, n, n + 2)
    n = _double_track_ends(t, out, n, knots_s[0], knots_s[knots_s.shape[0] - 1])
    # copies of just the samples: slices would keep the spare rows alive
    return OK, _grown(t, n, n), _grown(out, n, n), -1, np.inf
