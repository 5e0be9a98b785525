"""Slow NumPy twin of the field engine, and tracks written from formulas for the checks.

`pointwise_fields` evaluates SPEC's Liénard–Wiechert formula (both terms, or the radiation
term alone with n and R₀ fixed per point in the far field) at given observer times: the
retarded time is solved with `lagfield.retarded.retarded_time` and the motion is a
`lagfield.motion.Motion`, so twin and engine see the same smooth motion and differ only
in how the field is integrated. `bin_averages` integrates that pointwise field over each
bin [t − step/2, t + step/2] by Gauss–Legendre quadrature on many sub-intervals, split
where the field is not smooth (arrival of light from the track's ends and sample times).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants

from lagfield.motion import Motion
from lagfield.retarded import retarded_time
from lagfield.tracks import Track

C = constants.c
COULOMB = 1.0 / (4.0 * math.pi * constants.epsilon_0)  # V·m/C


# ---------------------------------------------------------------------------- twin
def kappa(n, beta, inv_g2):
    """κ = 1 − n·β, written (1/γ² + |n×β|²)/(1 + n·β) so it keeps its digits at high γ."""
    cross = np.cross(n, beta)
    return (inv_g2 + np.einsum("...i,...i->...", cross, cross)) / (
        1.0 + np.einsum("...i,...i->...", n, beta))


def pointwise_fields(motion: Motion, observer_m, t_obs_s, *, far=None):
    """(E (K, 3) V/m, B (K, 3) T) of the track's charge × weight at observer times
    t_obs_s (K,). far = (direction (3,), distance_m, origin_m (3,)) for the far field."""
    t_obs = np.atleast_1d(np.asarray(t_obs_s, dtype=float))
    q = motion.track.charge_c * motion.track.weight
    if far is None:
        t_ret = retarded_time(motion, observer_m, t_obs)
    else:
        direction, distance, origin = far
        t_ret = retarded_time(motion, observer_m, t_obs, far_direction=direction,
                              far_distance_m=distance, origin_m=origin)
    r, beta, inv_g2, beta_dot = motion.evaluate(t_ret)
    if far is None:
        d = np.asarray(observer_m, dtype=float) - r
        distance = np.sqrt(np.einsum("ij,ij->i", d, d))[:, None]
        n = d / distance
    else:
        n = np.broadcast_to(np.asarray(far[0], dtype=float), r.shape)
        distance = float(far[1])
    k = kappa(n, beta, inv_g2)[:, None]
    radiation = np.cross(n, np.cross(n - beta, beta_dot)) / (C * k**3 * distance)
    e = q * COULOMB * radiation
    if far is None:
        e = e + q * COULOMB * (n - beta) * inv_g2[:, None] / (k**3 * distance**2)
    return e, np.cross(n, e) / C


def observer_times_of(motion: Motion, observer_m, t_src_s, *, far=None):
    """Observer times at which light emitted at source times t_src_s arrives."""
    r = motion.evaluate(np.asarray(t_src_s, dtype=float))[0]
    if far is None:
        d = np.asarray(observer_m, dtype=float) - r
        return t_src_s + np.sqrt(np.einsum("ij,ij->i", d, d)) / C
    direction, distance, origin = far
    return t_src_s + (distance - (r - np.asarray(origin)) @ np.asarray(direction)) / C


def bin_averages(motion: Motion, observer_m, centres_s, step_s, *, far=None,
                 pieces=8, order=10):
    """(E (K, 3), B (K, 3)): the pointwise field averaged over [t − step/2, t + step/2] for
    each bin centre t in centres_s (K,), by `order`-point Gauss–Legendre quadrature on
    `pieces` equal sub-intervals per bin, also split at the arrival of light from every
    track sample (the field's derivatives jump there: ballistic ends, spline knots)."""
    centres = np.asarray(centres_s, dtype=float)
    edges = np.concatenate([centres - 0.5 * step_s, centres[-1:] + 0.5 * step_s])
    fine = (edges[:-1, None] + step_s * np.arange(pieces) / pieces).ravel()
    fine = np.append(fine, edges[-1])
    arrivals = observer_times_of(motion, observer_m, motion.track.t_s, far=far)
    arrivals = arrivals[(arrivals > edges[0]) & (arrivals < edges[-1])]
    cuts = np.unique(np.concatenate([fine, arrivals]))
    x, w = np.polynomial.legendre.leggauss(order)
    lo, hi = cuts[:-1], cuts[1:]
    nodes = (0.5 * (lo + hi))[:, None] + (0.5 * (hi - lo))[:, None] * x
    weights = (0.5 * (hi - lo))[:, None] * w
    e, b = pointwise_fields(motion, observer_m, nodes.ravel(), far=far)
    owner = np.clip(np.searchsorted(edges, 0.5 * (lo + hi)) - 1, 0, centres.size - 1)
    e_avg = np.zeros((centres.size, 3))
    b_avg = np.zeros((centres.size, 3))
    for i in range(3):
        np.add.at(e_avg[:, i], owner, (e[:, i].reshape(nodes.shape) * weights).sum(axis=1))
        np.add.at(b_avg[:, i], owner, (b[:, i].reshape(nodes.shape) * weights).sum(axis=1))
    return e_avg / step_s, b_avg / step_s


def far_of(group, point):
    """The (direction, distance_m, origin_m) far-field geometry of one point of a group."""
    directions, distance = group.far_geometry()
    return directions[point], float(distance[point]), group.origin_m


# ---------------------------------------------------------------------------- tracks
def circle_track(gamma, radius_m, t_s, *, charge_c=-constants.e, particle=0, phase=0.0):
    """Uniform circular motion in the x–y plane about the origin (counter-clockwise),
    with exact u = γβ."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    omega = beta * C / radius_m
    angle = omega * np.asarray(t_s) + phase
    pos = np.stack([radius_m * np.cos(angle), radius_m * np.sin(angle), 0.0 * angle], axis=1)
    u = gamma * beta * np.stack([-np.sin(angle), np.cos(angle), 0.0 * angle], axis=1)
    return Track(particle, np.asarray(t_s, dtype=float), pos, u, charge_c, 1.0)


def smooth_step(x):
    """A C∞ step from 0 (x ≤ 0) to 1 (x ≥ 1): all its derivatives vanish at both ends."""
    x = np.clip(np.asarray(x, dtype=float), 0.0, 1.0)
    with np.errstate(divide="ignore", over="ignore"):
        a = np.where(x > 0.0, np.exp(-1.0 / np.where(x > 0.0, x, 1.0)), 0.0)
        b = np.where(x < 1.0, np.exp(-1.0 / np.where(x < 1.0, 1.0 - x, 1.0)), 0.0)
    return a / (a + b)


def track_from_momentum(u_of_t, t_s, r0_m, *, charge_c=-constants.e, particle=0,
                        pieces=16, order=20):
    """A track with u = u_of_t(t) (vectorised callable, (K,) -> (K, 3)) and position r0_m
    at t_s[0], integrated as r(t) = r0 + ∫ c u/γ dt′ by `order`-point Gauss–Legendre
    quadrature on `pieces` sub-intervals of every sample interval (u must be smooth)."""
    t_s = np.asarray(t_s, dtype=float)
    x, w = np.polynomial.legendre.leggauss(order)
    cuts = (t_s[:-1, None] + np.diff(t_s)[:, None] * np.arange(pieces + 1) / pieces)
    lo, hi = cuts[:, :-1], cuts[:, 1:]
    nodes = (0.5 * (lo + hi))[..., None] + (0.5 * (hi - lo))[..., None] * x
    u = u_of_t(nodes.ravel())
    v = C * u / np.sqrt(1.0 + np.einsum("ij,ij->i", u, u))[:, None]
    v = v.reshape(nodes.shape + (3,))
    steps = np.einsum("jp,k,jpki->ji", 0.5 * (hi - lo), w, v)
    pos = np.asarray(r0_m, dtype=float) + np.concatenate([np.zeros((1, 3)),
                                                          np.cumsum(steps, axis=0)])
    return Track(particle, t_s, pos, u_of_t(t_s), charge_c, 1.0)


def overshoots(beta, probes):
    """Twin of kernels/audit.overshoots: beta (G, n, 3), probes (G, n−1, K, 3) → the largest
    excursion of the probes beyond the range of their interval's two samples (G, n−1, 3)."""
    low = np.minimum(beta[:, :-1, :], beta[:, 1:, :])[:, :, None, :]
    high = np.maximum(beta[:, :-1, :], beta[:, 1:, :])[:, :, None, :]
    return np.maximum(probes - high, low - probes).max(axis=2)
