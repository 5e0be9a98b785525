"""The fields table's columns filled from the engine's grids in one compiled pass, in
parallel over points (each point writes its own rows): a copy of a large grid through
numpy's strided transposes costs more than the deposit that made it."""

from __future__ import annotations

import numba

from ._jit import jit


@jit(parallel=True)
def fill_fields(start_s, step_s, n_bins, e, b, first_row, block, points):
    """Rows first_row[p] … first_row[p] + n_bins[p] − 1 of block (7, rows) (t, Ex … Bz)
    and points (rows,) from point p's bins: t = start_s[p] + k·step_s, e[p, k], b[p, k]
    (P, bins, 3, any strides)."""
    for p in numba.prange(n_bins.shape[0]):
        row = first_row[p]
        for k in range(n_bins[p]):
            block[0, row + k] = start_s[p] + step_s * k
            for c in range(3):
                block[1 + c, row + k] = e[p, k, c]
                block[4 + c, row + k] = b[p, k, c]
            points[row + k] = p
