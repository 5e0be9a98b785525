"""Make the invented sample scenarios of lagfield: electron tracks and run files.

Each scenario integrates the Lorentz force d(γ m v)/dt = q (E + v × B) with
scipy.integrate.solve_ivp through an invented magnet, writes the samples at a fixed
output step (as a tracking code writes them) in the track-table layout of the product
contract (particle, t, x, y, z, ux, uy, uz [, weight]; SI units) and a run file next to it.

    python sample_data/make_samples.py               # all four scenarios
    python sample_data/make_samples.py --noise-m 1e-7  # with Gaussian position noise

The functions ``make_pickup_tracks``, ``make_undulator_tracks`` and ``make_bend_tracks``
return pandas DataFrames without writing anything; ``undulator_parameters`` and
``bend_parameters`` give the physics numbers the run files are built from. The plasma
scenario is analytic betatron motion (``make_plasma_bunch``, ``plasma_parameters``) written
as an openPMD series (``write_openpmd_series``, needs openpmd-api).
"""

from __future__ import annotations

import argparse
import json
import math
import os
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from scipy.constants import c, e, epsilon_0, m_e
from scipy.integrate import solve_ivp

ELECTRON_CHARGE_C = -e
DEFAULT_SEED = 7
HERE = Path(__file__).resolve().parent
COLUMNS = ["particle", "t", "x", "y", "z", "ux", "uy", "uz"]

# A field map takes a position (m, shape (3,)) and returns (E in V/m, B in T), each shape (3,).
FieldMap = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]
_NO_E = np.zeros(3)


# ---------------------------------------------------------------- integration
def _lorentz_rhs(field: FieldMap, charge_c: float, mass_kg: float):
    """Right-hand side for the state (x, y, z, ux, uy, uz), u = γβ, in time t (s)."""
    q_over_mc = charge_c / (mass_kg * c)

    def rhs(_t: float, state: np.ndarray) -> np.ndarray:
        u = state[3:]
        beta = u / math.sqrt(1.0 + u @ u)
        e_field, b_field = field(state[:3])
        du_dt = q_over_mc * (e_field + c * np.cross(beta, b_field))
        return np.concatenate((c * beta, du_dt))

    return rhs


def track_particle(r0_m: Sequence[float], u0: Sequence[float], t_out_s: np.ndarray,
                   field: FieldMap, edges_z_m: Sequence[float] = (),
                   charge_c: float = ELECTRON_CHARGE_C, mass_kg: float = m_e) -> np.ndarray:
    """Integrate one particle from (r0_m, u0) at t_out_s[0] and sample it at t_out_s.

    edges_z_m are planes z = const where the field map jumps (hard edges): the
    integration stops on each (a terminal event) and restarts there, so no Runge–Kutta
    step straddles a discontinuity. Returns an array of shape (len(t_out_s), 6) holding
    x, y, z (m) and ux, uy, uz. The step is capped at the output step so a field-free
    drift cannot let the integrator step over a magnet.
    """
    t_out_s = np.asarray(t_out_s, dtype=float)
    rhs = _lorentz_rhs(field, charge_c, mass_kg)
    max_step_s = float(np.min(np.diff(t_out_s))) if len(t_out_s) > 1 else np.inf
    state = np.concatenate((np.asarray(r0_m, float), np.asarray(u0, float)))
    atol = np.array([1e-13] * 3 + [1e-12 * max(1.0, float(np.linalg.norm(u0)))] * 3)
    pending = sorted(z for z in edges_z_m if z > state[2])
    t_now, t_end = t_out_s[0], t_out_s[-1]
    out = np.full((len(t_out_s), 6), np.nan)
    while True:
        events = None
        if pending:
            def events(_t, s, z_edge=pending[0]):
                return s[2] - z_edge
            events.terminal = True
            events.direction = 1
        sol = solve_ivp(rhs, (t_now, t_end), state, method="DOP853", dense_output=True,
                        events=events, rtol=1e-11, atol=atol, max_step=max_step_s)
        if not sol.success:
            raise RuntimeError(f"integration failed at t = {sol.t[-1]:.6e} s: {sol.message}")
        inside = (t_out_s >= t_now) & (t_out_s <= sol.t[-1])
        out[inside] = sol.sol(t_out_s[inside]).T
        if sol.status != 1:
            break
        t_now, state = sol.t_events[0][0], sol.y_events[0][0]
        pending.pop(0)
    return out


def _time_grid(duration_s: float, step_s: float) -> np.ndarray:
    """t_k = k·step for k = 0, 1, … while t_k ≤ duration (plus one step of rounding slack)."""
    return np.arange(int(math.floor(duration_s / step_s + 1e-9)) + 1) * step_s


def _table(tracks: list[np.ndarray], t_s: np.ndarray, position_noise_m: float,
           seed: int) -> pd.DataFrame:
    """Rows grouped by particle, times ascending; optional Gaussian position noise.

    The noise is drawn perpendicular to the local velocity (rms position_noise_m along each
    of the two transverse directions): noise along the motion larger than about
    (1 − β)·c·step would make neighbouring samples look faster than light.
    """
    parts = []
    for particle, samples in enumerate(tracks):
        block = pd.DataFrame(samples, columns=COLUMNS[2:])
        block.insert(0, "t", t_s)
        block.insert(0, "particle", np.int64(particle))
        parts.append(block)
    table = pd.concat(parts, ignore_index=True)
    if position_noise_m > 0.0:
        noise_rng = np.random.default_rng([seed, 1])
        noise = noise_rng.normal(0.0, position_noise_m, (len(table), 3))
        u = table[["ux", "uy", "uz"]].to_numpy()
        along = u / np.linalg.norm(u, axis=1, keepdims=True)
        noise -= np.einsum("ij,ij->i", noise, along)[:, None] * along
        table[["x", "y", "z"]] += noise
    return table


def noise_limit_m(gamma: float, step_s: float) -> float:
    """Transverse noise rms above which chords between samples risk exceeding c.

    A transverse difference δ between neighbouring samples adds (δ / c·step)² to β², and
    1 − β² = 1/γ²: δ must stay well below c·step/γ. With |δ| ≈ 2σ and 3σ tails over
    ~1000 samples this gives σ ≲ c·step/(8γ) (estimate, common practice margin).
    """
    return c * step_s / (8.0 * gamma)


