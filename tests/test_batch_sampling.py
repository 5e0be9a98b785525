"""The source sampling of a batch of particles in one compiled call (kernels/batch.py,
`sources.sample_motions`) against the particle-by-particle path it replaces: the same span,
samples and extension ends, bit for bit; far field cut to the sampled track with stops; the
same fields whatever the number of threads; errors naming the particle that fails."""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest
from scipy import constants

from lagfield import engine, sources
from lagfield.errors import ObserverError
from lagfield.kernels import deposit
from lagfield.motion import build_motions
from lagfield.observers import ObserverGroup
from lagfield.retarded import span_arguments
from lagfield.tracks import Track

C = constants.c
Q = -constants.e
N_SAMPLES = 30


def helix_tracks(count, momenta=True):
    """Charges on helices along +z (β⊥ 0.3, β∥ 0.9), phases and radii differing, all
    sampled at the same times (so their motions are built as one group)."""
    t = np.linspace(0.0, 2e-10, N_SAMPLES)
    tracks = []
    for i in range(count):
        radius_m, phase = 0.004 * (1.0 + 0.1 * i), 0.37 * i
        omega = 0.3 * C / radius_m
        angle = omega * t + phase
        pos = np.column_stack([radius_m * np.cos(angle), radius_m * np.sin(angle),
                               0.9 * C * t + 1e-4 * i])
        gamma = 1.0 / math.sqrt(1.0 - 0.3 ** 2 - 0.9 ** 2)
        u = gamma * np.column_stack([-0.3 * np.sin(angle), 0.3 * np.cos(angle),
                                     np.full(t.size, 0.9)])
        tracks.append(Track(i + 1, t, pos, u if momenta else None, Q, 1.0 + i))
    return tracks


def near_group():
    points = np.array([[0.03, 0.0, 0.02], [0.0, -0.05, 0.04], [0.0, 0.02, 0.1]])
    return ObserverGroup("probes", "points", points, np.zeros(3))


def window(group, settings, tracks):
    ends = engine.track_ends(tracks)
    return engine.group_windows([group], ends, settings)[0]


def per_motion(blocks):
    """(motion, t, columns, ends) of each motion of `sources.sample_motions`' blocks, in
    order, its samples cut out of its block."""
    for run, t, columns, offsets, ends in blocks:
        assert offsets[0] == 0 and offsets[-1] == t.size and len(offsets) == len(run) + 1
        for i, motion in enumerate(run):
            part = slice(offsets[i], offsets[i + 1])
            yield motion, t[part], tuple(column[part] for column in columns), ends[i]


@pytest.mark.parametrize("momenta", [True, False])
def test_batch_gives_each_particles_own_samples_and_ends(momenta):
    tracks = helix_tracks(5, momenta)
    group = near_group()
    settings = engine.FieldSettings(step_s=2e-13)
    start_s, n_bins = window(group, settings, tracks)
    edges = (start_s - 0.1e-12, start_s - 0.1e-12 + n_bins * 2e-13)
    geometry = group.geometry(False)
    arguments = span_arguments(geometry, *edges, "ballistic")
    motions = build_motions(tracks)
    blocks = sources.sample_motions(motions, group, arguments,
                                    settings.sampling_resolution_s(), settings.step_s)
    sampled = list(per_motion(blocks))
    assert [item[0] for item in sampled] == motions
    for motion, t, columns, ends in sampled:
        span, seen = sources.source_span(motion, geometry, *edges, "ballistic", arguments)
        t_one, state_one = sources.source_samples(motion, group, geometry, span,
                                                  settings.sampling_resolution_s(), seen,
                                                  bin_s=settings.step_s)
        assert np.array_equal(t, t_one)
        for mine, theirs in zip(columns, state_one, strict=True):
            assert np.array_equal(mine, theirs)
        pos, beta, inv_g2, _ = motion.evaluate(np.array([motion.t_first, motion.t_last]))
        assert np.array_equal(ends[:, deposit.END_T], [motion.t_first, motion.t_last])
        assert np.array_equal(ends[:, deposit.END_X:deposit.END_X + 3], pos)
        assert np.array_equal(ends[:, deposit.END_BX:deposit.END_BX + 3], beta)
        assert np.array_equal(ends[:, deposit.END_IG2], inv_g2)


def test_far_field_samples_only_the_track_and_stops_where_it_ends():
    """The radiation term vanishes on the ballistic extensions: the samples lie on the
    sampled track, and a copy with β̇ = 0 precedes its first sample (follows its last)."""
    tracks = helix_tracks(3)
    directions = np.array([[0.0, 0.0, 1.0], [0.3, 0.0, math.sqrt(0.91)]])
    group = ObserverGroup("sky", "points", 10.0 * directions, np.zeros(3))
    settings = engine.FieldSettings(step_s=1e-14, far_field=True)
    start_s, n_bins = window(group, settings, tracks)
    edges = (start_s - 0.5e-14 - 1e-12, start_s - 0.5e-14 + n_bins * 1e-14 + 1e-12)
    arguments = span_arguments(group.geometry(True), *edges, "ballistic")
    blocks = sources.sample_motions(build_motions(tracks), group, arguments,
                                    settings.sampling_resolution_s(), settings.step_s)
    sampled = list(per_motion(blocks))
    assert len(sampled) == len(tracks)
    for track, (_, mine, columns, _) in zip(tracks, sampled, strict=True):
        accel = columns[3]
        assert mine[0] == track.t_s[0] and mine[-1] == track.t_s[-1]
        assert mine[1] == track.t_s[0] and mine[-2] == track.t_s[-1]
        assert np.all(accel[[0, -1]] == 0.0) and np.all(np.abs(accel[[1, -2]]).sum(axis=1) > 0)


def test_fields_do_not_depend_on_the_number_of_threads():
    """40 particles: the batch's sampling is shared between two threads, or made in one;
    the fields are the same, bit for bit."""
    tracks = helix_tracks(40)
    group = near_group()
    previous = numba.get_num_threads()
    results = []
    try:
        for threads in (1, 2):
            numba.set_num_threads(threads)
            (result,) = engine.compute_fields(tracks, [group], engine.FieldSettings(step_s=2e-13))
            results.append(result)
    finally:
        numba.set_num_threads(previous)
    one, two = results
    assert np.abs(one.e_v_per_m).max() > 0.0
    assert np.array_equal(one.e_v_per_m, two.e_v_per_m)
    assert np.array_equal(one.b_t, two.b_t)
    assert one.source_samples == two.source_samples


def test_a_point_reached_names_the_particle_that_reaches_it():
    tracks = helix_tracks(40)
    on_track = tracks[23].position_m[N_SAMPLES // 2]
    group = ObserverGroup("probes", "points", np.array([[0.0, 0.3, 0.3], on_track]),
                          np.zeros(3))
    with pytest.raises(ObserverError, match="point 1 .* particle 24 reaches it"):
        engine.compute_fields(tracks, [group], engine.FieldSettings(step_s=2e-13))
