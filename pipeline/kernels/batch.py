"""Source samples of many particles in one compiled call: per motion of a group of motions
(one header, values (G, L); `lagfield.kernels.motion`) the source span (`retarded.source_span`),
in the far field its part on the sampled track, the refined samples (`refine.refine`), in the
far field the stops where the radiation ends, and the track's end states for the ballistic
extensions (`deposit`'s `ends`). The samples of all motions come back concatenated, in order,
so that no Python runs per particle.

Far field: the radiation term vanishes where β̇ = 0, so the ballistic extensions send no far
field (their primitive n×(n×β)/κ is constant). Only the part of the span on the sampled track
is sampled, and where the samples start at the track's first sample (end at its last), a copy
with β̇ = 0 goes before (after) it: the field drops to zero there rather than its end value
being held to the window's edge, so bins and spectra stay exact.
"""

from __future__ import annotations

import numpy as np

from ._jit import jit
from .deposit import END_BX, END_COLUMNS, END_IG2, END_T, END_X
from .motion import BREAKS, ENDS_BETA, ENDS_INV_G2, ENDS_R, PIECES, STATE_WIDTH, state_columns
from .refine import OK, _copy_row, _grown, _zero_acceleration, refine
from .retarded import source_span


@jit
def _ends_into(header, values, extend_none, ends, i):
    """ends[i] (2, END_COLUMNS): time, position, velocity and 1/γ² of the track's first and
    last sample, where its extensions start, as the motion record holds them (times ∓inf
    with extend_none: no extensions)."""
    for e in range(2):
        ends[i, e, END_T] = values[header[BREAKS] + e * header[PIECES]]
        for c in range(3):
            ends[i, e, END_X + c] = values[header[ENDS_R] + 3 * e + c]
            ends[i, e, END_BX + c] = values[header[ENDS_BETA] + 3 * e + c]
        ends[i, e, END_IG2] = values[header[ENDS_INV_G2] + e]
    if extend_none:
        ends[i, 0, END_T] = -np.inf
        ends[i, 1, END_T] = np.inf


@jit
def sample_rows(header, values, rows, knots, targets, far_distance, origin, far, edge_lo,
                edge_hi, extend_none, subdivisions, resolution_s, bin_s, per_bin, tolerance,
                uniform_split_max, max_samples, max_depth, reach_m):
    """The source samples of motions rows (M,) of the group (header, values (G, L)), whose
    tracks are all sampled at knots (n,) s, over the span whose light the points' windows see
    (targets (P, 3) … extend_none as `retarded.source_span` takes them; the refinement's
    rules as `refine.refine` takes them):
    (t (N,), columns, offsets (M + 1,), ends (M, 2, END_COLUMNS), failed, status, point,
    distance_m), the columns those of `motion.state_columns` (pos, beta, inv_g2, beta_dot,
    ref_t, ref_r, disp). Motion i's samples are t[offsets[i]:offsets[i + 1]]. At the
    first motion whose sampling fails, `failed` is its index (else -1) and the samples stop
    there; status, point and distance_m are `refine.refine`'s."""
    m = rows.shape[0]
    n_points = targets.shape[0]
    seen_lo = np.empty(n_points)
    seen_hi = np.empty(n_points)
    offsets = np.zeros(m + 1, np.int64)
    ends = np.empty((m, 2, END_COLUMNS))
    t_all = np.empty(1024)
    state_all = np.empty((1024, STATE_WIDTH))
    n = 0
    t_first = knots[0]
    t_last = knots[knots.shape[0] - 1]
    for i in range(m):
        record = values[rows[i]]
        _ends_into(header, record, extend_none, ends, i)
        source_span(header, record, targets, far_distance, origin, far, edge_lo, edge_hi,
                    extend_none, seen_lo, seen_hi)
        t_lo = seen_lo.min()
        t_hi = seen_hi.max()
        if far:  # the accelerated part only
            t_lo = max(t_lo, t_first)
            t_hi = min(t_hi, t_last)
            if not t_lo < t_hi:
                offsets[i + 1] = n
                continue  # the window sees only extensions: no radiation
            for p in range(n_points):
                seen_lo[p] = min(max(seen_lo[p], t_lo), t_hi)
                seen_hi[p] = min(max(seen_hi[p], t_lo), t_hi)
        status, t, state, point, distance = refine(
            header, record, knots, t_lo, t_hi, subdivisions, targets, seen_lo, seen_hi,
            far, resolution_s, bin_s, per_bin, tolerance, uniform_split_max, max_samples,
            max_depth, reach_m)
        if status != OK:
            return (t_all[:n], state_columns(state_all[:0]), offsets, ends, i, status, point,
                    distance)
        count = t.shape[0]
        head = far and count > 0 and t[0] == t_first
        tail = far and count > 0 and t[count - 1] == t_last
        need = n + count + 2
        if need > t_all.shape[0]:
            t_all = _grown(t_all, n, 2 * need)
            state_all = _grown(state_all, n, 2 * need)
        if head:  # the radiation starts at the track's first sample
            t_all[n] = t[0]
            _copy_row(state, 0, state_all, n)
            _zero_acceleration(state_all, n)
            n += 1
        for j in range(count):
            t_all[n] = t[j]
            _copy_row(state, j, state_all, n)
            n += 1
        if tail:  # and ends at its last
            t_all[n] = t[count - 1]
            _copy_row(state, count - 1, state_all, n)
            _zero_acceleration(state_all, n)
            n += 1
        offsets[i + 1] = n
    return t_all[:n].copy(), state_columns(state_all[:n]), offsets, ends, -1, OK, -1, np.inf
