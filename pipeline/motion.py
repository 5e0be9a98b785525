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
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from numpy.polynomial import chebyshev
from scipy import constants, interpolate

from .errors import MotionError
from .kernels import motion as kernels
from .tracks import Track

C = constants.c
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
CHEBYSHEV_NODES = (16, 32, 64, 128)  # node counts tried in turn
ROUNDING_ULPS = 8  # slips below this many units in the last place are rounding
MERGE_FRACTION = 1e-6  # a spline knot this close (× interval) to a sample is that sample
EPS = np.finfo(float).eps
# the other kind's arrays in a motion record (`Motion.record`)
_NO_PIECES = np.zeros((0, 1, 3))
_NO_ROWS = np.zeros((0, 3))
_NO_TIMES = np.zeros(0)
_NO_INTERVALS = np.zeros(0, dtype=np.int64)


class Motion:
    """Reconstructed motion of one track.

    `evaluate(t_s)` returns (position_m (K, 3), beta (K, 3), inv_gamma2 (K,),
    beta_dot_per_s (K, 3)); outside [t_first, t_last] the ballistic extension.
    degree: the spline degree asked for (3 or 5); `degree_used` is lower for tracks of
    fewer than degree + 1 samples (n − 1). u_offset_s: the momenta were sampled at
    t + u_offset_s (default: the track's own `u_offset_s`, else 0).
    """

    def __init__(self, track: Track, *, degree: int = 5, extend: str = "ballistic",
                 smoothing_m: float = 0.0, u_offset_s: float | None = None):
        if degree not in (3, 5):
            raise ValueError(f"spline degree must be 3 or 5, not {degree}")
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
        self._ends_r = np.zeros((2, 3))
        self._ends_beta = np.zeros((2, 3))
        self._ends_inv_g2 = np.ones(2)
        if self.has_momentum:
            if smoothing_m > 0.0:
                raise MotionError(
                    f"particle {self.particle}: [motion] smoothing is for positions-only "
                    "tracks; with ux, uy, uz the velocity comes from the momenta and the "
                    "positions are its integral through every sample. Remove [motion] "
                    "smoothing, or map the momentum columns away to smooth noisy positions")
            with np.errstate(over="ignore", invalid="ignore"):  # absurd u: check_slip says so
                self._build_with_momenta(t, np.asarray(track.position_m, dtype=float),
                                         np.asarray(track.u, dtype=float))
        else:
            self._build_positions(t, np.asarray(track.position_m, dtype=float), smoothing_m)
        r, beta, inv_g2, _ = self.evaluate(np.array([self.t_first, self.t_last]))
        self._ends_r, self._ends_beta, self._ends_inv_g2 = r, beta, inv_g2

    # ------------------------------------------------------------------ construction
    def _build_positions(self, t, position_m, smoothing_m):
        k = self.degree_used
        tau = t - t[0]
        if smoothing_m > 0.0:
            s = t.size * smoothing_m**2
            splines = [interpolate.make_splrep(tau, position_m[:, i], k=k, s=s)
                       for i in range(3)]
        else:
            splines = [interpolate.make_interp_spline(tau, position_m, k=k)]
        self._breaks = breakpoints(t, np.concatenate([t[0] + s.t for s in splines]))
        start = self._breaks[:-1] - t[0]
        coef = [taylor_coefficients(s, start, k) for s in splines]
        self._coef = np.ascontiguousarray(
            coef[0] if len(coef) == 1 else np.stack(coef, axis=-1))

    def _build_with_momenta(self, t, position_m, u):
        k = self.degree_used
        offset = self.u_offset_s
        t_u = t + offset  # when the momenta were sampled
        first_gap = t_u[0] - t[0]
        last_gap = t[-1] - t_u[-1]
        if max(first_gap / (t_u[1] - t_u[0]), last_gap / (t_u[-1] - t_u[-2])) > 1.0 + 1e-9:
            raise MotionError(
                f"particle {self.particle}: u_offset = {offset:.6g} s puts the momenta more "
                "than one sample interval away from the positions at the track's "
                f"{'start' if first_gap > last_gap else 'end'}; u_offset should be a "
                "fraction of the step between samples (e.g. minus half a step for a "
                "leapfrog pusher)")
        spline = interpolate.make_interp_spline(t_u - t[0], u, k=k)
        breaks = breakpoints(t, t[0] + spline.t)
        width = np.diff(breaks)
        interval_of = np.clip(np.searchsorted(t, breaks[:-1], side="right") - 1, 0,
                              t.size - 2)
        u_coef = taylor_coefficients(spline, breaks[:-1] - t[0], k)
        path, total, fit_error = path_series(u_coef, width)

        # pieces of one interval: each starts where the previous one ended
        first_piece = np.searchsorted(interval_of, interval_of, side="left")
        rank = np.arange(interval_of.size) - first_piece
        for r in range(1, int(rank.max()) + 1):
            later = np.flatnonzero(rank == r)
            path[later, 0, :] += path[later - 1].sum(axis=1)  # its value at x = 1
        integral = np.zeros((t.size - 1, 3))
        np.add.at(integral, interval_of, total)
        chord = np.diff(position_m, axis=0)
        slip = (chord - integral) / C
        size_r = np.maximum(np.linalg.norm(position_m[:-1], axis=1),
                            np.linalg.norm(position_m[1:], axis=1))
        size_t = np.maximum(np.abs(t[:-1]), np.abs(t[1:]))
        path_length = np.zeros(t.size - 1)
        np.add.at(path_length, interval_of, np.linalg.norm(total, axis=1))
        fit = np.zeros(t.size - 1)
        np.add.at(fit, interval_of, fit_error * width)
        floor_s = ROUNDING_ULPS * EPS * (size_r / C + size_t + path_length / C) + fit
        self.raw_slip_s = slip
        self.chord_m = chord
        self.integral_m = integral
        resolved = np.linalg.norm(slip, axis=1) > floor_s
        self._slip = np.ascontiguousarray(np.where(resolved[:, None], slip, 0.0))
        # a slip at the rounding floor is left out of the velocity (uniform motion stays
        # exactly uniform), so interval i ends a rounding error away from sample i+1; each
        # interval starts at the offset from its sample that keeps the motion continuous
        # (its light times too, at γ ≳ 10⁴ where 1e-13 m is visible). The steady part of
        # those errors (β rounded the same way in every interval) would add up to a drift
        # from the samples: the path, not the velocity, carries it as a constant rate
        reached = integral + C * self._slip - chord
        h = np.diff(t)
        drift_m_per_s = reached.sum(axis=0) / h.sum()
        self._chord_slip = np.ascontiguousarray(self._slip - np.outer(h, drift_m_per_s) / C)
        self._start_offset = np.zeros((t.size, 3))
        np.cumsum(reached - np.outer(h, drift_m_per_s), axis=0, out=self._start_offset[1:])
        self._breaks = breaks
        self._interval_of = interval_of.astype(np.int64)
        self._knots = np.ascontiguousarray(t)
        self._knot_r = np.ascontiguousarray(position_m)
        self._u_coef = np.ascontiguousarray(u_coef)
        self._path = np.ascontiguousarray(path)

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
        pos = np.empty((t_s.size, 3))
        beta = np.empty((t_s.size, 3))
        inv_g2 = np.empty(t_s.size)
        beta_dot = np.empty((t_s.size, 3))
        ref_t = np.empty(t_s.size)
        ref_r = np.empty((t_s.size, 3))
        disp = np.empty((t_s.size, 3))
        kernels.evaluate_state(*self.record, t_s, pos, beta, inv_g2, beta_dot, ref_t, ref_r,
                               disp)
        return pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp

    @property
    def record(self) -> tuple:
        """The motion as the compiled kernels take it (`lagfield.kernels.motion`):
        (has_momentum, breaks, coef, interval_of, knots, knot_r, slip_s, chord_slip_s,
        u_coef, path_cheb, start_offset, ends_r, ends_beta, ends_inv_g2)."""
        ends = (self._ends_r, self._ends_beta, self._ends_inv_g2)
        if self.has_momentum:
            return (True, self._breaks, _NO_PIECES, self._interval_of, self._knots,
                    self._knot_r, self._slip, self._chord_slip, self._u_coef, self._path,
                    self._start_offset, *ends)
        return (False, self._breaks, self._coef, _NO_INTERVALS, _NO_TIMES, _NO_ROWS,
                _NO_ROWS, _NO_ROWS, _NO_PIECES, _NO_PIECES, _NO_ROWS, *ends)

    # ------------------------------------------------------------------ checks
    def check_speed(self) -> None:
        """Raise MotionError where the reconstructed speed reaches c (never clamped):
        probed SPEED_CHECKS_PER_INTERVAL times per interval between samples."""
        t = self.track.t_s
        fractions = np.linspace(0.0, 1.0, SPEED_CHECKS_PER_INTERVAL, endpoint=False)
        probe = (t[:-1, None] + np.diff(t)[:, None] * fractions).ravel()
        probe = np.append(probe, t[-1])
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
    try:
        motion = Motion(track, **options)
        motion.slip = check_slip(motion, resolution_s)
        motion.check_speed()
    except MotionError as error:
        if path is None:
            raise
        raise MotionError(f"file {path}, {error}") from None
    return motion


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


