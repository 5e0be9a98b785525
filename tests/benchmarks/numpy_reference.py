"""Straightforward NumPy implementations of lagfield's job, and the invented scenarios the
end-to-end benchmark (bench_end_to_end.py) runs through both.

The NumPy side is what a physicist would write in an afternoon, correct rather than fast:
- motion: scipy CubicSpline of the sampled positions and of β = u/√(1+u²) (β̇ its
  derivative), extended as a straight line (velocity of the first or last sample);
- near field: for each observer point and particle, the retarded time of every quadrature
  node in observer time (seeded by np.interp of t(t′) on a fine source grid, finished by
  Newton steps on t′ + R(t′)/c = t; closed form on the straight extensions), the full
  Liénard–Wiechert E and B there (the formula of the product contract; Jackson, Classical
  Electrodynamics, 3rd ed., eqs. 14.13–14.14, in SI, equation numbers from memory), bin
  averages by Gauss–Legendre quadrature over each half bin, and
  spectra as the Fourier sum of the same pointwise field over [start, stop];
- far field: the radiation integral (Jackson, 3rd ed., eq. 14.67, in SI and with the
  transform Ẽ(f) = ∫E e^(−2πift) dt):
  Ẽ(f) = q/(4πε0 c R) ∫ n×((n−β)×β̇)/κ² e^(−2πif (t′ + (R − n·r)/c)) dt′,
  Simpson's rule on a uniform source grid, a direct sum over source samples.

Scenario generators return a `Scenario`: a track table in the layout of the product
contract (particle, t, x, y, z, ux, uy, uz [, weight]; SI, u = γβ), the run settings
(as the dict a run file reads to) and the observer geometry. All scenarios are invented.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
from scipy import constants
from scipy.interpolate import CubicSpline

C = constants.c
ELECTRON_CHARGE_C = -constants.e
COULOMB = 1.0 / (4.0 * math.pi * constants.epsilon_0)  # V·m/C
GAUSS_NODES = 8  # per sample interval, when positions are integrated from velocities


# ------------------------------------------------------------------------------ scenarios
@dataclasses.dataclass
class Group:
    """An observer group as both sides see it: `spec` is its [[observers]] entry, points_m
    (P, 3) its points by SPEC's numbering; far-field groups also carry directions (P, 3)
    and distance_m (P,) seen from origin_m."""

    spec: dict
    points_m: np.ndarray
    origin_m: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(3))

    @property
    def name(self) -> str:
        return self.spec["name"]

    def far_geometry(self):
        offset = self.points_m - self.origin_m
        distance = np.linalg.norm(offset, axis=1)
        return offset / distance[:, None], distance


@dataclasses.dataclass
class Scenario:
    name: str
    description: str
    tracks: pd.DataFrame
    groups: list
    step_s: float
    start_s: float
    n_bins: int
    far_field: bool = False
    frequencies_hz: np.ndarray | None = None
    coherent: bool = True
    charge_c: float = ELECTRON_CHARGE_C

    @property
    def stop_s(self) -> float:
        return self.start_s + (self.n_bins - 1) * self.step_s

    def run_dict(self, tracks_file: str) -> dict:
        """The run file's content for lagfield (tracks_file relative to base_dir)."""
        run = {
            "tracks": {"path": tracks_file, "format": "parquet", "charge": self.charge_c},
            "motion": {"degree": 5, "extend": "ballistic"},
            "observers": [group.spec for group in self.groups],
            "fields": {"far_field": self.far_field},
            "time": {"step": self.step_s, "start": self.start_s, "stop": self.stop_s},
        }
        if self.frequencies_hz is not None:
            f = self.frequencies_hz
            spacing = "log" if np.allclose(f, np.geomspace(f[0], f[-1], f.size)) else "linear"
            run["spectrum"] = {"frequencies": {"start": float(f[0]), "stop": float(f[-1]),
                                               "count": int(f.size), "spacing": spacing},
                               "coherent": self.coherent}
        return run

    def field_samples(self) -> int:
        return sum(len(group.points_m) for group in self.groups) * self.n_bins


def points_group(name: str, points_m) -> Group:
    points = np.asarray(points_m, dtype=float)
    return Group({"name": name, "points": points.tolist()}, points)


