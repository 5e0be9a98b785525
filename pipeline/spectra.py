"""Spectra of the field over the time window: Ẽ(f) = ∫ E(t) e^(−2πi f t) dt (V·s/m),
spectral fluence F(f) = 2 ε0 c |Ẽ(f)|² (J/(m²·Hz)), and R² F on spheres (J/(Hz·sr)).

The integral runs over the observer times of the source samples (not over the output
bins, so there is no sinc attenuation from the step), by the trapezoid rule with its
Euler–Maclaurin end correction, which splits into two sums of the form Σ c_j e^(−iωt_j):
any frequency list, linear or logarithmic over many decades, is then one type-3
nonuniform FFT (finufft) per point, or a direct sum for small problems. The source
sampling puts at least SAMPLES_PER_PERIOD samples in the period of the top frequency.
"""

from __future__ import annotations

import dataclasses
import functools
import math

import numpy as np
from scipy import constants

from .kernels import pointwise, quadrature

SAMPLES_PER_PERIOD = 16.0  # source samples (in observer time) per period of the top frequency
NUFFT_TOLERANCE = 1e-9
NUFFT_UPSAMPLING = 1.25  # finufft upsampfac (see _nufft_plan); budget.py sizes its grid
DIRECT_SUM_LIMIT = 2_000_000  # samples × frequencies below which a direct sum is used
COULOMB = 1.0 / (4.0 * math.pi * constants.epsilon_0)


@dataclasses.dataclass(frozen=True)
class SpectrumSettings:
    frequencies_hz: np.ndarray
    coherent: bool = True
    taper: str = "none"  # or "hann"


def frequency_list(start_hz: float, stop_hz: float, count: int, spacing: str) -> np.ndarray:
    """The frequencies of a [spectrum] table, both ends included."""
    if spacing == "log":
        return np.geomspace(start_hz, stop_hz, count)
    return np.linspace(start_hz, stop_hz, count)


def fourier_sums(t_s: np.ndarray, values: np.ndarray, frequencies_hz: np.ndarray):
    """S[k, c] = Σ_j values[c, j] exp(−2πi f_k t_j): NUFFT type 3 or a direct sum."""
    omega = 2.0 * np.pi * frequencies_hz
    if values.shape[1] == 0:
        return np.zeros((frequencies_hz.size, values.shape[0]), dtype=complex)
    centre = 0.5 * (t_s[0] + t_s[-1])
    x = t_s - centre
    phase = np.exp(-1j * omega * centre)
    if t_s.size * frequencies_hz.size <= DIRECT_SUM_LIMIT:
        sums = np.exp(-1j * np.outer(omega, x)) @ values.T.astype(complex)
        return sums * phase[:, None]
    plan = _nufft_plan(values.shape[0])
    plan.setpts(x, s=omega)
    sums = plan.execute(np.ascontiguousarray(values, dtype=complex))
    return sums.T * phase[:, None]


@functools.cache
def _nufft_plan(n_vectors: int):
    """A reusable type-3 NUFFT plan (its set-up is a tenth of a transform's time).
    upsampfac 1.25 halves the time of these many-target transforms for an error of about
    1e-8 of the peak (tests/benchmarks/bench_spectra.py); one thread is fastest here."""
    import finufft

    return finufft.Plan(3, 1, n_trans=n_vectors, eps=NUFFT_TOLERANCE, isign=-1, nthreads=1,
                        upsampfac=NUFFT_UPSAMPLING)


def window_spectrum(t_obs_s, e_v_per_m, start_s, stop_s, frequencies_hz, taper="none"):
    """Ẽ(f) (F, 3) of the field samples (t_obs_s (N,), increasing; e (N, 3)) over
    [start_s, stop_s]."""
    first = int(np.searchsorted(t_obs_s, start_s, side="left"))
    last = int(np.searchsorted(t_obs_s, stop_s, side="right"))
    t = t_obs_s[first:last]
    e = e_v_per_m[first:last]
    if t.size < 2:
        return np.zeros((frequencies_hz.size, 3), dtype=complex)
    if taper == "hann":
        e = e * (0.5 - 0.5 * np.cos(2.0 * np.pi * (t - start_s) / (stop_s - start_s)))[:, None]
    ab = np.empty((6, t.size))
    quadrature.corrected_trapezoid(t, np.ascontiguousarray(e), start_s, stop_s, ab[:3], ab[3:])
    sums = fourier_sums(t, ab, frequencies_hz)
    omega = 2.0 * np.pi * frequencies_hz
    return sums[:, :3] - 1j * omega[:, None] * sums[:, 3:]


def fluence(spectrum: np.ndarray) -> np.ndarray:
    """F(f) = 2 ε0 c |Ẽ(f)|² summed over components, J/(m²·Hz)."""
    return 2.0 * constants.epsilon_0 * constants.c * np.sum(np.abs(spectrum) ** 2, axis=-1)


class SpectrumAccumulator:
    """Spectra of one group's points, to which particles' source samples are added."""

    def __init__(self, group, start_s, stop_s, settings: SpectrumSettings, far=None):
        self.group = group
        self.start_s = start_s
        self.stop_s = stop_s
        self.settings = settings
        self.far = far
        n_f = settings.frequencies_hz.size
        self.spectrum = np.zeros((group.n_points, n_f, 3), dtype=complex)
        self.fluence = np.zeros((group.n_points, n_f))

    def add(self, t, state, charge_c: float, weight: float) -> None:
        t_obs, e, kappa = np.empty(t.size), np.empty((t.size, 3)), np.empty(t.size)
        for p in range(self.group.n_points):
            pointwise.point_fields(t, state, p, self.group.points_m, self.far, t_obs, e, kappa)
            single = window_spectrum(t_obs, e * (COULOMB * charge_c), self.start_s[p],
                                     self.stop_s[p], self.settings.frequencies_hz,
                                     self.settings.taper)
            if self.settings.coherent:
                self.spectrum[p] += weight * single
            else:
                self.fluence[p] += weight * fluence(single)

    def table(self):
        """SPEC's spectra table for this group."""
        import pandas as pd

        f = self.settings.frequencies_hz
        n_f = f.size
        n_p = self.group.n_points
        frame = pd.DataFrame({"observer": self.group.name,
                              "point": np.repeat(np.arange(n_p, dtype=np.int64), n_f),
                              "f": np.tile(f, n_p)})
        if self.settings.coherent:
            flat = self.spectrum.reshape(n_p * n_f, 3)
            for i, axis in enumerate("xyz"):
                frame[f"E{axis}_re"] = flat[:, i].real
                frame[f"E{axis}_im"] = flat[:, i].imag
            values = fluence(self.spectrum)
        else:
            values = self.fluence
        frame["fluence"] = values.reshape(-1)
        if self.group.kind == "sphere":
            offset = self.group.points_m - self.group.origin_m
            radius2 = np.einsum("ij,ij->i", offset, offset)
            frame["dW_df_dOmega"] = (values * radius2[:, None]).reshape(-1)
        return frame
