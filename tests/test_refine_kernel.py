"""The compiled adaptive source sampling (kernels/refine.py) against a level-by-level twin.

The twin below refines the way the sampling is specified (DEVELOPERS.md, "The field
method"): every interval whose end limits ask for more than one piece is cut, all of them
at once, into equal parts (halves beyond UNIFORM_SPLIT_MAX), the new samples' limits taken
with neighbours at ± the part's width; until no interval is cut. The compiled kernel walks
the intervals depth first instead; both must give the same samples, bit for bit, since
each sample is made by the same arithmetic from the same interval.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from lagfield import engine, sources
from lagfield.errors import LagfieldError, ObserverError
from lagfield.kernels import refine, sampling
from lagfield.motion import Motion
from lagfield.observers import Geometry, ObserverGroup
from lagfield.tracks import Track

C = constants.c
Q = -constants.e
RULES = dict(per_bin=engine.SAMPLES_PER_BIN, tolerance=engine.ANGLE_TOLERANCE,
             subdivisions=engine.SUBDIVISIONS_PER_INTERVAL,
             uniform_split_max=engine.UNIFORM_SPLIT_MAX,
             max_samples=engine.MAX_SAMPLES_PER_PARTICLE,
             max_refinements=engine.MAX_REFINEMENTS, reach_m=engine.REACH_DISTANCE_M)


# ------------------------------------------------------------------------------ the twin
class TooMany(Exception):
    pass


class NotSettled(Exception):
    pass


def twin_initial(knots, t_lo, t_hi, subdivisions):
    inside = [k for k in knots if t_lo < k < t_hi]
    times = [t_lo, knots[-1], t_hi]
    if len(inside) >= 2:
        for a, b in zip(inside[:-1], inside[1:], strict=True):
            times += [a + (b - a) * (k / subdivisions) for k in range(subdivisions)]
    else:
        times += inside
    times = np.array(sorted(set(times)))
    return times[(times >= t_lo) & (times <= t_hi)]


def twin_limits(state, before, after, geometry, seen, resolution_s, rules):
    out = np.empty(before.size)
    sampling.source_step_limits(*state[:4], before, after, geometry.targets, seen[0], seen[1],
                                geometry.far, resolution_s, resolution_s, rules["per_bin"],
                                rules["tolerance"], out)
    return out


def twin_reached(t, state, geometry, seen, rules):
    """(point, distance) the track reaches, or None."""
    if geometry.far:
        return None
    distance = np.empty(geometry.targets.shape[0])
    sampling.closest_approach(t, state[0], geometry.targets, seen[0], seen[1], distance)
    return (int(np.argmin(distance)), distance.min()) if distance.min() < rules["reach_m"] \
        else None


def twin(motion, geometry, span, resolution_s, seen, rules=RULES):
    """(t, state) refined level by level, or raises TooMany / NotSettled, or returns
    ("reach", point) when the track reaches a point."""
    t = twin_initial(list(motion.track.t_s), span[0], span[1], rules["subdivisions"])
    state = motion.evaluate_referenced(t)
    before = np.concatenate([t[:1], t[:-1]])
    after = np.concatenate([t[1:], t[-1:]])
    limits = twin_limits(state, before, after, geometry, seen, resolution_s, rules)
    if (reached := twin_reached(t, state, geometry, seen, rules)) is not None:
        return "reach", reached
    for _ in range(rules["max_refinements"]):
        made, widths = [], []
        for i in range(t.size - 1):
            with np.errstate(divide="ignore", invalid="ignore"):
                pieces = np.ceil((t[i + 1] - t[i]) / np.minimum(limits[i], limits[i + 1])
                                 * (1.0 - 1e-12))
            if not np.isfinite(pieces) or pieces <= 1.0:
                continue
            count = int(pieces) - 1 if pieces <= rules["uniform_split_max"] else 1
            width = (t[i + 1] - t[i]) / (count + 1)
            made += [t[i] + width * rank for rank in range(1, count + 1)]
            widths += [width] * count
        if not made:
            if (reached := twin_reached(t, state, geometry, seen, rules)) is not None:
                return "reach", reached
            return split_ends(t, state, motion)
        if t.size + len(made) > rules["max_samples"]:
            raise TooMany
        made, widths = np.array(made), np.array(widths)
        made_state = motion.evaluate_referenced(made)
        made_limits = twin_limits(made_state, made - widths, made + widths, geometry, seen,
                                  resolution_s, rules)
        order = np.argsort(np.concatenate([t, made]), kind="stable")
        t = np.concatenate([t, made])[order]
        state = [np.concatenate([a, b])[order] for a, b in zip(state, made_state, strict=True)]
        limits = np.concatenate([limits, made_limits])[order]
    raise NotSettled


def split_ends(t, state, motion):
    """The sample at the track's first (last) sample time doubled, the copy with zero
    acceleration before (after) it, unless it is the first (last) sample."""
    rows = list(range(t.size))
    first = int(np.searchsorted(t, motion.t_first))
    last = int(np.searchsorted(t, motion.t_last))
    copies = []
    if 0 < first < t.size and t[first] == motion.t_first:
        copies.append(first)
    if last < t.size - 1 and t[last] == motion.t_last:
        copies.append(last)
    if last in copies:
        rows.insert(last + 1, -1 - last)
    if first in copies:
        rows.insert(first, -1 - first)
    index = np.array([r if r >= 0 else -1 - r for r in rows])
    zero = np.array([r < 0 for r in rows])
    new_state = [a[index] for a in state]
    new_state[3][zero] = 0.0
    return t[index], new_state


# ------------------------------------------------------------------------------ scenarios
def group_of(points, far=False):
    points = np.asarray(points, dtype=float)
    group = ObserverGroup("probes", "points", points, np.zeros(3))
    if far:
        distance = np.linalg.norm(points, axis=1)
        return group, Geometry(True, points / distance[:, None], np.zeros(3), distance)
    return group, Geometry(False, points, np.zeros(3))


def circle_track(momenta: bool, beta=0.9, radius_m=0.05, n=40, particle=1):
    """A charge on a circle in the x-y plane, 40 samples a turn (exact u = γβ)."""
    omega = beta * C / radius_m
    t = np.linspace(0.0, 2.0 * math.pi / omega, n)
    angle = omega * t
    pos = radius_m * np.column_stack([np.cos(angle), np.sin(angle), np.zeros(n)])
    gamma = 1.0 / math.sqrt(1.0 - beta * beta)
    u = gamma * beta * np.column_stack([-np.sin(angle), np.cos(angle), np.zeros(n)])
    return Motion(Track(particle, t, pos, u if momenta else None, Q, 1.0))


def line_motion(beta, t_s, momenta=True, particle=2):
    """Uniform motion along +z through the origin at t = 0."""
    pos = np.zeros((t_s.size, 3))
    pos[:, 2] = beta * C * t_s
    u = np.zeros((t_s.size, 3))
    u[:, 2] = beta / math.sqrt((1.0 - beta) * (1.0 + beta))
    return Motion(Track(particle, t_s, pos, u if momenta else None, Q, 1.0))


def whole(motion, geometry, before_s, after_s):
    span = (motion.t_first - before_s, motion.t_last + after_s)
    p = geometry.targets.shape[0]
    return span, (np.full(p, span[0]), np.full(p, span[1]))


NEAR = [(0.2, 0.0, 0.01), (0.0, -0.3, 0.05), (0.0, 0.0, 0.4)]
FAR = [(1.0, 0.0, 0.0), (0.0, 3.0, 4.0), (0.6, 0.0, -0.8)]


def cases():
    """(id, motion, group, geometry, span, resolution_s, seen)."""
    out = []
    for momenta in (False, True):
        motion = circle_track(momenta)
        period = motion.t_last
        group, geometry = group_of(NEAR)
        span, seen = whole(motion, geometry, 0.2 * period, 0.3 * period)
        out.append((f"circle-near-{momenta}", motion, group, geometry, span, 1e-11, seen))
        # a window cutting the track, a different part seen by each point
        cut = (motion.t_first + 0.2 * period, motion.t_first + 0.7 * period)
        seen_cut = (cut[0] + np.array([0.0, 0.1, 0.2]) * period,
                    cut[1] - np.array([0.3, 0.0, 0.1]) * period)
        out.append((f"circle-cut-{momenta}", motion, group, geometry, cut, 1e-11, seen_cut))
        group, geometry = group_of(FAR, far=True)
        span, seen = whole(motion, geometry, 0.0, 0.0)
        out.append((f"circle-far-{momenta}", motion, group, geometry, span, 2e-12, seen))
        # a tight step: fine uniform splits everywhere
        out.append((f"circle-tight-{momenta}", motion, group, geometry, span, 5e-14, seen))
    # a ballistic extension towards a point 0.15 m past the last sample, the light the
    # point sees leaving up to 10 ps before the charge would reach it (1.5 mm away)
    motion = line_motion(0.5, np.linspace(-2e-9, 0.0, 21))
    group, geometry = group_of([(0.0, 0.0, 0.5 * C * 1e-9), (0.05, 0.0, 0.0)])
    span = (-2.5e-9, 0.99e-9)
    seen = (np.full(2, span[0]), np.full(2, span[1]))
    out.append(("line-towards-point", motion, group, geometry, span, 1e-11, seen))
    return out


CASES = cases()


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_compiled_refinement_gives_the_twins_samples_bit_for_bit(case):
    _, motion, group, geometry, span, resolution_s, seen = case
    t_twin, state_twin = twin(motion, geometry, span, resolution_s, seen)
    t, state = sources.source_samples(motion, group, geometry, span, resolution_s, seen,
                                      **RULES)
    assert t.size > 4 * engine.SUBDIVISIONS_PER_INTERVAL
    assert np.array_equal(t, t_twin)
    assert len(state) == 7
    for mine, theirs in zip(state, state_twin, strict=True):
        assert np.array_equal(mine, theirs)
    assert np.all(np.diff(t) >= 0.0)


def test_track_ends_are_doubled_with_zero_acceleration_on_the_extension_side():
    _, motion, group, geometry, span, resolution_s, seen = CASES[0]
    t, state = sources.source_samples(motion, group, geometry, span, resolution_s, seen,
                                      **RULES)
    for end, extension_side in ((motion.t_first, 0), (motion.t_last, 1)):
        rows = np.flatnonzero(t == end)
        assert rows.size == 2
        assert np.all(state[3][rows[extension_side]] == 0.0)
        assert np.any(state[3][rows[1 - extension_side]] != 0.0)
        assert np.array_equal(state[0][rows[0]], state[0][rows[1]])


def test_the_extension_towards_a_point_is_graded_not_uniform():
    """Near the point the R/c limit (2 % of R/c: 1e-13 s at 1.5 mm) shrinks the steps far
    below those at the track's end (R = 0.15 m)."""
    _, motion, group, geometry, span, resolution_s, seen = CASES[-1]
    t, _ = sources.source_samples(motion, group, geometry, span, resolution_s, seen, **RULES)
    steps = np.diff(t[t > motion.t_last])
    assert steps[-1] < 0.1 * steps[0]


