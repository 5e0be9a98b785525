"""Speed-up of a distributed run: `lagfield.run` with 1 and with 2 local Dask workers.

Workload: the tracking case of the end-to-end benchmark (numpy_reference.doublet: N
electrons × 50 samples through a quadrupole doublet, 4 buttons, time domain), written as a
Parquet track table in row groups of 50,000 rows (so a worker reads only the row groups of
its particles), run with the default `[compute] chunk`. Printed: the in-process time, the
time with 1 and with 2 workers (each including the start of the cluster and the validation
pass, during which the workers load the engine, as a user sees them), and the ratio
1 worker ÷ 2 workers (target: at least 1.7).
The machine's other load makes these figures noisy: run it on a quiet machine.
Run: python tests/benchmarks/bench_dask.py [--particles 100000] (the default: about half a minute
in one worker; at 2e4 particles the cluster's fixed costs, which an in-process run does not
pay, are about a quarter of the run)
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parent))
import numpy_reference as ref  # noqa: E402

import lagfield  # noqa: E402
from lagfield.tables import FIELD_COLUMNS  # noqa: E402

ROW_GROUP_ROWS = 50_000


def timed(run: dict, folder: Path, workers: int | None):
    """(seconds, Signals) of one run, not written; prints them with the run's phases."""
    start = time.perf_counter()
    signals = lagfield.run(run, base_dir=folder, write=False, workers=workers)
    seconds = time.perf_counter() - start
    phases = signals.summary["timings"]
    where = "in-process (all cores)" if workers is None else f"{workers} Dask worker(s)"
    cluster = "" if workers is None else f"starting the cluster {phases['cluster_s']:.1f} s, "
    print(f"  {where}: {seconds:.1f} s ({cluster}reading and checking the tracks "
          f"{phases['read_s']:.1f} s, fields {phases['compute_s']:.1f} s)", flush=True)
    return seconds, signals


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--particles", type=int, default=100_000)
    options = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        warm = ref.doublet(n_particles=4)  # compiles (and caches) the kernels first
        warm.tracks.to_parquet(folder / "warm.parquet", index=False)
        lagfield.run(warm.run_dict("warm.parquet"), base_dir=folder, write=False)
        scenario = ref.doublet(n_particles=options.particles)
        pq.write_table(pa.Table.from_pandas(scenario.tracks, preserve_index=False),
                       folder / "tracks.parquet", row_group_size=ROW_GROUP_ROWS)
        run = scenario.run_dict("tracks.parquet")
        print(f"doublet: {options.particles} particles × 50 samples, 4 buttons")
        local, reference = timed(run, folder, None)
        one, _ = timed(run, folder, 1)
        two, signals = timed(run, folder, 2)
        a, b = (s.fields[list(FIELD_COLUMNS)].to_numpy() for s in (reference, signals))
        print(f"  speed-up 1 → 2 workers: {one / two:.2f}x (target: at least 1.7x); "
              f"2 workers differ from in-process by {np.max(np.abs(a - b)) / np.max(np.abs(a)):.1e}"
              " of the peak")


if __name__ == "__main__":
    main()