def plane_group(name, center_m, u, v, size_m, shape) -> Group:
    """SPEC's plane: point = i_u·n_v + i_v, edges included (u, v unit and perpendicular)."""
    a = np.linspace(-0.5, 0.5, shape[0]) * size_m[0]
    b = np.linspace(-0.5, 0.5, shape[1]) * size_m[1]
    aa, bb = np.meshgrid(a, b, indexing="ij")
    points = (np.asarray(center_m, float) + aa.reshape(-1, 1) * np.asarray(u, float)
              + bb.reshape(-1, 1) * np.asarray(v, float))
    spec = {"name": name, "plane": {"center": list(center_m), "u": list(u), "v": list(v),
                                    "size": list(size_m), "shape": list(shape)}}
    return Group(spec, points)


def sphere_group(name, center_m, radius_m, theta, phi) -> Group:
    """SPEC's sphere: theta from +z, phi from +x, point = i_theta·n_phi + i_phi."""
    tt, pp = np.meshgrid(np.linspace(*theta[:2], theta[2]), np.linspace(*phi[:2], phi[2]),
                         indexing="ij")
    tt, pp = tt.ravel(), pp.ravel()
    directions = np.stack([np.sin(tt) * np.cos(pp), np.sin(tt) * np.sin(pp), np.cos(tt)], 1)
    center = np.asarray(center_m, float)
    spec = {"name": name, "sphere": {"center": list(center_m), "radius": radius_m,
                                     "theta": list(theta), "phi": list(phi)}}
    return Group(spec, center + radius_m * directions, center)


def integrate_positions(t_s: np.ndarray, beta_at, r0_m: np.ndarray) -> np.ndarray:
    """Positions (N, M, 3) at the sample times t_s (N, M) of velocities c·beta_at(t) (a
    function of times (N, K) returning (N, K, 3)), from r0_m (N, 3) at t_s[:, 0]:
    Gauss–Legendre on each interval, so the samples describe one motion to rounding."""
    x, w = np.polynomial.legendre.leggauss(GAUSS_NODES)
    n, m = t_s.shape
    dt = np.diff(t_s, axis=1)
    nodes = t_s[:, :-1, None] + 0.5 * dt[..., None] * (x + 1.0)
    beta = beta_at(nodes.reshape(n, -1)).reshape(n, m - 1, GAUSS_NODES, 3)
    steps = C * 0.5 * dt[..., None] * np.einsum("k,nmkc->nmc", w, beta)
    r = np.zeros((n, m, 3))
    r[:, 1:] = np.cumsum(steps, axis=1)
    return r + r0_m[:, None, :]


def track_table(t_s, r_m, beta, weight=None) -> pd.DataFrame:
    """SPEC's track table of N particles sampled at t_s (N, M), r_m and beta (N, M, 3)."""
    n, m = t_s.shape
    u = beta / np.sqrt(1.0 - np.sum(beta * beta, axis=-1))[..., None]
    table = pd.DataFrame({"particle": np.repeat(np.arange(n, dtype=np.int64), m),
                          "t": t_s.ravel()})
    for i, axis in enumerate("xyz"):
        table[axis] = r_m[..., i].ravel()
    for i, axis in enumerate("xyz"):
        table[f"u{axis}"] = u[..., i].ravel()
    if weight is not None:
        table["weight"] = np.repeat(np.broadcast_to(weight, (n,)), m)
    return table


def _sample(beta_at, t_s, r0_m, weight=None) -> pd.DataFrame:
    r = integrate_positions(t_s, beta_at, r0_m)
    return track_table(t_s, r, beta_at(t_s), weight)


def _beta(gamma) -> np.ndarray:
    return np.sqrt(1.0 - 1.0 / np.asarray(gamma, float) ** 2)


def _with_longitudinal(beta_total, bx, by) -> np.ndarray:
    """(…, 3) velocity of speed beta_total with transverse components bx, by."""
    return np.stack([bx, by, np.sqrt(beta_total**2 - bx**2 - by**2)], axis=-1)


