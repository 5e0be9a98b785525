"""The geometry a source sees of an observer group: light delays to the points (near field)
and the far-field approximation R ≈ R₀ − n·(r − O), whose error is below |r − O|²/(2R₀)
(second-order term of the expansion of |x − r| for |r − O| ≪ R₀)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from lagfield.errors import ObserverError
from lagfield.observers import ObserverGroup

C = constants.c


def group_at(points_m, origin_m=(0.0, 0.0, 0.0)):
    return ObserverGroup("screen", "points", np.asarray(points_m, dtype=float),
                         np.asarray(origin_m, dtype=float))


def test_near_field_delay_is_distance_over_c():
    group = group_at([[0.0, 0.0, 2.0], [1.0, -1.0, 0.5]])
    positions = np.array([[0.0, 0.0, 0.0], [0.3, 0.1, -0.2], [1.0, -1.0, 0.0]])
    geometry = group.geometry(False)
    assert not geometry.far
    expected = np.linalg.norm(group.points_m[None, :, :] - positions[:, None, :], axis=2) / C
    np.testing.assert_allclose(geometry.light_delay_s(positions), expected, rtol=1e-15)


def test_far_field_geometry_approximates_the_distance():
    origin = np.array([0.5, 0.0, 0.0])
    points = origin + 1e4 * np.array([[0.0, 0.0, 1.0], [0.6, 0.0, 0.8], [0.0, -1.0, 0.0]])
    group = group_at(points, origin)
    geometry = group.geometry(True)
    assert geometry.far
    np.testing.assert_allclose(np.linalg.norm(geometry.targets, axis=1), 1.0, rtol=1e-15)
    np.testing.assert_allclose(geometry.distance_m, 1e4, rtol=1e-15)
    assert geometry.origins_m().shape == (3, 3) and np.all(geometry.origins_m() == origin)
    rng = np.random.default_rng(5)
    offset_m = 0.1
    positions = origin + rng.uniform(-offset_m, offset_m, (20, 3))
    exact = group.geometry(False).light_delay_s(positions)
    bound_s = 3 * offset_m**2 / (2 * 1e4) / C  # |r − O|² ≤ 3·offset²
    assert np.abs(geometry.light_delay_s(positions) - exact).max() <= bound_s


def test_far_field_needs_points_away_from_the_origin():
    with pytest.raises(ObserverError, match="observer group 'screen', point 1"):
        group_at([[0.0, 0.0, 1.0], [0.0, 0.0, 0.0]]).geometry(True)