def test_too_many_samples_raises_naming_particle_and_group():
    _, motion, group, geometry, span, resolution_s, seen = CASES[0]
    rules = dict(RULES, max_samples=300)
    with pytest.raises(TooMany):
        twin(motion, geometry, span, resolution_s, seen, rules)
    with pytest.raises(LagfieldError, match=r"particle 1, observer group 'probes': more than "
                                            r"3e\+02 source samples"):
        sources.source_samples(motion, group, geometry, span, resolution_s, seen, **rules)


def test_sampling_that_does_not_settle_raises():
    _, motion, group, geometry, span, resolution_s, seen = CASES[-1]
    rules = dict(RULES, max_refinements=3)
    with pytest.raises(NotSettled):
        twin(motion, geometry, span, resolution_s, seen, rules)
    with pytest.raises(LagfieldError, match="particle 2: source sampling did not settle after "
                                            "3 refinements"):
        sources.source_samples(motion, group, geometry, span, resolution_s, seen, **rules)


@pytest.mark.parametrize("on_extension", [False, True], ids=["sampled", "extension"])
def test_a_point_the_track_reaches_raises_naming_it(on_extension):
    """The line passes z = 0 at t = 0 (a sample) or z = 0.15 m at 1 ns (its extension)."""
    motion = line_motion(0.5, np.linspace(-2e-9, 0.0, 21), particle=7)
    where = (0.0, 0.0, 0.5 * C * 1e-9) if on_extension else (0.0, 0.0, -0.5 * C * 1e-9)
    group, geometry = group_of([(0.05, 0.0, 0.0), where])
    span = (-2.5e-9, 1.5e-9)
    seen = (np.full(2, span[0]), np.full(2, span[1]))
    assert twin(motion, geometry, span, 1e-11, seen)[0] == "reach"
    with pytest.raises(ObserverError, match=r"'probes', point 1 .*particle 7 reaches it"):
        sources.source_samples(motion, group, geometry, span, 1e-11, seen, **RULES)


def test_initial_times_are_the_ends_and_equal_parts_of_the_inner_intervals():
    knots = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    assert np.array_equal(refine.initial_times(knots, 0.5, 3.5, 4),
                          [0.5, 1.0, 1.25, 1.5, 1.75, 2.0, 2.25, 2.5, 2.75, 3.5])
    assert np.array_equal(refine.initial_times(knots, -1.0, 5.0, 2),
                          [-1.0, 0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 5.0])
    assert np.array_equal(refine.initial_times(knots, 1.5, 2.5, 4), [1.5, 2.0, 2.5])
