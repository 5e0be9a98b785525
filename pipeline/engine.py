"""The retarded-field engine: from tracks and observer groups to bin-averaged E and B.

For each observer group: (1) the time window (SPEC's default or the run's), (2) per
particle the source-time samples, chosen from the step and the local κ so that every
observer bin gets several samples and no dip of κ is stepped over, (3) the compiled
kernels add each particle's exact bin integrals of E and B, weighted by charge × weight.
This module validates, allocates and chunks; the arithmetic is in `lagfield.kernels`.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import constants

from .errors import LagfieldError, ObserverError
from .fluence import FluenceAccumulator
from .kernels import deposit, sampling
from .motion import Motion, checked_motion
from .retarded import retarded_time
from .spectra import SAMPLES_PER_PERIOD, SpectrumAccumulator

C = constants.c
COULOMB = 1.0 / (4.0 * math.pi * constants.epsilon_0)  # q/(4πε0) factor, V·m/C

SAMPLES_PER_BIN = 4.0  # at least this many source samples per observer bin
ANGLE_TOLERANCE = 0.02  # fraction of R/c or of √(2κ)/|β̇| one source step may span
SUBDIVISIONS_PER_INTERVAL = 4  # initial source samples between two track samples
REACH_DISTANCE_M = 1e-9  # a track this close to a point reaches it
MAX_REFINEMENTS = 200
UNIFORM_SPLIT_MAX = 64  # pieces an interval is split into evenly in one refinement
MAX_SAMPLES_PER_PARTICLE = 50_000_000
SAMPLES_PER_KERNEL_CALL = 500_000


@dataclasses.dataclass(frozen=True)
class FieldSettings:
    step_s: float
    start_s: float | None = None
    stop_s: float | None = None
    align: str = "group"
    far_field: bool = False
    degree: int = 5
    extend: str = "ballistic"
    smoothing_m: float = 0.0
    u_offset_s: float | None = None  # momenta sampled at t + u_offset_s (None: each track's)
    max_frequency_hz: float | None = None  # top frequency of the spectra, when asked

    def resolution_s(self) -> float:
        """Observer-time scale the source sampling must resolve: the step, or a fraction
        of the period of the top frequency when spectra are asked."""
        if not self.max_frequency_hz:
            return self.step_s
        return min(self.step_s, SAMPLES_PER_BIN / (SAMPLES_PER_PERIOD * self.max_frequency_hz))


@dataclasses.dataclass
class GroupFields:
    """Bin-averaged fields of one group. start_s (P,): first bin centre of each point;
    n_bins (P,); e_v_per_m, b_t (P, max_bins, 3), zero past n_bins[p]; spectra: a
    SpectrumAccumulator when spectra were asked."""

    group: object
    step_s: float
    start_s: np.ndarray
    n_bins: np.ndarray
    e_v_per_m: np.ndarray
    b_t: np.ndarray
    spectra: object = None
    fluence: object = None  # fluence.FluenceAccumulator: exact ε0c∫|E|²dt
    source_samples: int = 0  # source-time samples used, summed over particles

    def times(self, point: int) -> np.ndarray:
        return self.start_s[point] + self.step_s * np.arange(self.n_bins[point])


# ---------------------------------------------------------------------------- window
def arrival_times(group, positions_m, times_s, far_field: bool) -> np.ndarray:
    """(M, P) observer times at the group's points of light emitted at (times_s (M,),
    positions_m (M, 3))."""
    if far_field:
        directions, distance = group.far_geometry()
        projected = (positions_m - group.origin_m) @ directions.T
        return times_s[:, None] + (distance[None, :] - projected) / C
    offset = group.points_m[None, :, :] - positions_m[:, None, :]
    return times_s[:, None] + np.sqrt(np.einsum("mpi,mpi->mp", offset, offset)) / C


def time_window(group, ends, settings: FieldSettings):
    """(start_s (P,), n_bins (P,)) of the group's time grid. `ends` holds the first and
    last sample of every track: (t_first (M,), r_first (M, 3), t_last (M,), r_last (M, 3))."""
    step = settings.step_s
    t_first, r_first, t_last, r_last = ends
    earliest = arrival_times(group, r_first, t_first, settings.far_field).min(axis=0)
    latest = arrival_times(group, r_last, t_last, settings.far_field).max(axis=0)
    if settings.align == "group":
        earliest = np.full_like(earliest, earliest.min())
        latest = np.full_like(latest, latest.max())
    if settings.start_s is None:
        start = np.floor(earliest / step) * step
    else:
        start = np.full(group.n_points, settings.start_s)
    stop = latest if settings.stop_s is None else np.full(group.n_points, settings.stop_s)
    bins = np.floor((stop - start) / step * (1.0 + 1e-12) + 1e-9)
    n_bins = np.minimum(bins, 2.0**62).astype(np.int64) + 1  # no overflow: budget.py refuses
    return start, np.maximum(n_bins, 1)


# ---------------------------------------------------------------------------- sampling
def _ballistic_retarded(t_obs, observers, r_end, beta_end, inv_g2, t_end, far):
    """Retarded times (P,) on the straight line through r_end at t_end with velocity
    c·beta_end, in closed form (the smaller root of the light-cone quadratic)."""
    big_t = t_obs - t_end
    if far is not None:
        directions, distance, origin = far
        delay = (distance - (r_end - origin) @ directions.T) / C
        kappa = 1.0 - directions @ beta_end
        return t_end + (big_t - delay) / kappa
    d = observers - r_end
    v = C * beta_end
    b = C * C * big_t - d @ v
    c0 = C * C * big_t * big_t - np.einsum("pi,pi->p", d, d)
    a = C * C * inv_g2
    return t_end + c0 / (b + np.sqrt(b * b - a * c0))


def source_span(motion: Motion, group, edge_lo, edge_hi, far, extend: str, ends):
    """(span, seen): the source-time interval (t_lo, t_hi) whose light covers observer
    times [edge_lo, edge_hi] at every point (conservative: it may be wider), and per point
    the source times (seen_lo (P,), seen_hi (P,)) whose light reaches it in its window.
    `ends`: the track's end samples (see `_extension_ends`)."""
    r_ends = ends[:, deposit.END_X:deposit.END_X + 3]
    beta_ends = ends[:, deposit.END_BX:deposit.END_BX + 3]
    g_ends = ends[:, deposit.END_IG2]
    lo = _ballistic_retarded(edge_lo, group.points_m, r_ends[0], beta_ends[0], g_ends[0],
                             motion.t_first, far)
    hi = _ballistic_retarded(edge_hi, group.points_m, r_ends[1], beta_ends[1], g_ends[1],
                             motion.t_last, far)
    # a closed-form root on the wrong side of the track's end means the true root lies
    # within the sampled span: solve there
    inside_lo = lo > motion.t_first
    inside_hi = hi < motion.t_last
    if inside_lo.any():
        lo[inside_lo] = _retarded_inside(motion, group, edge_lo, inside_lo, far)
    if inside_hi.any():
        hi[inside_hi] = _retarded_inside(motion, group, edge_hi, inside_hi, far)
    if extend == "none":
        lo, hi = np.maximum(lo, motion.t_first), np.minimum(hi, motion.t_last)
    return (float(lo.min()), float(hi.max())), (lo, hi)


