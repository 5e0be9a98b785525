"""Cost of the spectrum routes, and the constants of lagfield.transforms.COST fitted to it.

(1) One point: 1e5 source samples of a field (an undulator-like chirped pulse with
    nonuniform observer-time spacing), 1,000 frequencies log-spaced over 4 decades; the
    route the chooser takes, the NUFFT and the direct sum (on a subset of frequencies,
    extrapolated), and their largest difference relative to the peak.
(2) --fit: both routes timed over a design of sample counts N, frequency counts F and
    NUFFT fine-grid sizes G (time span × frequency span); the direct sum fitted as
    a·N·F, the NUFFT as b + c·N·log2(N) + d·F + e·G·log2(G) (non-negative least squares on relative
    errors). The printed constants are those to keep in lagfield/transforms.py (COST),
    followed by the worst relative misprediction of the fit.
(3) --expansion: the Jacobi–Anger expansion (kernels/expansion.py) timed over sample counts
    N, frequency counts F and window spans (as orders M), fitted as M·(a·N + b·F): the
    constants expansion_per_sample_order_s, expansion_per_frequency_order_s of
    transforms.COST, and beside them the NUFFT on the same windows.
(4) --filon: the Filon-type quadrature (kernels/filon.py) of one window timed over sample
    counts N and frequency counts F (gaps from well below to many periods), fitted as a·N·F
    per core and divided by numba's threads (a run shares the points among them): the
    constant filon_per_term_s of transforms.COST.
Run: python tests/benchmarks/bench_spectra.py [--fit | --expansion | --filon] (numba on all cores;
finufft one thread, as in a run).
"""

from __future__ import annotations

import argparse
import itertools
import sys
import time
from pathlib import Path

import numpy as np
from scipy import optimize

from lagfield import spectra, transforms

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from analytic_fields import chirped_pulse  # noqa: E402


def best_of(repeats: int, function, *args) -> float:
    function(*args)  # warm up (compilation, plans)
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        function(*args)
        best = min(best, time.perf_counter() - start)
    return best


