"""The motion record of the compiled kernels (lagfield.kernels.motion): its two arrays hold
every field where the header says, and its per-row evaluators (`state_into` into one state
array, `state_row` into seven) give what `Motion.evaluate_referenced` gives, to the bit."""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest
from scipy import constants

from lagfield.kernels import motion as kernels
from lagfield.motion import Motion, build_motions
from lagfield.tracks import Track

C = constants.c
STEP_S = 5e-12


def circle_track(particle, *, momenta, gamma=8.0, n_samples=30, phase=0.0):
    """A charge on a circle in the x-y plane, sampled every STEP_S."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    radius_m = 0.1
    omega = beta * C / radius_m
    t = STEP_S * np.arange(n_samples)
    angle = omega * t + phase
    position = np.stack([radius_m * np.cos(angle), radius_m * np.sin(angle),
                         np.zeros_like(t)], axis=1)
    u = (gamma * beta * np.stack([-np.sin(angle), np.cos(angle), np.zeros_like(t)], axis=1)
         if momenta else None)
    return Track(particle, t, position, u, -constants.e)


@numba.njit
def rows_into(header, values, t):
    state = np.empty((t.shape[0], kernels.STATE_WIDTH))
    for j in range(t.shape[0]):
        kernels.state_into(header, values, t[j], state, j)
    return state


@numba.njit
def rows_by_arrays(record, t, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp):
    for j in range(t.shape[0]):
        kernels.state_row(record, t[j], j, pos, beta, inv_g2, beta_dot, ref_t, ref_r, disp)


def probe_times(motion):
    """Times before, inside (samples, between them, at knots) and after the track."""
    t = motion.track.t_s
    inside = np.linspace(t[0], t[-1], 7 * t.size)
    return np.concatenate([[t[0] - 40 * STEP_S, t[0] - 1e-15], inside, t,
                           [t[-1] + 1e-15, t[-1] + 40 * STEP_S]])


@pytest.mark.parametrize("momenta", [False, True])
def test_per_row_evaluators_agree_to_the_bit(momenta):
    motion = Motion(circle_track(1, momenta=momenta))
    t = probe_times(motion)
    expected = motion.evaluate_referenced(t)
    state = rows_into(*motion.record, t)
    for mine, theirs in zip(kernels.state_columns(state), expected, strict=True):
        assert mine.flags.c_contiguous
        assert np.array_equal(mine, theirs)
    outputs = tuple(np.full_like(a, np.nan) for a in expected)
    rows_by_arrays(motion.record, t, *outputs)
    for mine, theirs in zip(outputs, expected, strict=True):
        assert np.array_equal(mine, theirs)


@pytest.mark.parametrize("momenta", [False, True])
def test_fields_of_a_group_are_where_the_header_says(momenta):
    """Each motion of a group is a row of the group's values; the fields read back are the
    breaks (the sample times and knots), the ends (the motion at the first and last sample,
    as evaluated) and, with momenta, the sampled positions and times."""
    tracks = [circle_track(p, momenta=momenta, phase=0.4 * p) for p in range(3)]
    motions = build_motions(tracks)
    header, values = motions[0].record
    assert header[kernels.KIND] == int(momenta)
    assert values.shape == (header[kernels.LENGTH],)
    offsets = [int(header[slot]) for slot in range(kernels.BREAKS, kernels.LENGTH)]
    assert offsets == sorted(offsets) and offsets[0] == 0
    for motion, track in zip(motions, tracks, strict=True):
        assert motion.record[0] is header  # one header per group
        breaks = kernels.field(motion.record, "breaks")
        assert np.all(np.isin(track.t_s, breaks)) and np.all(np.diff(breaks) > 0.0)
        ends = motion.evaluate(np.array([track.t_s[0], track.t_s[-1]]))
        assert np.array_equal(kernels.field(motion.record, "ends_r"), ends[0])
        assert np.array_equal(kernels.field(motion.record, "ends_beta"), ends[1])
        assert np.array_equal(kernels.field(motion.record, "ends_inv_g2"), ends[2])
        if momenta:
            assert np.array_equal(kernels.field(motion.record, "knots"), track.t_s)
            assert np.array_equal(kernels.field(motion.record, "knot_r"), track.position_m)
            assert kernels.field(motion.record, "coef").size == 0
        else:
            coef = kernels.field(motion.record, "coef")
            assert coef.shape == (breaks.size - 1, motion.degree_used + 1, 3)
            assert kernels.field(motion.record, "u_coef").size == 0


def test_pack_keeps_shared_and_per_motion_fields():
    breaks = np.array([0.0, 1.0, 2.5])
    coef = np.arange(2 * 2 * 4 * 3, dtype=float).reshape(2, 2, 4, 3)  # (G, P, terms, 3)
    header, values = kernels.pack(False, np.zeros(0, dtype=np.int64),
                                  {"breaks": breaks, "coef": coef}, 2)
    assert values.shape == (2, header[kernels.LENGTH]) and values.flags.c_contiguous
    assert (header[kernels.PIECES], header[kernels.TERMS]) == (2, 4)
    for g in range(2):
        record = (header, values[g])
        assert np.array_equal(kernels.field(record, "breaks"), breaks)
        assert np.array_equal(kernels.field(record, "coef"), coef[g])
        assert np.array_equal(kernels.field(record, "ends_inv_g2"), np.zeros(2))
    assert kernels.field((header, values), "coef").shape == (2, 2, 4, 3)