def _retarded_inside(motion, group, edges, mask, far):
    """Retarded times of observer times `edges` (P,) at the points selected by `mask`."""
    edges = np.broadcast_to(edges, mask.shape)[mask]
    if far is None:
        return retarded_time(motion, group.points_m[mask], edges)
    directions, distance, origin = far
    return retarded_time(motion, None, edges, far_direction=directions[mask],
                         far_distance_m=distance[mask], origin_m=origin)


def _check_reach(t, positions_m, group, motion, far, seen):
    """ObserverError if the polyline through the source samples whose light a point sees
    in its window (`seen`: per point, those source times) comes within REACH_DISTANCE_M of
    it (near field only: far-field points are at infinity). A point the track passed
    before (or passes after) the light it sees left is not reached."""
    if far is not None:
        return
    distance_m = np.empty(group.n_points)
    sampling.closest_approach(t, positions_m, group.points_m, seen[0], seen[1], distance_m)
    if distance_m.min() < REACH_DISTANCE_M:
        point = int(np.argmin(distance_m))
        raise ObserverError(
            f"observer group '{group.name}', point {point} at {group.points_m[point].tolist()} m:"
            f" particle {motion.particle} reaches it during the time window (closest approach "
            f"{distance_m[point]:.3g} m, extension included); the field there is singular. "
            "Move the point off the track")


def _insert_stops(t, state, where, source):
    """Copies of the samples `source` (same time, position, velocity and references; zero
    acceleration) inserted before the indices `where`."""
    inserted = tuple(np.insert(a, where, np.zeros_like(a[source]) if i == 3 else a[source],
                               axis=0) for i, a in enumerate(state))
    return np.insert(t, where, t[source]), inserted


