"""Far field: the radiation term vanishes where β̇ = 0, so only the accelerated track is
sampled; the field is zero on the ballistic extensions, in the bins and in the spectra."""

from __future__ import annotations

import math

import numpy as np
import reference as ref
from test_physics_fields import GAMMA_KICK, C, K, Q, fields_of, kicked, points_group

from lagfield.engine import FieldSettings, compute_fields
from lagfield.spectra import SpectrumSettings

THETA = 0.05
RADIUS_M = 100.0
STEP_S = 1e-12
LOW_FREQUENCIES_HZ = np.array([1e5, 1e6])  # far below 1/(pulse length ≈ 2 ps)


def pulse_start(track, n):
    """Observer time of the light the charge sends as the kick starts (t′ = 0)."""
    at_kick = int(np.flatnonzero(track.t_s == 0.0)[0])
    return (RADIUS_M - n @ track.position_m[at_kick]) / C


def cut_kick(half_window_s):
    """The γ = 20 charge of the kick test, its track ending halfway through the kick (so
    the far field is not zero at the last sample), seen at θ = 0.05 rad, 100 m away, over
    a window of ±half_window_s about the pulse."""
    t = np.arange(-100, 51) * 1e-11
    track = ref.track_from_momentum(kicked, t, [0.0, 0.0, 0.0])
    n = np.array([math.sin(THETA), 0.0, math.cos(THETA)])
    centre = pulse_start(track, n)
    settings = FieldSettings(step_s=STEP_S, start_s=centre - half_window_s,
                             stop_s=centre + half_window_s, far_field=True)
    spectrum = SpectrumSettings(frequencies_hz=LOW_FREQUENCIES_HZ)
    result = compute_fields([track], [points_group("forward", RADIUS_M * n)], settings,
                            spectrum=spectrum)[0]
    u_ends = kicked(np.array([t[0], t[-1]]))
    gamma_ends = np.sqrt(1.0 + np.sum(u_ends**2, axis=1))
    beta_ends = u_ends / gamma_ends[:, None]
    kept = np.cross(n, np.cross(n, beta_ends)) / ref.kappa(n, beta_ends,
                                                           1.0 / gamma_ends**2)[:, None]
    # ∫E dt = q/(4πε0 c R₀) [n×(n×β)/κ] over the sampled track (Jackson, Classical
    # Electrodynamics, 3rd ed., eq. 14.14 with dt = κ dt′; from memory): nothing after it
    area = Q * K / (C * RADIUS_M) * (kept[1] - kept[0])
    return result, area, centre


def test_bins_and_spectra_see_no_field_on_the_extensions():
    """The track stops while β̇ ≠ 0: its far field drops to zero there. Bins after the
    light of the last sample are exactly zero, the bins' area equals the exact area to
    1e-6, and the spectrum at frequencies far below 1/(pulse length) has that area as its
    magnitude (to 1e-5), for a window of ±20 ps and one of ±2 µs alike."""
    for half_window_s in (2e-11, 2e-6):
        result, area, centre = cut_kick(half_window_s)
        times, e, _ = fields_of(result, 0)
        assert GAMMA_KICK == 20.0
        assert np.abs(e.sum(axis=0) * STEP_S - area).max() <= 1e-6 * np.linalg.norm(area)
        last = np.flatnonzero(np.abs(e).max(axis=1) > 0.0).max()
        assert times[last] < centre + 1e-11  # the pulse ends within the short window
        assert np.all(e[last + 1:] == 0.0)
        spectrum = result.spectra.spectrum[0]  # (F, 3) V·s/m
        magnitude = np.linalg.norm(np.abs(spectrum), axis=1)
        assert np.allclose(magnitude, np.linalg.norm(area), rtol=1e-5, atol=0.0)


def test_far_field_sampling_does_not_grow_with_the_window():
    """The extensions are not sampled: a window 1e5 times longer uses the same source
    samples."""
    short = cut_kick(2e-11)[0]
    long = cut_kick(2e-6)[0]
    assert short.source_samples > 100
    assert long.source_samples == short.source_samples
