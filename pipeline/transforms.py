"""Fourier sums S[k, c] = Σ_j v[j, c] exp(−2πi f_k t_j) over source samples, by the route
predicted to be cheapest: a compiled direct sum (cost ∝ samples × frequencies) or a
type-3 nonuniform FFT (finufft; cost ∝ samples + frequencies + its fine grid, which grows
with the time span × the frequency span). Both are exact to NUFFT_TOLERANCE, so the choice
is made on predicted time alone, with no threshold and no cliff between the routes.

The NUFFT transforms the real vectors in pairs, each pair one complex vector evaluated at
±f (see `_nufft`). Its fine grid (and memory) is estimated before a plan is made; a span whose grid
would pass NUFFT_MEMORY_BYTES is cut into time pieces, each transformed alone (the sum is
additive), and the cost model counts the pieces. The constants of the cost model were
fitted on a 2-core machine by tests/benchmarks/bench_spectra.py, which prints them.

A third route, the Jacobi–Anger expansion (kernels/expansion.py), costs samples × orders
plus frequencies × orders, the orders set by the window's span × the band's width: the
spectra accumulator takes it for short windows (far field), where it beats both
(`CostModel.expansion_s`, constants from tests/benchmarks/bench_spectra.py).

A fourth, the Filon-type quadrature (kernels/filon.py), costs samples × frequencies but
needs no sample per period: near-field runs take it when it is predicted cheaper than
refining the samples to resolve the top frequency (`spectra.filon_cheaper`,
`CostModel.filon_s`, constant from tests/benchmarks/bench_spectra.py --filon).
"""

from __future__ import annotations

import dataclasses
import math
import threading

import numpy as np

from .kernels import expansion, fourier

NUFFT_TOLERANCE = 1e-11  # with upsampfac 2: about 1e-11 of the peak (bench_spectra.py)
NUFFT_UPSAMPLING = 2.0  # finufft upsampfac; 1.25 cannot reach 1e-10 (kernel width)
NUFFT_BYTES_PER_GRID_POINT = 4 * 16  # complex fine grid; peak ~4 grids (bench_budget.py)
NUFFT_MEMORY_BYTES = 32 * 2**20  # one transform's fine grids (larger grids also run slower
# per point, out of cache: bench_spectra.py); a longer span is cut in pieces
ROUTES = ("direct", "nufft")
N_VECTORS = expansion.VECTORS  # the sums of one spectrum: 3 components × 2 quadrature terms


def nufft_grid_points(span_s: float, low_hz: float, high_hz: float) -> float:
    """Fine-grid size of a type-3 NUFFT from sources over `span_s` to the frequencies
    ±[low_hz, high_hz] (see `_nufft`): about 2σ·X·S/π points for source half-width
    X = span/2 and angular half-width S = 2π·high, so 2σ·span·high (from memory of
    Barnett, Magland & af Klinteberg, SIAM J. Sci. Comput. 41 (2019); measured by
    tests/benchmarks/bench_budget.py)."""
    return 2.0 * NUFFT_UPSAMPLING * float(span_s) * float(high_hz)


def nufft_pieces(span_s: float, low_hz: float, high_hz: float) -> int:
    """Number of time pieces keeping each piece's fine grids under NUFFT_MEMORY_BYTES."""
    grid_bytes = nufft_grid_points(span_s, low_hz, high_hz) * NUFFT_BYTES_PER_GRID_POINT
    return max(1, math.ceil(grid_bytes / NUFFT_MEMORY_BYTES))