def polynomial(coef: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """Σ_m coef[p, m, :] σ[p, j]^m, shape (P, J, 3)."""
    value = np.zeros(sigma.shape + coef.shape[2:])
    for m in range(coef.shape[1] - 1, -1, -1):
        value = value * sigma[..., None] + coef[:, None, m, :]
    return value


def velocity_of(u: np.ndarray) -> np.ndarray:
    """β = u/√(1 + u²) along the last axis."""
    return u / np.sqrt(1.0 + np.einsum("...i,...i->...", u, u))[..., None]


def path_series(u_coef: np.ndarray, width_s: np.ndarray):
    """Chebyshev series (P, M+1, 3), in x = 2σ/w − 1, of c·∫β_u dt′ from each piece's start;
    the piece totals (P, 3) m; and the fit's largest error of β_u per piece (P,)."""
    for nodes in CHEBYSHEV_NODES:
        angle = np.pi * (np.arange(nodes) + 0.5) / nodes
        beta = velocity_of(polynomial(u_coef, 0.5 * (np.cos(angle)[None, :] + 1.0)
                                      * width_s[:, None]))
        basis = np.cos(np.outer(angle, np.arange(nodes))) * (2.0 / nodes)
        basis[:, 0] *= 0.5
        series = np.einsum("jm,pjc->pmc", basis, beta)
        check = np.cos(np.pi * np.arange(nodes + 1) / nodes)  # between the nodes, and the ends
        exact = velocity_of(polynomial(u_coef, 0.5 * (check[None, :] + 1.0) * width_s[:, None]))
        fitted = np.einsum("jm,pmc->pjc", chebyshev.chebvander(check, nodes - 1), series)
        error = np.abs(fitted - exact).max(axis=(1, 2))
        size = np.abs(exact).max(axis=(1, 2))
        if np.all(error <= FIT_TOLERANCE * size):
            break
    path = chebyshev.chebint(series, lbnd=-1.0, axis=1) * (0.5 * C * width_s)[:, None, None]
    return path, path.sum(axis=1), error


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
    """The slip of a track with momenta (None for a positions-only track)."""
    if not motion.has_momentum:
        return None
    chord = float(np.linalg.norm(motion.chord_m, axis=1).sum())
    integral = float(np.linalg.norm(motion.integral_m, axis=1).sum())
    speed_ratio = chord / integral if integral > 0.0 else (math.inf if chord > 0.0 else math.nan)
    t = np.asarray(motion.track.t_s, dtype=float)
    change = np.diff(motion.evaluate(t)[1], axis=0)  # Δβ_i; δβ is zero at the samples
    weight = float(np.sum(change * change))
    along = float(np.sum(motion.raw_slip_s * change))
    total = float(np.sum(motion.raw_slip_s**2))
    offset = -along / weight if weight > 0.0 else 0.0
    explained = along * along / (weight * total) if weight > 0.0 and total > 0.0 else 0.0
    return SlipReport(motion.particle, t, np.linalg.norm(motion.raw_slip_s, axis=1),
                      speed_ratio, offset, explained, float(np.median(np.diff(t))))


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
