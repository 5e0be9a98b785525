"""Spectra at every point of a group from particles' source samples, in one compiled call:
per point (one thread each, particles in order, so results do not depend on the number
of threads) the pointwise fields, the samples inside the point's window, the weights of
the corrected trapezoid rule and the Fourier sums by the Jacobi–Anger expansion
(kernels/expansion.py); added coherently (Ẽ) or incoherently (weighted spectral fluence).
The same fields give each particle's ∫|E|² dt over the window (`energy.window_energy`) when
it is asked for, so the exact fluence costs no second pass. `point_filon` does the same with
the Filon-type quadrature (kernels/filon.py) in place of the trapezoid and the expansion.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ._jit import jit
from .energy import window_energy
from .expansion import VECTORS, expansion_sums
from .filon import filon_sums
from .pointwise import fields_kappa
from .quadrature import corrected_trapezoid


@jit
def _windowed(t_obs, e, start, stop, scale, hann, fields):
    """(first, count): the samples inside [start, stop] (t_obs increasing), their fields
    × scale (× the Hann taper when `hann`) in fields[:count]."""
    first = np.searchsorted(t_obs, start, side="left")
    count = np.searchsorted(t_obs, stop, side="right") - first
    for j in range(count):
        taper = scale
        if hann:
            taper *= 0.5 - 0.5 * math.cos(2.0 * math.pi * (t_obs[first + j] - start)
                                          / (stop - start))
        for c in range(3):
            fields[j, c] = e[first + j, c] * taper
    return first, count


@jit
def _window_terms(t_obs, e, start, stop, scale, top_omega, hann, values):
    """(first, count): the samples inside [start, stop] (t_obs increasing) and, in
    values[:, :count], the two sums' coefficients of `spectra.quadrature_terms` (fields ×
    scale, Hann taper when `hann`)."""
    fields = np.empty((t_obs.shape[0], 3))
    first, count = _windowed(t_obs, e, start, stop, scale, hann, fields)
    if count < 2:
        return first, 0
    a = np.empty((3, count))
    b = np.empty((3, count))
    corrected_trapezoid(t_obs[first:first + count], fields[:count], start, stop, a, b)
    for c in range(3):
        for j in range(count):
            values[c, j] = a[c, j]
            values[3 + c, j] = b[c, j] * top_omega
    return first, count


@jit(inline=True)
def _project(values, j, across, out, row):
    """out[0:4, row] = the two sums' samples values[0:3, j] and values[3:6, j] projected on
    the unit vectors across[0], across[1] (a·u₀, a·u₁, b·u₀, b·u₁; in place when out is
    values and row is j: the rows read, 0–5, are read before any is written)."""
    a0, a1, a2 = values[0, j], values[1, j], values[2, j]
    b0, b1, b2 = values[3, j], values[4, j], values[5, j]
    for u in range(2):
        out[u, row] = a0 * across[u, 0] + a1 * across[u, 1] + a2 * across[u, 2]
        out[2 + u, row] = b0 * across[u, 0] + b1 * across[u, 1] + b2 * across[u, 2]


@jit
def _longest(offsets):
    """The most samples any particle holds (particle i: offsets[i] … offsets[i + 1])."""
    most = 0
    for i in range(offsets.shape[0] - 1):
        most = max(most, offsets[i + 1] - offsets[i])
    return most


@jit
def point_terms(t, pos, beta, inv_g2, beta_dot, offsets, scales, far, targets, distance_m,
                origin, start, stop, p, top_omega, hann, across, t_out, values_out, firsts,
                counts):
    """The two Fourier sums' samples of every particle at point p (as
    `spectra.quadrature_terms` of its fields × scales[i] over [start[p], stop[p]]), packed
    one particle after another: particle i's count[i] terms at rows firsts[i] … of t_out
    (N,) and values_out (VECTORS, N). Returns the rows filled. With across (P, 2, 3) not
    empty (the far field, where E·n = 0), rows 0–3 hold the two sums projected on
    across[p]'s two unit vectors (a·u₀, a·u₁, b·u₀, b·u₁) and rows 4–5 are not written."""
    project = across.shape[0] > 0
    most = _longest(offsets)
    t_obs = np.empty(most)
    e = np.empty((most, 3))
    kappa = np.empty(most)
    values = np.empty((VECTORS, most))
    row = 0
    for i in range(offsets.shape[0] - 1):
        lo = offsets[i]
        n = offsets[i + 1] - lo
        hi = lo + n
        fields_kappa(t[lo:hi], pos[lo:hi], beta[lo:hi], inv_g2[lo:hi], beta_dot[lo:hi], far,
                     targets[p], distance_m[p], origin, t_obs[:n], e[:n], kappa[:n])
        first, count = _window_terms(t_obs[:n], e[:n], start[p], stop[p], scales[i],
                                     top_omega, hann, values)
        firsts[i] = row
        counts[i] = count
        for j in range(count):
            t_out[row + j] = t_obs[first + j]
            if project:
                _project(values, j, across[p], values_out, row + j)
            else:
                for c in range(VECTORS):
                    values_out[c, row + j] = values[c, j]
        row += count
    return row


