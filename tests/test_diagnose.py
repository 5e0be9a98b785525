"""`inspect_tracks` / `format_report`: counts, Lorentz factor, acceleration, and whether
the sampling resolves the bends (synchrotron critical frequency, formation time)."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from lagfield.diagnose import format_report, inspect_tracks

C = constants.c


def circle(particle, gamma, radius_m, step_s, n_samples, with_u=True) -> pd.DataFrame:
    """Uniform circular motion in the x-y plane (a charge in a uniform magnetic field)."""
    beta = math.sqrt(1 - 1 / gamma**2)
    omega = beta * C / radius_m
    t = np.arange(n_samples) * step_s
    phase = omega * t
    table = pd.DataFrame({"particle": particle, "t": t, "x": radius_m * np.cos(phase),
                          "y": radius_m * np.sin(phase), "z": 0.0})
    if with_u:
        table = table.assign(ux=-gamma * beta * np.sin(phase), uy=gamma * beta * np.cos(phase),
                             uz=0.0)
    return table


def line(particle, beta, step_s, n_samples, with_u=False) -> pd.DataFrame:
    t = np.arange(n_samples) * step_s
    direction = np.array([1.0, 2.0, 2.0]) / 3.0
    table = pd.DataFrame({"particle": particle, "t": t, "x": beta * C * t * direction[0],
                          "y": beta * C * t * direction[1], "z": beta * C * t * direction[2]})
    if with_u:
        gamma_beta = beta / math.sqrt(1 - beta**2)
        table = table.assign(ux=gamma_beta * direction[0], uy=gamma_beta * direction[1],
                             uz=gamma_beta * direction[2])
    return table


def inspect(tmp_path, registry, table):
    path = tmp_path / "tracks.csv"
    table.to_csv(path, index=False)
    return inspect_tracks(path, registry=registry)


def formation_time_s(gamma, radius_m):
    """rho / (c γ): the source time over which a bend's radiation forms."""
    return radius_m / (C * gamma)


def test_well_sampled_circle(tmp_path, registry):
    gamma, radius_m = 10.0, 1.0
    step_s = formation_time_s(gamma, radius_m) / 8
    report = inspect(tmp_path, registry, circle(3, gamma, radius_m, step_s, 200))
    assert report["n_particles"] == 1 and report["n_rows"] == 200
    assert report["samples_per_particle"] == {"min": 200, "median": 200.0, "max": 200}
    assert report["time_span_s"]["stop"] == pytest.approx(199 * step_s, rel=1e-12)
    assert report["lorentz_factor"]["min"] == pytest.approx(gamma, rel=1e-9)
    assert report["lorentz_factor"]["from"] == "ux, uy, uz"
    # centripetal acceleration of uniform circular motion: v² / R (Feynman, Leighton and
    # Sands, The Feynman Lectures on Physics, vol. I, sec. 11-7; from memory)
    beta2 = 1 - 1 / gamma**2
    assert report["peak_acceleration_m_s2"] == pytest.approx(beta2 * C**2 / radius_m, rel=1e-2)
    bend = report["strongest_bend"]
    assert bend["particle"] == 3 and bend["radius_m"] == pytest.approx(radius_m, rel=1e-2)
    # Jackson, Classical Electrodynamics, 3rd ed., eq. 14.85: omega_c = 3 γ³ c / (2 rho)
    f_c = 3 * gamma**3 * C / (2 * radius_m) / (2 * math.pi)
    assert bend["critical_frequency_hz"] == pytest.approx(f_c, rel=1e-2)
    assert report["resolved"] and report["problems"] == []
    text = format_report(report)
    assert "resolves the motion of every track" in text


def test_straight_track_has_nothing_to_resolve(tmp_path, registry):
    beta = 0.99
    report = inspect(tmp_path, registry, line(0, beta, 1e-12, 50))
    # γ = 1 / sqrt(1 - β²) from the chord speed of a straight, uniform track (Jackson,
    # Classical Electrodynamics, 3rd ed., sec. 11.3; from memory)
    assert report["lorentz_factor"]["max"] == pytest.approx(1 / math.sqrt(1 - beta**2),
                                                            rel=1e-9)
    assert report["strongest_bend"] is None and report["n_straight"] == 1
    assert report["resolved"] and report["max_critical_frequency_hz"] is None
    assert report["peak_acceleration_m_s2"] < 1e-3 * beta * C / 1e-12  # round-off only
    assert "every track is straight" in format_report(report)


def test_mixed_file_counts_bent_and_straight_tracks(tmp_path, registry):
    gamma, radius_m = 5.0, 2.0
    step_s = formation_time_s(gamma, radius_m) / 10
    table = pd.concat([line(1, 0.9, step_s, 60, with_u=True),
                       circle(2, gamma, radius_m, step_s, 60)], ignore_index=True)
    report = inspect(tmp_path, registry, table)
    assert (report["n_bent"], report["n_straight"]) == (1, 1)
    assert report["strongest_bend"]["particle"] == 2
    assert report["lorentz_factor"]["min"] == pytest.approx(1 / math.sqrt(1 - 0.81), rel=1e-9)
    assert report["lorentz_factor"]["max"] == pytest.approx(gamma, rel=1e-9)


def test_report_is_plain_json(tmp_path, registry):
    gamma, radius_m = 10.0, 1.0
    table = pd.concat([circle(0, gamma, radius_m, 1e-10, 30, with_u=False),
                       line(1, 0.5, 1e-10, 30)], ignore_index=True)
    report = inspect(tmp_path, registry, table)
    assert json.loads(json.dumps(report, allow_nan=False)) == report
    text = format_report(report)
    for unit in (" s", "m/s^2", "Hz", " m"):
        assert unit in text
