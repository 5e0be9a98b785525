"""Peak memory and time of reading an openPMD series through the openpmd importer.

Workload (default): 1e5 electrons × 200 iterations (2e7 samples, about 1.3 GB of records)
of the plasma scenario's betatron motion, written with sample_data/make_samples.py's
`write_openpmd_series` (HDF5, one file), then read by `lagfield.tracks.iter_tracks`: one
iteration per batch, re-partitioned by particle through a temporary Parquet dataset, tracks
handed on one by one. Prints the series size, the write and read times and the peak resident
memory of the reading process (a child process, so the writer's memory does not count).

Run: python tests/benchmarks/bench_openpmd.py [--particles 100000] [--iterations 200]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPOSITORY = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPOSITORY / "tests"))
from scenarios import make_samples_module  # noqa: E402

READER = """
import json, resource, sys, time
from lagfield.tracks import iter_tracks
started = time.perf_counter()
n = rows = 0
for track in iter_tracks(sys.argv[1], format="openpmd", bucket_rows=int(sys.argv[2])):
    n += 1
    rows += track.n_samples
print(json.dumps({"particles": n, "rows": rows, "read_s": time.perf_counter() - started,
                  "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def samples_module():
    return make_samples_module()


def steps(samples, n_particles: int, n_iterations: int, dt_s: float):
    """Iterations of betatron motion, computed one at a time (the writer holds one)."""
    rng = np.random.default_rng(11)
    params = samples.plasma_parameters()
    gamma = params["gamma"] * (1.0 + 0.01 * rng.standard_normal(n_particles))
    omega = params["omega_p_rad_s"] / np.sqrt(2.0 * gamma)
    radius = params["radius_m"] * rng.uniform(0.5, 1.5, n_particles)
    phase = rng.uniform(0.0, 2.0 * np.pi, n_particles)
    beta_z = np.sqrt(1.0 - 1.0 / gamma**2 - (radius * omega / 299792458.0) ** 2)
    ids = np.arange(1, n_particles + 1)
    c = 299792458.0
    for k in range(n_iterations):
        t = k * dt_s
        position = np.column_stack([radius * np.sin(omega * t + phase),
                                    np.zeros(n_particles), beta_z * c * t])
        bx = radius * omega * np.cos(omega * (t - dt_s / 2) + phase) / c
        u = gamma[:, None] * np.column_stack([bx, np.zeros(n_particles), beta_z])
        yield k, t, ids, position, u


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--particles", type=int, default=100_000)
    parser.add_argument("--iterations", type=int, default=200)
    parser.add_argument("--bucket-rows", type=int, default=1_000_000)
    args = parser.parse_args()
    samples = samples_module()
    dt = samples.plasma_parameters()["period_s"] / 32
    with tempfile.TemporaryDirectory(prefix="lagfield-bench-openpmd-") as tmp:
        path = Path(tmp) / "series.h5"
        started = time.perf_counter()
        samples.write_openpmd_series(path, steps(samples, args.particles, args.iterations, dt),
                                     u_offset_s=-0.5 * dt)
        written_s = time.perf_counter() - started
        size_mb = path.stat().st_size / 1e6
        result = subprocess.run([sys.executable, "-c", READER, str(path),
                                 str(args.bucket_rows)], capture_output=True, text=True,
                                check=False)
        if result.returncode:
            raise SystemExit(f"reading failed: {result.stderr.strip()}")
    figures = json.loads(result.stdout.strip().splitlines()[-1])
    print(f"series: {args.particles} particles x {args.iterations} iterations, "
          f"{size_mb:.0f} MB (HDF5), written in {written_s:.1f} s")
    print(f"read: {figures['particles']} tracks, {figures['rows']} samples in "
          f"{figures['read_s']:.1f} s; peak resident memory {figures['peak_rss_mb']:.0f} MB "
          f"(bucket_rows {args.bucket_rows})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
