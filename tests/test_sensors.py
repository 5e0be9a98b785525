"""Sensors against analytic fields, each check naming its source. The fields are bin
averages of closed-form fields (SPEC's meaning of a sample), built into GroupFields."""

from __future__ import annotations

import numpy as np
import pytest
from analytic_fields import along, bin_average, gaussian_bin_average
from scipy import constants, integrate

from lagfield.sensors import (
    EffectiveArea,
    EffectiveLength,
    Electrode,
    edge_derivative,
    edge_values,
    load_voltage,
)

C = constants.c
EPS0 = constants.epsilon_0
MU0 = constants.mu_0

# An electron bunch passing a button (an invented pickup): 100 pC, γ = 100, σ_t = 30 ps,
# button of 80 mm² at b = 20 mm, normal pointing at the beam.
BUNCH_C = -100e-12
GAMMA = 100.0
SPEED = C * np.sqrt(1.0 - 1.0 / GAMMA**2)
SIGMA_S = 30e-12
DISTANCE_M = 0.02
AREA_M2 = 80e-6
STEP_S = 5e-12
TIMES_S = np.arange(-300e-12, 1000e-12 + STEP_S / 2, STEP_S)


def bunch_field_bins():
    """Bin averages of E_y at the button: the field of one point charge passing at distance
    b, E_y(s) = qγb / (4πε0 (b² + γ²v²s²)^(3/2)) (Jackson, Classical Electrodynamics, 3rd
    ed., eq. 11.152), convolved with the Gaussian arrival-time density of the bunch. The
    bin average of the Gaussian is exact (erf); the sum over s is a trapezoid rule on a grid
    eight times finer than the point charge's pulse width b/(γv)."""
    width_s = DISTANCE_M / (GAMMA * SPEED)
    s = np.arange(-900e-12, 900e-12, width_s / 8.0)
    single = (BUNCH_C * GAMMA * DISTANCE_M
              / (4.0 * np.pi * EPS0 * (DISTANCE_M**2 + (GAMMA * SPEED * s) ** 2) ** 1.5))
    density = gaussian_bin_average(TIMES_S[:, None] - s[None, :], STEP_S, SIGMA_S)
    density /= np.sqrt(2.0 * np.pi) * SIGMA_S
    return (density @ single) * (s[1] - s[0])


def line_charge_charge(t):
    """Induced charge Q = −A λ(t)/(2πb) of the line-charge limit, λ = q g(t)/v (common
    practice: the standard beam-instrumentation picture of a button pickup; the sign is
    that of an image charge, opposite to the beam's)."""
    density = np.exp(-0.5 * (t / SIGMA_S) ** 2) / (np.sqrt(2.0 * np.pi) * SIGMA_S)
    return -AREA_M2 * BUNCH_C * density / (2.0 * np.pi * DISTANCE_M * SPEED)


def line_charge_current(t):
    """I = dQ/dt of `line_charge_charge`."""
    return -t / SIGMA_S**2 * line_charge_charge(t)


@pytest.fixture(scope="module")
def button_field():
    return along(bunch_field_bins(), 1)


BUTTON = Electrode(area_m2=AREA_M2, normal=(0.0, -1.0, 0.0))


def test_button_charge_is_the_line_charge_image(button_field):
    charge = BUTTON.charge(button_field)
    expected = bin_average(line_charge_charge, TIMES_S, STEP_S)
    assert np.abs(expected).max() == pytest.approx(
        AREA_M2 * abs(BUNCH_C) / (2 * np.pi * DISTANCE_M * SPEED * np.sqrt(2 * np.pi) * SIGMA_S),
        rel=0.01)  # peak of Aλ/(2πb): the bins are fine enough to keep it
    assert np.abs(charge - expected).max() < 0.01 * np.abs(expected).max()
    assert charge.max() > 0.0  # an electron bunch induces a positive image charge


def test_button_into_50_ohm_is_the_current_times_50_ohm(button_field):
    volts = BUTTON.voltage(button_field, np.zeros_like(button_field), STEP_S)
    edges = np.concatenate([TIMES_S - STEP_S / 2, TIMES_S[-1:] + STEP_S / 2])
    expected = 50.0 * np.diff(line_charge_charge(edges)) / STEP_S
    assert np.abs(volts - expected).max() < 0.01 * np.abs(expected).max()
    # electrons: the image charge grows first, so the first lobe is positive
    assert volts[np.argmin(np.abs(TIMES_S + SIGMA_S))] > 0.0
    assert volts[np.argmin(np.abs(TIMES_S - SIGMA_S))] < 0.0


def solve_rc(current, resistance_ohm, capacitance_f):
    """C dV/dt + V/R = I(t) from rest, by scipy's DOP853 at tight tolerances; bin averages."""
    scale = np.abs(line_charge_current(np.linspace(-3, 3, 61) * SIGMA_S)).max() * resistance_ohm
    solution = integrate.solve_ivp(
        lambda t, v: (current(t) - v / resistance_ohm) / capacitance_f,
        (TIMES_S[0] - STEP_S, TIMES_S[-1] + STEP_S), [0.0], method="DOP853", rtol=1e-10,
        atol=1e-12 * scale, max_step=SIGMA_S / 8, dense_output=True)
    return bin_average(lambda t: solution.sol(t.ravel())[0].reshape(t.shape), TIMES_S, STEP_S)


