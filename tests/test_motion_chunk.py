"""Motions of a chunk of tracks built together (`build_motions`, `checked_motions`) against
the same tracks built one by one (`Motion`, `checked_motion`): the same arrays to the bit,
the same slip reports, the same first error."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import constants

from lagfield import motion as motion_module
from lagfield.errors import MotionError
from lagfield.motion import Motion, build_motions, check_slip, checked_motion, checked_motions
from lagfield.tracks import Track

C = constants.c
STEP_S = 10e-12
RESOLUTION_S = 2e-12


def helix_track(particle, t_s, *, gamma=20.0, phase=0.0, momenta=True, u_shift_s=0.0,
                u_scale=1.0, radius_m=0.05):
    """A charge on a helix about z sampled at t_s; momenta (scaled by u_scale) sampled at
    t_s + u_shift_s; positions and momenta of one motion when u_scale = 1."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    beta_t, beta_z = 0.6 * beta, 0.8 * beta
    omega = beta_t * C / radius_m

    def position(t):
        return np.stack([radius_m * np.cos(omega * t + phase),
                         radius_m * np.sin(omega * t + phase), beta_z * C * t], axis=1)

    def momentum(t):
        return u_scale * gamma * np.stack([-beta_t * np.sin(omega * t + phase),
                                           beta_t * np.cos(omega * t + phase),
                                           np.full_like(t, beta_z)], axis=1)

    t_s = np.asarray(t_s, dtype=float)
    u = momentum(t_s + u_shift_s) if momenta else None
    return Track(particle, t_s.copy(), position(t_s), u, -constants.e)


def grid(n_samples, start_s=0.0, step_s=STEP_S):
    return start_s + step_s * np.arange(n_samples)


def assert_same_motion(batched, alone):
    assert batched.particle == alone.particle
    assert (batched.t_first, batched.t_last) == (alone.t_first, alone.t_last)
    assert (batched.degree_used, batched.has_momentum) == (alone.degree_used,
                                                           alone.has_momentum)
    assert len(batched.record) == len(alone.record)
    for ours, theirs in zip(batched.record, alone.record, strict=True):
        if isinstance(theirs, np.ndarray):
            assert ours.shape == theirs.shape and ours.dtype == theirs.dtype
            assert np.array_equal(ours, theirs)  # to the bit
            assert ours.flags.c_contiguous
        else:
            assert ours == theirs
    if alone.has_momentum:
        for name in ("raw_slip_s", "chord_m", "integral_m"):
            assert np.array_equal(getattr(batched, name), getattr(alone, name))


def mixed_chunk():
    """Tracks on a shared grid (with and without momenta), momenta sampled half a step
    early, short tracks of 2 to 5 samples, and tracks on grids of their own, interleaved."""
    shared = grid(40)
    tracks = []
    for p in range(6):
        tracks.append(helix_track(p, shared, phase=0.3 * p, gamma=5.0 + 10 * p))
    tracks.append(helix_track(6, shared, momenta=False))
    tracks.append(helix_track(7, grid(40, start_s=1e-12), phase=1.0))  # its own grid
    tracks.append(helix_track(8, shared, momenta=False, phase=2.0))
    for n in (2, 3, 4, 5, 2, 5):
        tracks.append(helix_track(len(tracks), grid(n), phase=0.1 * n))
        tracks.append(helix_track(len(tracks), grid(n), phase=0.2 * n, momenta=False))
    tracks.append(helix_track(len(tracks), grid(25, step_s=7e-12), phase=0.5))
    tracks.append(helix_track(len(tracks), shared, phase=4.0))
    return tracks


def test_batched_motions_equal_motions_built_alone():
    tracks = mixed_chunk()
    batched = build_motions(tracks)
    assert [m.particle for m in batched] == [tr.particle for tr in tracks]
    for motion, track in zip(batched, tracks, strict=True):
        assert motion.track is track
        assert_same_motion(motion, Motion(track))


@pytest.mark.parametrize("degree", [3, 5])
def test_batched_with_u_offset_and_degree_equals_alone(degree):
    t = grid(30)
    tracks = [helix_track(p, t, phase=0.4 * p, u_shift_s=-0.5 * STEP_S) for p in range(5)]
    options = {"degree": degree, "u_offset_s": -0.5 * STEP_S}
    for motion, track in zip(build_motions(tracks, **options), tracks, strict=True):
        assert motion.u_offset_s == -0.5 * STEP_S
        assert_same_motion(motion, Motion(track, **options))


def test_track_offsets_group_apart():
    """Tracks whose own u_offset_s differ are not fitted together."""
    t = grid(20)
    tracks = []
    for p, shift in enumerate((0.0, -0.5 * STEP_S, 0.0, -0.25 * STEP_S)):
        track = helix_track(p, t, u_shift_s=shift, phase=p)
        tracks.append(dataclasses.replace(track, u_offset_s=shift or None))
    for motion, track in zip(build_motions(tracks), tracks, strict=True):
        assert_same_motion(motion, Motion(track))


def test_positions_with_smoothing_equal_alone():
    t = grid(30)
    rng = np.random.default_rng(5)
    tracks = [helix_track(p, t, momenta=False, phase=p) for p in range(3)]
    tracks = [dataclasses.replace(track, position_m=track.position_m + 1e-6
                                  * rng.standard_normal(track.position_m.shape))
              for track in tracks]
    for motion, track in zip(build_motions(tracks, smoothing_m=1e-6), tracks, strict=True):
        assert_same_motion(motion, Motion(track, smoothing_m=1e-6))


