"""The compiled retarded-time solve and source span (lagfield.kernels.retarded).

The solve is checked against the condition it solves, t = t′ + R(t′)/c (near field) or
t = t′ + (R₀ − n·(r(t′) − O))/c (far field), evaluated here from the motion's positions, on
motions with and without momenta, with roots before, inside and after the sampled track;
and against the Doppler compression of light from a charge coming straight at the
observer, dt′/dt = 1/(1 − β) = (1 + β)γ² (about 2γ²: κ = 1/(2γ²)), Jackson, Classical
Electrodynamics, 3rd ed., sec. 14.1 (κ = 1 − n·β as dt/dt′; from memory). The source span
is checked against the same condition at the window's edges on the shipped scenarios'
tracks and on uniform motion, near and far field, with and without the ballistic
extensions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import reference as ref
from scenarios import make_samples_module
from scipy import constants

from lagfield import engine, windows
from lagfield.motion import Motion
from lagfield.observers import ObserverGroup
from lagfield.retarded import retarded_time, span_times
from lagfield.tracks import Track

C = constants.c
EPS = np.finfo(float).eps


def line_track(gamma, t_s, *, momenta=True):
    """Uniform motion along +z through the origin at t = 0."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    pos = np.zeros((t_s.size, 3))
    pos[:, 2] = beta * C * t_s
    u = np.zeros((t_s.size, 3))
    u[:, 2] = gamma * beta
    return Track(0, t_s, pos, u if momenta else None, -constants.e, 1.0)


def curved_motions():
    """A circle of radius 1 m at γ = 3 (100 ps samples over 30 ns) and a wiggling track
    (β_z at γ = 50, 25 ps samples), each with and without its momenta."""
    circle = ref.circle_track(3.0, 1.0, np.arange(301) * 1e-10)
    t = np.linspace(0.0, 2e-9, 81)
    amplitude = 0.3e-3  # transverse wiggle of 0.3 mm over a 0.2 m period: |β| < 1
    k = 2.0 * math.pi / 0.2
    beta_z = math.sqrt(1.0 - 1.0 / 50.0**2)
    z = beta_z * C * t
    x = amplitude * np.sin(k * z)
    beta = np.stack([amplitude * k * np.cos(k * z) * beta_z, 0.0 * t, np.full_like(t, beta_z)],
                    axis=1)
    u = beta / np.sqrt(1.0 - np.einsum("ij,ij->i", beta, beta))[:, None]
    wiggle = Track(1, t, np.stack([x, 0.0 * t, z], axis=1), u, -constants.e, 1.0)
    motions = []
    for track in (circle, wiggle):
        motions.append(Motion(track))
        motions.append(Motion(Track(track.particle, track.t_s, track.position_m, None,
                                    track.charge_c, track.weight)))
    return motions


def near_residual(motion, observer, t_obs, t_ret):
    """(g = t′ + R(t′)/c − t, the scale of its largest term)."""
    r = motion.evaluate(t_ret)[0]
    delay = np.linalg.norm(np.asarray(observer) - r, axis=1) / C
    scale = np.maximum.reduce([np.abs(t_ret), np.abs(t_obs), delay])
    return t_ret + delay - t_obs, scale


@pytest.mark.parametrize("index", range(4))
def test_near_solve_satisfies_the_condition(index):
    """Observers inside, beside and far from the track; observer times whose roots lie
    long before the track (ballistic), inside it and after it. The condition holds to 8
    units in the last place of its largest term."""
    motion = curved_motions()[index]
    t_mid = 0.5 * (motion.t_first + motion.t_last)
    span = motion.t_last - motion.t_first
    for observer in [(0.2, 0.1, 0.05), (0.0, 2.0, 0.3), (30.0, -5.0, 100.0)]:
        r_mid = motion.evaluate([t_mid])[0][0]
        light = np.linalg.norm(np.asarray(observer) - r_mid) / C
        t_obs = t_mid + light + span * np.array([-3.0, -0.6, -0.2, 0.0, 0.1, 0.45, 2.0])
        t_ret = retarded_time(motion, observer, t_obs)
        assert t_ret.min() < motion.t_first and t_ret.max() > motion.t_last
        assert np.any((t_ret > motion.t_first) & (t_ret < motion.t_last))
        g, scale = near_residual(motion, observer, t_obs, t_ret)
        assert np.all(np.abs(g) <= 8.0 * EPS * scale), (observer, g / scale)


