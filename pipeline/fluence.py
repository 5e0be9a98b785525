"""Energy fluence ε0 c ∫|E|² dt (J/m²) of every observer point over its time window, and
energy per solid angle R² × fluence (J/sr) on spheres.

The observer-time integral is done over the source samples the engine already has:
∫|E|² dt = ∫|E|² κ dt′ (κ = dt/dt′), by the corrected trapezoid rule in source time, where
the integrand is smooth and resolved (the source sampling follows κ), however short the
pulse is in observer time. This is exact (to the quadrature's accuracy) for one particle and
for incoherent sums: a track of weight w adds w² × its single-particle energy in coherent
runs (its field is scaled by w) and w × in incoherent ones.

A coherent sum of several particles has cross terms ∫E_a·E_b dt that would need every
particle's field on one observer-time grid; there the fluence is a lower bound, the larger
of (a) ∫ F df over the computed band (Parseval's theorem: ∫₀^∞ F df = ε0 c ∫|E|² dt) and
(b) ε0 c step Σ|Ē|² of the bin averages (by the Cauchy–Schwarz inequality never above the
true value, and close to it where the step resolves the pulse). The `method` column says
which was used.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate

from .constants import COULOMB, EPS0_C
from .kernels import energy
from .spectra import fluence as spectral_density
from .spectra import kernel_geometry, window_arrays

TABLE_COLUMNS = ("observer", "point", "fluence", "dW_dOmega", "method")
METHOD_EXACT = "exact, from the source motion"
METHOD_EXACT_INCOHERENT = "exact, from the source motion (incoherent sum)"
METHOD_BINS = "from the bin averages: a lower bound where the step does not resolve the pulse"
METHOD_SPECTRA = ("from the spectra, band {lo:.6g}–{hi:.6g} Hz: a lower bound (the energy "
                  "outside the band is missing)")


def window_energy(t_src_s, t_obs_s, e, kappa, start_s: float, stop_s: float) -> float:
    """∫|E|² dt over observer times [start_s, stop_s] (units of e squared × s), as
    ∫|E|² κ dt′ over the source samples t_src_s (N,) with observer times t_obs_s (N,)
    (non-decreasing), fields e (N, 3) and κ (N,). A window edge between two samples becomes
    a sample of its own, its source time and integrand interpolated linearly in t."""
    return float(energy.window_energy(
        np.ascontiguousarray(t_src_s, dtype=float), np.ascontiguousarray(t_obs_s, dtype=float),
        np.ascontiguousarray(e, dtype=float), np.ascontiguousarray(kappa, dtype=float),
        float(start_s), float(stop_s)))


class FluenceAccumulator:
    """Exact energy fluence of one group's points, to which particles' source samples are
    added; stops computing (and gives None) once a coherent sum has a second track."""

    def __init__(self, group, start_s, stop_s, geometry=None, coherent: bool = True):
        self.group = group
        self.start_s, self.stop_s = window_arrays(start_s, stop_s, group.n_points)
        self.geometry = group.geometry(False) if geometry is None else geometry
        self._kernel = kernel_geometry(self.geometry, group.n_points)
        self.coherent = coherent
        self.energy = np.zeros(group.n_points)  # Σ factor × ∫|E|² dt, V²·s/m²
        self.tracks = 0

    @property
    def exact(self) -> bool:
        return not self.coherent or self.tracks <= 1

    def claim(self, charge_c: float, weight: float) -> float:
        """Count a track whose ∫|E|² dt another kernel adds to `energy` (over the same
        windows and geometry); returns the factor it must be added with (0: none, the sum
        is no longer exact)."""
        self.tracks += 1
        if not self.exact:
            return 0.0
        return (COULOMB * charge_c) ** 2 * (weight * weight if self.coherent else weight)

    def add(self, t, state, charge_c: float, weight: float) -> None:
        factor = self.claim(charge_c, weight)
        if factor == 0.0:
            return
        energy.window_energies(
            np.ascontiguousarray(t, dtype=float),
            *(np.ascontiguousarray(a, dtype=float) for a in state[:4]),
            *self._kernel, self.start_s, self.stop_s, float(factor), self.energy)

    def merge(self, other: FluenceAccumulator) -> None:
        """Add another accumulator of the same group (a partial sum of other particles)."""
        self.energy += other.energy
        self.tracks += other.tracks

    def fluence_j_per_m2(self):
        """ε0 c ∫|E|² dt (P,), or None when the sum is coherent over several tracks."""
        return EPS0_C * self.energy if self.exact else None


# ---------------------------------------------------------------------------- lower bounds
def bin_fluence(e_v_per_m, step_s: float) -> np.ndarray:
    """ε0 c step Σ|Ē|² (P,) of bin averages e (P, max_bins, 3) (zero past each point's
    bins)."""
    return EPS0_C * step_s * np.einsum("pki,pki->p", e_v_per_m, e_v_per_m)


def spectral_fluence(frequencies_hz, fluence_per_hz) -> np.ndarray:
    """∫ F df (P,) over the frequency list (trapezoid rule); fluence_per_hz (P, F)."""
    if frequencies_hz.size < 2:
        return np.zeros(fluence_per_hz.shape[0])
    return integrate.trapezoid(fluence_per_hz, frequencies_hz, axis=1)


def group_fluence(result):
    """(fluence (P,) in J/m², method) of one GroupFields."""
    exact = result.fluence.fluence_j_per_m2() if result.fluence is not None else None
    if exact is not None:
        coherent = result.fluence.coherent
        return exact, METHOD_EXACT if coherent else METHOD_EXACT_INCOHERENT
    bins = bin_fluence(result.e_v_per_m, result.step_s)
    spectra = result.spectra
    if spectra is None or spectra.settings.frequencies_hz.size < 2:
        return bins, METHOD_BINS
    f = spectra.settings.frequencies_hz
    band = spectral_fluence(f, spectral_density(spectra.spectrum))  # coherent: Ẽ is kept
    if band.sum() > bins.sum():
        return band, METHOD_SPECTRA.format(lo=float(f.min()), hi=float(f.max()))
    return bins, METHOD_BINS


def fluence_table(results):
    """The `fluence` table of a run: observer, point, fluence (J/m²), dW_dOmega (J/sr,
    spheres: R² × fluence, R from the sphere's center), method."""
    import pandas as pd

    frames = []
    for result in results:
        group = result.group
        values, method = group_fluence(result)
        frame = pd.DataFrame({"observer": group.name,
                              "point": np.arange(group.n_points, dtype=np.int64),
                              "fluence": values})
        if group.kind == "sphere":
            offset = group.points_m - group.origin_m
            frame["dW_dOmega"] = values * np.einsum("ij,ij->i", offset, offset)
        frame["method"] = method
        frames.append(frame)
    table = pd.concat(frames, ignore_index=True)
    return table[[c for c in TABLE_COLUMNS if c in table.columns]]