def wiggler(n_particles=6, n_samples=2000, screen_shape=(8, 8), step_s=6e-15,
            n_frequencies=0, seed=1) -> Scenario:
    """Electrons (γ = 30, 0.1 % spread, 20 µm / 20 µrad rms) through a 5-period planar
    wiggler (period 2 cm, peak K = 1, sin² field envelope so the ends are smooth; centred
    on z = 0, drifts of 3 cm) seen on a screen 12 cm downstream (±1.5/γ at 12 cm) and by
    three pickup points 5 mm off axis at z = 0. One window for all points, from before the
    pickups' pulse to after the screen's; with n_frequencies, coherent spectra at as many
    log-spaced frequencies from 0.1 to 40 THz (the on-axis fundamental is near 18 THz)."""
    rng = np.random.default_rng(seed)
    gamma0, k_peak, period_m, n_periods = 30.0, 1.0, 0.02, 5
    gamma = gamma0 * (1.0 + 1e-3 * rng.standard_normal(n_particles))
    beta0 = _beta(gamma)[:, None]
    angle = 20e-6 * rng.standard_normal((n_particles, 2))
    omega_u = 2.0 * math.pi * _beta(gamma0) * C / period_m
    t_wiggler = n_periods * 2.0 * math.pi / omega_u
    amplitude = (k_peak / gamma)[:, None]

    def beta_at(t):
        s = np.clip(t + 0.5 * t_wiggler, 0.0, t_wiggler)  # wiggler from -T/2 to T/2
        wiggle = amplitude * np.sin(omega_u * s) * np.sin(math.pi * s / t_wiggler) ** 2
        return _with_longitudinal(beta0, angle[:, :1] + wiggle, angle[:, 1:] + 0 * t)

    span_s = 0.16 / (_beta(gamma0) * C)
    t = np.broadcast_to(np.linspace(-0.5 * span_s, 0.5 * span_s, n_samples),
                        (n_particles, n_samples))
    r0 = np.column_stack([20e-6 * rng.standard_normal((n_particles, 2)),
                          -0.08 + 5e-6 * rng.standard_normal(n_particles)])
    distance_m, half_m = 0.12, 0.12 * 1.5 / gamma0
    groups = [plane_group("screen", [0.0, 0.0, distance_m], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0],
                          [2 * half_m, 2 * half_m], screen_shape),
              points_group("pickups", [[5e-3, 0.0, 0.0], [-2.5e-3, 4.330127e-3, 0.0],
                                       [-2.5e-3, -4.330127e-3, 0.0]])]
    start_s = -0.03e-9
    n_bins = int(math.ceil((distance_m / C + 3e-12 - start_s) / step_s)) + 1
    f = np.geomspace(1e11, 4e13, n_frequencies) if n_frequencies else None
    return Scenario("a", "wiggler, near field, " + ("spectra" if n_frequencies else "fields"),
                    _sample(beta_at, t, r0), groups, step_s, start_s, n_bins,
                    frequencies_hz=f)


def far_window(scenario_tracks: pd.DataFrame, groups, step_s: float, margin_bins=2):
    """(start_s, n_bins) of a far-field window holding every arrival with a margin: the
    field outside it is zero, so its spectrum is the whole radiation integral."""
    t = scenario_tracks["t"].to_numpy()
    r = scenario_tracks[["x", "y", "z"]].to_numpy()
    first, last = np.inf, -np.inf
    for group in groups:
        directions, distance = group.far_geometry()
        arrival = t[:, None] + (distance[None, :] - (r - group.origin_m) @ directions.T) / C
        first, last = min(first, arrival.min()), max(last, arrival.max())
    start = (math.floor(first / step_s) - margin_bins) * step_s
    return start, int(math.ceil((last - start) / step_s)) + margin_bins + 1