def _split_track_ends(t, state, motion):
    """Where the sampled track meets its ballistic extension the acceleration jumps: the
    sample there is doubled (same time, position and velocity; zero acceleration on the
    extension side), so that each side's segment sees its own one-sided values."""
    inserts = []
    first = np.searchsorted(t, motion.t_first)
    if 0 < first < t.size and t[first] == motion.t_first:
        inserts.append((first, first))  # the extension copy goes before
    last = np.searchsorted(t, motion.t_last)
    if last < t.size - 1 and t[last] == motion.t_last:
        inserts.append((last + 1, last))  # and after
    if not inserts:
        return t, state
    return _insert_stops(t, state, [at for at, _ in inserts], [j for _, j in inserts])


def _neighbours(t):
    """Source times of each sample's neighbours (its own at the ends)."""
    return np.concatenate([t[:1], t[:-1]]), np.concatenate([t[1:], t[-1:]])


def source_samples(motion: Motion, group, span, settings: FieldSettings, far, seen):
    """Source times, adaptively refined, and the motion at them with its references (the
    7-tuple of `Motion.evaluate_referenced`). `seen` (seen_lo (P,),
    seen_hi (P,)): the source times whose light each point sees in its window; only there
    does a point's distance limit the step (and count for the reach check)."""
    t_lo, t_hi = span
    knots = motion.track.t_s
    inner = knots[(knots > t_lo) & (knots < t_hi)]
    if inner.size >= 2:
        fractions = np.arange(SUBDIVISIONS_PER_INTERVAL) / SUBDIVISIONS_PER_INTERVAL
        inner = (inner[:-1, None] + np.diff(inner)[:, None] * fractions).ravel()
    t = np.unique(np.concatenate([[t_lo], inner, knots[-1:], [t_hi]]))
    t = t[(t >= t_lo) & (t <= t_hi)]
    targets = far[0] if far is not None else group.points_m
    state = motion.evaluate_referenced(t)
    resolution = settings.resolution_s()

    def step_limits(times, motion_state, before, after):
        limits = np.empty(times.size)
        sampling.source_step_limits(*motion_state[:4], before, after, targets, seen[0], seen[1],
                                    far is not None, resolution, SAMPLES_PER_BIN,
                                    ANGLE_TOLERANCE, limits)
        return limits

    limits = step_limits(t, state, *_neighbours(t))
    _check_reach(t, state[0], group, motion, far, seen)
    for _ in range(MAX_REFINEMENTS):
        allowed = np.minimum(limits[:-1], limits[1:])
        pieces = np.ceil(np.diff(t) / allowed * (1.0 - 1e-12))
        pieces = np.where(np.isfinite(pieces), pieces, 1.0)
        bad = np.flatnonzero(pieces > 1.0)
        if bad.size == 0:
            _check_reach(t, state[0], group, motion, far, seen)
            return _split_track_ends(t, state, motion)
        # an interval needing few pieces is split evenly; one needing many is halved, so
        # that a long interval whose limit is small at one end only (a ballistic
        # extension towards the observer) ends up graded, not uniformly fine
        counts = np.where(pieces[bad] <= UNIFORM_SPLIT_MAX, pieces[bad], 2).astype(np.int64) - 1
        if t.size + counts.sum() > MAX_SAMPLES_PER_PARTICLE:
            raise LagfieldError(
                f"particle {motion.particle}, observer group '{group.name}': more than "
                f"{MAX_SAMPLES_PER_PARTICLE:.0e} source samples would be needed; shorten the "
                "time window or enlarge [time] step")
        starts = np.repeat(t[bad], counts)
        widths = np.repeat(np.diff(t)[bad] / (counts + 1), counts)
        rank = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts) + 1
        new_t = starts + widths * rank
        new_state = motion.evaluate_referenced(new_t)
        new_limits = step_limits(new_t, new_state, new_t - widths, new_t + widths)
        order = np.argsort(np.concatenate([t, new_t]), kind="stable")
        t = np.concatenate([t, new_t])[order]
        state = tuple(np.concatenate([old, new])[order] for old, new in zip(state, new_state,
                                                                           strict=True))
        limits = np.concatenate([limits, new_limits])[order]
    raise LagfieldError(f"particle {motion.particle}: source sampling did not settle after "
                        f"{MAX_REFINEMENTS} refinements")


