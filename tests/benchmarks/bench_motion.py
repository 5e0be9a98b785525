"""Time to build and evaluate the motion of long tracks.

Workload: a charge on a helix at γ = 50, 2,000 samples, with momenta (offset 0 and half a
step early, u_offset = −step/2) and positions only; construction time per track and
evaluation rate (source times per second, one core, compiled kernels warmed up).
Run: python tests/benchmarks/bench_motion.py [--samples N]
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy import constants

from lagfield.motion import Motion
from lagfield.tracks import Track

C = constants.c


def helix(n_samples: int, u_shift_s: float = 0.0) -> tuple[Track, float]:
    gamma, radius_m = 50.0, 0.5
    beta = math.sqrt(1 - 1 / gamma**2)
    beta_t, beta_z = 0.3 * beta, math.sqrt(1 - 0.09) * beta
    omega = beta_t * C / radius_m
    step_s = 2 * math.pi / omega / 200
    t = np.arange(n_samples) * step_s
    position = np.stack([radius_m * np.cos(omega * t), radius_m * np.sin(omega * t),
                         beta_z * C * t], axis=1)
    ts = t + u_shift_s
    u = gamma * np.stack([-beta_t * np.sin(omega * ts), beta_t * np.cos(omega * ts),
                          np.full_like(ts, beta_z)], axis=1)
    return Track(0, t, position, u, -constants.e), step_s


def best_of(function, repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=2000)
    n = parser.parse_args().samples
    track, step = helix(n)
    shifted, _ = helix(n, -0.5 * step)
    plain = Track(0, track.t_s, track.position_m, None, track.charge_c)
    probe = np.sort(np.random.default_rng(1).uniform(track.t_s[0], track.t_s[-1], 1_000_000))
    cases = (("momenta", lambda: Motion(track)),
             ("momenta, u_offset = -step/2", lambda: Motion(shifted, u_offset_s=-0.5 * step)),
             ("positions only", lambda: Motion(plain)))
    for label, build in cases:
        motion = build()
        motion.evaluate(probe[:10])  # compile or load the kernels
        seconds = best_of(build)
        rate = probe.size / best_of(lambda m=motion: m.evaluate(probe), 3)
        print(f"{label:30s} build {seconds * 1e3:8.2f} ms / {n} samples   "
              f"evaluate {rate:10.3g} times/s")


if __name__ == "__main__":
    main()