@pytest.mark.parametrize("index", range(4))
def test_far_solve_satisfies_the_condition(index):
    """Far field: directions along, across and against the motion, R₀ = 20 m from an
    origin off the track; roots before, inside and after it. Also one direction per
    observer time (the (K, 3) form)."""
    motion = curved_motions()[index]
    origin = np.array([0.1, -0.2, 0.3])
    distance = 20.0
    t_src = motion.t_first + (motion.t_last - motion.t_first) * np.array(
        [-2.0, -0.1, 0.0, 0.3, 0.77, 1.0, 1.5])
    r = motion.evaluate(t_src)[0]
    directions = np.array([[0.0, 0.0, 1.0], [0.6, 0.0, 0.8], [0.0, 1.0, 0.0],
                           [0.0, 0.0, -1.0], [0.48, 0.6, 0.64]])
    for n in directions:
        t_obs = t_src + (distance - (r - origin) @ n) / C
        t_ret = retarded_time(motion, None, t_obs, far_direction=n, far_distance_m=distance,
                              origin_m=origin)
        r_ret = motion.evaluate(t_ret)[0]
        delay = (distance - (r_ret - origin) @ n) / C
        g = t_ret + delay - t_obs
        scale = np.maximum.reduce([np.abs(t_ret), np.abs(t_obs), np.abs(delay)])
        assert np.all(np.abs(g) <= 8.0 * EPS * scale), (n, g / scale)
    per_time = directions[np.arange(t_src.size) % len(directions)]
    t_obs = t_src + (distance - np.einsum("ij,ij->i", r - origin, per_time)) / C
    t_ret = retarded_time(motion, None, t_obs, far_direction=per_time,
                          far_distance_m=np.full(t_src.size, distance), origin_m=origin)
    assert np.allclose(t_ret, t_src, rtol=0.0, atol=1e-6 * (motion.t_last - motion.t_first))


@pytest.mark.parametrize("momenta", [True, False])
def test_doppler_compression_at_gamma_1e4(momenta):
    """A charge at γ = 1e4 coming straight at the observer (1 m ahead of its track, on the
    axis): the whole sampled nanosecond arrives within 1e-9/(2γ²) = 5e-18 s, and the
    retarded time advances (1 + β)γ² ≈ 2e8 times faster than the observer time, κ ≈
    1/(2γ²) = 5e-9. Checked by finite differences over 1e-20 s of observer time (their
    rounding: ~4e-25 s of 1e-20, 4e-5), to 1e-4; the roots lie inside the track."""
    gamma = 1e4
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    motion = Motion(line_track(gamma, np.linspace(0.0, 1e-9, 101), momenta=momenta))
    observer = (0.0, 0.0, 1.0)
    t0 = 1.0 / C + np.array([1e-18, 2e-18, 3e-18, 4e-18])
    t_ret = retarded_time(motion, observer, np.concatenate([t0, t0 + 1e-20]))
    assert np.all((t_ret > 0.0) & (t_ret < 1e-9))
    dt_ret = t_ret[4:] - t_ret[:4]
    dt_obs = (t0 + 1e-20) - t0
    expected = (1.0 + beta) * gamma**2
    assert np.allclose(dt_ret / dt_obs, expected, rtol=1e-4, atol=0.0)
    g, scale = near_residual(motion, observer, np.concatenate([t0, t0 + 1e-20]), t_ret)
    assert np.all(np.abs(g) <= 8.0 * EPS * scale)


