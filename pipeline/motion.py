"""Smooth motion from sampled tracks: r, β, 1/γ² and β̇ at any source time, as arrays.

The motion of a track is held as per-piece polynomial coefficients, evaluated by the
compiled kernels of `lagfield.kernels.motion`; building them is vectorised numpy (scipy
only builds the splines). Pieces are the intervals between samples, split further where
a spline has a knot between two samples.

Positions only. An interpolating spline of the positions (a smoothing spline with
`smoothing_m`), so β = r′/c, β̇ = r″/c and 1/γ² = (1 − |β|)(1 + |β|); where |β| reaches 1
between samples `check_speed` raises MotionError (never clamped).

With momenta u = γβ (SPEC: the velocity is c·u/√(1 + u²) and the positions are its time
integral, passing through every sampled position). Per position interval i (τ = t − t_i,
h = t_{i+1} − t_i, y = τ/h):
  - u is a spline interpolating the momenta at their own times t_j + u_offset, extended by
    its end polynomials over at most one interval; β_u = u/√(1 + u²);
  - c·∫β_u dt′ is a Chebyshev series per piece, fitted at Chebyshev nodes with enough nodes
    that the fit of β_u is within FIT_TOLERANCE of its size (checked at other points);
  - the slip D_i = (r_{i+1} − r_i − c·∫β_u dt′)/c (a 3-vector, seconds) is what the momenta
    miss of the sampled chord; the velocity correction δβ = 30·D_i·y²(1 − y)²/h has zero
    value and slope at both samples and integrates to D_i over the interval, so
    β = β_u + δβ stays C¹, equals β_u at the samples, and r = r_i + c·∫β_u + c·D_i·(10y³ −
    15y⁴ + 6y⁵) passes through every sample with dr/dt′ = cβ (up to the fit);
  - 1/γ² = 1/(1 + u²) − 2β_u·δβ − |δβ|², which keeps its digits at any γ, and
    β̇ = (u′ − β_u(β_u·u′))/γ + δβ′. A slip below what the samples' rounding can resolve
    (ROUNDING_ULPS units in the last place of |r|/c, of t and of the path, plus the fit's
    error) is no information and is not corrected, so uniform motion stays exactly uniform;
    the steady part of those slips (β rounded alike in every interval) is carried by the
    path as a constant rate, so that they do not add up to a drift from the samples.
The slip measures how far the samples are from one motion; `check_slip` compares the
largest |D_i| with SLIP_FRACTION of the time scale the run resolves, the ratio of the summed
chords to the summed c·∫β_u with UNIT_RATIO_LIMIT (a gross unit mistake), and the shift of
the momentum times that best explains the slips with OFFSET_FRACTION of a step.

Outside the sampled span the motion is ballistic (constant velocity, the velocity at the
first or last sample); `extend` is kept for the engine, which limits the source span.

A chunk of tracks is built at once by `build_motions` / `checked_motions`: tracks sampled
at the same times (tracking and particle-in-cell output) form a group that shares one
spline fit, its pieces, and every vectorised step; `Motion(track)` is a group of one, so
both give the same motion to the bit. The motions of a group hold views of its arrays.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from numpy.polynomial import chebyshev
from scipy import interpolate

from .constants import C
from .errors import MotionError
from .kernels import motion as kernels
from .tracks import Track

SPEED_CHECKS_PER_INTERVAL = 8
# Slip allowed, as a fraction of the time scale the run resolves (the step, or a quarter of
# the period of the top frequency: FieldSettings.resolution_s). A slip δ is how far the
# spline of u alone would misplace the light of that interval in arrival time, a phase error
# of up to 2πfδ; the correction that puts the motion through every sample leaves less (a
# fifth of it, measured at a kink of u between samples). At 1 × resolution that is π/2 at
# the top frequency, or one bin, before the correction. Consistent tracks measure up to
# 0.51 (the shipped bend scenario: 2 ps samples through a hard-edge dipole, a kink of u
# that no spline follows), 0.29 (the same at 1 ps and 1/80 of the critical period) and 0.4
# (a charge stopped within two samples, run at a quarter of the sample interval). Momenta
# half a step off give 1 to 5 on relativistic tracks; on slow ones the offset test below
# catches them.
SLIP_FRACTION = 1.0
# Σ|chord| / Σ|c·∫β_u dt′| over the intervals outside [1/limit, limit]: the
# momenta and positions disagree about the speed itself (units of u or of t, x, y, z).
UNIT_RATIO_LIMIT = 1.5
# Momenta sampled δ later than assumed give slips D_i ≈ −δ·Δβ_i in every interval where the
# velocity changes: an apparent offset beyond this fraction of the step is an error once the
# largest slip reaches VISIBLE_FRACTION of the resolved time scale (where such a slip shows:
# the correction's velocity wiggle, ≈ D/h within each interval, is then a few % of the field
# of a slow charge on a circle sampled 40 times a turn; tests/test_motion.py).
OFFSET_FRACTION = 0.2
VISIBLE_FRACTION = 0.01
FIT_TOLERANCE = 1e-14  # Chebyshev fit of β_u: largest error relative to max |β_u| on a piece
CHEBYSHEV_NODES = (8, 16, 32, 64, 128)  # node counts tried in turn
ROUNDING_ULPS = 8  # slips below this many units in the last place are rounding
MERGE_FRACTION = 1e-6  # a spline knot this close (× interval) to a sample is that sample
EPS = np.finfo(float).eps
BATCH_SAMPLES = 1 << 17  # samples of the tracks built in one batch at most (scratch memory)
# tracks in one spline fit at most: with more right-hand sides the banded solve's rank-1
# updates go multi-threaded in OpenBLAS (measured: from ~550 tracks of degree 5), which
# stalls for a time slice at every step on a busy machine
BATCH_TRACKS = 512
# The vectorised checks of a chunk flag a track this close to a limit (relative) for the
# exact check of that track alone, whatever the rounding of a sum: slip and speed ratios,
# and |β|² against 1 (units in the last place).
CHECK_MARGIN = 1e-9
SPEED_MARGIN = 8 * EPS
_NO_INTERVALS = np.zeros(0, dtype=np.int64)  # interval_of of a positions-only record


class Motion:
    """Reconstructed motion of one track.

    `evaluate(t_s)` returns (position_m (K, 3), beta (K, 3), inv_gamma2 (K,),
    beta_dot_per_s (K, 3)); outside [t_first, t_last] the ballistic extension.
    degree: the spline degree asked for (3 or 5); `degree_used` is lower for tracks of
    fewer than degree + 1 samples (n − 1). u_offset_s: the momenta were sampled at
    t + u_offset_s (default: the track's own `u_offset_s`, else 0).

    Motions built together (`build_motions`) hold views of their group's arrays: the
    motions of a chunk keep that chunk's arrays alive, and are dropped with the chunk.
    """

    def __init__(self, track: Track, *, degree: int = 5, extend: str = "ballistic",
                 smoothing_m: float = 0.0, u_offset_s: float | None = None):
        _check_degree(degree)
        t = self._describe(track, degree, extend, u_offset_s)
        _build_group([self], np.zeros(1, dtype=np.int64), t, smoothing_m)

    # ------------------------------------------------------------------ construction
    def _describe(self, track, degree, extend, u_offset_s) -> np.ndarray:
        """Take what the track and the options say; return the track's sample times."""
        self.track = track
        self.particle = track.particle
        self.degree = degree
        self.extend = extend
        t = np.asarray(track.t_s, dtype=float)
        if t.size < 2:
            raise MotionError(f"particle {self.particle}: a track needs at least 2 samples, "
                              f"this one has {t.size}")
        self.degree_used = min(degree, t.size - 1)
        self.t_first = float(t[0])
        self.t_last = float(t[-1])
        self.has_momentum = track.u is not None
        self.slip: SlipReport | None = None  # set by `checked_motion`
        if u_offset_s is None:
            u_offset_s = getattr(track, "u_offset_s", None)
        self.u_offset_s = float(u_offset_s or 0.0)
        return t

    def _adopt(self, group: _Group, g: int) -> None:
        """Take motion g of `group` (views of its arrays)."""
        self._record = (group.record[0], group.record[1][g])
        self.group_record, self.row = group.record, g  # (header, values (G, L)), g
        self._breaks = kernels.field(self._record, "breaks")
        if group.raw_slip_s is not None:
            self.raw_slip_s = group.raw_slip_s[g]
            self.chord_m = group.chord_m[g]
            self.integral_m = group.integral_m[g]

    # ------------------------------------------------------------------ evaluation
    def evaluate(self, t_s):
        return self.evaluate_referenced(t_s)[:4]

    def evaluate_referenced(self, t_s):
        """`evaluate` and, per time, the track sample its position is measured from:
        (position_m, beta, inv_gamma2, beta_dot_per_s, ref_t_s (K,), ref_m (K, 3),
        displacement_m (K, 3)), the displacement r − ref formed without the (possibly
        large) reference position, so that it keeps its relative precision (with momenta,
        it includes the offset that keeps the motion continuous where the sampled
        positions are rounded: ref + displacement may differ from position_m by it). On the
        ballistic extensions the reference is the track's end sample."""
        t_s = np.ascontiguousarray(np.atleast_1d(np.asarray(t_s, dtype=float)))
        out = state_arrays(t_s.size)
        kernels.evaluate_state(*self.record, t_s, *out)
        return out

    @property
    def record(self) -> tuple:
        """The motion as the compiled kernels take it (`lagfield.kernels.motion`): (header
        (int64), values (L,) float64), a view of its group's arrays."""
        return self._record

    # ------------------------------------------------------------------ checks
    def check_speed(self) -> None:
        """Raise MotionError where the reconstructed speed reaches c (never clamped):
        probed SPEED_CHECKS_PER_INTERVAL times per interval between samples."""
        probe = speed_probes(self.track.t_s)
        _, beta, inv_g2, _ = self.evaluate(probe)
        speed = np.sqrt(np.einsum("ij,ij->i", beta, beta))
        bad = np.flatnonzero(~(inv_g2 > 0.0) | ~(speed < 1.0))
        if not bad.size:
            return
        worst = bad[np.argmin(inv_g2[bad])]
        if self.has_momentum:
            advice = ("the correction that makes the positions the integral of the "
                      "velocity needs more than c there: check the units of ux, uy, uz and "
                      "of the positions, and [tracks] u_offset")
        else:
            advice = (f"the degree-{self.degree_used} spline overshoots there. Write the "
                      "track more often, give ux, uy, uz, set [motion] degree = 3, or set "
                      "[motion] smoothing to the position noise")
        raise MotionError(
            f"particle {self.particle}: the reconstructed speed reaches c "
            f"(|β| = {speed[worst]:.12f}) at t = {probe[worst]:.9g} s, between samples of "
            f"the track; {advice}")


def checked_motion(track: Track, resolution_s: float, *, path=None, **options) -> Motion:
    """Motion(track, **options) after `check_slip` at the run's resolution and
    `check_speed`, its SlipReport kept as `motion.slip`; a MotionError names the track
    file `path` when given."""
    return checked_motions([track], resolution_s, path=path, **options)[0]


def build_motions(tracks, *, degree: int = 5, extend: str = "ballistic",
                  smoothing_m: float = 0.0, u_offset_s: float | None = None) -> list[Motion]:
    """[Motion(track, ...) for track in tracks], the same to the bit, built together: the
    tracks sampled at the same times (and of the same kind and u_offset) share one spline
    fit with all their coordinates as its right-hand side, and every further step is
    vectorised over their pieces. The MotionError raised is that of the first track that
    fails alone."""
    motions, _, failures = _build_chunk(list(tracks), degree, extend, smoothing_m, u_offset_s)
    if failures:
        raise failures[min(failures)]
    return motions


def checked_motions(tracks, resolution_s: float, *, path=None, **options) -> list[Motion]:
    """[checked_motion(track, resolution_s, path=path, **options) for track in tracks], the
    same motions, reports and first error, built as by `build_motions` and checked
    together; a track whose vectorised checks come near a limit (CHECK_MARGIN,
    SPEED_MARGIN) is checked alone by `check_slip` and `Motion.check_speed`."""
    options.setdefault("degree", 5)
    options.setdefault("extend", "ballistic")
    options.setdefault("smoothing_m", 0.0)
    options.setdefault("u_offset_s", None)
    motions, groups, failures = _build_chunk(list(tracks), **options)
    suspects = set(failures)
    for group in groups:
        flagged = group.speed_suspects()
        if group.raw_slip_s is not None:
            reports, odd = slip_reports(group, resolution_s)
            flagged |= odd
            for motion, report in zip(group.motions, reports, strict=True):
                motion.slip = report
        suspects.update(group.indices[flagged].tolist())
    for i in sorted(suspects):
        try:
            if i in failures:
                raise failures[i]
            motions[i].slip = check_slip(motions[i], resolution_s)
            motions[i].check_speed()
        except MotionError as error:
            if path is None:
                raise
            raise MotionError(f"file {path}, {error}") from None
    return motions


def state_arrays(*shape: int) -> tuple:
    """Empty outputs of the motion kernels for times of `shape`: (pos (…, 3), beta (…, 3),
    inv_g2 (…), beta_dot (…, 3), ref_t (…), ref_r (…, 3), disp (…, 3))."""
    rows = (*shape, 3)
    return (np.empty(rows), np.empty(rows), np.empty(shape), np.empty(rows), np.empty(shape),
            np.empty(rows), np.empty(rows))


def speed_probes(t_s: np.ndarray) -> np.ndarray:
    """The times `Motion.check_speed` looks at: SPEED_CHECKS_PER_INTERVAL per interval
    between samples and the last sample."""
    fractions = np.linspace(0.0, 1.0, SPEED_CHECKS_PER_INTERVAL, endpoint=False)
    probe = (t_s[:-1, None] + np.diff(t_s)[:, None] * fractions).ravel()
    return np.append(probe, t_s[-1])


def _check_degree(degree: int) -> None:
    if degree not in (3, 5):
        raise ValueError(f"spline degree must be 3 or 5, not {degree}")


# ---------------------------------------------------------------------------- groups
@dataclasses.dataclass
class _Group:
    """Motions built together from tracks sampled at the same times t_s: their record
    (header, values (G, L)) (`lagfield.kernels.motion`), their places in the chunk
    (indices), and with momenta the slips (G, n−1, 3) of `Motion`."""

    motions: list
    indices: np.ndarray
    t_s: np.ndarray
    record: tuple
    raw_slip_s: np.ndarray | None = None
    chord_m: np.ndarray | None = None
    integral_m: np.ndarray | None = None

    def evaluate(self, t_s: np.ndarray) -> tuple:
        """`Motion.evaluate_referenced` of every motion at the times t_s (K,): (G, K, …)."""
        out = state_arrays(len(self.motions), t_s.size)
        kernels.evaluate_states(*self.record, t_s, *out)
        return out

    def speed_suspects(self) -> np.ndarray:
        """(G,) True for the motions whose speed may reach c at the probes of
        `Motion.check_speed`."""
        out = np.empty(len(self.motions), dtype=np.bool_)
        kernels.speed_suspects(*self.record, speed_probes(self.t_s), SPEED_MARGIN, out)
        return out


def _build_chunk(tracks, degree, extend, smoothing_m, u_offset_s):
    """(motions, groups, failures {index: MotionError}) of a list of tracks: tracks with
    the same sample times, kind, degree and u_offset built together, in batches of at
    most BATCH_TRACKS tracks and BATCH_SAMPLES samples; a batch that fails is built again
    one by one, so that each track gets the error it gets alone."""
    _check_degree(degree)
    motions, times, failures, keyed = [], [], {}, {}
    for i, track in enumerate(tracks):
        motion = Motion.__new__(Motion)
        motions.append(motion)
        try:
            t = motion._describe(track, degree, extend, u_offset_s)
        except MotionError as error:
            failures[i] = error
            times.append(None)
            continue
        times.append(t)
        alone = not motion.has_momentum and smoothing_m > 0.0  # a fit of its own
        key = i if alone else (motion.has_momentum, motion.degree_used, motion.u_offset_s,
                               t.tobytes())
        keyed.setdefault(key, []).append(i)
    groups = []
    for members in keyed.values():
        size = max(1, min(BATCH_TRACKS, BATCH_SAMPLES // times[members[0]].size))
        for start in range(0, len(members), size):
            batch = np.array(members[start:start + size], dtype=np.int64)
            groups += _build_batch(motions, times, batch, smoothing_m, failures)
    return motions, groups, failures


def _build_batch(motions, times, batch, smoothing_m, failures) -> list[_Group]:
    try:
        return _build_group([motions[i] for i in batch], batch, times[batch[0]], smoothing_m)
    except MotionError as error:
        if batch.size == 1:
            failures[int(batch[0])] = error
            return []
    return [group for i in batch
            for group in _build_batch(motions, times, batch[i == batch], smoothing_m, failures)]


def _build_group(motions, indices, t, smoothing_m) -> list[_Group]:
    """Build `motions` (described, tracks sampled at the times t) together."""
    position = np.stack([np.asarray(m.track.position_m, dtype=float) for m in motions])
    if not motions[0].has_momentum:
        return [_positions_group(motions, indices, t, position, smoothing_m)]
    if smoothing_m > 0.0:
        raise MotionError(
            f"particle {motions[0].particle}: [motion] smoothing is for positions-only "
            "tracks; with ux, uy, uz the velocity comes from the momenta and the "
            "positions are its integral through every sample. Remove [motion] "
            "smoothing, or map the momentum columns away to smooth noisy positions")
    u = np.stack([np.asarray(m.track.u, dtype=float) for m in motions])
    with np.errstate(over="ignore", invalid="ignore"):  # absurd u: check_slip says so
        return _momenta_groups(motions, indices, t, position, u)


def _finish(motions, indices, t, record, **slips) -> _Group:
    """The group of `record` (ends still to fill): its ends evaluated, its motions set."""
    group = _Group(motions, indices, t, record, **slips)
    pos, beta, inv_g2 = group.evaluate(np.array([t[0], t[-1]]))[:3]
    for name, value in zip(("ends_r", "ends_beta", "ends_inv_g2"), (pos, beta, inv_g2),
                           strict=True):
        kernels.field(record, name)[...] = value
    for g, motion in enumerate(motions):
        motion._adopt(group, g)
    return group


def _positions_group(motions, indices, t, position, smoothing_m) -> _Group:
    k = motions[0].degree_used
    tau = t - t[0]
    if smoothing_m > 0.0:  # one track
        s = t.size * smoothing_m**2
        splines = [interpolate.make_splrep(tau, position[0, :, i], k=k, s=s)
                   for i in range(3)]
    else:
        splines = [interpolate.make_interp_spline(tau, np.moveaxis(position, 0, 1), k=k)]
    breaks = breakpoints(t, np.concatenate([t[0] + s.t for s in splines]))
    start = breaks[:-1] - t[0]
    coef = [taylor_coefficients(s, start, k) for s in splines]
    # (P, k+1, G, 3) from one spline of every coordinate, (P, k+1) from each of three
    coef = np.moveaxis(coef[0], 2, 0) if len(coef) == 1 else np.stack(coef, axis=-1)[None]
    record = kernels.pack(False, _NO_INTERVALS, {"breaks": breaks, "coef": coef},
                          len(motions))
    return _finish(motions, indices, t, record)


def _momenta_groups(motions, indices, t, position, u) -> list[_Group]:
    """Motions with momenta: a group per count of Chebyshev nodes their paths need."""
    first = motions[0]
    k = first.degree_used
    offset = first.u_offset_s
    t_u = t + offset  # when the momenta were sampled
    first_gap = t_u[0] - t[0]
    last_gap = t[-1] - t_u[-1]
    if max(first_gap / (t_u[1] - t_u[0]), last_gap / (t_u[-1] - t_u[-2])) > 1.0 + 1e-9:
        raise MotionError(
            f"particle {first.particle}: u_offset = {offset:.6g} s puts the momenta more "
            "than one sample interval away from the positions at the track's "
            f"{'start' if first_gap > last_gap else 'end'}; u_offset should be a "
            "fraction of the step between samples (e.g. minus half a step for a "
            "leapfrog pusher)")
    spline = interpolate.make_interp_spline(t_u - t[0], np.moveaxis(u, 0, 1), k=k)
    breaks = breakpoints(t, t[0] + spline.t)
    interval_of = np.clip(np.searchsorted(t, breaks[:-1], side="right") - 1, 0,
                          t.size - 2).astype(np.int64)
    u_coef = np.ascontiguousarray(
        np.moveaxis(taylor_coefficients(spline, breaks[:-1] - t[0], k), 2, 0))
    groups = []
    for members, path, total, fit_error in path_series(u_coef, np.diff(breaks)):
        every = members.size == len(motions)
        groups.append(_momenta_group(
            [motions[i] for i in members], indices[members], t, breaks, interval_of,
            position if every else position[members], u_coef if every else u_coef[members],
            path, total, fit_error))
    return groups


def _momenta_group(motions, indices, t, breaks, interval_of, position, u_coef, path, total,
                   fit_error) -> _Group:
    """The slips and offsets of motions with momenta (module docstring), all (G, …)."""
    n_motions = len(motions)
    width = np.diff(breaks)
    # pieces of one interval: each starts where the previous one ended
    first_piece = np.searchsorted(interval_of, interval_of, side="left")
    rank = np.arange(interval_of.size) - first_piece
    for r in range(1, int(rank.max()) + 1):
        later = np.flatnonzero(rank == r)
        path[:, later, 0, :] += path[:, later - 1].sum(axis=2)  # its value at x = 1
    every = (slice(None), interval_of)
    integral = np.zeros((n_motions, t.size - 1, 3))
    np.add.at(integral, every, total)
    chord = np.diff(position, axis=1)
    slip = (chord - integral) / C
    size_r = np.maximum(np.linalg.norm(position[:, :-1], axis=2),
                        np.linalg.norm(position[:, 1:], axis=2))
    size_t = np.maximum(np.abs(t[:-1]), np.abs(t[1:]))
    path_length = np.zeros((n_motions, t.size - 1))
    np.add.at(path_length, every, np.linalg.norm(total, axis=2))
    fit = np.zeros((n_motions, t.size - 1))
    np.add.at(fit, every, fit_error * width)
    floor_s = ROUNDING_ULPS * EPS * (size_r / C + size_t + path_length / C) + fit
    resolved = np.linalg.norm(slip, axis=2) > floor_s
    used = np.ascontiguousarray(np.where(resolved[..., None], slip, 0.0))
    # a slip at the rounding floor is left out of the velocity (uniform motion stays
    # exactly uniform), so interval i ends a rounding error away from sample i+1; each
    # interval starts at the offset from its sample that keeps the motion continuous
    # (its light times too, at γ ≳ 10⁴ where 1e-13 m is visible). The steady part of
    # those errors (β rounded the same way in every interval) would add up to a drift
    # from the samples: the path, not the velocity, carries it as a constant rate
    reached = integral + C * used - chord
    h = np.diff(t)
    drift = h[None, :, None] * (reached.sum(axis=1) / h.sum())[:, None, :]
    chord_slip = np.ascontiguousarray(used - drift / C)
    start_offset = np.zeros((n_motions, t.size, 3))
    np.cumsum(reached - drift, axis=1, out=start_offset[:, 1:])
    record = kernels.pack(True, interval_of, {
        "breaks": breaks, "knots": t, "knot_r": position, "slip_s": used,
        "chord_slip_s": chord_slip, "u_coef": u_coef, "path_cheb": path,
        "start_offset": start_offset}, n_motions)
    return _finish(motions, indices, t, record, raw_slip_s=slip, chord_m=chord,
                   integral_m=integral)


# ---------------------------------------------------------------------------- pieces
def breakpoints(t_s: np.ndarray, knots_s: np.ndarray) -> np.ndarray:
    """The sample times t_s with the spline knots that fall strictly between samples (a
    knot within MERGE_FRACTION of an interval from a sample is that sample)."""
    inner = knots_s[(knots_s > t_s[0]) & (knots_s < t_s[-1])]
    right = np.clip(np.searchsorted(t_s, inner), 1, t_s.size - 1)
    width = t_s[right] - t_s[right - 1]
    distance = np.minimum(inner - t_s[right - 1], t_s[right] - inner)
    return np.unique(np.concatenate([t_s, inner[distance > MERGE_FRACTION * width]]))


def taylor_coefficients(spline, start, k: int) -> np.ndarray:
    """(P, k+1, ...) coefficients, ascending, of the spline's polynomial on each piece in
    σ = t − start[p] (derivatives at the piece's start, from the right)."""
    return np.stack([spline(start, nu=m) / math.factorial(m) for m in range(k + 1)], axis=1)


def velocity_of(u: np.ndarray) -> np.ndarray:
    """β = u/√(1 + u²) along the last axis."""
    return u / np.sqrt(1.0 + np.einsum("...i,...i->...", u, u))[..., None]


def path_series(u_coef: np.ndarray, width_s: np.ndarray) -> list[tuple]:
    """Chebyshev series, in x = 2σ/w − 1, of c·∫β_u dt′ from each piece's start, of the
    motions of a group: u_coef (G, P, k+1, 3), width_s (P,). Each motion gets the fewest
    nodes of CHEBYSHEV_NODES that fit β_u on all its pieces within FIT_TOLERANCE of its
    size. Returns, per node count used, (members (g,) of the group, series (g, P, M+1, 3)
    m, piece totals (g, P, 3) m, largest error of the fit of β_u per piece (g, P))."""
    fits = []
    pending = np.arange(u_coef.shape[0])
    for nodes in CHEBYSHEV_NODES:
        coef = u_coef if pending.size == u_coef.shape[0] else u_coef[pending]
        path = np.empty((coef.shape[0], coef.shape[1], nodes + 1, 3))
        error = np.empty(coef.shape[:2])
        size = np.empty(coef.shape[:2])
        angle = np.pi * (np.arange(nodes) + 0.5) / nodes
        basis = np.cos(np.outer(np.arange(nodes), angle)) * (2.0 / nodes)
        basis[0] *= 0.5
        check = np.cos(np.pi * np.arange(nodes + 1) / nodes)  # between the nodes, and ends
        kernels.chebyshev_fit(coef, width_s, np.cos(angle), basis, check,
                              chebyshev.chebvander(check, nodes - 1), path, error, size)
        good = np.all(error <= FIT_TOLERANCE * size, axis=1) | (nodes == CHEBYSHEV_NODES[-1])
        if good.any():
            if not good.all():
                path, error = path[good], error[good]
            fits.append((pending[good], path, path.sum(axis=2), error))
        pending = pending[~good]
        if not pending.size:
            break
    return fits


# ---------------------------------------------------------------------------- slip
@dataclasses.dataclass(frozen=True)
class SlipReport:
    """How far a track's positions and momenta are from one motion.

    slip_s (n−1,): arrival-time slip |Δr − c∫β_u dt′|/c of each interval between samples;
    speed_ratio: Σ|Δr| / Σ|c∫β_u dt′| over the intervals (1 for consistent samples, whatever
    turns or stops; nan when nothing moves); offset_s: the shift of the momentum sample times that
    best explains the slips (least squares of D_i ≈ −offset·Δβ_i, the slip of momenta
    sampled `offset` late), 0 when the velocity never changes; explained: the share of
    Σ|D_i|² that offset accounts for (near 1 for momenta written at other times, near 0 for
    noise or a kink between samples); step_s: median interval."""

    particle: int
    t_s: np.ndarray
    slip_s: np.ndarray
    speed_ratio: float
    offset_s: float
    explained: float
    step_s: float

    def worst(self) -> int:
        """Index i of the interval (samples i and i+1, from 0) with the largest slip."""
        return int(np.argmax(self.slip_s))


def slip_report(motion: Motion) -> SlipReport | None:
    """The slip of a track with momenta (None for a positions-only track): `slip_reports`
    of the motion as a group of one."""
    if not motion.has_momentum:
        return None
    header, values = motion.record
    alone = _Group([motion], np.zeros(1, dtype=np.int64), np.asarray(motion.track.t_s,
                                                                      dtype=float),
                   (header, values[None]), motion.raw_slip_s[None], motion.chord_m[None],
                   motion.integral_m[None])
    return _slip_figures(alone)[0][0]


def _slip_figures(group: _Group) -> tuple:
    """(reports, speed ratio, offset, explained, slip_s (G, n−1), step_s) of every motion
    of a group with momenta (`SlipReport`), vectorised."""
    chord = np.linalg.norm(group.chord_m, axis=2).sum(axis=1)
    integral = np.linalg.norm(group.integral_m, axis=2).sum(axis=1)
    change = np.empty(group.chord_m.shape)  # Δβ_i; δβ is zero at the samples
    kernels.velocity_changes(*group.record, group.t_s, change)
    n_motions = change.shape[0]
    weight = (change * change).reshape(n_motions, -1).sum(axis=1)
    along = (group.raw_slip_s * change).reshape(n_motions, -1).sum(axis=1)
    total = (group.raw_slip_s**2).reshape(n_motions, -1).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(integral > 0.0, chord / integral,
                         np.where(chord > 0.0, math.inf, math.nan))
        offset = np.where(weight > 0.0, -along / weight, 0.0)
        explained = np.where((weight > 0.0) & (total > 0.0), along * along / (weight * total),
                             0.0)
    slip_s = np.linalg.norm(group.raw_slip_s, axis=2)
    step_s = float(np.median(np.diff(group.t_s)))
    reports = [SlipReport(motion.particle, np.asarray(motion.track.t_s, dtype=float),
                          slip_s[g], float(ratio[g]), float(offset[g]), float(explained[g]),
                          step_s)
               for g, motion in enumerate(group.motions)]
    return reports, ratio, offset, explained, slip_s, step_s


def slip_reports(group: _Group, resolution_s: float) -> tuple[list[SlipReport], np.ndarray]:
    """`slip_report` of every motion of a group with momenta, vectorised, and (G,) True
    for those near a limit of `check_slip` (CHECK_MARGIN), to be checked alone."""
    reports, ratio, offset, explained, slip_s, step_s = _slip_figures(group)
    near = 1.0 - CHECK_MARGIN
    fraction = slip_s.max(axis=1) / resolution_s
    with np.errstate(invalid="ignore"):
        odd = ~(np.isnan(ratio) | ((ratio * near >= 1.0 / UNIT_RATIO_LIMIT)
                                    & (ratio <= UNIT_RATIO_LIMIT * near)))
        odd |= ~(fraction <= SLIP_FRACTION * near)
        odd |= ((np.abs(offset) / step_s > OFFSET_FRACTION * near) & (explained > 0.5 * near)
                & (fraction > VISIBLE_FRACTION * near))
    return reports, odd


def check_slip(motion: Motion, resolution_s: float) -> SlipReport | None:
    """Raise MotionError when a track's positions and momenta cannot describe one motion:
      - the speeds they imply differ grossly (their ratio beyond UNIT_RATIO_LIMIT);
      - an interval's slip exceeds SLIP_FRACTION of `resolution_s`, the time scale the run
        resolves;
      - the slips are those of momenta sampled at other times than the positions (an
        apparent offset above OFFSET_FRACTION of the step between samples that explains
        most of them) and the largest is visible at the run's resolution (above
        VISIBLE_FRACTION of it).
    Returns the report (None for a positions-only track)."""
    report = slip_report(motion)
    if report is None:
        return None
    particle = f"particle {report.particle}"
    what = ("check the units of ux, uy, uz (γβ, dimensionless) and of t, x, y, z, and for a "
            "staggered (leapfrog) pusher that writes momenta half a step off set [tracks] "
            "u_offset to when they were sampled (e.g. u_offset = \"-0.5 ps\" for a 1 ps step)")
    ratio = report.speed_ratio
    if not (math.isnan(ratio) or 1.0 / UNIT_RATIO_LIMIT <= ratio <= UNIT_RATIO_LIMIT):
        raise MotionError(
            f"{particle}: the positions move {ratio:.4g} times as far as the momenta ux, uy, "
            "uz imply (summed over the intervals between samples; allowed "
            f"{1 / UNIT_RATIO_LIMIT:.3g} to {UNIT_RATIO_LIMIT:.3g}); {what}")
    i = report.worst()
    fraction = report.slip_s[i] / resolution_s
    t = report.t_s
    where = (f"{particle}: positions and momenta do not describe one motion between its "
             f"samples {i + 1} and {i + 2} (this particle's rows counted from 1; t = "
             f"{t[i]:.9g} s to {t[i + 1]:.9g} s): the arrival-time slip |Δr − ∫cβ dt′|/c is "
             f"{report.slip_s[i]:.3g} s, {fraction:.3g} of the time scale the run resolves "
             f"({resolution_s:.3g} s)")
    apparent = abs(report.offset_s) / report.step_s
    staggered = apparent > OFFSET_FRACTION and report.explained > 0.5
    if staggered:
        suggested = motion.u_offset_s + report.offset_s
        what = (f"over the whole track the slips are those of momenta sampled "
                f"{report.offset_s:+.3g} s ({apparent:.2f} of a step) off the times assumed "
                f"(u_offset = {motion.u_offset_s:.6g} s): set [tracks] u_offset = "
                f"\"{suggested:.6g} s\" if that is when they were written, and check the "
                "units of ux, uy, uz (γβ, dimensionless)")
    if fraction > SLIP_FRACTION:
        above = int(np.count_nonzero(report.slip_s > SLIP_FRACTION * resolution_s))
        raise MotionError(f"{where}, more than the {SLIP_FRACTION:g} allowed ({above} of "
                          f"{report.slip_s.size} intervals are above it); {what}")
    if staggered and fraction > VISIBLE_FRACTION:
        raise MotionError(f"{where}; {what}")
    return report
