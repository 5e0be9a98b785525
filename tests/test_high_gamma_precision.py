"""Observer times at very high γ keep their digits: near a charge at γ = 1e5 the retarded
time lies microseconds before the observer time, and a femtosecond pulse is resolved.

A track given by positions only does not reach this precision at γ = 1e5: its velocity
is the derivative of a spline through positions rounded at ~1e-13 m, and 1/γ² = 1e-10
comes out of (1 − |β|)(1 + |β|) with errors of a few % (the bin averages differ from the
exact ones by about 0.1 of the peak); give momenta at such γ (README, "Limits")."""

from __future__ import annotations

import math

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


# A line whose samples are exact doubles: v = c − 2⁻⁶ m/s (γ ≈ 9.8e4) has a short mantissa
# and the sample times are multiples of 2⁻²⁷ s, so every v·t is exact and what remains is
# the method's error, not the rounding of the data.
EXACT_SPEED_M_S = constants.c - 2.0**-6
EXACT_GAMMA = 1.0 / math.sqrt((2.0**-6 / constants.c) * (2.0 - 2.0**-6 / constants.c))


def exact_line_track(t0_s):
    """The charge moving at EXACT_SPEED_M_S along z through the origin at t = 0, sampled
    every 2⁻²⁷ s (7.5 ns) from t0 (a multiple of 2⁻²⁷ s) to past its closest approach."""
    t_s = t0_s + np.arange(round(-t0_s * 2.0**27) + 128) * 2.0**-27
    pos = np.zeros((t_s.size, 3))
    pos[:, 2] = EXACT_SPEED_M_S * t_s
    assert np.array_equal(pos[:, 2] / EXACT_SPEED_M_S, t_s)  # the samples are exact
    u = np.zeros_like(pos)
    u[:, 2] = EXACT_GAMMA * EXACT_SPEED_M_S / constants.c
    return Track(0, t_s, pos, u, line_track(GAMMA, t_s[:2]).charge_c, 1.0)


def bin_average_error(track, gamma):
    """Largest |E − E_exact| over the bins, as a fraction of the peak, 1 cm from the line
    at its closest approach, bins of 1/30 of the pulse's half width."""
    width_s = IMPACT_M / (gamma * constants.c)
    step_s = width_s / 30
    observer = (0.0, IMPACT_M, 0.0)
    settings = FieldSettings(step_s=step_s, start_s=-5 * width_s, stop_s=5 * width_s)
    result = compute_fields([track], [points_group("close", [observer])], settings)[0]
    n = result.n_bins[0]
    e_exact, _ = uniform_bin_averages(observer, result.times(0), step_s, gamma)
    peak = np.abs(e_exact).max()
    assert n >= 290 and peak > 0.0
    return np.abs(result.e_v_per_m[0, :n] - e_exact).max() / peak


@pytest.mark.parametrize("t0_s", [-2.0**-18, -2.0**-16], ids=["3.8us", "15us"])
def test_bin_averages_at_gamma_1e5_from_inside_the_sampled_track(t0_s):
    """Jackson, Classical Electrodynamics, 3rd ed., eq. 11.154 (as in the test above), with
    the light of the pulse leaving the charge between samples of a track given with momenta
    and positions, 3.8 µs (1.1 km) before it arrives: bins of 1/30 of the pulse width match
    the exact bin averages to 1e-6 of the peak (measured 1.2e-7 whether the track starts
    3.8 µs or 15 µs before; formed from absolute times it was 1e-4). Observer times are taken
    relative to each interval's first sample, and β rounded alike in every interval (1 ulp
    is 2e-6 of 1 − β here) does not add up to a drift of the path from the samples."""
    assert bin_average_error(exact_line_track(t0_s), EXACT_GAMMA) <= 1e-6


def test_rounded_samples_set_the_floor_at_gamma_1e5():
    """The same with positions v·t rounded to doubles (Jackson eq. 11.154 as above): 1.1 km
    away a position carries ±1.1e-13 m, which moves the light by ±3.8e-22 s, 1.1e-6 of the
    pulse's half width; the bins stay within 3e-6 of the peak (measured 0.9e-6 to 1.7e-6
    for tracks starting 3.8 µs to 15 µs before), a limit of the data, not of the method."""
    t_s = -2.0**-17 + np.arange(1152) * 2.0**-27
    assert bin_average_error(line_track(GAMMA, t_s), GAMMA) <= 3e-6
