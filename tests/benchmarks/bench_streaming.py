"""Memory and throughput of a large run, streamed from a Parquet track table.

Workload: 1e4 particles × 1e3 samples (1e7 rows, a bunch wiggling through a short helical
field region, row groups of 1e5 rows) against a ring of 64 pickup points. Prints the peak
resident memory of `lagfield run` in-process, then the wall time in-process and with 1 and 2
local Dask workers (`--workers`). Run: python tests/benchmarks/bench_streaming.py
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import constants


def write_tracks(path: Path, n_particles: int, n_samples: int) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(3)
    gamma = 10.0
    beta = np.sqrt(1.0 - 1.0 / gamma**2)
    t = np.linspace(0.0, 1e-9, n_samples)
    per_group = max(1, 100_000 // n_samples)
    with pq.ParquetWriter(path, pa.schema([(c, pa.float64()) if c != "particle"
                                           else (c, pa.int64()) for c in
                                           ("particle", "t", "x", "y", "z", "ux", "uy",
                                            "uz")])) as writer:
        for first in range(0, n_particles, per_group):
            ids = np.arange(first, min(first + per_group, n_particles))
            delay = rng.normal(0.0, 3e-12, ids.size)[:, None]
            x0 = rng.normal(0.0, 5e-4, ids.size)[:, None]
            y0 = rng.normal(0.0, 5e-4, ids.size)[:, None]
            tau = t[None, :] - delay
            amplitude = 1e-4
            omega = 2 * np.pi / 0.2e-9
            x = x0 + amplitude * np.sin(omega * tau)
            z = beta * constants.c * tau
            ux = gamma * amplitude * omega * np.cos(omega * tau) / constants.c
            uz = np.sqrt(gamma**2 * beta**2 - ux**2)
            columns = {"particle": np.repeat(ids, n_samples), "t": np.tile(t, ids.size),
                       "x": x.ravel(), "y": np.repeat(y0.ravel(), n_samples), "z": z.ravel(),
                       "ux": ux.ravel(), "uy": np.zeros(x.size), "uz": uz.ravel()}
            writer.write_table(pa.table(columns))


def write_run(folder: Path, out: str, workers: int | None) -> Path:
    angle = np.linspace(0.0, 2 * np.pi, 64, endpoint=False)
    points = ", ".join(f"[{0.05 * np.cos(a):.6f}, {0.05 * np.sin(a):.6f}, 0.15]" for a in angle)
    compute = f"\n[compute]\nworkers = {workers}\n" if workers else ""  # default chunk
    run = folder / f"{out}.toml"
    run.write_text(f"""
[tracks]
path = "tracks.parquet"
charge = "-1 e"
[motion]
degree = 3
[[observers]]
name = "ring"
points = [{points}]
[time]
step = "2 ps"
start = "0.45 ns"
stop = "0.6 ns"
{compute}
[output]
dir = "{out}"
formats = ["parquet"]
""")
    return run


def timed_run(run: Path) -> tuple[float, float]:
    """(wall seconds, peak resident MiB of the child) of `lagfield run`."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "lagfield.cli", "run", str(run)], check=True,
                   stdout=subprocess.DEVNULL)
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return seconds, max(peak, before) / 1024.0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--particles", type=int, default=10_000)
    parser.add_argument("--samples", type=int, default=1_000)
    parser.add_argument("--skip-workers", action="store_true")
    options = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        start = time.perf_counter()
        write_tracks(folder / "tracks.parquet", options.particles, options.samples)
        rows = options.particles * options.samples
        size_mib = (folder / "tracks.parquet").stat().st_size / 2**20
        print(f"track table: {rows:.3g} rows, {size_mib:.0f} MiB on disk "
              f"(written in {time.perf_counter() - start:.1f} s); 64 observer points")
        seconds, peak = timed_run(write_run(folder, "in_process", None))
        print(f"  in-process: {seconds:.1f} s, peak resident memory {peak:.0f} MiB "
              "(target: at most 500 MiB)")
        if not options.skip_workers:
            one, _ = timed_run(write_run(folder, "one_worker", 1))
            two, _ = timed_run(write_run(folder, "two_workers", 2))
            print(f"  1 Dask worker: {one:.1f} s; 2 Dask workers: {two:.1f} s; "
                  f"speed-up {one / two:.2f}x (target: at least 1.7x)")


if __name__ == "__main__":
    main()