def helices(n_particles=100, n_samples=1000, n_frequencies=300, sphere=(8, 12),
            seed=2) -> Scenario:
    """Electrons (γ = 1.5, pitch 45°) gyrating in an invented 10 T axial field, 4 turns,
    random phases, guiding centres spread 0.2 mm across and 0.3 mm along; far field on a
    sphere of directions (1 m), coherent spectra over 0.2 … 8 × the gyration frequency."""
    rng = np.random.default_rng(seed)
    gamma = 1.5 * (1.0 + 1e-3 * rng.standard_normal(n_particles))
    beta = _beta(gamma)[:, None]
    omega = (constants.e * 10.0 / (gamma * constants.m_e))[:, None]
    phase = rng.uniform(0.0, 2.0 * math.pi, (n_particles, 1))
    f_gyration = float(np.mean(omega)) / (2.0 * math.pi)

    def beta_at(t):
        b_perp = beta / math.sqrt(2.0)
        return _with_longitudinal(beta, b_perp * np.cos(omega * t + phase),
                                  b_perp * np.sin(omega * t + phase))

    t = np.broadcast_to(np.linspace(0.0, 4.0 / f_gyration, n_samples),
                        (n_particles, n_samples))
    r0 = np.column_stack([0.2e-3 * rng.standard_normal((n_particles, 2)),
                          0.3e-3 * rng.standard_normal(n_particles)])
    tracks = _sample(beta_at, t, r0)
    groups = [sphere_group("sphere", [0.0, 0.0, 0.0], 1.0, [0.15, math.pi - 0.15, sphere[0]],
                           [0.0, 2.0 * math.pi * (1.0 - 1.0 / sphere[1]), sphere[1]])]
    f = np.linspace(0.2, 8.0, n_frequencies) * f_gyration
    step_s = 1.0 / (4.0 * f[-1])
    start_s, n_bins = far_window(tracks, groups, step_s)
    return Scenario("b", "helices, far field, coherent", tracks, groups, step_s, start_s,
                    n_bins, far_field=True, frequencies_hz=f)


def doublet(n_particles=1000, n_samples=50, seed=3) -> Scenario:
    """A 100 pC electron bunch (γ = 20, 0.1 % spread; 3 mm long, 0.5 mm across, 0.2 mrad)
    through a weak quadrupole doublet (focal lengths +2 m and -2 m at z = -0.15 m and
    -0.10 m, kicks spread over 3 cm) passing four buttons at 20 mm radius in z = 0; tracks
    every 20 ps, time domain only (2 ps step, ±60 ps around the bunch's passage)."""
    rng = np.random.default_rng(seed)
    gamma = 20.0 * (1.0 + 1e-3 * rng.standard_normal(n_particles))
    beta = _beta(gamma)[:, None]
    x0 = 0.5e-3 * rng.standard_normal((n_particles, 2))
    angle = 0.2e-3 * rng.standard_normal((n_particles, 2))
    dz = 3e-3 * rng.standard_normal(n_particles)[:, None]
    t_first = -0.8e-9
    kicks, times = [], []
    position = x0 + angle * (-0.15 - dz - beta * C * t_first)  # at the first quadrupole
    slope = angle.copy()
    for z_quad, focal_m, next_z in ((-0.15, 2.0, -0.10), (-0.10, -2.0, None)):
        kick = -position / focal_m * np.array([1.0, -1.0])  # focusing in x, defocusing in y
        kicks.append(kick)
        times.append((z_quad - dz) / (beta * C))
        slope = slope + kick
        if next_z is not None:
            position = position + slope * (next_z - z_quad)
    width_s = 0.03 / (2.0 * _beta(20.0) * C)

    def beta_at(t):
        transverse = beta[..., None] * angle[:, None, :]
        for kick, t_quad in zip(kicks, times, strict=True):
            step = 0.5 * (1.0 + np.tanh((t - t_quad) / width_s))
            transverse = transverse + beta[..., None] * kick[:, None, :] * step[..., None]
        return _with_longitudinal(beta, transverse[..., 0], transverse[..., 1])

    t = np.broadcast_to(t_first + 20e-12 * np.arange(n_samples), (n_particles, n_samples))
    r0 = np.column_stack([x0, dz[:, 0] + beta[:, 0] * C * t_first])
    weight = 100e-12 / constants.e / n_particles
    groups = [points_group("buttons", [[0.02, 0.0, 0.0], [0.0, 0.02, 0.0], [-0.02, 0.0, 0.0],
                                       [0.0, -0.02, 0.0]])]
    return Scenario("c", "doublet, buttons, time domain", _sample(beta_at, t, r0, weight),
                    groups, 2e-12, -60e-12, 61)


