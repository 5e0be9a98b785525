"""Readout-chain elements against closed-form responses, each naming its source."""

from __future__ import annotations

import numpy as np
import pytest
from analytic_fields import bin_average, gaussian_bin_average
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal, special

from lagfield.chain import Butterworth, Gain, ImpulseResponse, Touchstone, hat_weights
from lagfield.detectors import read_touchstone
from lagfield.errors import DetectorError

STEP_S = 10e-12
TIMES_S = STEP_S * np.arange(400)
ARRIVAL_S = 1e-9  # the pulse's centre
SIGMA_S = 40e-12


def pulse():
    """Bin averages of a Gaussian pulse, exactly zero before 0.6 ns (10 σ ahead of it)."""
    x = gaussian_bin_average(TIMES_S, STEP_S, SIGMA_S, ARRIVAL_S)
    x[TIMES_S < ARRIVAL_S - 10 * SIGMA_S] = 0.0
    return x


def test_butterworth_is_scipys_filter_run_causally():
    element = Butterworth(order=4, low_hz=2e9, high_hz=8e9)
    x = pulse()
    y = element.apply(x, STEP_S)
    reference = signal.sosfilt(signal.butter(4, [2e9, 8e9], btype="bandpass", fs=1 / STEP_S,
                                             output="sos"), x)
    np.testing.assert_allclose(y, reference, rtol=1e-12, atol=1e-15)
    first = np.flatnonzero(x)[0]
    assert np.abs(y[:first]).max() <= 1e-9 * np.abs(y).max()  # nothing before the cause
    assert np.abs(y).max() > 0.05  # and the band does pass something


@pytest.mark.parametrize(("element", "btype"), [
    (Butterworth(order=3, high_hz=5e9), "lowpass"), (Butterworth(order=2, low_hz=1e9),
                                                     "highpass")])
def test_butterworth_single_edges(element, btype):
    edge = element.high_hz or element.low_hz
    reference = signal.butter(element.order, edge, btype=btype, fs=1 / STEP_S, output="sos")
    np.testing.assert_allclose(element.sos(STEP_S), reference)
    assert element.check_step(STEP_S) is None
    assert "Nyquist" in element.check_step(1.0 / edge)  # edge at 2× Nyquist


def exponentially_modified_gaussian(t, tau_s):
    """(1/τ)∫₀^∞ e^(−s/τ) g(t − s) ds for g = exp(−(t − t0)²/(2σ²)): (σ/τ)√(π/2)·
    exp(σ²/(2τ²) − u/τ)·erfc((σ/τ − u/σ)/√2), u = t − t0 (the exponentially modified Gaussian,
    Grushka, Anal. Chem. 44 (1972) 1733); written with erfcx where erfc underflows."""
    u = t - ARRIVAL_S
    z = (SIGMA_S / tau_s - u / SIGMA_S) / np.sqrt(2.0)
    scale = SIGMA_S / tau_s * np.sqrt(np.pi / 2.0)
    late = z < 0.0
    out = np.empty_like(u)
    out[late] = scale * np.exp(0.5 * (SIGMA_S / tau_s) ** 2 - u[late] / tau_s) \
        * special.erfc(z[late])
    out[~late] = scale * np.exp(-0.5 * (u[~late] / SIGMA_S) ** 2) * special.erfcx(z[~late])
    return out


@pytest.mark.parametrize("spacing", [0.37, 1.7])
def test_tabulated_exponential_response_is_the_first_order_response(spacing):
    tau_s = 60e-12
    t = spacing * STEP_S * np.arange(int(30 * tau_s / (spacing * STEP_S)) + 1)
    element = ImpulseResponse(t_s=t, h_per_s=np.exp(-t / tau_s) / tau_s)
    y = element.apply(gaussian_bin_average(TIMES_S, STEP_S, SIGMA_S, ARRIVAL_S), STEP_S)
    expected = bin_average(lambda s: exponentially_modified_gaussian(s, tau_s), TIMES_S, STEP_S)
    # the table's linear interpolation of e^(−t/τ) costs (spacing·Δ/τ)²/8 relative
    assert np.abs(y - expected).max() < 0.01 * expected.max()