def one_point(options) -> None:
    t, e = chirped_pulse(options.samples, seed=5)
    f = np.geomspace(1e12, 1e16, options.frequencies)
    route = transforms.choose(t.size, f, t[-1] - t[0])
    fast = spectra.window_spectrum(t, e, t[0], t[-1], f, route="nufft")
    nufft_s = best_of(options.repeats, spectra.window_spectrum, t, e, t[0], t[-1], f, "none",
                      "nufft")
    subset = slice(None, None, max(1, options.frequencies // 50))
    start = time.perf_counter()
    direct = spectra.window_spectrum(t, e, t[0], t[-1], f[subset], route="direct")
    direct_s = (time.perf_counter() - start) * options.frequencies / f[subset].size
    error = np.max(np.abs(fast[subset] - direct)) / np.max(np.abs(direct))
    print(f"{options.samples:.0e} samples, {options.frequencies} log-spaced frequencies "
          f"(4 decades), one point: chooser takes '{route}'")
    print(f"  NUFFT: {nufft_s * 1e3:.1f} ms per point (target: at most 50 ms); direct sum: "
          f"{direct_s:.2f} s per point (extrapolated); max difference {error:.1e} of peak")


def fit(options) -> None:
    rng = np.random.default_rng(7)
    span_s = 1e-9
    direct_rows, nufft_rows = [], []
    for n, n_f in itertools.product((2_000, 20_000, 100_000), (4, 16, 64)):
        t = rng.random(n) * span_s
        values = rng.standard_normal((n, transforms.N_VECTORS))
        f = np.geomspace(1e9, 1e12, n_f)
        seconds = best_of(options.repeats, transforms.fourier_sums, t, values, f, "direct")
        direct_rows.append((n, n_f, seconds))
    for n, n_f, grid in itertools.product((1_000, 30_000, 300_000), (10, 300, 3_000),
                                          (1e3, 3e4, 5e5)):
        t = rng.random(n) * span_s
        values = rng.standard_normal((n, transforms.N_VECTORS))
        top = grid / (transforms.NUFFT_UPSAMPLING * span_s)
        f = np.geomspace(top * 1e-3, top, n_f)
        seconds = best_of(options.repeats, transforms.fourier_sums, t, values, f, "nufft")
        nufft_rows.append((n, n_f, transforms.nufft_grid_points(span_s, f.min(), f.max()),
                           seconds))
    d = np.array(direct_rows)
    per_term = np.sum(d[:, 2] * d[:, 0] * d[:, 1]) / np.sum((d[:, 0] * d[:, 1]) ** 2)
    u = np.array(nufft_rows)
    grid_log = u[:, 2] * np.log2(u[:, 2])
    n_log = u[:, 0] * np.log2(u[:, 0])
    design = np.column_stack([np.ones(len(u)), n_log, u[:, 1], grid_log]) / u[:, 3:4]
    coefficients, _ = optimize.nnls(design, np.ones(len(u)))
    model = transforms.CostModel(per_term, *coefficients)
    worst_direct = np.max(np.abs(model.direct_per_term_s * d[:, 0] * d[:, 1] / d[:, 2] - 1))
    worst_nufft = np.max(np.abs(design @ coefficients - 1))
    print("COST = CostModel(" + ", ".join(
        f"{field.name}={getattr(model, field.name):.3g}"
        for field in transforms.dataclasses.fields(model)) + ")")
    print(f"  worst misprediction: direct {worst_direct:.0%}, NUFFT {worst_nufft:.0%} "
          f"({len(d)} and {len(u)} timings)")
    for n, n_f, grid, seconds in nufft_rows:
        predicted = coefficients @ np.array([1.0, n * np.log2(n), n_f, grid * np.log2(grid)])
        print(f"  NUFFT N={n:.0e} F={n_f:5.0f} G={grid:.0e}: {seconds * 1e3:8.2f} ms "
              f"(model {predicted * 1e3:8.2f} ms)")


def expansion_fit(options) -> None:
    from lagfield.kernels import expansion

    rng = np.random.default_rng(3)
    rows = []
    for n, n_f, periods in itertools.product((300, 1_000, 4_000), (50, 200, 800),
                                             (1.0, 6.0, 30.0)):
        f = np.linspace(1e15, 2e16, n_f)
        half = 0.5 * periods / f.max()
        x = np.sort(rng.uniform(-half, half, n))
        values = rng.standard_normal((expansion.VECTORS, n))
        centre, width = transforms.expansion_band(f)
        orders = transforms.expansion_orders(f, half)
        w_re, w_im = expansion.chebyshev_weights(2 * np.pi * f, centre, width, orders)
        table = np.empty((orders + 1, n))
        out_re, out_im = (np.empty((expansion.VECTORS, n_f)) for _ in range(2))
        seconds = best_of(options.repeats, expansion.expansion_sums, x, values, centre, width,
                          w_re, w_im, table, out_re, out_im)
        nufft_s = best_of(options.repeats, transforms.fourier_sums, x, values.T.copy(), f,
                          "nufft")
        rows.append((n, n_f, orders, seconds, nufft_s))
    r = np.array(rows)
    design = np.column_stack([r[:, 2] * r[:, 0], r[:, 2] * r[:, 1]]) / r[:, 3:4]
    coefficients, _ = optimize.nnls(design, np.ones(len(r)))
    print(f"expansion_per_sample_order_s={coefficients[0]:.3g}, "
          f"expansion_per_frequency_order_s={coefficients[1]:.3g}; worst misprediction "
          f"{np.max(np.abs(design @ coefficients - 1)):.0%}")
    for n, n_f, orders, seconds, nufft_s in rows:
        print(f"  N={n:5.0f} F={n_f:4.0f} orders={orders:4.0f}: expansion "
              f"{seconds * 1e3:7.3f} ms, NUFFT {nufft_s * 1e3:7.3f} ms")


def filon_fit(options) -> None:
    import numba

    from lagfield.kernels import filon

    rng = np.random.default_rng(11)
    rows = []
    for n, n_f in itertools.product((1_000, 10_000, 100_000), (4, 16, 64)):
        x = np.sort(rng.uniform(-0.5, 0.5, n)) * 1e-9
        e = rng.standard_normal((n, 3))
        omega = 2 * np.pi * np.geomspace(1e-3, 10.0, n_f) * n / 1e-9  # gaps of 1e-3 … 10 periods
        out = np.zeros((n_f, 3), complex)
        seconds = best_of(options.repeats, filon.filon_sums, x, e, x[0], x[-1], omega, out)
        rows.append((n, n_f, seconds))
    r = np.array(rows)
    per_term = np.sum(r[:, 2] * r[:, 0] * r[:, 1]) / np.sum((r[:, 0] * r[:, 1]) ** 2)
    threads = numba.get_num_threads()
    worst = np.max(np.abs(per_term * r[:, 0] * r[:, 1] / r[:, 2] - 1))
    print(f"filon_per_term_s={per_term / threads:.3g} ({per_term * 1e9:.1f} ns per term on one "
          f"core, shared by {threads} threads); worst misprediction {worst:.0%}")
    for n, n_f, seconds in rows:
        print(f"  N={n:6.0f} F={n_f:3.0f}: {seconds * 1e3:8.3f} ms")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=100_000)
    parser.add_argument("--frequencies", type=int, default=1_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--fit", action="store_true", help="time both routes and fit COST")
    parser.add_argument("--expansion", action="store_true",
                        help="time the expansion route and fit its COST constants")
    parser.add_argument("--filon", action="store_true",
                        help="time the Filon-type quadrature and fit its COST constant")
    options = parser.parse_args()
    if options.filon:
        filon_fit(options)
    elif options.expansion:
        expansion_fit(options)
    elif options.fit:
        fit(options)
    else:
        one_point(options)


if __name__ == "__main__":
    main()
