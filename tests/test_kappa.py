"""κ = dt/dt′ = 1 − n·β, the derivative of t = t′ + R(t′)/c (Jackson, Classical
Electrodynamics, 3rd ed., sec. 14.1, the factor 1 − β·n of the Liénard–Wiechert fields;
section from memory): the compiled form and the NumPy form agree with the definition, and
keep their digits where 1 − n·β cancels (high γ)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lagfield.kernels.kappa import kappa, kappa_array


def random_directions_and_velocities(count, seed=3):
    rng = np.random.default_rng(seed)
    n = rng.normal(size=(count, 3))
    n /= np.linalg.norm(n, axis=1)[:, None]
    beta = rng.normal(size=(count, 3))
    beta *= (rng.uniform(0.0, 0.9, count) / np.linalg.norm(beta, axis=1))[:, None]
    inv_g2 = 1.0 - np.einsum("ij,ij->i", beta, beta)
    return n, beta, inv_g2


def test_both_forms_equal_one_minus_n_dot_beta_at_moderate_speed():
    n, beta, inv_g2 = random_directions_and_velocities(200)
    definition = 1.0 - np.einsum("ij,ij->i", n, beta)  # no cancellation for |β| ≤ 0.9
    compiled = np.array([kappa(*n[i], *beta[i], inv_g2[i]) for i in range(len(n))])
    np.testing.assert_allclose(compiled, definition, rtol=1e-13)
    np.testing.assert_allclose(kappa_array(n, beta, inv_g2), definition, rtol=1e-13)


def test_numpy_form_broadcasts_one_velocity_over_many_directions():
    n, _, _ = random_directions_and_velocities(50)
    beta = np.array([0.1, -0.3, 0.5])
    inv_g2 = 1.0 - beta @ beta
    expected = [kappa(*direction, *beta, inv_g2) for direction in n]
    np.testing.assert_allclose(kappa_array(n, beta, inv_g2), expected, rtol=1e-15)


@pytest.mark.parametrize("gamma", [1e3, 1e5, 1e7])
def test_forward_direction_keeps_its_digits_at_high_gamma(gamma):
    """β ∥ n: κ = 1 − β = 1/(γ²(1 + β)) → 1/(2γ²) up to a relative 1/(4γ²); 1 − β in
    floating point keeps only about two digits at γ = 1e7 (1/(2γ²) = 5e-15, against a
    rounding of β of 1.1e-16)."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    inv_g2 = 1.0 / gamma**2
    assert kappa(0.0, 0.0, 1.0, 0.0, 0.0, beta, inv_g2) * 2.0 * gamma**2 == pytest.approx(
        1.0, rel=1.0 / gamma**2 + 1e-14)
    assert kappa_array([0.0, 0.0, 1.0], [0.0, 0.0, beta], inv_g2) * 2.0 * gamma**2 == (
        pytest.approx(1.0, rel=1.0 / gamma**2 + 1e-14))


def test_small_angle_form_at_high_gamma():
    """1 − β cos θ ≈ (1/γ² + θ²)/2 for θ ≪ 1, γ ≫ 1 (the small-angle expansion of the
    definition; relative error of order θ² + 1/γ²)."""
    gamma, theta = 1e4, 1e-4
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    n = (math.sin(theta), 0.0, math.cos(theta))
    expected = 0.5 * (1.0 / gamma**2 + theta**2)
    assert kappa(*n, 0.0, 0.0, beta, 1.0 / gamma**2) == pytest.approx(expected, rel=1e-7)