def _accelerated_part(span, seen, motion: Motion):
    """Far field: the part of `span` (and of each point's `seen` window) on the sampled
    track, or (None, None). The radiation term vanishes where β̇ = 0, so the ballistic
    extensions send no far field (their primitive n×(n×β)/κ is constant)."""
    t_lo, t_hi = max(span[0], motion.t_first), min(span[1], motion.t_last)
    if not t_lo < t_hi:
        return None, None
    return (t_lo, t_hi), (np.clip(seen[0], t_lo, t_hi), np.clip(seen[1], t_lo, t_hi))


def _radiation_stops(t, state, motion: Motion):
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


# ---------------------------------------------------------------------------- engine
def _extension_ends(motion: Motion, extend: str) -> np.ndarray:
    """(2, deposit.END_COLUMNS): time, position, velocity and 1/γ² of the track's first and
    last sample, where its ballistic extensions start (none with extend = "none")."""
    ends = np.empty((2, deposit.END_COLUMNS))
    times = np.array([motion.t_first, motion.t_last])
    r, beta, inv_g2, _ = motion.evaluate(times)
    ends[:, deposit.END_T] = times
    ends[:, deposit.END_X:deposit.END_X + 3] = r
    ends[:, deposit.END_BX:deposit.END_BX + 3] = beta
    ends[:, deposit.END_IG2] = inv_g2
    if extend == "none":
        ends[:, deposit.END_T] = (-np.inf, np.inf)
    return ends


class FieldAccumulator:
    """Bin integrals of one group, to which chunks of particles are added."""

    def __init__(self, group, start_s, n_bins, settings: FieldSettings, spectrum=None):
        self.group = group
        self.settings = settings
        self.start_s = start_s
        self.n_bins = n_bins
        self.edge0 = start_s - 0.5 * settings.step_s
        self.integrals = np.zeros((group.n_points, int(n_bins.max()), 6))
        self.far = None
        if settings.far_field:
            directions, distance = group.far_geometry()
            self.far = (directions, distance, group.origin_m)
        self._pending = []
        self._pending_samples = 0
        self.source_samples = 0
        self.spectra = None
        if spectrum is not None:
            stop_s = start_s + (n_bins - 1) * settings.step_s
            self.spectra = SpectrumAccumulator(group, start_s, stop_s, spectrum, self.far)
        self.fluence = FluenceAccumulator(group, start_s, start_s + (n_bins - 1) * settings.step_s,
                                          self.far, spectrum is None or spectrum.coherent)

    def add(self, motion: Motion) -> None:
        edge_lo = self.edge0
        edge_hi = self.edge0 + self.n_bins * self.settings.step_s
        ends = _extension_ends(motion, self.settings.extend)
        span, seen = source_span(motion, self.group, edge_lo, edge_hi, self.far,
                                 self.settings.extend, ends)
        if self.far is not None:
            span, seen = _accelerated_part(span, seen, motion)
            if span is None:
                return  # the window sees only extensions: no radiation
        t, state = source_samples(motion, self.group, span, self.settings, self.far, seen)
        if self.far is not None:
            t, state = _radiation_stops(t, state, motion)
        scale = motion.track.charge_c * motion.track.weight
        state, reference = state[:4], state[4:]  # references: observer times keep digits
        if self.spectra is not None:
            self.spectra.add(t, state, motion.track.charge_c, motion.track.weight)
        self.fluence.add(t, state, motion.track.charge_c, motion.track.weight)
        self._pending.append((t, state, scale, ends, reference))
        self._pending_samples += t.size
        self.source_samples += t.size
        if self._pending_samples >= SAMPLES_PER_KERNEL_CALL:
            self.flush()

    def flush(self) -> None:
        if not self._pending:
            return
        t = np.concatenate([p[0] for p in self._pending])
        pos, beta, inv_g2, beta_dot = (np.ascontiguousarray(np.concatenate(
            [p[1][i] for p in self._pending])) for i in range(4))
        offsets = np.concatenate([[0], np.cumsum([p[0].size for p in self._pending])])
        scale = np.array([p[2] for p in self._pending])
        ends = np.stack([p[3] for p in self._pending])
        reference = tuple(np.ascontiguousarray(np.concatenate([p[4][i] for p in self._pending]))
                          for i in range(3))
        args = (t, pos, beta, inv_g2, beta_dot, offsets.astype(np.int64), scale)
        if self.far is None:
            deposit.deposit_near(*args, self.group.points_m, self.edge0, self.settings.step_s,
                                 self.n_bins, self.integrals, ends, reference)
        else:
            directions, distance, origin = self.far
            origins = np.ascontiguousarray(np.broadcast_to(origin, directions.shape))
            deposit.deposit_far(*args, directions, distance, origins, self.edge0,
                                self.settings.step_s, self.n_bins, self.integrals, ends,
                                reference)
        self._pending = []
        self._pending_samples = 0

    def result(self) -> GroupFields:
        self.flush()
        step = self.settings.step_s
        e = self.integrals[:, :, :3] * (COULOMB / step)
        b = self.integrals[:, :, 3:] * (COULOMB / (C * step))
        return GroupFields(self.group, step, self.start_s, self.n_bins, e, b, self.spectra,
                           self.fluence, source_samples=self.source_samples)