@settings(max_examples=60, deadline=None)
@given(offset=st.floats(0.0, 3.0), spacing=st.floats(0.05, 4.0), count=st.integers(2, 40))
def test_hat_weights_keep_the_area_of_h(offset, spacing, count):
    # the hats sum to 1 everywhere, so Σ w = ∫h (trapezoid rule, exact for linear h)
    t = offset + spacing * np.arange(count)
    h = np.cos(t) + 2.0
    weights = hat_weights(t, h, 1.0)
    assert weights.min() >= 0.0
    assert weights.sum() == pytest.approx(np.trapezoid(h, t), rel=1e-10)


def write_two_port(path, frequency_hz, s21):
    """A reciprocal, matched 2-port (S11 = S22 = 0, S12 = S21), written with scikit-rf."""
    import skrf

    s = np.zeros((frequency_hz.size, 2, 2), dtype=complex)
    s[:, 1, 0] = s[:, 0, 1] = s21
    network = skrf.Network(frequency=skrf.Frequency.from_f(frequency_hz, unit="hz"), s=s)
    network.write_touchstone(filename=path.stem, dir=path.parent)
    return path.with_suffix(".s2p")


def test_touchstone_attenuator_with_delay_scales_and_delays(tmp_path):
    # an ideal matched attenuator (−6.02 dB) with a pure delay τ: S21 = 0.5·e^(−j2πfτ) in the
    # engineering convention e^(+jωt) (a matched line of length ℓ has S21 = e^(−jβℓ): Pozar,
    # Microwave Engineering, 4th ed., ch. 4, from memory); the output must be the input
    # halved and τ later
    delay_s = 12.3 * STEP_S
    f = np.linspace(0.0, 0.5 / STEP_S, 401)
    path = write_two_port(tmp_path / "cable.s2p", f, 0.5 * np.exp(-2j * np.pi * f * delay_s))
    element = read_touchstone(path, "test")
    y = element.apply(gaussian_bin_average(TIMES_S, STEP_S, SIGMA_S, ARRIVAL_S), STEP_S)
    expected = 0.5 * gaussian_bin_average(TIMES_S, STEP_S, SIGMA_S, ARRIVAL_S + delay_s)
    assert np.abs(y - expected).max() < 1e-6 * expected.max()


def test_touchstone_near_the_window_end_does_not_wrap_around(tmp_path):
    # a pulse delayed past the window's end leaves the window; nothing comes back at its start
    delay_s = 350 * STEP_S  # the pulse would come back at 0.5 ns if it wrapped around
    f = np.linspace(0.0, 0.5 / STEP_S, 2001)
    path = write_two_port(tmp_path / "long.s2p", f, np.exp(-2j * np.pi * f * delay_s))
    y = read_touchstone(path, "test").apply(pulse(), STEP_S)
    assert np.abs(y).max() < 1e-6


def test_touchstone_that_misses_the_band_names_it(tmp_path):
    f = np.linspace(2e9, 50e9, 100)
    element = read_touchstone(write_two_port(tmp_path / "band.s2p", f, np.ones(f.size)), "test")
    with pytest.raises(DetectorError, match=r"band\.s2p covers 2e\+09 Hz .* lacks 0 Hz – 2e\+09"):
        element.apply(pulse(), STEP_S)
    # a band-limited signal inside the file's range is accepted
    tone = np.sin(2 * np.pi * 10e9 * TIMES_S) * np.hanning(TIMES_S.size)
    np.testing.assert_allclose(element.apply(tone, STEP_S), tone, atol=1e-3)


def test_touchstone_transfer_interpolates_in_magnitude_and_phase():
    f = np.array([0.0, 1e9, 2e9])
    element = Touchstone(frequency_hz=f, s21=np.array([1.0, 0.5j, -0.25]))
    np.testing.assert_allclose(element.transfer(np.array([0.5e9, 1.5e9, 3e9])),
                               [0.75 * np.exp(0.25j * np.pi), 0.375 * np.exp(0.75j * np.pi), 0])


def test_gain():
    assert Gain(factor=10.0).apply(np.array([1.0, -2.0]), STEP_S).tolist() == [10.0, -20.0]
