"""Observer times at very high γ keep their digits: near a charge at γ = 1e5 the retarded
time lies microseconds before the observer time, and a femtosecond pulse is resolved.

A track given by positions only does not reach this precision at γ = 1e5: its velocity
is the derivative of a spline through positions rounded at ~1e-13 m, and 1/γ² = 1e-10
comes out of (1 − |β|)(1 + |β|) with errors of a few % (the bin averages differ from the
exact ones by about 0.1 of the peak); give momenta at such γ (README, "Limits")."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants
from test_physics_fields import line_track, points_group, uniform_bin_averages

from lagfield.engine import FieldSettings, compute_fields
from lagfield.tracks import Track

GAMMA = 1e5
IMPACT_M = 0.01
WIDTH_S = IMPACT_M / (GAMMA * constants.c)  # b/(γv): the pulse's half width, ≈ 0.33 fs
STEP_S = WIDTH_S / 30


@pytest.mark.parametrize("z_m", [0.0, 0.3], ids=["at-start", "downstream"])
def test_bin_averages_at_gamma_1e5_one_centimetre_from_the_path(z_m):
    """Jackson, Classical Electrodynamics, 3rd ed., eq. 11.154: E_⊥ = qγb/(4πε0 (b² +
    γ²v²t²)^{3/2}) for a charge moving uniformly along z, closest to the observer at t = 0.
    With s = v t, ∫E_⊥ dt = qγb/(4πε0 v) ∫ds/(b² + γ²s²)^{3/2} = qγs/(4πε0 v b
    √(b² + γ²s²)) (since d/ds [s/√(b² + γ²s²)] = b²/(b² + γ²s²)^{3/2}); E_z likewise; the
    test's reference integrates these closed forms over each bin (uniform_bin_averages).
    The track is sampled from t = 0 on, the light of the pulse leaves the charge on its
    ballistic extension about γb/c = 3 µs earlier; bins of 1/30 of the pulse width must
    match the exact bin averages to 1e-6 of the peak."""
    t_s = np.linspace(0.0, 2e-9, 21)
    track = line_track(GAMMA, t_s)
    observer = (0.0, IMPACT_M, z_m)
    t_pass_s = z_m / (np.sqrt(1.0 - 1.0 / GAMMA**2) * constants.c)
    settings = FieldSettings(step_s=STEP_S, start_s=t_pass_s - 5 * WIDTH_S,
                             stop_s=t_pass_s + 5 * WIDTH_S)
    result = compute_fields([track], [points_group("close", [observer])], settings)[0]
    n = result.n_bins[0]
    e = result.e_v_per_m[0, :n]
    e_exact, _ = uniform_bin_averages(observer, result.times(0), STEP_S, GAMMA)
    peak = np.abs(e_exact).max()
    assert n >= 290 and peak > 0.0
    assert np.abs(e - e_exact).max() <= 1e-6 * peak


def inside_track(momenta: bool):
    """The charge of `line_track` at γ = 1e5 sampled every 2⁻²⁷ s (7.5 ns) from
    t₀ = −2⁻¹⁸ s (−3.8 µs, where the light of the pulse's peak leaves it) to past its
    closest approach at t = 0. t₀ is a power of two, so its position v·t₀ is exact and the
    sampled line is the reference's line; later positions carry their rounding (≈ 1e-13 m
    at 1 km, visible at this γ: it moves the light by 3e-22 s, 3e-5 of a bin)."""
    t_s = -2.0**-18 + np.arange(640) * 2.0**-27
    track = line_track(GAMMA, t_s)
    if not momenta:
        track = Track(track.particle, track.t_s, track.position_m, None, track.charge_c, 1.0)
    return track


def test_bin_averages_at_gamma_1e5_from_inside_the_sampled_track():
    """Jackson, Classical Electrodynamics, 3rd ed., eq. 11.154 (as in the test above), with
    the light of the peak and of the pulse's later half leaving the charge between samples
    of a track given with momenta and positions (the earlier half on its extension): bins
    of 1/30 of the pulse width match the exact bin averages to 3e-6 of the peak (measured
    2.5e-6, at the peak; formed from absolute times it was 1e-4). The observer times are
    formed relative to each interval's first sample, so neither the ~1 km distance nor
    the ~3.8 µs retarded times cost digits; what remains grows with the time between the
    first sample and the light's departure (7e-6 for a track starting 15 µs before)."""
    observer = (0.0, IMPACT_M, 0.0)
    settings = FieldSettings(step_s=STEP_S, start_s=-5 * WIDTH_S, stop_s=5 * WIDTH_S)
    result = compute_fields([inside_track(True)], [points_group("close", [observer])],
                            settings)[0]
    n = result.n_bins[0]
    e_exact, b_exact = uniform_bin_averages(observer, result.times(0), STEP_S, GAMMA)
    peak = np.abs(e_exact).max()
    assert n >= 290 and peak > 0.0
    assert np.abs(result.e_v_per_m[0, :n] - e_exact).max() <= 3e-6 * peak
    assert np.abs(result.b_t[0, :n] - b_exact).max() <= 3e-6 * peak / constants.c
