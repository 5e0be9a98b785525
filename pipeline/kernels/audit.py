"""How far a spline's velocity between two samples goes beyond their range (the ringing
check of `lagfield.resolution`), without the temporaries of the probes' size."""

from __future__ import annotations

from ._jit import jit


@jit
def overshoots(beta, probes, out):
    """out[g, i, c] = the largest excursion, over the probes probes[g, i, :, c] between
    samples i and i + 1, beyond the range [min, max] of beta[g, i, c] and beta[g, i + 1, c]
    (negative: inside it). beta (G, n, 3); probes (G, n−1, K, 3); out (G, n−1, 3)."""
    for g in range(probes.shape[0]):
        for i in range(probes.shape[1]):
            for c in range(3):
                a = beta[g, i, c]
                b = beta[g, i + 1, c]
                low = min(a, b)
                high = max(a, b)
                worst = -float("inf")
                for k in range(probes.shape[2]):
                    value = probes[g, i, k, c]
                    worst = max(worst, max(value - high, low - value))
                out[g, i, c] = worst
