"""Throughput of the full near-field Liénard–Wiechert kernel with bin deposition.

Workload: 100 particles × 20,000 source samples × 64 observer points (a bunch on a
helical path seen by a ring of points), reported as source-sample × observer-point
evaluations per second on one core and on all cores, and peak resident memory.
Run: python tests/benchmarks/bench_kernels.py

Timings are wall-clock and best of --repeats; other work on the machine lowers them, so
the CPU time of the process is printed beside them.
"""

from __future__ import annotations

import argparse
import os
import resource
import time

import numba
import numpy as np
from scipy import constants

from lagfield.kernels import deposit

# throughput goals for the default workload (evaluations/s), by number of threads
TARGETS = {1: 8e7, 2: 1.5e8}


def workload(n_particles: int, n_samples: int, n_points: int, n_bins: int):
    rng = np.random.default_rng(1)
    gamma = 20.0
    speed = np.sqrt(1.0 - 1.0 / gamma**2)
    duration = 2e-9
    t = np.tile(np.linspace(0.0, duration, n_samples), n_particles)
    phase = np.repeat(rng.uniform(0, 2 * np.pi, n_particles), n_samples)
    omega = 2 * np.pi / 0.5e-9
    radius_m = 1e-3
    beta_t = radius_m * omega / constants.c
    beta_z = np.sqrt(speed**2 - beta_t**2)
    pos = np.stack([radius_m * np.cos(omega * t + phase), radius_m * np.sin(omega * t + phase),
                    beta_z * constants.c * t], axis=1)
    beta = np.stack([-beta_t * np.sin(omega * t + phase), beta_t * np.cos(omega * t + phase),
                     np.full_like(t, beta_z)], axis=1)
    beta_dot = np.stack([-beta_t * omega * np.cos(omega * t + phase),
                         -beta_t * omega * np.sin(omega * t + phase), np.zeros_like(t)], axis=1)
    inv_g2 = np.full_like(t, 1.0 / gamma**2)
    offsets = np.arange(n_particles + 1, dtype=np.int64) * n_samples
    scale = np.full(n_particles, -constants.e)
    angle = np.linspace(0, 2 * np.pi, n_points, endpoint=False)
    observers = np.stack([0.05 * np.cos(angle), 0.05 * np.sin(angle),
                          np.full(n_points, 0.3)], axis=1)
    # the bins span exactly the arrival times of the samples, so every evaluation counts
    offset = observers[None, :, :] - pos[:: max(1, n_samples // 200), None, :]
    arrival = t[:: max(1, n_samples // 200), None] + np.sqrt((offset**2).sum(axis=2)) / constants.c
    step = (arrival.max() - arrival.min()) / n_bins
    edge0 = np.full(n_points, arrival.min())
    counts = np.full(n_points, n_bins, dtype=np.int64)
    out = np.zeros((n_points, n_bins, 6))
    return (t, pos, beta, inv_g2, beta_dot, offsets, scale, observers, edge0, step, counts,
            out)


def measure(args, threads: int, repeats: int) -> tuple[float, float]:
    """Best wall-clock and CPU seconds of one call on `threads` threads."""
    numba.set_num_threads(threads)
    best = best_cpu = np.inf
    for _ in range(repeats):
        args[-1][:] = 0.0
        start = time.perf_counter()
        start_cpu = time.process_time()
        deposit.deposit_near(*args)
        best = min(best, time.perf_counter() - start)
        best_cpu = min(best_cpu, time.process_time() - start_cpu)
    return best, best_cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--particles", type=int, default=100)
    parser.add_argument("--samples", type=int, default=20_000)
    parser.add_argument("--points", type=int, default=64)
    parser.add_argument("--bins", type=int, nargs="+", default=[4_000, 2_000, 1_000],
                        help="observer bins per point (one measurement each)")
    parser.add_argument("--repeats", type=int, default=3)
    options = parser.parse_args()
    evaluations = options.particles * options.samples * options.points
    small = workload(2, 100, 2, 10)
    deposit.deposit_near(*small)  # compile outside the timing
    print(f"workload: {options.particles} particles x {options.samples} samples x "
          f"{options.points} points = {evaluations:.3g} evaluations")
    default = (options.particles, options.samples, options.points) == (100, 20_000, 64)
    for n_bins in options.bins:
        args = workload(options.particles, options.samples, options.points, n_bins)
        per_bin = options.samples / n_bins
        print(f" {n_bins} bins ({per_bin:g} source samples per bin and particle; a segment "
              f"crosses a bin edge about once in {per_bin:g}):")
        for threads in sorted({1, numba.config.NUMBA_NUM_THREADS}):
            seconds, cpu_seconds = measure(args, threads, options.repeats)
            rate = evaluations / seconds
            goal = ""
            if default and threads in TARGETS:
                verdict = "met" if rate >= TARGETS[threads] else "not met"
                goal = f" (goal {TARGETS[threads]:.3g}: {verdict})"
            print(f"  {threads} thread(s): {seconds:.3f} s, {rate:.3g} evaluations/s{goal}; "
                  f"CPU {cpu_seconds:.3f} s")
        del args
    peak_mib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"  peak resident memory: {peak_mib:.0f} MiB (cores seen: {os.cpu_count()})")


if __name__ == "__main__":
    main()