@dataclasses.dataclass(frozen=True)
class CostModel:
    """Predicted seconds of the two routes for N_VECTORS vectors (fitted constants)."""

    direct_per_term_s: float  # per sample × frequency, both cores
    nufft_fixed_s: float  # per transform (plan points, FFT set-up)
    nufft_per_sample_log_s: float  # sorting and spreading the N samples: × N·log2(N)
    nufft_per_frequency_s: float  # interpolation and deconvolution
    nufft_per_grid_log_s: float  # the FFT of the fine grid of G points: × G·log2(G)
    expansion_per_sample_order_s: float = 4.49e-09  # Bessel table and moments: × N·orders
    expansion_per_frequency_order_s: float = 1.57e-09  # the Chebyshev sums: × F·orders
    filon_per_term_s: float = 1.54e-08  # Filon-type quadrature (kernels/filon.py): × N·F

    def direct_s(self, n_samples: int, n_frequencies: int) -> float:
        return self.direct_per_term_s * n_samples * n_frequencies

    def nufft_s(self, n_samples: int, frequencies_hz: np.ndarray, span_s: float) -> float:
        low, high = float(frequencies_hz.min()), float(frequencies_hz.max())
        pieces = nufft_pieces(span_s, low, high)
        piece_grid = nufft_grid_points(span_s, low, high) / pieces
        return (pieces * (self.nufft_fixed_s + self.nufft_per_frequency_s * frequencies_hz.size
                          + self.nufft_per_grid_log_s * _n_log(piece_grid))
                + self.nufft_per_sample_log_s * _n_log(n_samples))

    def expansion_s(self, n_samples: int, n_frequencies: int, orders: int) -> float:
        """One window by the Jacobi–Anger expansion (kernels/expansion.py)."""
        return orders * (self.expansion_per_sample_order_s * n_samples
                         + self.expansion_per_frequency_order_s * n_frequencies)


    def filon_s(self, n_samples: int, n_frequencies: int) -> float:
        """One window by the Filon-type quadrature (kernels/filon.py)."""
        return self.filon_per_term_s * n_samples * n_frequencies


def _n_log(count: float) -> float:
    """n·log2(n), taken as 2 below n = 2 (sorting n samples, the FFT of an n-point grid)."""
    count = max(float(count), 2.0)
    return count * math.log2(count)


# fitted by tests/benchmarks/bench_spectra.py --fit (and --expansion) on a quiet 2-core
# machine; timings under load vary by about 2×, so the model decides well only away from
# the crossover, where it matters
COST = CostModel(direct_per_term_s=1.5e-08, nufft_fixed_s=2.81e-04,
                 nufft_per_sample_log_s=6.61e-09, nufft_per_frequency_s=5.71e-07,
                 nufft_per_grid_log_s=5.7e-09, expansion_per_sample_order_s=4.35e-09,
                 expansion_per_frequency_order_s=1.58e-09)


def predicted_s(n_samples: int, frequencies_hz: np.ndarray, span_s: float, route: str,
                model: CostModel = COST) -> float:
    """Predicted seconds of `route` for n_samples over span_s to frequencies_hz."""
    if route == "direct":
        return model.direct_s(n_samples, frequencies_hz.size)
    return model.nufft_s(n_samples, frequencies_hz, span_s)


def choose(n_samples: int, frequencies_hz: np.ndarray, span_s: float,
           model: CostModel = COST) -> str:
    """"direct" or "nufft": the route predicted to be faster (a tie goes to "direct")."""
    return min(ROUTES, key=lambda route: predicted_s(n_samples, frequencies_hz, span_s, route,
                                                     model))


def cheapest_s(n_samples: int, frequencies_hz: np.ndarray, span_s: float,
               model: CostModel = COST) -> float:
    """Predicted seconds of the route `choose` takes."""
    route = choose(n_samples, frequencies_hz, span_s, model)
    return predicted_s(n_samples, frequencies_hz, span_s, route, model)


def expansion_band(frequencies_hz: np.ndarray) -> tuple[float, float]:
    """(centre, half width) in rad/s of the band the expansion spans (never zero wide)."""
    omega = 2.0 * np.pi * np.asarray(frequencies_hz, dtype=float)
    low, high = float(omega.min()), float(omega.max())
    return 0.5 * (low + high), max(0.5 * (high - low), 1e-300 + 1e-12 * abs(high))