@jit(inline=True)
def _particle_at_point(i, p, t, pos, beta, inv_g2, beta_dot, offsets, far, targets,
                       distance_m, origin_m, start, stop, energy_factors, energy, t_obs, e,
                       kappa):
    """n: particle i's n samples seen from point p (observer times, fields per q/4πε0 and κ
    into t_obs[:n], e[:n], kappa[:n]); adds energy_factors[i] × its ∫|E|² dt over p's
    window to energy[p] when that factor is not 0."""
    lo = offsets[i]
    hi = offsets[i + 1]
    n = hi - lo
    fields_kappa(t[lo:hi], pos[lo:hi], beta[lo:hi], inv_g2[lo:hi], beta_dot[lo:hi], far,
                 targets[p], distance_m[p], origin_m, t_obs[:n], e[:n], kappa[:n])
    if energy_factors[i] != 0.0:
        energy[p] += energy_factors[i] * window_energy(t[lo:hi], t_obs[:n], e[:n], kappa[:n],
                                                       start[p], stop[p])
    return n


@jit(inline=True)
def _add_sums(p, out_re, out_im, ratio, omega, middle, coherent, across, project, half,
              spectrum, fluence, fluence_weight):
    """Add one particle's sums (rows: `half` components of each quadrature sum, centred on
    `middle`) to point p's spectrum (coherent; back from the components along across[p, 0],
    across[p, 1] when `project`) or fluence (× fluence_weight; |Ẽ|² is the same sum in an
    orthonormal basis)."""
    for k in range(omega.shape[0]):
        shift = -omega[k] * middle
        shift_re = math.cos(shift) if coherent else 1.0
        shift_im = math.sin(shift) if coherent else 0.0
        power = 0.0
        for c in range(half):
            re = out_re[c, k] + ratio[k] * out_im[half + c, k]
            im = out_im[c, k] - ratio[k] * out_re[half + c, k]
            if coherent:
                value = (re * shift_re - im * shift_im) + 1j * (re * shift_im + im * shift_re)
                if project:  # back to x, y, z
                    for axis in range(3):
                        spectrum[p, k, axis] += value * across[p, c, axis]
                else:
                    spectrum[p, k, c] += value
            else:
                power += re * re + im * im
        if not coherent:
            fluence[p, k] += fluence_weight * power


