"""Fixtures for the track-reading tests: a fresh plugin registry with only the built-in
importers, and a helical electron track table written from formulas."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, settings
from scipy import constants

from lagfield.registry import build_registry

ELECTRON_CHARGE_C = -constants.e  # CODATA 2018, exact: -1.602176634e-19 C

# Hypothesis profiles: "ci" (default) is reproducible and quick; "slow" explores more
# (LAGFIELD_HYPOTHESIS_PROFILE=slow). Neither keeps an example database in the tree.
settings.register_profile("ci", max_examples=10, derandomize=True, deadline=None,
                          database=None, print_blob=True,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("slow", max_examples=100, deadline=None, database=None,
                          print_blob=True, suppress_health_check=[HealthCheck.too_slow])
settings.load_profile(os.environ.get("LAGFIELD_HYPOTHESIS_PROFILE", "ci"))


def helix_table(n_particles=3, n_samples=40, gamma=20.0, radius_m=0.1, span_s=1e-9,
                beta_z_fraction=0.3) -> pd.DataFrame:
    """Electrons on helices about z (uniform magnetic field): r = (R cos φ, R sin φ,
    β_z c t), φ = ω t + phase, ω = β_perp c / R; u = γ dr/dt / c. Rows grouped by particle,
    time ascending; particle p starts at phase p and is shifted by p mm in x."""
    beta = np.sqrt(1.0 - 1.0 / gamma**2)
    beta_z = beta_z_fraction * beta
    beta_perp = np.sqrt(beta**2 - beta_z**2)
    omega = beta_perp * constants.c / radius_m
    t = np.linspace(0.0, span_s, n_samples)
    parts = []
    for p in range(n_particles):
        phase = omega * t + p
        parts.append(pd.DataFrame({
            "particle": p, "t": t,
            "x": radius_m * np.cos(phase) + 1e-3 * p, "y": radius_m * np.sin(phase),
            "z": beta_z * constants.c * t,
            "ux": -gamma * beta_perp * np.sin(phase), "uy": gamma * beta_perp * np.cos(phase),
            "uz": np.full_like(t, gamma * beta_z)}))
    return pd.concat(parts, ignore_index=True)


@pytest.fixture
def helix():
    """The `helix_table` function."""
    return helix_table


@pytest.fixture
def registry():
    """A registry with only the built-in CSV and Parquet plugins (no entry points)."""
    from lagfield.plugins import csv_format, parquet_format

    return build_registry(autoload=False,
                          extra_plugins=[("csv", csv_format), ("parquet", parquet_format)])
