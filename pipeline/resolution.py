"""Whether a track's samples resolve the motion the spline puts between them.

The spline through the samples claims a motion between them; where the samples are too far
apart for that claim, the spline rings or bends in ways no sample supports. Checked on the
velocity β at the samples (from ux, uy, uz, else from the positions' spline) and on its
spline of the run's degree, probed PROBES_PER_INTERVAL times per interval:

- ringing: a component of β between two samples goes beyond the range of its two sampled
  values by more than RING_FRACTION of the largest sampled change |Δβ| over the interval
  and its neighbours (a reversal between samples that share a sign is such an overshoot);
- β̇ jumps: the mean β̇ of neighbouring intervals, Δβ/Δt, differs by more than
  ACCEL_CHANGE of the track's largest (an oscillation sampled fewer than 2π/ACCEL_CHANGE
  ≈ 13 times a period, or a bend that starts or ends within one interval).
The ringing scale is at least MINOR_FRACTION of the track's largest |Δβ|.

Both compare the motion with itself, never with a scale such as 1/γ: a γ = 1e4 arc sampled
every few formation times turns by 1e-4 rad per sample and is followed exactly. Changes of
β below TURN_FLOOR (rounding of the samples) are no motion. `run` warns once for all
tracks (run.json) and `lagfield inspect` lists the same findings.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import interpolate

from .constants import C
from .kernels import audit
from .motion import velocity_of
from .wording import plural

PROBES_PER_INTERVAL = 8
RING_FRACTION = 0.25  # overshoot / largest nearby sampled change of the component
ACCEL_CHANGE = 0.5  # |Δ(Δβ/Δt)| between neighbouring intervals / the track's max |Δβ/Δt|
TURN_FLOOR = 1e-9  # |Δβ| per interval below this is rounding, not motion
# changes below this fraction of the track's largest are measured against that tenth: the
# tail of a field edge, where a tiny β̇ grows steeply, is no motion the field depends on
MINOR_FRACTION = 0.1


@dataclasses.dataclass(frozen=True)
class Finding:
    """The worst place where one track's samples do not resolve its spline: what (ringing
    or β̇ jump), the time, how far beyond the limit (ratio > 1) and the step there."""

    particle: int
    what: str
    t_s: float
    ratio: float
    step_s: float

    @property
    def factor(self) -> int:
        """How many times more often to sample there (at least 2)."""
        return max(2, math.ceil(self.ratio * (1 - 1e-12)))

    def sentence(self) -> str:
        return (f"particle {self.particle} at t = {self.t_s:.6g} s: {self.what}; write its "
                f"samples at least {self.factor}x more often there (every "
                f"{self.step_s / self.factor:.3g} s or less)")


AUDIT_BATCH = 256  # tracks the audit checks together (those sharing sample times at once)
AUDIT_SAMPLES = 32_768  # or fewer, once they hold this many samples (scratch memory)


def sampled_velocity(t, positions_m, u, degree: int) -> np.ndarray:
    """β (..., n, 3) at the samples t (n,) of tracks (positions_m, u: (..., n, 3), u may be
    None): from ux, uy, uz, else the derivative of the positions' interpolating spline of
    `degree` (at most n − 1)."""
    if u is not None:
        return velocity_of(np.asarray(u, dtype=float))
    k = min(degree, t.size - 1)
    spline = interpolate.make_interp_spline(t, np.asarray(positions_m, dtype=float), k=k,
                                            axis=-2)
    return spline.derivative(1)(t) / C


def check_resolution(track, degree: int = 5) -> Finding | None:
    """The worst Finding of `track` (None when its samples resolve the spline's motion)."""
    t = np.asarray(track.t_s, dtype=float)
    if t.size < 3:
        return None
    beta = sampled_velocity(t, track.position_m, track.u, degree)
    step = np.diff(t)
    change = np.diff(beta, axis=0)  # (n−1, 3)
    candidates = [_ringing(t, beta, change, min(degree, t.size - 1)),
                  _accel_jumps(t, change, step)]
    found = [c for c in candidates if c is not None]
    if not found:
        return None
    ratio, what, i = max(found, key=lambda c: c[0])
    return Finding(int(track.particle), what, float(t[i]), float(ratio), float(step[i]))


def _ringing_ratios(t, beta, change, k):
    """Ringing of tracks sampled at t (n,): beta (..., n, 3), change (..., n−1, 3) →
    (ratio, overshoot, nearby, probes); ratio (..., n−1, 3) > 1 where a component rings."""
    spline = interpolate.make_interp_spline(t, beta, k=k, axis=-2)
    y = (np.arange(1, PROBES_PER_INTERVAL) / PROBES_PER_INTERVAL)
    probes = spline(t[:-1, None] + np.diff(t)[:, None] * y)  # (..., n−1, probes, 3)
    overshoot = np.empty(change.shape)  # (..., n−1, 3)
    audit.overshoots(np.ascontiguousarray(beta, dtype=float).reshape(-1, *beta.shape[-2:]),
                     probes.reshape(-1, *probes.shape[-3:]),
                     overshoot.reshape(-1, *overshoot.shape[-2:]))
    size = np.linalg.norm(change, axis=-1)
    before = np.concatenate([size[..., :1], size[..., :-1]], axis=-1)
    after = np.concatenate([size[..., 1:], size[..., -1:]], axis=-1)
    nearby = np.maximum(size, np.maximum(before, after))
    nearby = np.maximum(nearby, MINOR_FRACTION * size.max(axis=-1, keepdims=True))[..., None]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(overshoot > TURN_FLOOR, overshoot / (RING_FRACTION * nearby), 0.0)
    return np.nan_to_num(ratio, posinf=1e300), overshoot, nearby, probes


def _ringing(t, beta, change, k):
    ratio, overshoot, nearby, probes = _ringing_ratios(t, beta, change, k)
    i, c = np.unravel_index(int(np.argmax(ratio)), ratio.shape)
    if not ratio[i, c] > 1.0:
        return None
    nearby = np.broadcast_to(nearby, ratio.shape)
    same_sign = beta[i, c] * beta[i + 1, c] > 0
    crossing = same_sign and bool(np.any(probes[i, :, c] * beta[i, c] < 0))
    axis = "xyz"[c]
    what = (f"β{axis} reverses between two samples of the same sign" if crossing else
            f"the spline's β{axis} between samples overshoots their range by "
            f"{overshoot[i, c]:.3g}, {overshoot[i, c] / max(nearby[i, c], 1e-300):.2g} of the "
            "sampled change nearby")
    return ratio[i, c], what, i


def _jump_ratios(change, step):
    """β̇ jumps of tracks: change (..., n−1, 3), step (n−1,) → (ratio (..., n−2), jump)."""
    rate = change / step[:, None]
    size = np.linalg.norm(rate, axis=-1)
    moving = np.linalg.norm(change, axis=-1) > TURN_FLOOR
    both = moving[..., 1:] & moving[..., :-1]
    larger = size.max(axis=-1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        jump = np.linalg.norm(np.diff(rate, axis=-2), axis=-1) / larger
    return np.where(both, jump / ACCEL_CHANGE, 0.0), jump


def _accel_jumps(t, change, step):
    if change.shape[0] < 2:
        return None
    ratio, jump = _jump_ratios(change, step)
    i = int(np.argmax(ratio))
    if not ratio[i] > 1.0:
        return None
    what = (f"β̇ changes by {jump[i]:.0%} of its largest value from one interval between "
            "samples to the next (a hard field edge stays such a step at any sampling)")
    return ratio[i], what, i + 1


class ResolutionAudit:
    """Findings of many tracks, for one aggregated warning (`add` each track). Tracks are
    checked in batches of AUDIT_BATCH (or AUDIT_SAMPLES samples), those sharing sample times
    together; only the worst track's finding is worded (by `check_resolution`)."""

    def __init__(self, degree: int = 5):
        self.degree = degree
        self.findings = 0
        self.worst: Finding | None = None
        self._pending = []
        self._pending_samples = 0

    def add(self, track) -> None:
        self._pending.append(track)
        self._pending_samples += track.t_s.size
        if len(self._pending) >= AUDIT_BATCH or self._pending_samples >= AUDIT_SAMPLES:
            self._check_pending()

    def _check_pending(self) -> None:
        groups = {}
        for order, track in enumerate(self._pending):
            key = (np.asarray(track.t_s, dtype=float).tobytes(), track.u is None)
            groups.setdefault(key, []).append((order, track))
        worst_ratio = np.full(len(self._pending), -np.inf)
        for members in groups.values():
            ratios = self._worst_ratios([track for _, track in members])
            for (order, _), ratio in zip(members, ratios, strict=True):
                worst_ratio[order] = ratio
        self.findings += int(np.count_nonzero(worst_ratio > 1.0))
        best = int(np.argmax(worst_ratio))
        if worst_ratio[best] > 1.0 and (self.worst is None
                                        or worst_ratio[best] > self.worst.ratio):
            finding = check_resolution(self._pending[best], self.degree)
            if finding is not None and (self.worst is None or finding.ratio > self.worst.ratio):
                self.worst = finding
        self._pending = []
        self._pending_samples = 0

    def _worst_ratios(self, tracks) -> np.ndarray:
        """Per track (sharing sample times and kind) its largest ratio of either check."""
        t = np.asarray(tracks[0].t_s, dtype=float)
        if t.size < 3:
            return np.full(len(tracks), -np.inf)
        positions = np.stack([np.asarray(track.position_m, dtype=float) for track in tracks])
        u = (None if tracks[0].u is None else
             np.stack([np.asarray(track.u, dtype=float) for track in tracks]))
        beta = sampled_velocity(t, positions, u, self.degree)
        step = np.diff(t)
        change = np.diff(beta, axis=-2)
        ring = _ringing_ratios(t, beta, change, min(self.degree, t.size - 1))[0]
        worst = ring.reshape(len(tracks), -1).max(axis=1)
        if change.shape[-2] >= 2:
            worst = np.maximum(worst, _jump_ratios(change, step)[0].max(axis=1))
        return worst

    def warnings(self) -> list[str]:
        if self._pending:
            self._check_pending()
        if self.worst is None:
            return []
        many = "1 particle's" if self.findings == 1 else f"{self.findings} particles'"
        return [f"{many} samples do not resolve the motion their spline puts between them "
                f"(README, 'Motion between samples'); worst: {self.worst.sentence()}"]


class ShortTracks:
    """Tracks with fewer samples than the spline degree needs (their spline has a lower
    degree, n − 1), for one aggregated warning."""

    def __init__(self, degree: int = 5):
        self.degree = degree
        self.degrees_used: list[int] = []

    def add(self, track) -> None:
        if track.n_samples < self.degree + 1:
            self.degrees_used.append(track.n_samples - 1)

    def warnings(self) -> list[str]:
        if not self.degrees_used:
            return []
        low, high = min(self.degrees_used), max(self.degrees_used)
        used = f"degree {low}" if low == high else f"degree {low}–{high}"
        return [f"{plural(len(self.degrees_used), 'particle')} with fewer than "
                f"{self.degree + 1} samples used {used} instead of {self.degree} ([motion] "
                "degree)"]
