"""Helpers for the detector tests: bin averages of analytic signals (SPEC: a sample at t is
the average over [t − step/2, t + step/2]) and engine results built from them."""

from __future__ import annotations

import numpy as np
from scipy import special

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