class TrackEnds:
    """Collects the first and last sample and the id of every track it is shown
    (`add(track)`), for the default window and for cutting particles into chunks."""

    def __init__(self):
        self._t_first, self._t_last, self._r_first, self._r_last = [], [], [], []
        self._ids = []

    def add(self, track) -> None:
        self._t_first.append(track.t_s[0])
        self._t_last.append(track.t_s[-1])
        self._r_first.append(track.position_m[0].copy())  # a view would keep the whole
        self._r_last.append(track.position_m[-1].copy())  # track's positions alive
        self._ids.append(track.particle)

    def ends(self):
        """(t_first (M,), r_first (M, 3), t_last (M,), r_last (M, 3))."""
        return (np.array(self._t_first), np.array(self._r_first).reshape(-1, 3),
                np.array(self._t_last), np.array(self._r_last).reshape(-1, 3))

    def ids(self) -> np.ndarray:
        return np.array(self._ids, dtype=np.int64)


def track_ends(tracks, *, with_ids: bool = False):
    """(t_first, r_first, t_last, r_last) of every track, for the default window, in one
    pass over `tracks`; with_ids: also the particle ids, as ((...), ids)."""
    collected = TrackEnds()
    for track in tracks:
        collected.add(track)
    return (collected.ends(), collected.ids()) if with_ids else collected.ends()


def group_windows(groups, ends, settings: FieldSettings):
    """[(start_s (P,), n_bins (P,)) per group]: the time grids, from the tracks' ends."""
    for group in groups:
        if group.n_points == 0:
            raise ObserverError(f"observer group '{group.name}' has no points")
    return [time_window(group, ends, settings) for group in groups]


def compute_fields(tracks, groups, settings: FieldSettings, *, spectrum=None, ends=None,
                   windows=None, progress=None):
    """Bin-averaged E, B of every group (list of GroupFields), coherently summed over
    the tracks, and their spectra when `spectrum` (SpectrumSettings) is given.
    `tracks` is an iterable of Track. The time grids come from `windows` (see
    `group_windows`), else from `ends` (see `track_ends`), else from the tracks themselves
    (a second pass). progress(1) is called for each particle in each group, as it is done
    (so len(tracks) × len(groups) calls in all)."""
    path = getattr(tracks, "path", None)  # the track file, for errors
    if windows is None:
        if ends is None:
            tracks = list(tracks)
            ends = track_ends(tracks)
        windows = group_windows(groups, ends, settings)
    accumulators = [FieldAccumulator(group, start, n_bins, settings, spectrum)
                    for group, (start, n_bins) in zip(groups, windows, strict=True)]
    for track in tracks:
        motion = checked_motion(track, settings.resolution_s(), path=path,
                                degree=settings.degree, extend=settings.extend,
                                smoothing_m=settings.smoothing_m, u_offset_s=settings.u_offset_s)
        for accumulator in accumulators:
            accumulator.add(motion)
            if progress is not None:
                progress(1)
    return [accumulator.result() for accumulator in accumulators]


def add_results(first, second):
    """The sum of two lists of GroupFields of the same groups and grids (partial sums of
    different particles), written into `first`."""
    for a, b in zip(first, second, strict=True):
        a.e_v_per_m += b.e_v_per_m
        a.b_t += b.b_t
        if a.spectra is not None:
            a.spectra.spectrum += b.spectra.spectrum
            a.spectra.fluence += b.spectra.fluence
        if a.fluence is not None:
            a.fluence.merge(b.fluence)
        a.source_samples += b.source_samples
    return first