def _speed_factor(gamma: float) -> float:
    return math.sqrt(1.0 - 1.0 / gamma**2)


# ---------------------------------------------------------------- 1. pickup
def quadrupole_doublet(gradients_t_per_m: Sequence[float] = (-1.0, 1.0),
                       centers_z_m: Sequence[float] = (-0.10, -0.05),
                       length_m: float = 0.03, fringe_m: float = 0.004) -> FieldMap:
    """Invented doublet: g(z) = Σ g_i · ½[tanh((z − a_i)/f) − tanh((z − b_i)/f)].

    Field to first order off axis: Bx = g y, By = g x, Bz = g'(z) x y (curl-free).
    A negative gradient focuses electrons in x.
    """
    gradients = np.asarray(gradients_t_per_m, float)
    starts = np.asarray(centers_z_m, float) - length_m / 2
    stops = starts + length_m

    def field(r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        x, y, z = r
        a, b = np.tanh((z - starts) / fringe_m), np.tanh((z - stops) / fringe_m)
        g = float(np.sum(gradients * 0.5 * (a - b)))
        dg_dz = float(np.sum(gradients * 0.5 * ((1 - a * a) - (1 - b * b)) / fringe_m))
        return _NO_E, np.array([g * y, g * x, dg_dz * x * y])

    return field


def pickup_weight(bunch_charge_c: float = 100e-12, n_particles: int = 64) -> float:
    """Physical electrons per macro-particle for the given bunch charge."""
    return bunch_charge_c / e / n_particles


def make_pickup_tracks(n_particles: int = 64, gamma: float = 20.0,
                       bunch_charge_c: float = 100e-12, sigma_z_m: float = 3e-3,
                       sigma_xy_m: float = 0.5e-3, sigma_angle_rad: float = 0.2e-3,
                       energy_spread: float = 1e-3, z_start_m: float = -0.15,
                       z_stop_m: float = 0.15, step_s: float = 10e-12,
                       position_noise_m: float = 0.0, seed: int = DEFAULT_SEED,
                       field: FieldMap | None = None) -> pd.DataFrame:
    """A Gaussian bunch drifting along +z through a weak quadrupole doublet.

    The bunch centre starts at z_start_m at t = 0; every particle is sampled at the
    same times until the centre reaches z_stop_m. Returns columns particle, t, x, y, z,
    ux, uy, uz, weight (weight = bunch_charge_c / e / n_particles).
    """
    rng = np.random.default_rng([seed, 0])
    field = field or quadrupole_doublet()
    t_s = _time_grid((z_stop_m - z_start_m) / (_speed_factor(gamma) * c), step_s)
    p0 = math.sqrt(gamma**2 - 1.0)
    tracks = []
    for _ in range(n_particles):
        x, y = rng.normal(0.0, sigma_xy_m, 2)
        z = z_start_m + rng.normal(0.0, sigma_z_m)
        xp, yp = rng.normal(0.0, sigma_angle_rad, 2)
        p = p0 * (1.0 + energy_spread * rng.normal())
        u0 = p * np.array([xp, yp, 1.0]) / math.sqrt(1.0 + xp * xp + yp * yp)
        tracks.append(track_particle((x, y, z), u0, t_s, field))
    table = _table(tracks, t_s, position_noise_m, seed)
    table["weight"] = pickup_weight(bunch_charge_c, n_particles)
    return table


PICKUP_BUTTONS_M = [[0.02, 0.0, 0.0], [0.0, 0.02, 0.0], [-0.02, 0.0, 0.0], [0.0, -0.02, 0.0]]


# ---------------------------------------------------------------- 2. undulator
def undulator_parameters(gamma: float = 100.0, period_m: float = 0.02, n_periods: int = 8,
                         peak_field_t: float = 0.5) -> dict:
    """K, on-axis fundamental λ1, f1, T1 and the run-file time step T1/10.

    K = e B0 λu / (2π m c) (X-ray Data Booklet, sec. 2.1: K = 0.934 λu[cm] B0[T]);
    λ1 = λu / (2γ²) · (1 + K²/2) on axis (same source).
    """
    k_value = e * peak_field_t * period_m / (2 * math.pi * m_e * c)
    lambda1_m = period_m / (2 * gamma**2) * (1 + k_value**2 / 2)
    f1_hz = c / lambda1_m
    return {
        "gamma": gamma, "period_m": period_m, "n_periods": n_periods,
        "peak_field_t": peak_field_t, "length_m": n_periods * period_m,
        "K": k_value, "K_booklet": 0.934 * period_m * 100 * peak_field_t,
        "peak_angle_rad": k_value / gamma, "lambda1_m": lambda1_m, "f1_hz": f1_hz,
        "T1_s": 1 / f1_hz, "time_step_s": float(f"{1 / f1_hz / 10:.3g}"),
    }


def planar_undulator(period_m: float = 0.02, n_periods: int = 8, peak_field_t: float = 0.5,
                     z_entry_m: float = -0.08) -> FieldMap:
    """By = B0 cosh(k y) sin(k s), Bz = B0 sinh(k y) cos(k s), s = z − z_entry, 0 ≤ s ≤ N λu.

    The first and last half periods are at half strength, so ∫ By dz = 0 (no net
    deflection); the field is zero outside and continuous at every boundary (sin = 0 there).
    """
    k = 2 * math.pi / period_m
    length_m = n_periods * period_m

    def field(r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        s = r[2] - z_entry_m
        if s < 0.0 or s > length_m:
            return _NO_E, np.zeros(3)
        end_pole = s < period_m / 2 or s > length_m - period_m / 2
        b0 = peak_field_t * (0.5 if end_pole else 1.0)
        ky = k * r[1]
        return _NO_E, np.array([0.0, b0 * math.cosh(ky) * math.sin(k * s),
                                b0 * math.sinh(ky) * math.cos(k * s)])

    return field


def make_undulator_tracks(gamma: float = 100.0, period_m: float = 0.02, n_periods: int = 8,
                          peak_field_t: float = 0.5, drift_m: float = 0.03,
                          step_s: float = 0.8e-12, position_noise_m: float = 0.0,
                          seed: int = DEFAULT_SEED) -> pd.DataFrame:
    """One electron on axis through a planar undulator centred on z = 0, with drifts.

    Starts at z = −(N λu / 2 + drift_m) at t = 0 and is sampled until it would reach
    z = +(N λu / 2 + drift_m) at its initial speed. Columns particle, t, x, y, z, ux, uy, uz.
    """
    length_m = n_periods * period_m
    z_entry = -length_m / 2
    field = planar_undulator(period_m, n_periods, peak_field_t, z_entry)
    edges = [z_entry, z_entry + period_m / 2, -z_entry - period_m / 2, -z_entry]
    t_s = _time_grid((length_m + 2 * drift_m) / (_speed_factor(gamma) * c), step_s)
    u0 = (0.0, 0.0, math.sqrt(gamma**2 - 1.0))
    track = track_particle((0.0, 0.0, z_entry - drift_m), u0, t_s, field, edges)
    return _table([track], t_s, position_noise_m, seed)


# ---------------------------------------------------------------- 3. bend
def bend_parameters(gamma: float = 200.0, field_t: float = 0.2,
                    deflection_gamma_units: float = 20.0) -> dict:
    """Bending radius, deflection, magnet length and critical frequency of the dipole.

    ρ = γβ m c / (e B); the rectangular magnet (edges normal to the incoming z axis) has
    length L_z = ρ sin θ for a deflection θ = deflection_gamma_units / γ;
    f_c = 3 γ³ c / (4π ρ) (Jackson, Classical Electrodynamics, 3rd ed., eq. 14.85,
    ω_c = 3γ³c/(2ρ)); run-file time step 1/(8 f_c).
    """
    rho_m = math.sqrt(gamma**2 - 1.0) * m_e * c / (e * field_t)
    theta_rad = deflection_gamma_units / gamma
    fc_hz = 3 * gamma**3 * c / (4 * math.pi * rho_m)
    return {
        "gamma": gamma, "field_t": field_t, "rho_m": rho_m, "deflection_rad": theta_rad,
        "magnet_length_z_m": rho_m * math.sin(theta_rad), "arc_length_m": rho_m * theta_rad,
        "formation_time_s": rho_m / (c * gamma), "fc_hz": fc_hz,
        "critical_wavelength_m": c / fc_hz, "time_step_s": float(f"{1 / fc_hz / 8:.3g}"),
    }


def hard_edge_dipole(field_t: float = 0.2, length_z_m: float = 0.17) -> FieldMap:
    """By = field_t for 0 ≤ z ≤ length_z_m, zero elsewhere (electrons bend towards +x)."""
    inside = np.array([0.0, field_t, 0.0])

    def field(r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return _NO_E, inside if 0.0 <= r[2] <= length_z_m else np.zeros(3)

    return field


def make_bend_tracks(gamma: float = 200.0, field_t: float = 0.2,
                     deflection_gamma_units: float = 20.0, drift_m: float = 0.03,
                     step_s: float = 2e-12, position_noise_m: float = 0.0,
                     seed: int = DEFAULT_SEED) -> pd.DataFrame:
    """One electron along +z into a hard-edge dipole at 0 ≤ z ≤ L_z, drifts before and after.

    Starts at z = −drift_m at t = 0 and is sampled for the time to cover drift, arc and
    drift at constant speed. Columns particle, t, x, y, z, ux, uy, uz.
    """
    params = bend_parameters(gamma, field_t, deflection_gamma_units)
    length_z = params["magnet_length_z_m"]
    field = hard_edge_dipole(field_t, length_z)
    path_m = 2 * drift_m + params["arc_length_m"]
    t_s = _time_grid(path_m / (_speed_factor(gamma) * c), step_s)
    u0 = (0.0, 0.0, math.sqrt(gamma**2 - 1.0))
    track = track_particle((0.0, 0.0, -drift_m), u0, t_s, field, [0.0, length_z])
    return _table([track], t_s, position_noise_m, seed)


def bend_screen(params: dict, distance_m: float = 3.0, half_angle_gamma_units: float = 3.0,
                shape: tuple[int, int] = (21, 21)) -> dict:
    """A screen normal to the mean direction (bisector of entry and exit), distance_m from
    the middle of the arc, covering ±half_angle_gamma_units / γ both ways."""
    rho, half = params["rho_m"], params["deflection_rad"] / 2
    middle = np.array([rho * (1 - math.cos(half)), 0.0, rho * math.sin(half)])
    direction = np.array([math.sin(half), 0.0, math.cos(half)])
    side = 2 * distance_m * math.tan(half_angle_gamma_units / params["gamma"])
    return {"center": middle + distance_m * direction, "direction": direction,
            "u": np.array([math.cos(half), 0.0, -math.sin(half)]), "v": np.array([0.0, 1.0, 0.0]),
            "size": [side, side], "shape": list(shape), "arc_middle": middle}


# ---------------------------------------------------------------- observer points (checks)
def plane_points(center, u, v, size, shape) -> np.ndarray:
    """Points of a plane group, point = i_u·n_v + i_v, edges included (contract order)."""
    a = np.linspace(-size[0] / 2, size[0] / 2, shape[0])
    b = np.linspace(-size[1] / 2, size[1] / 2, shape[1])
    aa, bb = np.meshgrid(a, b, indexing="ij")
    return (np.asarray(center) + aa.reshape(-1, 1) * np.asarray(u)
            + bb.reshape(-1, 1) * np.asarray(v))


def sphere_points(center, radius, theta, phi) -> np.ndarray:
    """Points of a sphere group, theta-major, pole repeated for every phi."""
    th, ph = np.meshgrid(np.linspace(*theta[:2], theta[2]), np.linspace(*phi[:2], phi[2]),
                         indexing="ij")
    th, ph = th.ravel(), ph.ravel()
    unit = np.stack((np.sin(th) * np.cos(ph), np.sin(th) * np.sin(ph), np.cos(th)), axis=1)
    return np.asarray(center) + radius * unit


def arrival_window(table: pd.DataFrame, points_m: np.ndarray) -> tuple[float, float]:
    """Earliest and latest arrival, at any of the points, of light emitted between the first
    and last sample of any track (the default window of the contract). Arrival time
    t + |P − r(t)|/c grows along a track (v < c), so only end samples matter."""
    ends = table.groupby("particle").nth([0, -1])
    pos = ends[["x", "y", "z"]].to_numpy()
    dist = np.linalg.norm(points_m[None, :, :] - pos[:, None, :], axis=2)
    arrival = ends["t"].to_numpy()[:, None] + dist / c
    return float(arrival.min()), float(arrival.max())


def _window_report(label: str, table: pd.DataFrame, points_m: np.ndarray,
                   step_s: float) -> str:
    def count(first: float, last: float) -> int:
        start = math.floor(first / step_s) * step_s
        return int(math.floor((last - start) / step_s + 1e-9)) + 1

    first, last = arrival_window(table, points_m)
    widest = max(count(*arrival_window(table, p[None])) for p in points_m)
    return (f"  default window '{label}': {first:.6e} .. {last:.6e} s, {count(first, last)} "
            f"samples per point (align group; {widest} at most with align point) x "
            f"{len(points_m)} points")


# ---------------------------------------------------------------- checks
def _ok(measured: float, expected: float, rel_tol: float) -> str:
    diff = abs(measured - expected) / abs(expected)
    return f"{'ok' if diff <= rel_tol else 'MISMATCH'} (rel. diff {diff:.1e}, tol {rel_tol:g})"


def _gamma(table: pd.DataFrame) -> np.ndarray:
    u = table[["ux", "uy", "uz"]].to_numpy()
    return np.sqrt(1.0 + np.einsum("ij,ij->i", u, u))


def _gamma_drift(table: pd.DataFrame) -> float:
    """Largest relative change of γ along any track (magnetic fields only: should be ~0)."""
    g = _gamma(table)
    g0 = pd.Series(g).groupby(table["particle"].to_numpy()).transform("first").to_numpy()
    return float(np.max(np.abs(g / g0 - 1.0)))


def check_pickup(table: pd.DataFrame, gamma: float, sigma_z_m: float) -> list[str]:
    buttons = np.asarray(PICKUP_BUTTONS_M)
    pos = table[["x", "y", "z"]].to_numpy()
    nearest = np.min(np.linalg.norm(pos[:, None, :] - buttons[None], axis=2))
    first = table.groupby("particle").nth(0)
    angles = table[["ux", "uy"]].to_numpy() / table[["uz"]].to_numpy()
    start = (first[["ux", "uy"]].to_numpy() / first[["uz"]].to_numpy())[table["particle"]]
    change = np.hypot(*(angles - start).T)
    final = change[table.groupby("particle").cumcount(ascending=False).to_numpy() == 0]
    return [
        f"  mean gamma {np.mean(_gamma(table)):.4f} (set {gamma}); "
        f"max relative gamma change {_gamma_drift(table):.1e} (magnetic field only)",
        f"  rms bunch length at start {np.std(first['z']) * 1e3:.2f} mm (set "
        f"{sigma_z_m * 1e3:.1f} mm, 64-sample estimate)",
        f"  angle change by the doublet: up to {np.max(change) * 1e3:.3f} mrad inside, "
        f"net rms {np.sqrt(np.mean(final**2)) * 1e3:.3f} mrad",
        f"  nearest approach to a button {nearest * 1e3:.2f} mm (buttons at 20 mm radius)",
    ]


def check_undulator(table: pd.DataFrame, params: dict, step_s: float) -> list[str]:
    ux, uz, z, t = (table[k].to_numpy() for k in ("ux", "uz", "z", "t"))
    angle = ux / uz
    half = params["length_m"] / 2
    core = np.abs(z) < half - params["period_m"]
    # mean longitudinal speed over whole periods of the full-strength part
    span = (z > -half + params["period_m"] / 2) & (z < half - params["period_m"] / 2)
    slope = np.polyfit(t[span], z[span], 1)[0] / c
    lambda1_measured = params["period_m"] * (1 / slope - 1)
    per_period = params["period_m"] / (c * step_s)
    return [
        f"  K = {params['K']:.4f} (booklet 0.934 lu[cm] B0[T] = {params['K_booklet']:.4f})",
        f"  peak angle {np.max(np.abs(angle[core])) * 1e3:.4f} mrad vs K/gamma = "
        f"{params['peak_angle_rad'] * 1e3:.4f} mrad: "
        f"{_ok(np.max(np.abs(angle[core])), params['peak_angle_rad'], 2e-3)}",
        f"  exit angle {angle[-1]:.2e} rad (end poles at half strength: expect ~0), "
        f"offset after undulator {table['x'].iloc[-1] * 1e6:.2f} um",
        f"  lambda1 from mean speed {lambda1_measured * 1e9:.2f} nm vs "
        f"lu/(2 gamma^2)(1+K^2/2) = {params['lambda1_m'] * 1e9:.2f} nm: "
        f"{_ok(lambda1_measured, params['lambda1_m'], 5e-3)}",
        f"  samples per undulator period {per_period:.1f}; max relative gamma change "
        f"{_gamma_drift(table):.1e}",
    ]


def check_bend(table: pd.DataFrame, params: dict, step_s: float) -> list[str]:
    ux, uz, z, t = (table[k].to_numpy() for k in ("ux", "uz", "z", "t"))
    angle = np.arctan2(ux, uz)
    inside = (z > 0.0) & (z < params["magnet_length_z_m"])
    omega = np.polyfit(t[inside], angle[inside], 1)[0]
    rho_measured = _speed_factor(params["gamma"]) * c / omega
    expected_angle = math.asin(params["magnet_length_z_m"] / params["rho_m"])
    return [
        f"  deflection {angle[-1] * 1e3:.4f} mrad vs arcsin(Lz/rho) = L/rho = "
        f"{expected_angle * 1e3:.4f} mrad: {_ok(angle[-1], expected_angle, 1e-6)}",
        f"  bending radius from turn rate {rho_measured:.5f} m vs gamma m c/(e B) = "
        f"{params['rho_m']:.5f} m: {_ok(rho_measured, params['rho_m'], 1e-6)}",
        f"  samples per rho/(c gamma) = {params['formation_time_s'] / step_s:.1f} "
        f"(want >= 8); max relative gamma change {_gamma_drift(table):.1e}",
    ]


# ---------------------------------------------------------------- run files
def _num(value: float) -> str:
    """A TOML float with 12 significant digits (always with a point or an exponent)."""
    text = f"{float(value):.12g}"
    return text if any(ch in text for ch in ".en") else text + ".0"


def _vec(values) -> str:
    return "[" + ", ".join(_num(v) for v in values) + "]"


def _common_tail(formats=("parquet", "plots")) -> str:
    names = ", ".join(f'"{f}"' for f in formats)
    return f'\n[output]\ndir = "out"\nformats = [{names}]\n'


def _head(track_file: str) -> str:
    return (f'[tracks]\npath = "{track_file}"\nformat = "parquet"\n'
            f"charge = {ELECTRON_CHARGE_C!r}  # C, one electron (all tracks are electrons)\n\n"
            '[motion]\ndegree = 5\nextend = "ballistic"\n')


def _comment(lines: list[str]) -> str:
    return "".join(f"# {line}\n".replace("# \n", "#\n") for line in lines) + "\n"


PICKUP_WINDOW = (
    "# The bunch (gamma = 20) passes z = 0 at about 0.50 ns. Its field at a button 20 mm off\n"
    "# axis comes from retarded positions about gamma*b = 0.4 m upstream, before the tracks\n"
    "# begin, so the default window (from the first light of the tracks' first samples) would\n"
    "# start in the middle of the pulse: the window is given here to show the whole pulse.\n"
    'start = "0.44 ns"\nstop = "0.56 ns"\n')


def pickup_run_toml(weight: float, n_particles: int, noise_m: float) -> str:
    lines = [
        "Invented scenario: a short electron bunch passing a four-button beam pickup.",
        f"{n_particles} macro-particles of weight {weight:.6g} electrons (bunch charge "
        "100 pC), gamma = 20,",
        "rms length 3 mm, rms radius 0.5 mm, drifting along +z through a weak invented",
        "quadrupole doublet (centres z = -0.10 m and -0.05 m, 3 cm long, -1 and +1 T/m).",
        "Buttons at 20 mm radius in the plane z = 0. Output step of the tracks 10 ps.",
        "Tracks from sample_data/make_samples.py (regenerate with "
        "`python sample_data/make_samples.py`).",
    ]
    if noise_m > 0:
        lines.append(f"Positions carry Gaussian noise of {noise_m:g} m rms (transverse).")
    points = ", ".join(_vec(p) for p in PICKUP_BUTTONS_M)
    return (_comment(lines) + _head("tracks.parquet")
            + f'\n[[observers]]\nname = "pickup"\npoints = [{points}]  # m\n'
            + "\n[fields]\nfar_field = false\n"
            + '\n[time]\nstep = "2 ps"\n' + PICKUP_WINDOW + _common_tail())


def undulator_run_toml(params: dict, noise_m: float, far_m: float = 10.0,
                       theta_gamma_units: float = 3.0) -> str:
    g, f1 = params["gamma"], params["f1_hz"]
    theta_max = theta_gamma_units / g
    lines = [
        "Invented scenario: one electron (gamma = 100) through a short planar undulator.",
        f"Period {params['period_m'] * 100:g} cm, {params['n_periods']} periods, peak field "
        f"{params['peak_field_t']:g} T, half-strength end half-periods, centred on z = 0;",
        "drifts of 3 cm before and after.",
        f"K = {params['K']:.4f} (X-ray Data Booklet, sec. 2.1: K = 0.934 lu[cm] B0[T]),",
        f"peak angle K/gamma = {params['peak_angle_rad'] * 1e3:.3f} mrad,",
        f"on-axis fundamental lambda1 = lu/(2 gamma^2)(1 + K^2/2) = "
        f"{params['lambda1_m'] * 1e9:.2f} nm,",
        f"f1 = {f1:.5g} Hz, T1 = {params['T1_s']:.4g} s; time step T1/10.",
        "Observers: an on-axis point far downstream and a small sphere of directions around",
        f"the undulator middle (radius {far_m:g} m, theta 0 .. {theta_gamma_units:g}/gamma).",
        "Spectrum linear from 0.2 f1 to 3.5 f1 (first three harmonics).",
        "Tracks from sample_data/make_samples.py (regenerate with "
        "`python sample_data/make_samples.py`).",
    ]
    if noise_m > 0:
        lines.append(f"Positions carry Gaussian noise of {noise_m:g} m rms (transverse).")
    return (_comment(lines) + _head("tracks.parquet")
            + f'\n[[observers]]\nname = "on_axis"\npoints = [[0.0, 0.0, {far_m!r}]]  # m\n'
            + '\n[[observers]]\nname = "directions"\n'
            + f"sphere = {{ center = [0.0, 0.0, 0.0], radius = {far_m!r}, "
            + f"theta = [0.0, {theta_max:.12g}, 9], phi = [0.0, {1.5 * math.pi:.12g}, 4] }}\n"
            + "\n[fields]\nfar_field = false\n"
            + f"\n[time]\nstep = {params['time_step_s']!r}  # s, T1/10\n"
            + "\n[spectrum]\n"
            + f"frequencies = {{ start = {0.2 * f1:.6g}, stop = {3.5 * f1:.6g}, count = 400, "
            + 'spacing = "linear" }  # Hz, 0.2 f1 .. 3.5 f1\ncoherent = true\n'
            + _common_tail())


def bend_run_toml(params: dict, screen: dict, noise_m: float, drift_m: float = 0.03) -> str:
    g, fc = params["gamma"], params["fc_hz"]
    lines = [
        "Invented scenario: one electron (gamma = 200) through a short hard-edge dipole,",
        "seen on a screen downstream.",
        f"Field {params['field_t']:g} T over 0 <= z <= {params['magnet_length_z_m']:.5f} m "
        f"(edges normal to z), bending radius rho = gamma m c/(e B) = {params['rho_m']:.4f} m,",
        f"deflection {params['deflection_rad'] * 1e3:.2f} mrad = {params['deflection_rad'] * g:g}"
        f"/gamma towards +x; drifts of {drift_m * 100:g} cm before and after.",
        f"Critical frequency f_c = 3 gamma^3 c/(4 pi rho) = {fc:.5g} Hz (Jackson, Classical",
        "Electrodynamics, 3rd ed., eq. 14.85); time step 1/(8 f_c).",
        "Screen 3 m from the middle of the arc, normal to the mean direction (bisector of",
        "entry and exit), covering +-3/gamma both ways. Spectrum log from f_c/1000 to 10 f_c.",
        "align = \"point\": across the flat screen the path length differs by ~0.7 mm (~2 ps),",
        "far more than one pulse, so each point gets its own default window.",
        "Tracks from sample_data/make_samples.py (regenerate with "
        "`python sample_data/make_samples.py`).",
    ]
    if noise_m > 0:
        lines.append(f"Positions carry Gaussian noise of {noise_m:g} m rms (transverse).")
    plane = (f"{{ center = {_vec(screen['center'])}, u = {_vec(screen['u'])}, "
             f"v = {_vec(screen['v'])}, size = {_vec(screen['size'])}, "
             f"shape = [{screen['shape'][0]}, {screen['shape'][1]}] }}")
    return (_comment(lines) + _head("tracks.parquet")
            + f'\n[[observers]]\nname = "screen"\nplane = {plane}\n'
            + "\n[fields]\nfar_field = false\n"
            + f"\n[time]\nstep = {params['time_step_s']!r}  # s, 1/(8 f_c)\n"
            + 'align = "point"\n'
            + "\n[spectrum]\n"
            + f"frequencies = {{ start = {fc / 1000:.6g}, stop = {10 * fc:.6g}, count = 200, "
            + 'spacing = "log" }  # Hz, f_c/1000 .. 10 f_c\ncoherent = true\n'
            + _common_tail())


# ---------------------------------------------------------------- plasma (openPMD)
def plasma_parameters(density_cm3: float = 1e18, gamma: float = 100.0,
                      radius_m: float = 1e-6) -> dict:
    """Betatron numbers of an electron of Lorentz factor `gamma` oscillating with amplitude
    `radius_m` in an ion channel of electron density `density_cm3` (common practice for an
    ion channel: ω_β = ω_p/√(2γ), strength K = γ r_β ω_β / c, on-axis fundamental
    f1 = 2γ²/(1 + K²/2) · f_β, the undulator relation of X-ray Data Booklet sec. 2.1)."""
    omega_p = math.sqrt(density_cm3 * 1e6 * e**2 / (epsilon_0 * m_e))
    omega_b = omega_p / math.sqrt(2.0 * gamma)
    k_value = gamma * radius_m * omega_b / c
    f_b = omega_b / (2.0 * math.pi)
    f1 = 2.0 * gamma**2 / (1.0 + k_value**2 / 2.0) * f_b
    return {"density_cm3": density_cm3, "gamma": gamma, "radius_m": radius_m,
            "omega_p_rad_s": omega_p, "omega_beta_rad_s": omega_b, "f_beta_hz": f_b,
            "period_s": 1.0 / f_b, "K": k_value, "f1_hz": f1}


def betatron_track(gamma: float, radius_m: float, omega_rad_s: float, phase_rad: float,
                   t_s: np.ndarray, u_offset_s: float = 0.0, z0_m: float = 0.0) -> tuple:
    """(position (n, 3) at t_s, u (n, 3) at t_s + u_offset_s) of x(t) = r sin(ω t + φ) at
    constant γ (a static focusing field does no work): β_x = r ω cos(ω t + φ)/c,
    β_z = √(β² − β_x²), z the integral of c β_z by 16-point Gauss–Legendre quadrature on
    every sample interval (exact to rounding for this smooth motion)."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2)

    def beta_xz(t):
        bx = radius_m * omega_rad_s * np.cos(omega_rad_s * t + phase_rad) / c
        return bx, np.sqrt(beta**2 - bx**2)

    nodes, weights = np.polynomial.legendre.leggauss(16)
    lo, hi = t_s[:-1, None], t_s[1:, None]
    inner = 0.5 * (lo + hi) + 0.5 * (hi - lo) * nodes
    steps = (0.5 * (hi - lo) * weights * c * beta_xz(inner)[1]).sum(axis=1)
    z = z0_m + np.concatenate([[0.0], np.cumsum(steps)])
    x = radius_m * np.sin(omega_rad_s * t_s + phase_rad)
    bx, bz = beta_xz(t_s + u_offset_s)
    position = np.column_stack([x, np.zeros_like(x), z])
    u = gamma * np.column_stack([bx, np.zeros_like(bx), bz])
    return position, u


def make_plasma_bunch(n_particles: int = 100, gamma: float = 100.0,
                      energy_spread: float = 0.01, radius_m: float = 1e-6,
                      density_cm3: float = 1e18, n_periods: float = 3.0,
                      samples_per_period: int = 32, seed: int = DEFAULT_SEED) -> dict:
    """An invented laser-plasma-like bunch: electrons of Lorentz factor about `gamma` (rms
    relative spread `energy_spread`) doing betatron oscillations in the x–z plane of an ion
    channel, amplitudes uniform in [0.5, 1.5] × radius_m, random phases, a 2 µm rms bunch
    length. Momenta are sampled half a step before the positions (a staggered pusher).
    Returns {"t_s", "dt_s", "u_offset_s", "position_m" (P, n, 3), "u" (P, n, 3),
    "gamma" (P,), "params"} with the parameters of the mean electron."""
    rng = np.random.default_rng([seed, 5])
    params = plasma_parameters(density_cm3, gamma, radius_m)
    dt = params["period_s"] / samples_per_period
    t = np.arange(int(round(n_periods * samples_per_period)) + 1) * dt
    gammas = gamma * (1.0 + energy_spread * rng.standard_normal(n_particles))
    amplitudes = radius_m * rng.uniform(0.5, 1.5, n_particles)
    phases = rng.uniform(0.0, 2.0 * math.pi, n_particles)
    z0 = rng.normal(0.0, 2e-6, n_particles)
    positions, momenta = [], []
    for g, r, phi, z in zip(gammas, amplitudes, phases, z0, strict=True):
        omega = params["omega_p_rad_s"] / math.sqrt(2.0 * g)
        pos, u = betatron_track(g, r, omega, phi, t, -0.5 * dt, z)
        positions.append(pos)
        momenta.append(u)
    return {"t_s": t, "dt_s": dt, "u_offset_s": -0.5 * dt, "position_m": np.array(positions),
            "u": np.array(momenta), "gamma": gammas, "params": params}


def write_openpmd_series(path: Path, steps, *, u_offset_s: float,
                         species: str = "electrons", options: str = "{}") -> None:
    """Write an openPMD series (openpmd-api; the backend from the name: .h5 HDF5, .bp
    ADIOS2) of electrons, one iteration per entry of `steps`: (index, t_s, ids (n,),
    position_m (n, 3), u (n, 3) at t_s + u_offset_s). SI records (unitSI 1), positionOffset
    0, momentum in kg·m/s with its timeOffset, constant mass, charge and weighting.
    `options`: openpmd-api's JSON configuration of the series (e.g. compression)."""
    import openpmd_api as io

    length = {io.Unit_Dimension.L: 1}
    momentum = {io.Unit_Dimension.L: 1, io.Unit_Dimension.M: 1, io.Unit_Dimension.T: -1}
    scalar = io.Record_Component.SCALAR
    series = io.Series(str(path), io.Access.create, options)
    series.set_software("lagfield sample_data/make_samples.py")
    for index, t_s, ids, position_m, u in steps:
        iteration = series.iterations[int(index)]
        iteration.time, iteration.time_unit_SI, iteration.dt = float(t_s), 1.0, 0.0
        particles = iteration.particles[species]
        n = len(ids)
        vectors = (("position", length, position_m),
                   ("positionOffset", length, np.zeros((n, 3))),
                   ("momentum", momentum, u * (m_e * c)))
        for name, dimension, values in vectors:
            record = particles[name]
            record.unit_dimension = dimension
            for axis, column in zip("xyz", np.asarray(values, dtype=np.float64).T,
                                    strict=True):
                data = np.ascontiguousarray(column)
                record[axis].reset_dataset(io.Dataset(data.dtype, data.shape))
                record[axis].store_chunk(data)
                record[axis].unit_SI = 1.0
        particles["momentum"].time_offset = float(u_offset_s)
        fixed = (("mass", {io.Unit_Dimension.M: 1}, m_e),
                 ("charge", {io.Unit_Dimension.I: 1, io.Unit_Dimension.T: 1}, -e),
                 ("weighting", {}, 1.0))
        for name, dimension, value in fixed:
            particles[name].unit_dimension = dimension
            particles[name][scalar].reset_dataset(io.Dataset(np.dtype("float64"), [n]))
            particles[name][scalar].make_constant(value)
        id_values = np.ascontiguousarray(ids, dtype=np.uint64)
        particles["id"][scalar].reset_dataset(io.Dataset(id_values.dtype, id_values.shape))
        particles["id"][scalar].store_chunk(id_values)
        series.flush()
        iteration.close()
    series.close()


def plasma_steps(bunch: dict):
    """The iterations of a `make_plasma_bunch` result for `write_openpmd_series`."""
    ids = np.arange(1, bunch["position_m"].shape[0] + 1)
    for k, t in enumerate(bunch["t_s"]):
        yield k, t, ids, bunch["position_m"][:, k], bunch["u"][:, k]


def plasma_run_toml(bunch: dict, n_theta: int = 5, n_phi: int = 4) -> str:
    params = bunch["params"]
    g, f1, k_value = params["gamma"], params["f1_hz"], params["K"]
    theta_max = 1.5 * max(k_value, 1.0) / g
    lines = [
        f"Invented scenario: {bunch['position_m'].shape[0]} electrons (gamma about {g:g}, "
        "1 % rms energy spread) doing betatron",
        f"oscillations in an ion channel of density {params['density_cm3']:g} cm^-3 "
        "(amplitudes 0.5 .. 1.5 um, random phases).",
        f"Mean electron: omega_beta = omega_p/sqrt(2 gamma) = "
        f"{params['omega_beta_rad_s']:.4g} rad/s, K = {k_value:.3f},",
        f"on-axis fundamental f1 = 2 gamma^2/(1 + K^2/2) f_beta = {f1:.4g} Hz "
        "(X-ray Data Booklet sec. 2.1).",
        "A particle-in-cell-like openPMD series (HDF5), momenta half a step before positions.",
        "Far-field spectra on a cone of directions, added incoherently (random phases).",
        "Tracks from sample_data/make_samples.py (regenerate with "
        "`python sample_data/make_samples.py`).",
    ]
    return (_comment(lines)
            + '[tracks]\npath = "bunch.h5"\nformat = "openpmd"\n\n'
            + '[plugins.openpmd]\nspecies = "electrons"\n\n'
            + '[motion]\ndegree = 5\nextend = "ballistic"\n'
            + '\n[[observers]]\nname = "cone"\n'
            + "sphere = { center = [0.0, 0.0, 0.0], radius = 1.0, "
            + f"theta = [0.0, {theta_max:.6g}, {n_theta}], "
            + f"phi = [0.0, {2 * math.pi * (n_phi - 1) / n_phi:.12g}, {n_phi}] }}\n"
            + "\n[fields]\nfar_field = true\n"
            + f"\n[time]\nstep = {1.0 / (12.0 * f1):.6g}  # s, 1/(12 f1)\n"
            + "\n[spectrum]\n"
            + f"frequencies = {{ start = {0.1 * f1:.6g}, stop = {4.0 * f1:.6g}, count = 300, "
            + 'spacing = "linear" }  # Hz, 0.1 f1 .. 4 f1\ncoherent = false\n'
            + _common_tail())


# HDF5 datasets in chunks, byte-shuffled and deflated (openpmd-api's dataset options): the
# sample's smooth float64 tracks shrink to about 60 %.
PLASMA_SERIES_OPTIONS = json.dumps({"hdf5": {"dataset": {
    "chunks": "auto",
    "permanent_filters": [{"id": "shuffle"}, {"type": "zlib", "aggression": 9}]}}})


def write_plasma(folder: Path, n_particles: int = 300, samples_per_period: int = 16,
                 seed: int = DEFAULT_SEED) -> Path:
    """Write folder/bunch.h5 (an openPMD series, compressed) and folder/run.toml. 16 samples
    per betatron period give the same spectra as 32 to 3e-5 of the peak (measured), at half
    the file."""
    folder.mkdir(parents=True, exist_ok=True)
    bunch = make_plasma_bunch(n_particles, samples_per_period=samples_per_period, seed=seed)
    path, tmp = folder / "bunch.h5", folder / ".bunch-partial.h5"  # openpmd-api needs .h5
    try:
        write_openpmd_series(tmp, plasma_steps(bunch), u_offset_s=bunch["u_offset_s"],
                             options=PLASMA_SERIES_OPTIONS)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    _replace_atomically(folder / "run.toml",
                        lambda p: p.write_text(plasma_run_toml(bunch), encoding="utf-8"))
    return path


# ---------------------------------------------------------------- writing
def _replace_atomically(path: Path, write) -> None:
    tmp = path.with_name(f".{path.name}.tmp")
    try:
        write(tmp)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def write_scenario(folder: Path, table: pd.DataFrame, run_text: str) -> Path:
    """Write folder/tracks.parquet (rows grouped by particle) and folder/run.toml."""
    folder.mkdir(parents=True, exist_ok=True)
    arrow = pa.Table.from_pandas(table.sort_values(["particle", "t"], kind="stable"),
                                 preserve_index=False)
    track_path = folder / "tracks.parquet"
    _replace_atomically(track_path, lambda p: pq.write_table(arrow, p, compression="zstd"))
    _replace_atomically(folder / "run.toml", lambda p: p.write_text(run_text, encoding="utf-8"))
    return track_path


def _summary(name: str, table: pd.DataFrame, path: Path, step_s: float) -> str:
    n_particles = table["particle"].nunique()
    return (f"{name}: wrote {path.parent.name}/{path.name} ({path.stat().st_size / 1024:.1f} kB) "
            f"and run.toml: {n_particles} particle(s), {len(table)} samples, "
            f"output step {step_s:g} s")


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--noise-m", type=float, default=0.0,
                        help="rms in m of Gaussian position noise, per direction "
                             "perpendicular to the motion (default 0: none)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="numpy seed")
    parser.add_argument("--dest", type=Path, default=HERE,
                        help="folder receiving pickup/, undulator/, bend/, plasma/ (default: "
                             "beside this script)")
    args = parser.parse_args(argv)
    if args.noise_m < 0:
        parser.error("--noise-m must be >= 0")
    noise, seed = args.noise_m, args.seed
    for name, gamma, step in (("pickup", 20.0, 10e-12), ("undulator", 100.0, 0.8e-12),
                              ("bend", 200.0, 2e-12)):
        if noise > noise_limit_m(gamma, step):
            print(f"warning: {name}: noise {noise:g} m exceeds c*step/(8 gamma) = "
                  f"{noise_limit_m(gamma, step):.2g} m; samples may look faster than light")

    step = 10e-12
    table = make_pickup_tracks(step_s=step, position_noise_m=noise, seed=seed)
    weight = pickup_weight()
    path = write_scenario(args.dest / "pickup", table, pickup_run_toml(weight, 64, noise))
    print(_summary("pickup", table, path, step))
    print(f"  weight {weight:.6g} electrons per macro-particle (100 pC / 64)")
    print("\n".join(check_pickup(table, 20.0, 3e-3)))
    print(_window_report("pickup", table, np.asarray(PICKUP_BUTTONS_M), 2e-12))

    step = 0.8e-12
    params = undulator_parameters()
    table = make_undulator_tracks(step_s=step, position_noise_m=noise, seed=seed)
    path = write_scenario(args.dest / "undulator", table, undulator_run_toml(params, noise))
    print(_summary("undulator", table, path, step))
    print(f"  lambda1 {params['lambda1_m']:.5e} m, f1 {params['f1_hz']:.5e} Hz, "
          f"T1 {params['T1_s']:.4e} s, run step {params['time_step_s']:g} s")
    print("\n".join(check_undulator(table, params, step)))
    g = params["gamma"]
    print(_window_report("on_axis", table, np.array([[0.0, 0.0, 10.0]]),
                         params["time_step_s"]))
    print(_window_report("directions", table, sphere_points(
        (0, 0, 0), 10.0, (0.0, 3.0 / g, 9), (0.0, 1.5 * math.pi, 4)), params["time_step_s"]))

    step = 2e-12
    params = bend_parameters()
    screen = bend_screen(params)
    table = make_bend_tracks(step_s=step, position_noise_m=noise, seed=seed)
    path = write_scenario(args.dest / "bend", table, bend_run_toml(params, screen, noise))
    print(_summary("bend", table, path, step))
    print(f"  rho {params['rho_m']:.5f} m, Lz {params['magnet_length_z_m']:.5f} m, "
          f"deflection {params['deflection_rad']:.4f} rad, 1/gamma {1 / params['gamma']:.4g}"
          f" rad, f_c {params['fc_hz']:.5e} Hz (lambda_c {params['critical_wavelength_m']:.4e}"
          f" m), run step {params['time_step_s']:g} s")
    print("\n".join(check_bend(table, params, step)))
    print(f"  screen centre {_vec(screen['center'])} m, size {_vec(screen['size'])} m")
    print(_window_report("screen", table, plane_points(
        screen["center"], screen["u"], screen["v"], screen["size"], screen["shape"]),
        params["time_step_s"]))

    path = write_plasma(args.dest / "plasma", seed=seed)
    print(f"plasma: wrote {path.parent.name}/{path.name} ({path.stat().st_size / 1024:.1f} kB, "
          "openPMD series) and run.toml")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