def betatron(n_particles=100, n_samples=200, n_frequencies=200, cone=(8, 16),
             seed=4) -> Scenario:
    """Electrons (γ = 200, 1 % spread) oscillating in an invented plasma channel
    (betatron wavelength 200 µm at γ = 200, strength K uniform in 0.5 … 1.5, random plane
    and phase, bunch 1 µm long) for two periods; far field in a cone of 1.5/γ (1 m),
    incoherent spectra over 0.1 … 2.5 × the on-axis fundamental of K = 1."""
    rng = np.random.default_rng(seed)
    gamma0, wavelength0_m = 200.0, 200e-6
    gamma = gamma0 * (1.0 + 1e-2 * rng.standard_normal(n_particles))
    beta = _beta(gamma)[:, None]
    k_beta = (2.0 * math.pi / wavelength0_m * np.sqrt(gamma0 / gamma))[:, None]
    omega = k_beta * C
    strength = rng.uniform(0.5, 1.5, (n_particles, 1))
    plane = rng.uniform(0.0, math.pi, (n_particles, 1))
    phase = rng.uniform(0.0, 2.0 * math.pi, (n_particles, 1))
    amplitude = strength / gamma[:, None]  # transverse β

    def beta_at(t):
        transverse = amplitude * np.cos(omega * t + phase)
        return _with_longitudinal(beta, transverse * np.cos(plane),
                                  transverse * np.sin(plane))

    t = np.broadcast_to(np.linspace(0.0, 2.0 * wavelength0_m / C, n_samples),
                        (n_particles, n_samples))
    radius = (amplitude / k_beta * np.sin(phase))[:, 0]
    r0 = np.column_stack([radius * np.cos(plane[:, 0]), radius * np.sin(plane[:, 0]),
                          1e-6 * rng.standard_normal(n_particles)])
    tracks = _sample(beta_at, t, r0)
    groups = [sphere_group("cone", [0.0, 0.0, 0.0], 1.0, [0.0, 1.5 / gamma0, cone[0]],
                           [0.0, 2.0 * math.pi * (1.0 - 1.0 / cone[1]), cone[1]])]
    f1 = 2.0 * gamma0**2 * C / (wavelength0_m * 1.5)
    f = np.linspace(0.1, 2.5, n_frequencies) * f1
    step_s = 1.0 / (2.0 * f[-1])
    start_s, n_bins = far_window(tracks, groups, step_s)
    return Scenario("d", "betatron, far field, incoherent", tracks, groups, step_s, start_s,
                    n_bins, far_field=True, frequencies_hz=f, coherent=False)


# ------------------------------------------------------------------------------ motion
class SplineMotion:
    """One particle's motion: cubic splines of r and β through the samples, straight
    lines (first or last velocity, β̇ = 0) outside them."""

    def __init__(self, t_s, r_m, u):
        beta = u / np.sqrt(1.0 + np.sum(u * u, axis=1))[:, None]
        self.t_s = t_s
        self.r_spline = CubicSpline(t_s, r_m)
        self.beta_spline = CubicSpline(t_s, beta)
        self.beta_dot_spline = self.beta_spline.derivative()
        self.ends = ((t_s[0], r_m[0], beta[0]), (t_s[-1], r_m[-1], beta[-1]))

    def state(self, t_s):
        """r (K, 3) in m, β (K, 3), β̇ (K, 3) in 1/s at source times t_s (K,)."""
        inside = np.clip(t_s, self.t_s[0], self.t_s[-1])
        r = self.r_spline(inside)
        beta = self.beta_spline(inside)
        beta_dot = self.beta_dot_spline(inside)
        for (t_end, r_end, beta_end), outside in zip(
                self.ends, (t_s < self.t_s[0], t_s > self.t_s[-1]), strict=True):
            r[outside] = r_end + C * np.outer(t_s[outside] - t_end, beta_end)
            beta[outside] = beta_end
            beta_dot[outside] = 0.0
        return r, beta, beta_dot


def motions_of(tracks: pd.DataFrame):
    """[(SplineMotion, weight)] of a track table, by particle."""
    out = []
    for _, rows in tracks.sort_values(["particle", "t"]).groupby("particle", sort=True):
        weight = float(rows["weight"].iloc[0]) if "weight" in rows else 1.0
        out.append((SplineMotion(rows["t"].to_numpy(), rows[["x", "y", "z"]].to_numpy(),
                                 rows[["ux", "uy", "uz"]].to_numpy()), weight))
    return out


