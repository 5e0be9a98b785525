"""Helpers for tests against analytic fields: bin averages of analytic signals (SPEC: a
sample at t is the average over [t − step/2, t + step/2]), engine results built from them,
and the exact Liénard–Wiechert field of a motion given in closed form (retarded time by
brute force)."""

from __future__ import annotations

import numpy as np
from scipy import constants, optimize, special

from lagfield.engine import GroupFields

_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(8)


def bin_average(function, times_s, step_s):
    """Bin averages of function(t) (vectorized, any trailing shape) over the bins centred
    on times_s, by 8-point Gauss–Legendre quadrature per bin."""
    times_s = np.asarray(times_s, dtype=float)
    t = times_s[:, None] + 0.5 * step_s * _NODES[None, :]
    values = function(t)
    return 0.5 * np.tensordot(values, _WEIGHTS, axes=([1], [0]))


def gaussian_bin_average(times_s, step_s, sigma_s, centre_s=0.0):
    """Exact bin averages of exp(−(t − centre)²/(2σ²)) (the integral is an erf)."""
    scale = sigma_s * np.sqrt(2.0)
    upper = special.erf((np.asarray(times_s) - centre_s + 0.5 * step_s) / scale)
    lower = special.erf((np.asarray(times_s) - centre_s - 0.5 * step_s) / scale)
    return sigma_s * np.sqrt(np.pi / 2.0) * (upper - lower) / step_s


def group_fields(step_s, start_s, e_v_per_m, b_t=None):
    """A GroupFields of one or more points from (P, n, 3) or (n, 3) field samples."""
    e = np.asarray(e_v_per_m, dtype=float)
    if e.ndim == 2:
        e = e[None]
    b = np.zeros_like(e) if b_t is None else np.asarray(b_t, dtype=float).reshape(e.shape)
    points = e.shape[0]
    return GroupFields(group=None, step_s=step_s, start_s=np.full(points, float(start_s)),
                       n_bins=np.full(points, e.shape[1]), e_v_per_m=e, b_t=b)


def along(values, axis):
    """(n, 3) vectors of the given values along coordinate axis 0, 1 or 2."""
    out = np.zeros((len(values), 3))
    out[:, axis] = values
    return out


# ---------------------------------------------------------------- exact Liénard–Wiechert
def retarded_times(position, observer_m, t_obs_s, reach_s):
    """Source times t′ solving t = t′ + |x − r(t′)|/c (scipy's brentq on each observer time,
    xtol 1e-24 s), for a motion whose position(t′) (any t′ (K,) → (K, 3)) stays within
    c·reach_s of the observer over [t − reach_s, t]."""
    observer_m = np.asarray(observer_m, dtype=float)
    out = np.empty(len(t_obs_s))
    for k, t_obs in enumerate(np.asarray(t_obs_s, dtype=float)):
        def residual(t_src, t_obs=t_obs):
            distance = np.linalg.norm(observer_m - position(np.array([t_src]))[0])
            return t_src + distance / constants.c - t_obs
        out[k] = optimize.brentq(residual, t_obs - reach_s, t_obs, xtol=1e-24, rtol=1e-15)
    return out


def lienard_wiechert_e(state, observer_m, t_src_s, charge_c):
    """E (K, 3) in V/m of a charge with state(t′) = (r (K, 3) m, β (K, 3), β̇ (K, 3) 1/s),
    at the observer from the source times t_src_s (K,): Jackson, Classical Electrodynamics,
    3rd ed., eq. 14.14 in SI (SPEC's formula), both terms."""
    return _field_and_kappa(state, observer_m, t_src_s, charge_c)[0]


def _field_and_kappa(state, observer_m, t_src_s, charge_c):
    """(E (K, 3), κ = 1 − n·β (K,)) of `lienard_wiechert_e`."""
    r, beta, beta_dot = state(np.asarray(t_src_s, dtype=float))
    d = np.asarray(observer_m, dtype=float) - r
    distance = np.linalg.norm(d, axis=-1)[:, None]
    n = d / distance
    kappa = 1.0 - np.einsum("ij,ij->i", n, beta)[:, None]
    inv_gamma2 = 1.0 - np.einsum("ij,ij->i", beta, beta)[:, None]
    coulomb = charge_c / (4.0 * np.pi * constants.epsilon_0)
    e = coulomb * ((n - beta) * inv_gamma2 / (kappa**3 * distance**2)
                   + np.cross(n, np.cross(n - beta, beta_dot))
                   / (constants.c * kappa**3 * distance))
    return e, kappa[:, 0]


def exact_bin_averages(state, observer_m, centres_s, step_s, charge_c, reach_s, pieces=8):
    """Bin averages over [t − step/2, t + step/2] of the exact Liénard–Wiechert E
    (`lienard_wiechert_e`) integrated over source time: ∫E dt = ∫E κ dt′, since
    dt/dt′ = 1 − n·β = κ (Jackson 3rd ed., sec. 14.1). The bin edges' retarded times come
    from `retarded_times`; between them E·κ is smooth even where E is a pulse far shorter
    than the bin, and `pieces` × 8 Gauss–Legendre nodes integrate it."""
    centres_s = np.asarray(centres_s, dtype=float)
    edges = np.append(centres_s - 0.5 * step_s, centres_s[-1] + 0.5 * step_s)
    t_edges = retarded_times(lambda t: state(t)[0], observer_m, edges, reach_s)
    lo, width = t_edges[:-1, None], np.diff(t_edges)[:, None] / pieces
    offsets = (np.arange(pieces)[:, None] + 0.5 * (_NODES[None, :] + 1.0)).ravel()
    t_src = lo + width * offsets[None, :]  # (K, pieces × 8)
    weights = 0.5 * width * np.tile(_WEIGHTS, pieces)[None, :]
    e, kappa = _field_and_kappa(state, observer_m, t_src.ravel(), charge_c)
    integrand = (e * kappa[:, None]).reshape(*t_src.shape, 3)
    return np.einsum("kj,kjc->kc", weights, integrand) / step_s


def chirped_pulse(n_samples: int, seed: int = 3):
    """A field sampled at uneven times: a Gaussian-enveloped chirp (invented)."""
    rng = np.random.default_rng(seed)
    t = np.cumsum(1e-16 * (1.0 + rng.random(n_samples)))
    centre = t[n_samples // 2]
    envelope = np.exp(-(((t - centre) / (0.2 * t[-1])) ** 2))
    phase = 2 * np.pi * 2e14 * (t - centre) * (1.0 + 0.1 * (t - centre) / t[-1])
    e = np.stack([envelope * np.cos(phase), 0.3 * envelope * np.sin(phase),
                  0.01 * envelope], axis=1)
    return t, e
