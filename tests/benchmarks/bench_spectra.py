"""Time per observer point of a spectrum on a long logarithmic frequency list.

Workload: 1e5 source samples of a field (an undulator-like chirped pulse with nonuniform
observer-time spacing), 1,000 frequencies log-spaced over 4 decades; the type-3 NUFFT path
of lagfield.spectra.window_spectrum against a direct sum on a subset of frequencies (for
the error). One core. Run: python tests/benchmarks/bench_spectra.py
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from lagfield import spectra


def workload(n_samples: int):
    rng = np.random.default_rng(5)
    spacing = 1e-16 * (1.0 + 0.5 * rng.random(n_samples))
    t = np.cumsum(spacing)
    centre = t[n_samples // 2]
    envelope = np.exp(-(((t - centre) / (0.2 * t[-1])) ** 2))
    phase = 2 * np.pi * 2e14 * (t - centre) * (1.0 + 0.1 * (t - centre) / t[-1])
    e = np.stack([envelope * np.cos(phase), 0.3 * envelope * np.sin(phase),
                  0.01 * envelope], axis=1)
    return t, e


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=100_000)
    parser.add_argument("--frequencies", type=int, default=1_000)
    parser.add_argument("--repeats", type=int, default=5)
    options = parser.parse_args()
    t, e = workload(options.samples)
    f = np.geomspace(1e12, 1e16, options.frequencies)
    spectra.window_spectrum(t, e, t[0], t[-1], f)  # warm up (imports, plans)
    best = np.inf
    for _ in range(options.repeats):
        start = time.perf_counter()
        fast = spectra.window_spectrum(t, e, t[0], t[-1], f)
        best = min(best, time.perf_counter() - start)
    subset = slice(None, None, max(1, options.frequencies // 50))
    limit = spectra.DIRECT_SUM_LIMIT
    spectra.DIRECT_SUM_LIMIT = np.inf
    start = time.perf_counter()
    direct = spectra.window_spectrum(t, e, t[0], t[-1], f[subset])
    direct_s = (time.perf_counter() - start) * options.frequencies / f[subset].size
    spectra.DIRECT_SUM_LIMIT = limit
    error = np.max(np.abs(fast[subset] - direct)) / np.max(np.abs(direct))
    print(f"{options.samples:.0e} samples, {options.frequencies} log-spaced frequencies "
          f"(4 decades), one point:")
    print(f"  NUFFT: {best * 1e3:.1f} ms per point (target: at most 50 ms); direct sum: "
          f"{direct_s:.2f} s per point (extrapolated); max difference {error:.1e} of peak")


if __name__ == "__main__":
    main()
