"""Direct nonuniform Fourier sums S[k, c] = Σ_j v[j, c] exp(−i ω_k x_j) of real vectors,
compiled and parallel over the frequencies (each frequency's sum is one thread's, in a
fixed order, so the result does not depend on the number of threads)."""

from __future__ import annotations

import math

import numba
import numpy as np

from ._jit import jit


@jit(parallel=True)
def direct_sums(x, values, omega, out):
    """Fill out (K, C) complex with Σ_j values[j, c] exp(−i omega[k] x[j]) for x (N,),
    values (N, C) real and omega (K,) (rad/s, with x in s)."""
    n = x.shape[0]
    n_c = values.shape[1]
    for k in numba.prange(omega.shape[0]):
        w = omega[k]
        re = np.zeros(n_c)
        im = np.zeros(n_c)
        for j in range(n):
            phase = w * x[j]
            cos = math.cos(phase)
            sin = math.sin(phase)
            for c in range(n_c):
                re[c] += values[j, c] * cos
                im[c] -= values[j, c] * sin
        for c in range(n_c):
            out[k, c] = re[c] + 1j * im[c]
