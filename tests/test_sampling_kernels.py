"""The source-sampling kernels: serial and parallel drivers agree exactly, and the reach
distance is measured only over the part of the track a point sees."""

from __future__ import annotations

import numpy as np

from lagfield.kernels import sampling


def helix_samples(n):
    t = np.linspace(0.0, 1e-9, n)
    phase = 2 * np.pi * t / 2e-10
    pos = np.stack([1e-3 * np.cos(phase), 1e-3 * np.sin(phase), 0.29 * t * 1e9], axis=1)
    beta = np.gradient(pos, t, axis=0) / 299792458.0
    beta_dot = np.gradient(beta, t, axis=0)
    inv_g2 = 1.0 - np.sum(beta**2, axis=1)
    return t, pos, beta, inv_g2, beta_dot


def test_serial_and_parallel_drivers_agree_exactly():
    t, pos, beta, inv_g2, beta_dot = helix_samples(2000)
    points = np.stack([np.linspace(-0.05, 0.05, 150), np.full(150, 0.02),
                       np.full(150, 0.1)], axis=1)
    seen_lo = np.full(150, 2e-10)
    seen_hi = np.full(150, 8e-10)
    before = np.concatenate([t[:1], t[:-1]])
    after = np.concatenate([t[1:], t[-1:]])
    args = (pos, beta, inv_g2, beta_dot, before, after, points, seen_lo, seen_hi, False,
            1e-12, 1e-12, 4.0, 0.02)
    serial = np.empty(t.size)
    parallel = np.empty(t.size)
    sampling._limits_serial(*args, serial)
    sampling._limits_parallel(*args, parallel)
    assert np.array_equal(serial, parallel)
    near = np.empty(150)
    near_parallel = np.empty(150)
    sampling._closest_serial(t, pos, points, seen_lo, seen_hi, near)
    sampling._closest_parallel(t, pos, points, seen_lo, seen_hi, near_parallel)
    assert np.array_equal(near, near_parallel)


def test_closest_approach_counts_only_the_seen_source_times():
    """A straight track along z through the origin at t = 0 (1 m/ns): seen over
    [1 ns, 2 ns] only, its closest approach to the origin is 1 m (the track's position at
    1 ns, interpolated between samples), and to a point at z = 1.5 m it is 0."""
    t = np.linspace(-3e-9, 3e-9, 7)  # samples 1 ns apart
    pos = np.zeros((7, 3))
    pos[:, 2] = t * 1e9
    points = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 1.5], [0.0, 0.0, 0.5]])
    out = np.empty(3)
    sampling.closest_approach(t, pos, points, np.full(3, 1e-9), np.full(3, 2e-9), out)
    assert np.allclose(out, [1.0, 0.0, 0.5], rtol=0.0, atol=1e-12)
