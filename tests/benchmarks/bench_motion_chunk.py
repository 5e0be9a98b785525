"""Time to build the motions of a chunk of tracks: one by one and batched.

Workloads: the doublet bunch of the end-to-end benchmark (numpy_reference.doublet: 1,000
electrons, 50 samples with momenta on one time grid) and 1,000 helices of 2,000 samples
(bench_motion.helix, shifted in phase per particle); each with and without the checks of
a run (slip and speed), and the doublet also as positions only.
Run: python tests/benchmarks/bench_motion_chunk.py [--particles N] [--samples N]
"""

from __future__ import annotations

import argparse
import pathlib
import sys
import time

import numpy as np

from lagfield import motion
from lagfield.tracks import Track

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from bench_motion import helix  # noqa: E402
from numpy_reference import ELECTRON_CHARGE_C, doublet  # noqa: E402

RESOLUTION_S = 2e-12  # the doublet's step


def doublet_tracks(n_particles: int) -> list[Track]:
    table = doublet(n_particles=n_particles).tracks
    ids = table["particle"].to_numpy()
    starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]])
    ends = np.r_[starts[1:], ids.size]
    t = table["t"].to_numpy()
    r = table[["x", "y", "z"]].to_numpy()
    u = table[["ux", "uy", "uz"]].to_numpy()
    return [Track(int(ids[s]), t[s:e].copy(), r[s:e].copy(), u[s:e].copy(), ELECTRON_CHARGE_C)
            for s, e in zip(starts, ends, strict=True)]


def helix_tracks(n_particles: int, n_samples: int) -> list[Track]:
    base, _ = helix(n_samples)
    tracks = []
    for p in range(n_particles):
        shift = np.array([1e-3 * p, 0.0, 0.0])
        tracks.append(Track(p, base.t_s, base.position_m + shift, base.u, base.charge_c))
    return tracks


def seconds(function) -> float:
    start = time.perf_counter()
    function()
    return time.perf_counter() - start


def report(label: str, tracks: list[Track]) -> None:
    n = len(tracks)
    cases = [("Motion, one by one", lambda: [motion.Motion(tr) for tr in tracks]),
             ("checked_motion, one by one",
              lambda: [motion.checked_motion(tr, RESOLUTION_S) for tr in tracks])]
    if hasattr(motion, "build_motions"):
        cases += [("build_motions", lambda: motion.build_motions(tracks)),
                  ("checked_motions", lambda: motion.checked_motions(tracks, RESOLUTION_S))]
    for name, build in cases:
        build()  # compile or load the kernels
        print(f"{label:34s} {name:28s} {seconds(build) / n * 1e6:10.1f} µs per track")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--particles", type=int, default=1000)
    parser.add_argument("--samples", type=int, default=2000)
    options = parser.parse_args()
    tracks = doublet_tracks(options.particles)
    report("doublet, 50 samples, momenta", tracks)
    report("doublet, 50 samples, positions",
           [Track(tr.particle, tr.t_s, tr.position_m, None, tr.charge_c) for tr in tracks])
    report(f"helix, {options.samples} samples, momenta",
           helix_tracks(options.particles, options.samples))


if __name__ == "__main__":
    main()
