"""Motion from sampled tracks: one consistent motion from positions and momenta (dr/dt′ = cβ
through every sample), the slip check, short tracks, u_offset, and the compiled evaluation
against scipy's own spline evaluation."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants, interpolate

from lagfield.errors import MotionError
from lagfield.motion import Motion, check_slip, slip_report
from lagfield.tracks import Track

C = constants.c
Q = -constants.e


def random_track(seed: int, n: int = 30, *, consistent_m: float = 1e-9) -> Track:
    """A smooth random walk of u (|u| up to a few) sampled every ps, positions the
    trapezoid integral of the velocity plus up to consistent_m of disagreement."""
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.uniform(0.5e-12, 1.5e-12, n))
    u = np.cumsum(rng.normal(0.0, 0.3, (n, 3)), axis=0) + rng.normal(0.0, 1.0, 3)
    beta = u / np.sqrt(1.0 + np.sum(u * u, axis=1))[:, None]
    steps = 0.5 * (beta[1:] + beta[:-1]) * C * np.diff(t)[:, None]
    position = np.concatenate([np.zeros((1, 3)), np.cumsum(steps, axis=0)])
    position += rng.uniform(-consistent_m, consistent_m, position.shape)
    return Track(seed, t, position, u, Q)


def derivative(function, t, d):
    """Fourth-order central difference of function(t) (K, ...) with spacing d."""
    return (8.0 * (function(t + d) - function(t - d)) - (function(t + 2 * d)
                                                          - function(t - 2 * d))) / (12.0 * d)


# ---------------------------------------------------------------------------- consistency
@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), offset=st.sampled_from([0.0, -0.5, 0.3]))
def test_positions_are_the_integral_of_the_velocity(seed, offset):
    """On random tracks whose positions and momenta disagree (a slip of up to ~1e-17 s per
    interval) and with momenta at other times: the motion passes through every sample, and
    dr/dt′ = cβ, dβ/dt′ = β̇ and 1/γ² = 1 − |β|² hold between samples (fourth-order finite
    differences, tolerance their own truncation and rounding error)."""
    track = random_track(seed)
    h = float(np.min(np.diff(track.t_s)))
    motion = Motion(track, u_offset_s=offset * h)
    r, beta, inv_g2, _ = motion.evaluate(track.t_s)
    scale = np.abs(track.position_m).max()
    np.testing.assert_allclose(r, track.position_m, rtol=0, atol=1e-14 * scale)
    d = 1e-4 * h
    t = np.linspace(track.t_s[2], track.t_s[-3], 997)
    # β̈ jumps at the samples (and at knots between them): keep the stencils off them
    nearest = np.abs(t[:, None] - motion._breaks[None, :]).min(axis=1)
    t = t[nearest > 3 * d]
    position = derivative(lambda x: motion.evaluate(x)[0], t, d) / C
    r, beta, inv_g2, beta_dot = motion.evaluate(t)
    np.testing.assert_allclose(position, beta, rtol=0, atol=1e-8)
    velocity = derivative(lambda x: motion.evaluate(x)[1], t, d)
    np.testing.assert_allclose(velocity, beta_dot, rtol=0, atol=1e-6 * np.abs(beta_dot).max())
    np.testing.assert_allclose(inv_g2, 1.0 - np.sum(beta * beta, axis=1), rtol=1e-9, atol=1e-15)


def test_uniform_motion_at_gamma_1e5_keeps_its_inverse_gamma_squared():
    """Uniform motion at γ = 1e5 written with momenta: 1/γ² from the motion equals
    1/(1 + u²) (exact for β = u/√(1 + u²)) to 1e-12 relative, between samples too; 1 − |β|²
    would keep only ~1e-6 of it."""
    gamma = 1e5
    u_z = math.sqrt(gamma**2 - 1.0)
    beta = u_z / gamma
    t = np.arange(20) * 1e-12 + 3e-9
    position = np.zeros((t.size, 3))
    position[:, 0] = 0.02
    position[:, 2] = 0.1 + beta * C * (t - 3e-9)
    u = np.zeros((t.size, 3))
    u[:, 2] = u_z
    motion = Motion(Track(1, t, position, u, Q))
    probe = np.linspace(t[0], t[-1], 1001)
    _, b, inv_g2, beta_dot = motion.evaluate(probe)
    np.testing.assert_allclose(inv_g2, 1.0 / (1.0 + u_z**2), rtol=1e-12)
    assert np.abs(b[:, 2] - beta).max() <= 4e-16
    assert np.abs(beta_dot).max() * 1e-12 <= 1e-20  # rounding of the spline of u only


def test_positions_only_match_scipy_spline_evaluation():
    """Positions-only tracks (interpolating, and smoothing with [motion] smoothing): r, r′/c,
    r″/c from the compiled kernel against scipy's evaluation of the same spline (an
    independent implementation), to 1e-10 of their size (the conversion to per-piece
    coefficients rounds the derivatives at ~1e-12)."""
    track = random_track(3, 25)
    plain = Track(3, track.t_s, track.position_m, None, Q)
    tau = track.t_s - track.t_s[0]
    probe = np.linspace(track.t_s[0], track.t_s[-1], 777)
    for smoothing_m, splines in (
            (0.0, [interpolate.make_interp_spline(tau, track.position_m, k=5)]),
            (1e-7, [interpolate.make_splrep(tau, track.position_m[:, i], k=5,
                                            s=tau.size * 1e-14) for i in range(3)])):
        motion = Motion(plain, smoothing_m=smoothing_m)
        r, beta, _, beta_dot = motion.evaluate(probe)
        for nu, ours in ((0, r), (1, beta * C), (2, beta_dot * C)):
            values = [s(probe - track.t_s[0], nu) for s in splines]
            expected = values[0] if len(values) == 1 else np.stack(values, axis=-1)
            np.testing.assert_allclose(ours, expected, rtol=0,
                                       atol=1e-10 * np.abs(expected).max())


def test_ballistic_extension_continues_the_end_velocities():
    """Before the first and after the last sample: constant velocity (the end samples'),
    β̇ = 0, positions on the straight line."""
    track = random_track(5)
    motion = Motion(track)
    r_end, b_end, g_end, _ = motion.evaluate([motion.t_first, motion.t_last])
    for end, dt in ((0, -np.array([1e-12, 1e-9])), (1, np.array([1e-12, 1e-9]))):
        t = (motion.t_first, motion.t_last)[end] + dt
        r, beta, inv_g2, beta_dot = motion.evaluate(t)
        np.testing.assert_allclose(r, r_end[end] + C * b_end[end] * dt[:, None], rtol=1e-13)
        np.testing.assert_array_equal(beta, np.broadcast_to(b_end[end], beta.shape))
        np.testing.assert_array_equal(inv_g2, g_end[end])
        assert not beta_dot.any()


# ---------------------------------------------------------------------------- short tracks
@pytest.mark.parametrize("n", [2, 3, 4, 5, 6])
@pytest.mark.parametrize("momenta", [False, True])
def test_short_tracks_are_accepted_with_a_lower_degree(n, momenta):
    """Tracks of 2 … 6 samples: accepted, degree n − 1 up to the requested 5, through every
    sample; a two-sample uniform track is the straight line at its speed."""
    t = np.arange(n) * 1e-12
    beta = 0.6
    position = np.zeros((n, 3))
    position[:, 1] = beta * C * t
    u = np.zeros((n, 3))
    u[:, 1] = beta / math.sqrt(1 - beta**2)
    motion = Motion(Track(0, t, position, u if momenta else None, Q))
    assert motion.degree_used == min(5, n - 1)
    probe = np.linspace(0.0, t[-1], 11)
    r, b, inv_g2, _ = motion.evaluate(probe)
    np.testing.assert_allclose(r[:, 1], beta * C * probe, rtol=1e-12, atol=1e-18)
    np.testing.assert_allclose(b[:, 1], beta, rtol=1e-12)
    np.testing.assert_allclose(inv_g2, 1 - beta**2, rtol=1e-11)
    check_slip(motion, 1e-15)
    motion.check_speed()


def test_a_single_sample_is_an_error():
    with pytest.raises(MotionError, match="particle 4: a track needs at least 2 samples"):
        Motion(Track(4, np.zeros(1), np.zeros((1, 3)), None, Q))


def test_smoothing_with_momenta_is_refused():
    """[motion] smoothing would be silently meaningless with momenta: an error that says so."""
    track = random_track(1)
    with pytest.raises(MotionError, match=r"\[motion\] smoothing is for positions-only"):
        Motion(track, smoothing_m=1e-6)


def test_u_offset_beyond_one_interval_is_an_error():
    track = random_track(2)
    with pytest.raises(MotionError, match="u_offset"):
        Motion(track, u_offset_s=-3e-12)


def test_u_offset_defaults_to_the_tracks_own():
    track = random_track(2)
    shifted = Track(2, track.t_s, track.position_m, track.u, Q, u_offset_s=-0.2e-12)
    assert Motion(shifted).u_offset_s == -0.2e-12
    assert Motion(shifted, u_offset_s=0.1e-12).u_offset_s == 0.1e-12
    assert Motion(track).u_offset_s == 0.0


# ---------------------------------------------------------------------------- slip check
def circle(beta, per_turn, u_shift_fraction=0.0, radius_m=1.0, turns=2):
    """A charge on a circle, momenta written u_shift_fraction of a step after the
    positions; returns (track, step)."""
    omega = beta * C / radius_m
    h = 2 * math.pi / omega / per_turn
    t = np.arange(turns * per_turn + 1) * h
    phase = omega * t
    position = radius_m * np.stack([np.cos(phase), np.sin(phase), 0 * phase], 1)
    shifted = omega * (t + u_shift_fraction * h)
    gamma = 1 / math.sqrt(1 - beta**2)
    u = gamma * beta * np.stack([-np.sin(shifted), np.cos(shifted), 0 * phase], 1)
    return Track(9, t, position, u, Q), h


def test_consistent_coarse_tracks_pass_the_slip_check():
    """Consistent momenta on a circle at γ = 3 with 12 samples a turn (coarse): accepted at a
    resolution of a hundredth of the step. The slip is largest at the ends, where the spline
    has the least support (measured 1.1e-4 of the step), and no systematic offset is found."""
    track, h = circle(math.sqrt(8) / 3, 12)
    report = check_slip(Motion(track), 1e-2 * h)
    assert report.slip_s.max() < 1e-3 * h
    assert abs(report.offset_s) < 1e-6 * h
    assert report.speed_ratio == pytest.approx(1.0, abs=1e-5)


@pytest.mark.parametrize("beta, resolution_steps", [(math.sqrt(8) / 3, 1.0), (0.5, 0.25)])
def test_momenta_half_a_step_off_are_an_error(beta, resolution_steps):
    """Momenta written half a step early without u_offset (fast and slow circles): the
    report finds the offset (−h/2 within 2 %), the run stops with the particle, the samples
    and a u_offset hint; with u_offset the same track passes."""
    track, h = circle(beta, 40, -0.5)
    report = slip_report(Motion(track))
    assert report.offset_s == pytest.approx(-0.5 * h, rel=0.02)
    assert report.explained > 0.99
    with pytest.raises(MotionError, match=r"particle 9: .*samples \d+ and \d+.*u_offset"):
        check_slip(Motion(track), resolution_steps * h)
    check_slip(Motion(track, u_offset_s=-0.5 * h), resolution_steps * h)


@pytest.mark.parametrize("factor", [1e-3, 0.3, 1000.0])
def test_momenta_in_wrong_units_are_an_error(factor):
    """u multiplied by a wrong unit factor (e.g. momentum in MeV/c or kg·m/s, or β given in
    per mille): the speeds disagree and the run stops, pointing at the units."""
    track, h = circle(0.3, 40)
    wrong = Track(9, track.t_s, track.position_m, track.u * factor, Q)
    with pytest.raises(MotionError, match=r"particle 9: .*units of ux, uy, uz"):
        check_slip(Motion(wrong), h)


def test_slip_above_the_fraction_is_an_error_naming_the_interval():
    """One corrupted position (a 1 µm jump at sample 7): the slip there exceeds the fraction
    of the run's time scale; the error names samples 7 and 8 (or 6 and 7) and the slip."""
    track, h = circle(0.3, 40)
    position = track.position_m.copy()
    position[6, 2] += 1e-6
    bad = Track(9, track.t_s, position, track.u, Q)
    with pytest.raises(MotionError, match=r"samples (6 and 7|7 and 8).*3\.3\de-15 s"):
        check_slip(Motion(bad), 1e-15)


def test_turning_points_and_stopping_pass_the_slip_check():
    """A slow oscillator whose turning points fall between samples, and a charge coming to
    rest (u → 0 and staying there): valid motion, no error at a fine resolution."""
    omega = 2 * math.pi / 13.7e-12
    t = np.arange(60) * 1e-12
    position = np.zeros((t.size, 3))
    position[:, 0] = 1e-4 * np.sin(omega * t)
    u = np.zeros((t.size, 3))
    b = 1e-4 * omega / C * np.cos(omega * t)
    u[:, 0] = b / np.sqrt(1 - b * b)
    check_slip(Motion(Track(1, t, position, u, Q)), 1e-14)
    x = np.clip(t / 10e-12, 0, 1)
    speed = 0.01 * (1 - x) ** 2  # β, from 0.01 to rest at 10 ps, then at rest
    z = 0.01 * C * 10e-12 * (1 - (1 - x) ** 3) / 3
    position = np.zeros((t.size, 3))
    position[:, 2] = z
    u = np.zeros((t.size, 3))
    u[:, 2] = speed / np.sqrt(1 - speed**2)
    check_slip(Motion(Track(2, t, position, u, Q)), 1e-14)


def test_positions_only_spline_reaching_c_is_an_error():
    """Positions-only samples whose spline overshoots c between samples (a charge at
    β = 0.999 that jumps sideways): MotionError naming particle and time, never clamped."""
    t = np.arange(12) * 1e-12
    position = np.zeros((12, 3))
    position[:, 2] = 0.999 * C * t
    position[6:, 0] = 2e-5
    with pytest.raises(MotionError, match=r"particle 0: the reconstructed speed reaches c"):
        Motion(Track(0, t, position, None, Q)).check_speed()
