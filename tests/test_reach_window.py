"""An observer point is refused only if a track reaches it while the light that point sees
in its time window leaves the track (SPEC: "An observer point that a track reaches
(extension included) during the window is an error")."""

from __future__ import annotations

import numpy as np
import pytest
from test_physics_fields import line_track, points_group, uniform_bin_averages

from lagfield.engine import FieldSettings, compute_fields
from lagfield.errors import ObserverError

BETA = 0.5
GAMMA = 1.0 / np.sqrt(1.0 - BETA**2)
SAMPLES_S = np.linspace(-2e-9, 4e-9, 61)  # 100 ps apart, one of them at t = 0
STEP_S = 1e-11


def test_point_passed_before_the_window_is_accepted_and_sees_the_receding_field():
    """The charge passes through the origin at t = 0 (a track sample lies there); the
    window starts 1 ns later, when the light reaching the origin left the charge at
    t′ = t/(1 + β) ≥ 0.67 ns, 0.1 m away. A second point upstream sees light the charge
    sent before it reached the origin, so the group's source span covers that passage. At
    both points the field is that of a uniformly moving charge: Jackson, Classical
    Electrodynamics, 3rd ed., eq. 11.154, compared with its exact bin averages
    (closed-form antiderivative) to 1e-8 of the largest value."""
    track = line_track(None, SAMPLES_S, beta=BETA, particle=3)
    points = [(0.0, 0.0, 0.0), (0.02, 0.0, -0.4)]
    result = compute_fields([track], [points_group("on-axis", points)],
                            FieldSettings(step_s=STEP_S, start_s=1e-9, stop_s=2e-9))[0]
    for p, point in enumerate(points):
        n = result.n_bins[p]
        e = result.e_v_per_m[p, :n]
        e_exact, _ = uniform_bin_averages(point, result.times(p), STEP_S, GAMMA)
        scale = np.abs(e_exact).max()
        assert scale > 0.0
        assert np.abs(e - e_exact).max() <= 1e-8 * scale, point


@pytest.mark.parametrize("extension", [False, True], ids=["sampled", "extension"])
def test_point_crossed_during_the_window_is_an_error_naming_point_and_particle(extension):
    """Point 1 lies on the path where the charge passes at 1.5 ns, inside the window
    [1 ns, 2 ns] (on the sampled track, or on its ballistic extension past the last
    sample); point 0, off the path, alone would be fine."""
    t_s = SAMPLES_S[SAMPLES_S <= 1e-9] if extension else SAMPLES_S
    track = line_track(None, t_s, beta=BETA, particle=7)
    crossed_m = BETA * 299792458.0 * 1.5e-9
    group = points_group("pickup", [(0.02, 0.0, 0.0), (0.0, 0.0, crossed_m)])
    settings = FieldSettings(step_s=STEP_S, start_s=1e-9, stop_s=2e-9)
    with pytest.raises(ObserverError, match=r"'pickup', point 1 .*particle 7 reaches it"):
        compute_fields([track], [group], settings)
    compute_fields([track], [points_group("pickup", [(0.02, 0.0, 0.0)])], settings)


def test_point_the_track_reaches_after_the_window_is_accepted():
    """The charge reaches z = 0.9 m at 6 ns (on its extension), after the light of the
    window [1 ns, 2 ns] left it: accepted, and the field of the approaching charge matches
    Jackson 3rd ed., eq. 11.154 (exact bin averages) to 1e-8 of the largest value."""
    track = line_track(None, SAMPLES_S, beta=BETA, particle=2)
    point = (0.0, 0.0, BETA * 299792458.0 * 6e-9)
    result = compute_fields([track], [points_group("ahead", [point])],
                            FieldSettings(step_s=STEP_S, start_s=1e-9, stop_s=2e-9))[0]
    n = result.n_bins[0]
    e = result.e_v_per_m[0, :n]
    e_exact, _ = uniform_bin_averages(point, result.times(0), STEP_S, GAMMA)
    assert np.abs(e - e_exact).max() <= 1e-8 * np.abs(e_exact).max()
