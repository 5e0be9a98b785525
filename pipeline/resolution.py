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
from scipy import constants, interpolate

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


def sampled_velocity(track, degree: int) -> np.ndarray:
    """β (n, 3) at the samples: from ux, uy, uz, else the derivative of the positions'
    interpolating spline of `degree` (at most n − 1)."""
    if track.u is not None:
        return velocity_of(np.asarray(track.u, dtype=float))
    k = min(degree, track.n_samples - 1)
    spline = interpolate.make_interp_spline(track.t_s, track.position_m, k=k, axis=0)
    return spline.derivative(1)(track.t_s) / constants.c


def check_resolution(track, degree: int = 5) -> Finding | None:
    """The worst Finding of `track` (None when its samples resolve the spline's motion)."""
    t = np.asarray(track.t_s, dtype=float)
    if t.size < 3:
        return None
    beta = sampled_velocity(track, degree)
    step = np.diff(t)
    change = np.diff(beta, axis=0)  # (n−1, 3)
    candidates = [_ringing(t, beta, change, min(degree, t.size - 1)),
                  _accel_jumps(t, change, step)]
    found = [c for c in candidates if c is not None]
    if not found:
        return None
    ratio, what, i = max(found, key=lambda c: c[0])
    return Finding(int(track.particle), what, float(t[i]), float(ratio), float(step[i]))


def _ringing(t, beta, change, k):
    spline = interpolate.make_interp_spline(t, beta, k=k, axis=0)
    y = (np.arange(1, PROBES_PER_INTERVAL) / PROBES_PER_INTERVAL)
    probes = spline(t[:-1, None] + np.diff(t)[:, None] * y)  # (n−1, probes, 3)
    low = np.minimum(beta[:-1], beta[1:])[:, None, :]
    high = np.maximum(beta[:-1], beta[1:])[:, None, :]
    overshoot = np.maximum(probes - high, low - probes).max(axis=1)  # (n−1, 3)
    size = np.linalg.norm(change, axis=1)
    nearby = np.maximum(size, np.maximum(np.r_[size[:1], size[:-1]], np.r_[size[1:], size[-1:]]))
    nearby = np.maximum(nearby, MINOR_FRACTION * size.max())[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(overshoot > TURN_FLOOR, overshoot / (RING_FRACTION * nearby), 0.0)
    ratio = np.nan_to_num(ratio, posinf=1e300)
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


def _accel_jumps(t, change, step):
    if change.shape[0] < 2:
        return None
    rate = change / step[:, None]
    size = np.linalg.norm(rate, axis=1)
    moving = np.linalg.norm(change, axis=1) > TURN_FLOOR
    both = moving[1:] & moving[:-1]
    larger = size.max()
    with np.errstate(divide="ignore", invalid="ignore"):
        jump = np.linalg.norm(np.diff(rate, axis=0), axis=1) / larger
    ratio = np.where(both, jump / ACCEL_CHANGE, 0.0)
    i = int(np.argmax(ratio))
    if not ratio[i] > 1.0:
        return None
    what = (f"β̇ changes by {jump[i]:.0%} of its largest value from one interval between "
            "samples to the next (a hard field edge stays such a step at any sampling)")
    return ratio[i], what, i + 1


class ResolutionAudit:
    """Findings of many tracks, for one aggregated warning (`add` each track)."""

    def __init__(self, degree: int = 5):
        self.degree = degree
        self.findings = 0
        self.worst: Finding | None = None

    def add(self, track) -> Finding | None:
        finding = check_resolution(track, self.degree)
        if finding is not None:
            self.findings += 1
            if self.worst is None or finding.ratio > self.worst.ratio:
                self.worst = finding
        return finding

    def warnings(self) -> list[str]:
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