def _line_retarded(t_obs, point_m, t_end, r_end, beta_end):
    """Retarded times on the straight line through r_end at t_end with velocity c·β:
    the earlier root of |X − r(t′)| = c (t − t′), a quadratic in t′."""
    big_t = t_obs - t_end
    d = point_m - r_end
    b = C * big_t - d @ beta_end
    c0 = (C * big_t) ** 2 - d @ d
    a = 1.0 - beta_end @ beta_end
    return t_end + (c0 / (b + np.sqrt(b * b - a * c0))) / C


def retarded_times(motion: SplineMotion, point_m, t_obs, seed_per_interval=8, newton=3):
    """t′ (K,) solving t′ + |X − r(t′)|/c = t_obs (K,) at the point X."""
    t = motion.t_s
    fraction = np.arange(seed_per_interval) / seed_per_interval
    grid = np.append((t[:-1, None] + np.diff(t)[:, None] * fraction).ravel(), t[-1])
    arrival = grid + np.linalg.norm(point_m - motion.r_spline(grid), axis=1) / C
    t_ret = np.interp(t_obs, arrival, grid)
    inside = (t_obs >= arrival[0]) & (t_obs <= arrival[-1])
    tp = t_ret[inside]
    for _ in range(newton):
        d = point_m - motion.r_spline(tp)
        distance = np.linalg.norm(d, axis=1)
        kappa = 1.0 - np.sum(d * motion.beta_spline(tp), axis=1) / distance
        tp = np.clip(tp - (tp + distance / C - t_obs[inside]) / kappa, t[0], t[-1])
    t_ret[inside] = tp
    for (t_end, r_end, beta_end), outside in zip(
            motion.ends, (t_obs < arrival[0], t_obs > arrival[-1]), strict=True):
        t_ret[outside] = _line_retarded(t_obs[outside], point_m, t_end, r_end, beta_end)
    return t_ret


# ------------------------------------------------------------------------------ fields
def lienard_wiechert(point_m, r_m, beta, beta_dot, charge_c):
    """E (V/m) and B (T), each (K, 3), at point_m of a charge at r_m with β and β̇ (1/s):
    E = q/(4πε0)·[(n−β)(1−β²)/(κ³R²) + n×((n−β)×β̇)/(cκ³R)], B = n×E/c (SPEC's formula)."""
    d = point_m - r_m
    distance = np.linalg.norm(d, axis=1)
    n = d / distance[:, None]
    kappa3 = (1.0 - np.sum(n * beta, axis=1)) ** 3
    n_beta = n - beta
    velocity = n_beta * ((1.0 - np.sum(beta * beta, axis=1)) / (kappa3 * distance**2))[:, None]
    radiation = np.cross(n, np.cross(n_beta, beta_dot)) / (C * kappa3 * distance)[:, None]
    e = COULOMB * charge_c * (velocity + radiation)
    return e, np.cross(n, e) / C


def half_bin_nodes(step_s: float, per_half: int):
    """Offsets (2·per_half,) from a bin centre and weights (s) of Gauss–Legendre nodes on
    each half of the bin; the first per_half lie in its earlier half."""
    x, w = np.polynomial.legendre.leggauss(per_half)
    quarter = 0.25 * step_s
    return np.concatenate([-quarter + quarter * x, quarter + quarter * x]), np.tile(quarter * w, 2)


