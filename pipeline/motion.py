"""Smooth motion from sampled tracks: r, β, 1/γ² and β̇ at any source time.

Positions are interpolated (or smoothed) with scipy splines of degree 3 or 5. When the
track carries normalized momenta u = γβ, the velocity comes from a spline of u (so 1/γ² =
1/(1 + u²) keeps its precision at high γ) and the positions from a Hermite spline that
matches both the sampled positions and those velocities (and, for degree 5, the
accelerations). Outside the sampled span the motion is ballistic (constant velocity, the
velocity at the first or last sample) unless extension is switched off.
"""

from __future__ import annotations

import numpy as np
from scipy import constants, interpolate

from .errors import MotionError
from .tracks import Track

C = constants.c
SPEED_CHECKS_PER_INTERVAL = 8


class Motion:
    """Reconstructed motion of one track.

    `evaluate(t_s)` returns (position_m (K, 3), beta (K, 3), inv_gamma2 (K,),
    beta_dot_per_s (K, 3)); outside [t_first, t_last] the ballistic extension.
    """

    def __init__(self, track: Track, *, degree: int = 5, extend: str = "ballistic",
                 smoothing_m: float = 0.0):
        if degree not in (3, 5):
            raise ValueError(f"spline degree must be 3 or 5, not {degree}")
        self.track = track
        self.particle = track.particle
        self.degree = degree
        self.extend = extend
        t = np.asarray(track.t_s, dtype=float)
        self.t_first = float(t[0])
        self.t_last = float(t[-1])
        # scipy splines are evaluated on a time axis relative to the first sample
        self._t0 = self.t_first
        tau = t - self._t0
        k = min(degree, t.size - 1)
        if track.u is None:
            if smoothing_m > 0.0:
                s = t.size * smoothing_m**2
                self._position = [interpolate.make_splrep(tau, track.position_m[:, i], k=k, s=s)
                                  for i in range(3)]
            else:
                self._position = [interpolate.make_interp_spline(tau, track.position_m, k=k)]
            self._u_spline = None
        else:
            u = np.asarray(track.u, dtype=float)
            self._u_spline = interpolate.make_interp_spline(tau, u, k=k)
            beta, _, beta_dot = self._from_u(tau)
            v = C * beta
            if degree == 3 or t.size < 3:
                self._position = [interpolate.CubicHermiteSpline(tau, track.position_m, v)]
            else:
                a = C * beta_dot
                self._position = [interpolate.BPoly.from_derivatives(
                    tau, np.stack([track.position_m[:, i], v[:, i], a[:, i]], axis=1))
                    for i in range(3)]
        # ballistic extension: position and velocity at the ends
        ends = np.array([0.0, self.t_last - self._t0])
        r_end, beta_end, g_end, _ = self._inside(ends)
        self._r_end = r_end
        self._beta_end = beta_end
        self._g_end = g_end

    # ------------------------------------------------------------------ evaluation
    def _positions(self, tau, nu=0):
        if len(self._position) == 1:
            spline = self._position[0]
            return spline(tau, nu) if nu else spline(tau)
        return np.stack([(s(tau, nu) if nu else s(tau)) for s in self._position], axis=-1)

    def _from_u(self, tau):
        u = self._u_spline(tau)
        du = self._u_spline(tau, 1)
        u2 = np.einsum("...i,...i->...", u, u)
        gamma = np.sqrt(1.0 + u2)
        beta = u / gamma[..., None]
        beta_du = np.einsum("...i,...i->...", beta, du)
        beta_dot = (du - beta * beta_du[..., None]) / gamma[..., None]
        return beta, 1.0 / (1.0 + u2), beta_dot

    def _inside(self, tau):
        r = self._positions(tau)
        if self._u_spline is None:
            beta = self._positions(tau, 1) / C
            beta_dot = self._positions(tau, 2) / C
            speed = np.sqrt(np.einsum("...i,...i->...", beta, beta))
            inv_g2 = (1.0 - speed) * (1.0 + speed)
        else:
            beta, inv_g2, beta_dot = self._from_u(tau)
        return r, beta, inv_g2, beta_dot

    def evaluate(self, t_s):
        t_s = np.atleast_1d(np.asarray(t_s, dtype=float))
        tau = t_s - self._t0
        inside = (t_s >= self.t_first) & (t_s <= self.t_last)
        r = np.empty((t_s.size, 3))
        beta = np.empty((t_s.size, 3))
        inv_g2 = np.empty(t_s.size)
        beta_dot = np.zeros((t_s.size, 3))
        if inside.any():
            r[inside], beta[inside], inv_g2[inside], beta_dot[inside] = self._inside(tau[inside])
        for end, mask in ((0, t_s < self.t_first), (1, t_s > self.t_last)):
            if mask.any():
                t_end = self.t_first if end == 0 else self.t_last
                r[mask] = self._r_end[end] + C * self._beta_end[end] * (t_s[mask] - t_end)[:, None]
                beta[mask] = self._beta_end[end]
                inv_g2[mask] = self._g_end[end]
        return r, beta, inv_g2, beta_dot

    # ------------------------------------------------------------------ checks
    def check_speed(self) -> None:
        """Raise MotionError where the reconstructed speed reaches c (never clamped).
        With momenta the speed is |u|/√(1 + u²) < 1 by construction: nothing to check."""
        if self._u_spline is not None:
            return
        t = self.track.t_s
        fractions = np.linspace(0.0, 1.0, SPEED_CHECKS_PER_INTERVAL, endpoint=False)
        probe = (t[:-1, None] + np.diff(t)[:, None] * fractions).ravel()
        probe = np.append(probe, t[-1])
        _, beta, inv_g2, _ = self.evaluate(probe)
        speed = np.sqrt(np.einsum("ij,ij->i", beta, beta))
        bad = np.flatnonzero((speed >= 1.0) | (inv_g2 <= 0.0))
        if bad.size:
            worst = bad[np.argmax(speed[bad])]
            raise MotionError(
                f"particle {self.particle}: the reconstructed speed reaches c "
                f"(|β| = {speed[worst]:.12f}) at t = {probe[worst]:.9g} s, between samples "
                f"of the track; the degree-{self.degree} spline overshoots there. Write the "
                "track more often, give ux, uy, uz, set [motion] degree = 3, or set "
                "[motion] smoothing to the position noise")