@jit(parallel=True)
def point_spectra(t, pos, beta, inv_g2, beta_dot, offsets, scales, far, targets, distance_m,
                  origin_m, start, stop, omega, top_omega, hann, centre, half_width,
                  weights_re, weights_im, across, coherent, fluence_weights, spectrum, fluence,
                  energy_factors, energy):
    """Add the particles' spectra at every point p of targets (P, 3) (far: directions at
    distance_m (P,) from origin_m (3,)) over observer times [start[p], stop[p]]:
    Ẽ × scales[i] to spectrum (P, K, 3) complex when `coherent`, else
    fluence_weights[i] × Σ|Ẽ|² to fluence (P, K). Particle i holds samples
    offsets[i]:offsets[i + 1] of (t, pos, beta, inv_g2, beta_dot); omega (K,) rad/s in
    the band of the weights (`expansion.chebyshev_weights` of centre, half_width, with
    enough orders for the longest window); top_omega: 2π × the top frequency. Where
    energy_factors[i] ≠ 0, adds energy_factors[i] × ∫|E|² dt (per (q/4πε0)²) over the
    window to energy (P,). With across (P, 2, 3) not empty (far field: E·n = 0) the sums
    run over the two components along across[p] (4 vectors instead of 6)."""
    project = across.shape[0] > 0
    n_vectors = 4 if project else VECTORS
    n_k = omega.shape[0]
    ratio = np.zeros(n_k)  # ω/ω_top: the second sum's weight (f = 0 alone: 0)
    if top_omega > 0.0:
        for k in range(n_k):
            ratio[k] = omega[k] / top_omega
    most = _longest(offsets)
    for p in numba.prange(targets.shape[0]):
        t_obs = np.empty(most)
        e = np.empty((most, 3))
        kappa = np.empty(most)
        values = np.empty((VECTORS, most))
        table = np.empty((weights_re.shape[0] + 1, most))
        out_re = np.empty((VECTORS, n_k))
        out_im = np.empty((VECTORS, n_k))
        for i in range(offsets.shape[0] - 1):
            n = _particle_at_point(i, p, t, pos, beta, inv_g2, beta_dot, offsets, far, targets,
                                   distance_m, origin_m, start, stop, energy_factors, energy,
                                   t_obs, e, kappa)
            first, count = _window_terms(t_obs[:n], e[:n], start[p], stop[p], scales[i],
                                         top_omega, hann, values)
            if count == 0:
                continue
            middle = 0.5 * (t_obs[first] + t_obs[first + count - 1])
            x = t_obs[first:first + count] - middle
            if project:
                for j in range(count):
                    _project(values, j, across[p], values, j)
            expansion_sums(x, values[:n_vectors, :count], centre, half_width, weights_re,
                           weights_im, table, out_re, out_im)
            if project:  # constant counts let the compiler unroll the inner loops
                _add_sums(p, out_re, out_im, ratio, omega, middle, coherent, across, True, 2,
                          spectrum, fluence, fluence_weights[i])
            else:
                _add_sums(p, out_re, out_im, ratio, omega, middle, coherent, across, False,
                          3, spectrum, fluence, fluence_weights[i])


@jit(parallel=True)
def point_filon(t, pos, beta, inv_g2, beta_dot, offsets, scales, far, targets, distance_m,
                origin_m, start, stop, omega, hann, coherent, fluence_weights, spectrum,
                fluence, energy_factors, energy):
    """As `point_spectra`, with each particle's Ẽ at a point by the Filon-type quadrature
    of kernels/filon.py (exact phase: any spacing of the samples against the period)
    instead of the corrected trapezoid and the expansion."""
    n_k = omega.shape[0]
    most = _longest(offsets)
    for p in numba.prange(targets.shape[0]):
        t_obs = np.empty(most)
        e = np.empty((most, 3))
        kappa = np.empty(most)
        fields = np.empty((most, 3))
        part = np.empty((n_k, 3), dtype=np.complex128)
        centre = 0.5 * (start[p] + stop[p])
        for i in range(offsets.shape[0] - 1):
            n = _particle_at_point(i, p, t, pos, beta, inv_g2, beta_dot, offsets, far, targets,
                                   distance_m, origin_m, start, stop, energy_factors, energy,
                                   t_obs, e, kappa)
            first, count = _windowed(t_obs[:n], e[:n], start[p], stop[p], scales[i], hann,
                                     fields)
            if count < 2:
                continue
            part[:] = 0.0
            filon_sums(t_obs[first:first + count] - centre, fields[:count], start[p] - centre,
                       stop[p] - centre, omega, part)
            if coherent:  # the sums ran in t − centre: shift them back
                for k in range(n_k):
                    shift = complex(math.cos(omega[k] * centre), -math.sin(omega[k] * centre))
                    for c in range(3):
                        spectrum[p, k, c] += part[k, c] * shift
            else:
                for k in range(n_k):
                    power = 0.0
                    for c in range(3):
                        power += part[k, c].real ** 2 + part[k, c].imag ** 2
                    fluence[p, k] += fluence_weights[i] * power