def test_batches_of_a_few_tracks_give_the_same_motions(monkeypatch):
    tracks = mixed_chunk()
    whole = build_motions(tracks)
    monkeypatch.setattr(motion_module, "BATCH_TRACKS", 2)
    for ours, theirs in zip(build_motions(tracks), whole, strict=True):
        assert_same_motion(ours, theirs)


def test_batched_motions_evaluate_as_alone():
    """Evaluation inside the samples and on both ballistic extensions."""
    tracks = mixed_chunk()
    rng = np.random.default_rng(2)
    for motion, track in zip(build_motions(tracks), tracks, strict=True):
        span = track.t_s[-1] - track.t_s[0]
        times = rng.uniform(track.t_s[0] - span, track.t_s[-1] + span, 200)
        for ours, theirs in zip(motion.evaluate_referenced(times),
                                Motion(track).evaluate_referenced(times), strict=True):
            assert np.array_equal(ours, theirs)


def alone_checked(track, resolution_s, **options):
    """The checks made one by one, as `checked_motion` has always made them."""
    motion = Motion(track, **options)
    motion.slip = check_slip(motion, resolution_s)
    motion.check_speed()
    return motion


def test_checked_motions_reports_equal_the_checks_made_alone():
    tracks = mixed_chunk()
    for motion, track in zip(checked_motions(tracks, RESOLUTION_S), tracks, strict=True):
        alone = alone_checked(track, RESOLUTION_S)
        assert_same_motion(motion, alone)
        if alone.slip is None:
            assert motion.slip is None
            continue
        for field in ("particle", "speed_ratio", "offset_s", "explained", "step_s"):
            ours, theirs = getattr(motion.slip, field), getattr(alone.slip, field)
            assert ours == theirs or (math.isnan(ours) and math.isnan(theirs)), field
        assert np.array_equal(motion.slip.slip_s, alone.slip.slip_s)
        assert np.array_equal(motion.slip.t_s, alone.slip.t_s)


def error_alone(track, **options):
    with pytest.raises(MotionError) as alone:
        checked_motion(track, RESOLUTION_S, path="chunk.parquet", **options)
    return str(alone.value)


def test_first_bad_track_raises_its_own_error():
    """Momenta three times too large on a slow track (γ = 1.01): the positions move a
    third as far as the momenta say. The error is that of the track alone, file,
    particle and all, and the later bad track is not the one named."""
    t = grid(30)
    tracks = [helix_track(p, t, gamma=1.01, phase=p) for p in range(6)]
    tracks[3] = helix_track(3, t, gamma=1.01, phase=3, u_scale=3.0)
    tracks[5] = helix_track(5, t, gamma=1.01, phase=5, u_scale=3.0)
    message = error_alone(tracks[3])
    assert message.startswith("file chunk.parquet, particle 3:")
    assert "move" in message
    with pytest.raises(MotionError) as batched:
        checked_motions(tracks, RESOLUTION_S, path="chunk.parquet")
    assert str(batched.value) == message


def test_build_errors_are_those_of_the_first_failing_track():
    t = grid(10)
    one_sample = Track(2, t[:1].copy(), np.zeros((1, 3)), None, -constants.e)
    tracks = [helix_track(0, t), helix_track(1, t, phase=1.0), one_sample,
              helix_track(3, t, momenta=False)]
    with pytest.raises(MotionError) as alone:
        Motion(one_sample)
    with pytest.raises(MotionError) as batched:
        build_motions(tracks)
    assert str(batched.value) == str(alone.value)
    assert "at least 2 samples" in str(alone.value)
    # an offset beyond a step fails the whole group: the first track of it is named
    far = {"u_offset_s": -1.5 * STEP_S}
    with pytest.raises(MotionError) as batched:
        checked_motions(tracks, RESOLUTION_S, path="chunk.parquet", **far)
    assert str(batched.value) == error_alone(tracks[0], **far)
    assert "particle 0" in str(batched.value)
    # smoothing is refused for tracks with momenta, naming the first of them
    with pytest.raises(MotionError) as batched:
        build_motions(tracks[3:] + tracks[:2], smoothing_m=1e-6)
    with pytest.raises(MotionError) as alone:
        Motion(tracks[0], smoothing_m=1e-6)
    assert str(batched.value) == str(alone.value)


def test_speed_error_as_alone():
    """Positions only at 0.999 c that turn a right angle between two samples: the spline
    overshoots c there, in the batch as alone."""
    t = grid(12)
    corner = 6
    step_m = 0.999 * C * STEP_S
    position = np.zeros((12, 3))
    position[:corner, 0] = step_m * np.arange(corner)
    position[corner:, 0] = position[corner - 1, 0]
    position[corner:, 1] = step_m * np.arange(1, 12 - corner + 1)
    bent = Track(4, t.copy(), position, None, -constants.e)
    tracks = [helix_track(p, t, momenta=False, phase=p) for p in range(4)] + [bent]
    message = error_alone(bent)
    assert "reaches c" in message
    with pytest.raises(MotionError) as batched:
        checked_motions(tracks, RESOLUTION_S, path="chunk.parquet")
    assert str(batched.value) == message


@given(st.lists(st.tuples(st.integers(2, 9), st.booleans(), st.integers(0, 2),
                          st.floats(0.0, 6.0)), min_size=1, max_size=12))
def test_any_chunk_builds_as_alone(layout):
    """Any mix of lengths, kinds and three time grids per length."""
    tracks = [helix_track(p, grid(n, start_s=grid_id * 3e-12), momenta=momenta, phase=phase)
              for p, (n, momenta, grid_id, phase) in enumerate(layout)]
    for motion, track in zip(checked_motions(tracks, RESOLUTION_S), tracks, strict=True):
        assert_same_motion(motion, alone_checked(track, RESOLUTION_S))
