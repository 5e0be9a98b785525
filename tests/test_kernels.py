"""The compiled kernels against the slow NumPy twin in tests/reference.py, on a curved
relativistic track (a circular arc at γ = 3), and their independence of the thread count.

The twin evaluates SPEC's pointwise Liénard–Wiechert formula at the retarded time and
integrates it over each bin by Gauss–Legendre quadrature; the engine integrates exact
primitives. Both use the same `Motion`, so the comparison isolates the kernels. The
windows lie inside the light of the sampled arc (away from its ends).
"""

from __future__ import annotations

import numba
import numpy as np
import pytest
import reference as ref

from lagfield.engine import FieldSettings, compute_fields
from lagfield.kernels import pointwise
from lagfield.motion import Motion
from lagfield.observers import ObserverGroup

GAMMA = 3.0
RADIUS_M = 1.0
SAMPLE_SPACING_S = 1e-10  # 0.028 rad of arc per sample
STEP_S = 2e-11  # about 6 bins across the radiation pulse width ρ/(cγ³)
# bin averages agree to this fraction of the point's largest |E| (|B|); measured ~2e-11
KERNEL_TOLERANCE = 1e-9
POINTS_M = np.array([[0.0, 2.0, 0.3], [1.5, 1.5, -0.5], [-1.2, 0.4, 1.0],
                     [0.5, -1.6, 0.1], [0.2, 0.1, 0.05]])  # inside and outside, off-plane


@pytest.fixture(scope="module")
def arc():
    """1.35 turns (30 ns) of an electron circle of radius 1 m at γ = 3, with exact u."""
    return ref.circle_track(GAMMA, RADIUS_M, np.arange(301) * SAMPLE_SPACING_S)


def inner_window(motion, group, far):
    """(start_s, stop_s): bins that see only light emitted inside the sampled track."""
    ends = np.array([motion.t_first, motion.t_last])
    arrivals = np.array([
        ref.observer_times_of(motion, group.points_m[p], ends,
                              far=ref.far_of(group, p) if far else None)
        for p in range(group.n_points)])
    return arrivals[:, 0].max() + STEP_S, arrivals[:, 1].min() - STEP_S


@pytest.mark.parametrize("far", [False, True], ids=["near", "far"])
def test_bin_averages_match_the_twin_on_a_circular_arc(arc, far):
    points = POINTS_M if not far else 20.0 * POINTS_M / np.linalg.norm(
        POINTS_M, axis=1)[:, None]
    group = ObserverGroup("arc", "points", points, np.zeros(3))
    motion = Motion(arc)
    start, stop = inner_window(motion, group, far)
    assert stop - start > 1e-8  # more than a thousand bins
    result = compute_fields([arc], [group], FieldSettings(step_s=STEP_S, start_s=start,
                                                          stop_s=stop, far_field=far))[0]
    for p in range(group.n_points):
        n = result.n_bins[p]
        e_ref, b_ref = ref.bin_averages(motion, points[p], result.times(p), STEP_S,
                                        far=ref.far_of(group, p) if far else None,
                                        pieces=2, order=6)
        e, b = result.e_v_per_m[p, :n], result.b_t[p, :n]
        assert np.abs(e - e_ref).max() <= KERNEL_TOLERANCE * np.abs(e_ref).max(), p
        assert np.abs(b - b_ref).max() <= KERNEL_TOLERANCE * np.abs(b_ref).max(), p
        assert np.abs(e_ref).max() > 0.0


@pytest.mark.parametrize("far", [False, True], ids=["near", "far"])
def test_pointwise_kernels_match_the_twin_formula(arc, far):
    """fields_near / fields_far at the track samples vs the twin's formula evaluated at
    the retarded times of their observer times (agreement to 1e-12 of the largest |E|)."""
    motion = Motion(arc)
    t = np.linspace(arc.t_s[0], arc.t_s[-1], 99)[1:-1]  # inside: β̇ jumps at the ends
    pos, beta, inv_g2, beta_dot = motion.evaluate(t)
    q = arc.charge_c * ref.COULOMB
    for point in POINTS_M:
        t_obs = np.empty(t.size)
        e = np.empty((t.size, 3))
        if far:
            distance = 30.0
            direction = point / np.linalg.norm(point)
            origin = np.zeros(3)
            pointwise.fields_far(t, pos, beta, inv_g2, beta_dot, direction, distance, origin,
                                 t_obs, e)
            geometry = (direction, distance, origin)
        else:
            pointwise.fields_near(t, pos, beta, inv_g2, beta_dot, point, t_obs, e)
            geometry = None
        e_ref, _ = ref.pointwise_fields(motion, point, t_obs, far=geometry)
        assert np.abs(q * e - e_ref).max() <= 1e-12 * np.abs(e_ref).max()


@pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="needs two numba threads")
@pytest.mark.parametrize("far", [False, True], ids=["near", "far"])
def test_result_does_not_depend_on_the_number_of_threads(arc, far):
    """1 thread vs 2 threads: bin averages equal to 1e-12 of the largest |E| (the kernels
    add every point's segments in the same order whatever the threads)."""
    rng = np.random.default_rng(7)
    points = rng.uniform(-2.0, 2.0, (13, 3))
    points[:, 2] += 2.5  # off the orbit plane
    if far:
        points *= 10.0
    group = ObserverGroup("threads", "points", points, np.zeros(3))
    tracks = [arc, ref.circle_track(GAMMA, RADIUS_M, arc.t_s, particle=1, phase=1.0)]
    settings = FieldSettings(step_s=STEP_S, far_field=far)
    previous = numba.get_num_threads()
    try:
        results = []
        for threads in (1, 2):
            numba.set_num_threads(threads)
            results.append(compute_fields(tracks, [group], settings)[0])
    finally:
        numba.set_num_threads(previous)
    one, two = results
    assert np.array_equal(one.n_bins, two.n_bins)
    for a, b in ((one.e_v_per_m, two.e_v_per_m), (one.b_t, two.b_t)):
        assert np.abs(a).max() > 0.0
        assert np.abs(a - b).max() <= 1e-12 * np.abs(a).max()
