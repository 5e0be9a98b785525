"""Observer groups built from their configuration: plane axes, numbering, refusals."""

from __future__ import annotations

import numpy as np
import pytest

from lagfield.config import ObserverConfig
from lagfield.errors import ObserverError
from lagfield.observers import build_group, plane_axes, point_count


def test_plane_axes_are_unit_vectors_even_for_tiny_input():
    u, v = plane_axes([1e-300, 0.0, 0.0], [0.0, 2.0, 0.0])  # 1e-300 squared underflows
    assert u.tolist() == [1.0, 0.0, 0.0] and v.tolist() == [0.0, 1.0, 0.0]


@pytest.mark.parametrize(("u", "v", "fragment"), [
    ([1, 0, 0], [1, 1e-3, 0], "not perpendicular"),
    ([0, 0, 0], [0, 1, 0], "plane u"),
    ([1, 0, 0], [np.nan, 1, 0], "plane v"),
])
def test_bad_plane_axes(u, v, fragment):
    config = ObserverConfig("screen", "plane", u=tuple(u), v=tuple(v), size_m=(1.0, 1.0),
                            shape=(2, 2))
    with pytest.raises(ObserverError, match=f"observer group 'screen': .*{fragment}"):
        build_group(config)


def test_plane_numbering_includes_edges():
    # SPEC: point = i_u·n_v + i_v, edges included
    config = ObserverConfig("screen", "plane", center_m=(0.0, 0.0, 5.0), u=(0.0, 2.0, 0.0),
                            v=(0.0, 0.0, 3.0), size_m=(0.2, 0.4), shape=(3, 2))
    group = build_group(config)
    assert group.n_points == point_count(config) == 6
    assert group.points_m[0] == pytest.approx([0.0, -0.1, 4.8], abs=1e-15)
    assert group.points_m[1] == pytest.approx([0.0, -0.1, 5.2], abs=1e-15)
    assert group.points_m[5] == pytest.approx([0.0, 0.1, 5.2], abs=1e-15)