def expansion_orders(frequencies_hz: np.ndarray, half_span_s: float) -> int:
    """Orders the expansion needs for samples within ±half_span_s of their centre."""
    return int(expansion.orders_for(expansion_band(frequencies_hz)[1] * float(half_span_s)))


def fourier_sums(t_s: np.ndarray, values: np.ndarray, frequencies_hz: np.ndarray,
                 route: str | None = None) -> np.ndarray:
    """S (K, C) complex, S[k, c] = Σ_j values[j, c] exp(−2πi f_k t_j), for t_s (N,) in any
    order, values (N, C) real; by `route` ("direct", "nufft") or the cheaper one."""
    n_f = frequencies_hz.size
    if t_s.size == 0:
        return np.zeros((n_f, values.shape[1]), dtype=complex)
    low, high = float(t_s.min()), float(t_s.max())
    if route is None:
        route = choose(t_s.size, frequencies_hz, high - low)
    omega = 2.0 * np.pi * np.asarray(frequencies_hz, dtype=float)
    if route == "direct":
        return _centred(t_s, values, omega, low, high, _direct)
    pieces = nufft_pieces(high - low, float(frequencies_hz.min()), float(frequencies_hz.max()))
    if pieces == 1:
        return _centred(t_s, values, omega, low, high, _nufft)
    which = np.minimum((pieces * (t_s - low) / (high - low)).astype(np.int64), pieces - 1)
    total = np.zeros((n_f, values.shape[1]), dtype=complex)
    for piece in range(pieces):
        inside = which == piece
        if inside.any():
            t = t_s[inside]
            total += _centred(t, values[inside], omega, t.min(), t.max(), _nufft)
    return total


def _centred(t_s, values, omega, low, high, route):
    """Sums about the centre of [low, high] (short phases), shifted back."""
    centre = 0.5 * (low + high)
    sums = route(t_s - centre, values, omega)
    return sums * np.exp(-1j * omega * centre)[:, None]


def _direct(x, values, omega):
    out = np.empty((omega.size, values.shape[1]), dtype=complex)
    fourier.direct_sums(np.ascontiguousarray(x), np.ascontiguousarray(values, dtype=float),
                        omega, out)
    return out


_PLANS = threading.local()  # plans are never shared between threads


def _plan(n_vectors: int):
    """This thread's type-3 plan for n_vectors vectors (its set-up is reused). One finufft
    thread: the run's parallelism is over particles and points."""
    plans = _PLANS.__dict__.setdefault("by_count", {})
    if n_vectors not in plans:
        import finufft

        plans[n_vectors] = finufft.Plan(3, 1, n_trans=n_vectors, eps=NUFFT_TOLERANCE, isign=-1,
                                        nthreads=1, upsampfac=NUFFT_UPSAMPLING)
    return plans[n_vectors]


def _nufft(x, values, omega):
    """Real vectors in pairs, as one complex vector z = u + iv each, transformed at ±ω:
    S_u(ω) = (S_z(ω) + conj S_z(−ω))/2, S_v(ω) = (S_z(ω) − conj S_z(−ω))/(2i) (halves
    the spreading, which dominates; the doubled targets cost little)."""
    n_c = values.shape[1]
    half = (n_c + 1) // 2
    paired = np.zeros((half, x.size), dtype=complex)
    paired.real = values[:, :half].T
    paired.imag[: n_c - half] = values[:, half:].T
    plan = _plan(half)
    plan.setpts(np.ascontiguousarray(x), s=np.concatenate([omega, -omega]))
    sums = plan.execute(paired).reshape(half, 2 * omega.size)
    plus, minus = sums[:, :omega.size].T, np.conj(sums[:, omega.size:]).T
    return np.concatenate([0.5 * (plus + minus), -0.5j * (plus - minus)], axis=1)[:, :n_c]