def near_fields(scenario: Scenario, tracks: pd.DataFrame, groups=None, per_half=3,
                seed_per_interval=8):
    """{group: (E (P, n_bins, 3), B (P, n_bins, 3), Ẽ (P, F, 3) or None)}: bin averages of
    the summed fields, and the Fourier sum of the pointwise field over [start, stop]."""
    motions = motions_of(tracks)
    offsets, weights = half_bin_nodes(scenario.step_s, per_half)
    centres = scenario.start_s + scenario.step_s * np.arange(scenario.n_bins)
    t_nodes = (centres[:, None] + offsets).ravel()
    bin_weights = np.tile(weights, scenario.n_bins)[:, None] / scenario.step_s
    spectral = scenario.frequencies_hz is not None
    if spectral:
        omega = 2.0 * np.pi * scenario.frequencies_hz
        w_nodes = np.tile(weights, (scenario.n_bins, 1))
        w_nodes[0, :per_half] = 0.0  # the spectrum's window runs from the first bin's centre
        w_nodes[-1, per_half:] = 0.0  # to the last bin's centre
        centre_phase = np.exp(-1j * np.outer(omega, centres))  # (F, n_bins)
        node_phase = np.exp(-1j * np.outer(omega, offsets))  # (F, nodes per bin)
    out = {}
    for group in groups or scenario.groups:
        n_points = len(group.points_m)
        e_bins = np.zeros((n_points, scenario.n_bins, 3))
        b_bins = np.zeros_like(e_bins)
        spectrum = np.zeros((n_points, scenario.frequencies_hz.size, 3), complex) \
            if spectral else None
        for p, point in enumerate(group.points_m):
            e_sum = np.zeros((t_nodes.size, 3))
            b_sum = np.zeros_like(e_sum)
            for motion, weight in motions:
                t_ret = retarded_times(motion, point, t_nodes, seed_per_interval)
                e, b = lienard_wiechert(point, *motion.state(t_ret), scenario.charge_c * weight)
                e_sum += e
                b_sum += b
            e_bins[p] = (e_sum * bin_weights).reshape(scenario.n_bins, -1, 3).sum(axis=1)
            b_bins[p] = (b_sum * bin_weights).reshape(scenario.n_bins, -1, 3).sum(axis=1)
            if spectral:
                weighted = e_sum.reshape(scenario.n_bins, -1, 3) * w_nodes[..., None]
                for m in range(offsets.size):
                    spectrum[p] += node_phase[:, m, None] * (centre_phase @ weighted[:, m, :])
        out[group.name] = (e_bins, b_bins, spectrum)
    return out


def simpson_weights(n: int, h: float) -> np.ndarray:
    """Composite Simpson weights of n (odd) equally spaced samples h apart."""
    w = np.ones(n)
    w[1:-1:2], w[2:-1:2] = 4.0, 2.0
    return w * h / 3.0


def far_spectra(scenario: Scenario, tracks: pd.DataFrame, groups=None, samples_per_track=None):
    """{group: Ẽ (P, F, 3) (coherent) or fluence (P, F) (incoherent, J/(m²·Hz))}: the
    radiation integral of each particle on a uniform source grid (odd count, default the
    track's sample count rounded up to odd) by Simpson's rule, summed over particles."""
    motions = motions_of(tracks)
    omega = 2.0 * np.pi * scenario.frequencies_hz
    out = {}
    for group in groups or scenario.groups:
        directions, distance = group.far_geometry()
        n_points = len(directions)
        coherent = np.zeros((n_points, omega.size, 3), complex)
        fluence = np.zeros((n_points, omega.size))
        for motion, weight in motions:
            n_src = samples_per_track or motion.t_s.size
            n_src += 1 - n_src % 2
            t_src = np.linspace(motion.t_s[0], motion.t_s[-1], n_src)
            r, beta, beta_dot = motion.state(t_src)
            w = simpson_weights(n_src, t_src[1] - t_src[0])
            for p, n in enumerate(directions):
                kappa = 1.0 - beta @ n
                n_beta = n - beta
                amplitude = np.cross(n, np.cross(n_beta, beta_dot)) * (w / kappa**2)[:, None]
                t_obs = t_src + (distance[p] - (r - group.origin_m) @ n) / C
                single = np.exp(-1j * np.outer(omega, t_obs)) @ amplitude
                single *= COULOMB * scenario.charge_c / (C * distance[p])
                if scenario.coherent:
                    coherent[p] += weight * single
                else:
                    fluence[p] += weight * spectral_fluence(single)
        out[group.name] = coherent if scenario.coherent else fluence
    return out


def spectral_fluence(spectrum) -> np.ndarray:
    """F(f) = 2 ε0 c |Ẽ(f)|² (J/(m²·Hz)), summed over components (SPEC)."""
    return 2.0 * constants.epsilon_0 * C * np.sum(np.abs(spectrum) ** 2, axis=-1)


def relative_l2(value, reference) -> float:
    """‖value − reference‖ / ‖reference‖."""
    return float(np.linalg.norm(np.ravel(value - reference)) / np.linalg.norm(np.ravel(reference)))
