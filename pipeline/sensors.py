"""Sensors: the voltage an instrument at an observer point makes from the field there.

What the samples mean. The engine's sample k is the bin average of the field over
[t_k − Δ/2, t_k + Δ/2] (Δ the step). A sensor's voltage sample k is, in the same way, the
bin average of the voltage over that bin, so every sensor is written in bin averages:

- effective_length h (m): V = h·E, exactly h·Ē_k.
- effective_area A (m²): V = −dΦ/dt with Φ = A·B. The bin average of a derivative is a
  difference of point values at the bin edges: V̄_k = −(Φ(t_k + Δ/2) − Φ(t_k − Δ/2))/Δ.
- electrode of area A, normal n̂ (from the surface into the beam's space): Q = ε0 A n̂·E and
  I = dQ/dt, so Ī_k = (Q(t_k + Δ/2) − Q(t_k − Δ/2))/Δ in the same way. Without a load
  V = 50 Ω × I. With a load (R, C), V obeys C dV/dt + V/R = I. Within bin k the charge is
  taken as the parabola with the two edge values and the bin average Q̄_k (the
  piecewise-parabolic reconstruction of Colella & Woodward, without their limiter, which
  would make the sensor non-linear), so I is linear within each bin and keeps its exact bin
  average. For such a current the equation has an exact solution: with a = Δ/(RC) and
  I = I_0 + I_1·s at the time s ∈ [0, Δ] after the bin's left edge,
      V(right edge) = V(left edge)·e^(−a) + (Δ/C)(I_0 φ1 + I_1 Δ φ2),
      V̄_k           = V(left edge)·φ1     + (Δ/C)(I_0 φ2 + I_1 Δ φ3),
  φ1 = (1 − e^(−a))/a, φ2 = (1 − φ1)/a, φ3 = (1/2 − φ2)/a (the φ-functions of exponential
  integrators). R = ∞ (capacitance only) is a → 0, where V̄_k = (Q̄_k − Q(first edge))/C
  exactly; C = 0 (resistance only) is V = R·I.

Edge values from bin averages. The point value at the edge between bins k and k+1 is the
fourth-order interface value of finite-volume schemes (Colella & Woodward, J. Comput. Phys.
54 (1984) 174, eq. 1.6 on a uniform grid):
    f(t_k + Δ/2) = [7 (f̄_k + f̄_(k+1)) − (f̄_(k−1) + f̄_(k+2))] / 12,
exact for cubic f. Outside the window the field is taken as constant at its first and last
bin averages, so a field that is steady at the window's start makes no current there; the
load starts at rest (V = 0 before the window).

Everything here takes float64 arrays of one point's samples and returns new arrays; no
configuration, units or files.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import constants, signal

EPSILON_0 = constants.epsilon_0  # F/m
REFERENCE_LOAD_OHM = 50.0  # the load an electrode without `load` drives (SPEC)
_SERIES_BELOW = 0.05  # a = Δ/(RC) below which the φ-functions use their Taylor series


def edge_values(bin_averages: np.ndarray) -> np.ndarray:
    """Point values at the n + 1 bin edges t_k ∓ Δ/2 of n bin averages (along axis 0),
    fourth order inside, the signal held constant beyond both ends."""
    f = np.asarray(bin_averages, dtype=float)
    padded = np.concatenate([f[:1], f[:1], f, f[-1:], f[-1:]], axis=0)
    # edge j (j = 0 … n) lies between padded[j + 1] and padded[j + 2]
    return (7.0 * (padded[1:-2] + padded[2:-1]) - (padded[:-3] + padded[3:])) / 12.0


def edge_derivative(bin_averages: np.ndarray, step_s: float) -> np.ndarray:
    """Bin averages of df/dt from bin averages of f: (f(right edge) − f(left edge)) / Δ."""
    edges = edge_values(bin_averages)
    return np.diff(edges, axis=0) / step_s


def _phi(a: float) -> tuple[float, float, float]:
    """φ1, φ2, φ3 of a ≥ 0: φ1 = (1 − e^(−a))/a, φ2 = (1 − φ1)/a, φ3 = (1/2 − φ2)/a
    (1, 1/2, 1/6 at a = 0); for small a their series φn = Σ_k (−a)^k/(k + n)!."""
    if a < _SERIES_BELOW:
        return tuple(sum((-a) ** k / math.factorial(k + n) for k in range(8))
                     for n in (1, 2, 3))
    phi1 = -np.expm1(-a) / a
    phi2 = (1.0 - phi1) / a
    return phi1, phi2, (0.5 - phi2) / a


def load_voltage(charge_c: np.ndarray, step_s: float, resistance_ohm: float,
                 capacitance_f: float) -> np.ndarray:
    """Bin averages of V across a parallel R‖C load driven by I = dQ/dt, from bin averages
    of the charge Q, the load at rest before the first bin. resistance_ohm may be inf
    (capacitance only), capacitance_f 0 (resistance only)."""
    charge = np.asarray(charge_c, dtype=float)
    if charge.size == 0:
        return charge.copy()
    edges = edge_values(charge)
    rise = np.diff(edges)  # Q(right) − Q(left): Δ × the bin average of I
    if capacitance_f == 0.0:
        return resistance_ohm * rise / step_s
    # Q = Q̄ + rise·x + bend·(x² − 1/12) for x = (t − t_k)/Δ in [−1/2, 1/2]: I = dQ/dt is
    # (rise − bend)/Δ at the left edge and rises by 2·bend/Δ across the bin
    bend = 3.0 * (edges[:-1] + edges[1:]) - 6.0 * charge
    a = step_s / (resistance_ohm * capacitance_f)  # 0 when R = ∞
    phi1, phi2, phi3 = _phi(a)
    start = rise - bend
    right = signal.lfilter([1.0], [1.0, -np.exp(-a)],
                           (start * phi1 + 2.0 * bend * phi2) / capacitance_f)
    left = np.concatenate([[0.0], right[:-1]])
    return left * phi1 + (start * phi2 + 2.0 * bend * phi3) / capacitance_f


@dataclasses.dataclass(frozen=True)
class EffectiveLength:
    """An electrically short antenna: open-circuit V = h·E. length_m: h (3,), m."""

    length_m: tuple

    kind = "effective_length"

    def voltage(self, e_v_per_m: np.ndarray, b_t: np.ndarray, step_s: float) -> np.ndarray:
        return np.asarray(e_v_per_m, dtype=float) @ np.asarray(self.length_m)


@dataclasses.dataclass(frozen=True)
class EffectiveArea:
    """A small loop: V = −d(A·B)/dt (Faraday's law). area_m2: A (3,), m², along the
    loop's normal; positive V drives current around the normal in the right-hand sense."""

    area_m2: tuple

    kind = "effective_area"

    def voltage(self, e_v_per_m: np.ndarray, b_t: np.ndarray, step_s: float) -> np.ndarray:
        flux = np.asarray(b_t, dtype=float) @ np.asarray(self.area_m2)
        return -edge_derivative(flux, step_s)


@dataclasses.dataclass(frozen=True)
class Electrode:
    """A button or plate of area_m2 whose unit normal (3,) points from its surface into
    the beam's space. Load: resistance_ohm (inf: none in parallel) and capacitance_f (0:
    none); with neither given the electrode drives 50 Ω."""

    area_m2: float
    normal: tuple
    resistance_ohm: float = REFERENCE_LOAD_OHM
    capacitance_f: float = 0.0

    kind = "electrode"

    def charge(self, e_v_per_m: np.ndarray) -> np.ndarray:
        """Bin averages of the induced charge Q = ε0 A n̂·E, C."""
        normal = np.asarray(self.normal)
        return EPSILON_0 * self.area_m2 * (np.asarray(e_v_per_m, dtype=float) @ normal)

    def current(self, e_v_per_m: np.ndarray, step_s: float) -> np.ndarray:
        """Bin averages of I = dQ/dt into the load, A."""
        return edge_derivative(self.charge(e_v_per_m), step_s)

    def voltage(self, e_v_per_m: np.ndarray, b_t: np.ndarray, step_s: float) -> np.ndarray:
        return load_voltage(self.charge(e_v_per_m), step_s, self.resistance_ohm,
                            self.capacitance_f)


SENSORS = {cls.kind: cls for cls in (EffectiveLength, EffectiveArea, Electrode)}