@pytest.mark.parametrize("capacitance_f", [4e-12, 0.4e-12, 40e-12])
def test_button_rc_load_matches_the_ode(button_field, capacitance_f):
    sensor = Electrode(area_m2=AREA_M2, normal=(0.0, -1.0, 0.0), resistance_ohm=50.0,
                       capacitance_f=capacitance_f)
    volts = sensor.voltage(button_field, np.zeros_like(button_field), STEP_S)
    expected = solve_rc(line_charge_current, 50.0, capacitance_f)
    assert np.abs(volts - expected).max() < 0.01 * np.abs(expected).max()


def test_capacitance_only_load_holds_the_charge(button_field):
    sensor = Electrode(area_m2=AREA_M2, normal=(0.0, -1.0, 0.0), resistance_ohm=np.inf,
                       capacitance_f=4e-12)
    volts = sensor.voltage(button_field, np.zeros_like(button_field), STEP_S)
    expected = bin_average(line_charge_charge, TIMES_S, STEP_S) / 4e-12  # V = Q/C
    assert np.abs(volts - expected).max() < 0.01 * np.abs(expected).max()


# Oscillating electric dipole p = p0 cos(ωt) ẑ at the origin; a small loop at r x̂ with its
# area along ŷ. SI form of Jackson, Classical Electrodynamics, 3rd ed., eq. 9.18:
# B = (μ0 c k² / 4π) (n × p) e^(ikr)/r (1 − 1/(ikr)) e^(−iωt), here n × ẑ = −ŷ.
DIPOLE_CM = 1e-9
FREQUENCY_HZ = 100e6
RADIUS_M = 0.3  # kr = 0.63: near and radiation terms both count


def dipole_b_y(t):
    k = 2 * np.pi * FREQUENCY_HZ / C
    amplitude = -(MU0 * C * k**2 * DIPOLE_CM / (4 * np.pi) * np.exp(1j * k * RADIUS_M)
                  / RADIUS_M * (1.0 - 1.0 / (1j * k * RADIUS_M)))
    return np.real(amplitude * np.exp(-2j * np.pi * FREQUENCY_HZ * t))


def test_loop_voltage_is_faradays_law_for_a_dipole_field():
    step_s = 1.0 / (40 * FREQUENCY_HZ)
    times = step_s * np.arange(121)
    area_m2 = 1e-4
    b_t = along(bin_average(dipole_b_y, times, step_s), 1)
    volts = EffectiveArea(area_m2=(0.0, area_m2, 0.0)).voltage(np.zeros_like(b_t), b_t, step_s)
    # V = −A dB_y/dt, the derivative of the analytic field by a centred difference of 1e-4
    # of a period (error ~1e-8 relative), then bin-averaged
    h = 1e-4 / FREQUENCY_HZ
    expected = bin_average(lambda t: -area_m2 * (dipole_b_y(t + h) - dipole_b_y(t - h)) / (2 * h),
                           times, step_s)
    inner = slice(2, -2)  # the two end bins see the field held constant outside the window
    assert np.abs(volts[inner] - expected[inner]).max() < 0.01 * np.abs(expected).max()


def test_antenna_voltage_is_h_dot_e():
    e = np.random.default_rng(3).normal(size=(50, 3))
    h = (0.1, -0.5, 0.25)
    np.testing.assert_allclose(EffectiveLength(h).voltage(e, np.zeros_like(e), 1e-12),
                               e @ np.array(h), rtol=1e-14)


def test_edge_values_are_fourth_order():
    # bin averages of sin: (cos(t − Δ/2) − cos(t + Δ/2))/Δ exactly; edges should be sin(t ± Δ/2)
    errors = []
    for step in (0.2, 0.1):
        centres = np.arange(-40, 41) * step
        averages = (np.cos(centres - step / 2) - np.cos(centres + step / 2)) / step
        edges = edge_values(averages)
        exact = np.sin(np.concatenate([centres - step / 2, centres[-1:] + step / 2]))
        errors.append(np.abs(edges - exact)[3:-3].max())
    assert errors[0] / errors[1] > 12.0  # 16 for a fourth-order scheme
    assert errors[1] < 1e-5


def test_derivative_of_bin_averages_keeps_the_total_change():
    # the bin-averaged derivative telescopes: Σ Δ·f′̄ = f(last edge) − f(first edge)
    averages = np.tanh(np.linspace(-4, 4, 60))
    derivative = edge_derivative(averages, 0.5)
    edges = edge_values(averages)
    assert derivative.sum() * 0.5 == pytest.approx(edges[-1] - edges[0], rel=1e-12)


def test_load_limits_are_exact_for_any_charge():
    # R = ∞: V = (Q − Q(first edge))/C, whose bin average is (Q̄ − Q(first edge))/C;
    # C = 0: V = R·I, whose bin average is R·(Q(right edge) − Q(left edge))/Δ
    charge = np.random.default_rng(7).normal(size=64)
    edges = edge_values(charge)
    np.testing.assert_allclose(load_voltage(charge, 1e-12, np.inf, 2e-12),
                               (charge - edges[0]) / 2e-12, rtol=1e-12, atol=1e-12 / 2e-12)
    np.testing.assert_allclose(load_voltage(charge, 1e-12, 50.0, 0.0),
                               50.0 * np.diff(edges) / 1e-12, rtol=1e-12)
    # a large R‖C approaches the capacitance-only limit as 1/R
    near = load_voltage(charge, 1e-12, 1e9, 2e-12)
    assert np.abs(near - (charge - edges[0]) / 2e-12).max() < 1e-3 * np.abs(charge).max() / 2e-12