# ------------------------------------------------------------------------- source span
def shipped_motions():
    """Motions of the shipped scenarios' generators (pickup bunch, bend, undulator), with
    momenta, and the pickup bunch without."""
    samples = make_samples_module()
    tables = [samples.make_pickup_tracks(n_particles=3), samples.make_bend_tracks(),
              samples.make_undulator_tracks()]
    motions = []
    for table in tables:
        for particle, rows in table.groupby("particle", sort=True):
            t = rows["t"].to_numpy()
            pos = rows[["x", "y", "z"]].to_numpy()
            u = rows[["ux", "uy", "uz"]].to_numpy()
            motions.append(Motion(Track(int(particle), t, pos, u, -constants.e, 1.0)))
            if table is tables[0]:
                motions.append(Motion(Track(int(particle), t, pos, None, -constants.e, 1.0)))
    motions.append(Motion(line_track(1e3, np.linspace(-1e-9, 1e-9, 41))))
    return motions


def window_edges(group, motion, far_field, align):
    """(edge_lo (P,), edge_hi (P,)) of the group's window for this one track, as the
    engine's accumulator sets them (SPEC's default window), widened by 30 % both ways so
    that the edges' roots fall on the extensions as well as inside the track."""
    ends = (np.array([motion.t_first]), motion.evaluate([motion.t_first])[0],
            np.array([motion.t_last]), motion.evaluate([motion.t_last])[0])
    step = 1e-12
    settings = engine.FieldSettings(step_s=step, far_field=far_field, align=align)
    start, n_bins = windows.time_window(group, ends, settings)
    edge_lo, edge_hi = start - 0.5 * step, start + (n_bins - 0.5) * step
    width = edge_hi - edge_lo
    return edge_lo - 0.3 * width, edge_hi + 0.3 * width, edge_lo + 0.3 * width


GROUPS = [
    ObserverGroup("near", "points", np.array([[0.02, 0.0, 0.0], [0.0, -0.02, 0.1],
                                              [0.3, 0.2, 1.5], [-1.0, 0.0, -0.5]]),
                  np.zeros(3)),
    ObserverGroup("far", "points", np.array([[0.0, 0.0, 10.0], [3.0, 0.0, 9.0],
                                             [0.0, 10.0, 0.0], [0.0, 0.0, -10.0]]),
                  np.array([0.0, 0.0, 0.05])),
]


@pytest.mark.parametrize("far_field", [False, True])
def test_span_edges_satisfy_the_light_condition(far_field):
    """For each point, span_times returns source times whose light reaches it exactly at
    the window's edges (roots solved on the track and closed-form roots on the ballistic
    extensions alike); with extend = "none" the same times clipped to the sampled track."""
    group = GROUPS[int(far_field)]
    geometry = group.geometry(far_field)
    solved = ballistic = 0
    for motion in shipped_motions():
        for align in ("group", "point"):
            edges = window_edges(group, motion, far_field, align)
            for edge_lo, edge_hi in (edges[:2], edges[1:]):
                lo, hi = span_times(motion, geometry, edge_lo, edge_hi, "ballistic")
                lo_cut, hi_cut = span_times(motion, geometry, edge_lo, edge_hi, "none")
                assert np.array_equal(lo_cut, np.maximum(lo, motion.t_first))
                assert np.array_equal(hi_cut, np.minimum(hi, motion.t_last))
                for ours, t_obs, end in ((lo, edge_lo, 0), (hi, edge_hi, 1)):
                    on_track = (ours > motion.t_first) & (ours < motion.t_last)
                    solved += int(on_track.sum())
                    ballistic += int((~on_track).sum())
                    check_light_condition(motion, geometry, ours, t_obs, end)
    assert solved >= 20 and ballistic >= 20  # both kinds of root were checked


def check_light_condition(motion, geometry, t_src, t_obs, end):
    """The light leaving the charge at t_src reaches each point at t_obs, to 1e-12 of the
    largest term (the extension's closed form loses digits where c²T² and |d|² nearly
    cancel)."""
    r = motion.evaluate(t_src)[0]
    if geometry.far:
        projected = np.einsum("pi,pi->p", r - geometry.origin_m, geometry.targets)
        delay = (geometry.distance_m - projected) / C
    else:
        delay = np.linalg.norm(geometry.targets - r, axis=1) / C
    scale = np.maximum.reduce([np.abs(t_src), np.abs(t_obs), np.abs(delay)])
    assert np.all(np.abs(t_src + delay - t_obs) <= 1e-12 * scale)
