"""The retarded-time solver: t = t′ + R(t′)/c (or its far-field form) is satisfied, the
root matches the closed form for uniform motion up to γ = 1e5 even when it lies far before
the sampled track (SPEC: about 2γ² × distance / c), and t′ grows with t.

Closed form for uniform motion r(t′) = r(t) − v(t − t′), with D = observer − r(t) and
T = t − t′: (c² − v²)T² − 2(D·v)T − |D|² = 0, the positive root (Jackson, Classical
Electrodynamics, 3rd ed., sec. 14.1, the light-cone condition (from memory)).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import reference as ref
from scipy import constants

from lagfield.motion import Motion
from lagfield.retarded import retarded_time
from lagfield.tracks import Track

C = constants.c
EPS = np.finfo(float).eps


def straight_track(gamma, n_samples=101, span_s=1e-9):
    """Uniform motion along +z through the origin at t = 0, sampled on [0, span_s]."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2) if gamma > 1.0 else 0.0
    t = np.linspace(0.0, span_s, n_samples)
    pos = np.zeros((t.size, 3))
    pos[:, 2] = beta * C * t
    u = np.zeros((t.size, 3))
    u[:, 2] = gamma * beta
    return Track(0, t, pos, u, -constants.e, 1.0)


def exact_delay(observer, t_obs, gamma):
    """T = t − t′ for uniform motion along z at γ (closed form, no cancellation)."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2) if gamma > 1.0 else 0.0
    d = np.asarray(observer)[None, :] - np.stack(
        [0.0 * t_obs, 0.0 * t_obs, beta * C * t_obs], axis=1)
    dv = d[:, 2] * beta * C
    d2 = np.einsum("ij,ij->i", d, d)
    a = C * C / gamma**2
    root = np.sqrt(dv * dv + a * d2)
    return np.where(dv >= 0.0, (dv + root) / a, d2 / (root - dv))


def residual(motion, observer, t_obs, t_ret):
    r = motion.evaluate(t_ret)[0]
    distance = np.linalg.norm(np.asarray(observer) - r, axis=1)
    return t_ret + distance / C - t_obs, distance / C


@pytest.mark.parametrize("gamma", [1.0, 1.5, 10.0, 1e3, 1e5])
def test_uniform_motion_matches_the_closed_form(gamma):
    """Observers ahead of, beside and behind the line, at times whose roots lie before,
    inside and after the sampled span. The condition holds to a few units in the last
    place of its largest term; the root matches the closed form within that residual
    divided by κ = dg/dt′ (the conditioning of the root)."""
    motion = Motion(straight_track(gamma))
    observers = [(1e-3, 0.0, 1.0), (0.05, 0.02, 0.1), (0.0, 0.3, -0.5)]
    for observer in observers:
        z = observer[2]
        t_obs = z / C + np.array([-1e-8, -1e-10, -1e-12, 0.0, 1e-12, 3e-10, 2e-9])
        t_ret = retarded_time(motion, observer, t_obs)
        g, delay = residual(motion, observer, t_obs, t_ret)
        scale = np.maximum.reduce([np.abs(t_ret), np.abs(t_obs), delay])
        assert np.all(np.abs(g) <= 8.0 * EPS * scale)
        r, beta, inv_g2, _ = motion.evaluate(t_ret)
        d = np.asarray(observer) - r
        n = d / np.linalg.norm(d, axis=1)[:, None]
        kappa = ref.kappa(n, beta, inv_g2)
        expected = t_obs - exact_delay(observer, t_obs, gamma)
        assert np.all(np.abs(t_ret - expected) <= 16.0 * EPS * scale / kappa + 1e-21)


def test_roots_far_before_the_track_at_gamma_1e5():
    """On the axis ahead, 1 ps before the charge's light front: t′ ≈ −2γ² × 1 ps = −2e-2 s,
    ten million track spans before the first sample (0 … 1 ns)."""
    gamma = 1e5
    motion = Motion(straight_track(gamma))
    observer = (1e-4, 0.0, 1.0)
    t_obs = np.array([1.0 / C - 1e-12])
    t_ret = retarded_time(motion, observer, t_obs)
    assert t_ret[0] < -1e-2
    expected = t_obs - exact_delay(observer, t_obs, gamma)
    assert abs(t_ret[0] - expected[0]) <= 1e-4 * abs(expected[0])


@pytest.mark.parametrize("gamma", [2.0, 1e5])
def test_far_field_condition(gamma):
    """t = t′ + (R₀ − n·(r(t′) − O))/c; for uniform motion r = v t′ through the origin:
    t′ = (t − R₀/c − n·O/c)/(1 − n·β), κ = 1 − n·β written without cancellation. The
    observer times are those of chosen source times at which the charge is well inside
    the sphere of radius R₀ (where the far-field form applies)."""
    motion = Motion(straight_track(gamma))
    beta = np.array([0.0, 0.0, math.sqrt(1.0 - 1.0 / gamma**2)])
    origin = np.array([0.0, 0.01, -0.2])
    distance = 50.0
    t_src = np.array([-1e-7, -3e-9, 0.0, 4e-10, 1e-9, 5e-8])  # |r| ≤ 30 m
    for theta in (0.0, 1.0 / gamma, 0.3, 2.5):
        n = np.array([math.sin(theta), 0.0, math.cos(theta)])
        kappa = ref.kappa(n, beta, 1.0 / gamma**2)
        t_obs = t_src * kappa + distance / C + n @ origin / C
        t_ret = retarded_time(motion, None, t_obs, far_direction=n, far_distance_m=distance,
                              origin_m=origin)
        expected = (t_obs - distance / C - n @ origin / C) / kappa
        scale = np.maximum(np.abs(t_obs), np.abs(t_ret))
        assert np.all(np.abs(t_ret - expected) <= 16.0 * EPS * scale / kappa + 1e-21)
        assert np.allclose(t_ret, t_src, rtol=1e-6, atol=16.0 * EPS * scale.max() / kappa)


@pytest.mark.parametrize("gamma", [3.0, 1e5])
def test_retarded_time_increases_with_observer_time(gamma):
    """dt′/dt = 1/κ > 0: on a dense grid of observer times t′ strictly increases (a circle
    at γ = 3 seen from outside and inside the orbit; a line at γ = 1e5 seen from ahead)."""
    if gamma < 10:
        track = ref.circle_track(gamma, 1.0, np.arange(301) * 1e-10)
        observers = [(0.0, 2.0, 0.3), (0.2, 0.1, 0.05)]
    else:
        track = straight_track(gamma)
        observers = [(1e-3, 0.0, 1.0)]
    motion = Motion(track)
    for observer in observers:
        t_obs = np.linspace(-5e-9, 4e-8, 4001)
        t_ret = retarded_time(motion, observer, t_obs)
        assert np.all(np.diff(t_ret) > 0.0)
        g, delay = residual(motion, observer, t_obs, t_ret)
        assert np.all(np.abs(g) <= 8.0 * EPS * np.maximum.reduce(
            [np.abs(t_ret), np.abs(t_obs), delay]))
