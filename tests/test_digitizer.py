"""The digitizer: codes, clipping, sample times, noise and its reproducibility."""

from __future__ import annotations

import numpy as np
import pytest

from lagfield.digitizer import Digitizer

GRID_S = 1e-9 * np.arange(1001)  # an analog trace on a 1 ns grid, 0 … 1 µs
RAMP_V = np.linspace(-1.5, 1.5, GRID_S.size)


def test_codes_are_integers_clipped_at_the_range_and_v_is_code_times_lsb():
    adc = Digitizer(rate_hz=250e6, bits=8, full_scale_v=1.0)
    t, codes, volts = adc.digitize(GRID_S, RAMP_V, adc.rng())
    assert codes.dtype == np.int64
    assert adc.lsb_v == 2.0 / 256
    assert (codes.min(), codes.max()) == (-128, 127)  # the ramp overdrives both ends
    np.testing.assert_array_equal(volts, codes * adc.lsb_v)
    analog = np.interp(t, GRID_S, RAMP_V)
    inside = np.abs(analog) < 1.0 - adc.lsb_v
    assert np.abs(volts - analog)[inside].max() <= 0.5 * adc.lsb_v * (1 + 1e-12)
    assert np.all(codes[analog > 1.0] == 127) and np.all(codes[analog < -1.0] == -128)


def test_samples_start_with_the_window_and_are_one_period_apart():
    adc = Digitizer(rate_hz=300e6, bits=12, full_scale_v=2.0)
    t, _, _ = adc.digitize(GRID_S + 5e-9, RAMP_V, adc.rng())
    assert t[0] == 5e-9
    np.testing.assert_allclose(np.diff(t), 1.0 / 300e6, rtol=1e-9)
    assert t[-1] <= GRID_S[-1] + 5e-9 < t[-1] + 1.0 / 300e6  # as many as fit in the window


def test_noise_has_the_requested_rms_and_the_seed_fixes_it():
    adc = Digitizer(rate_hz=1e9, bits=16, full_scale_v=1.0, noise_v=2e-3, seed=11)
    grid = 1e-9 * np.arange(40_001)
    _, codes, volts = adc.digitize(grid, np.zeros(grid.size), adc.rng())
    # the sample standard deviation of N normal draws has relative spread 1/√(2N) ≈ 0.35 %;
    # rounding to a 30 µV LSB adds LSB²/12 to the variance, negligible here
    assert np.std(volts) == pytest.approx(2e-3, rel=0.02)
    again = adc.digitize(grid, np.zeros(grid.size), adc.rng())[1]
    np.testing.assert_array_equal(codes, again)
    other = Digitizer(rate_hz=1e9, bits=16, full_scale_v=1.0, noise_v=2e-3, seed=12)
    assert not np.array_equal(codes, other.digitize(grid, np.zeros(grid.size), other.rng())[1])


def test_rate_above_the_field_sample_rate_is_refused():
    adc = Digitizer(rate_hz=500e6, bits=12, full_scale_v=1.0)
    assert adc.check_step(2e-9) is None  # exactly 1/step is allowed
    assert "above the field's sample rate" in adc.check_step(2.5e-9)


def test_empty_trace_gives_no_samples():
    adc = Digitizer(rate_hz=1e9, bits=4, full_scale_v=1.0)
    t, codes, volts = adc.digitize(np.empty(0), np.empty(0), adc.rng())
    assert t.size == codes.size == volts.size == 0
