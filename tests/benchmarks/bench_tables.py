"""Time to build SPEC's fields table and write it as fields.parquet (and its size).

Workload: one observer group of 100 points × 50,000 bins (5e6 rows) of invented field
values. Printed: the columnar build of lagfield.tables.fields_table, and, for comparison,
a per-point build (one pandas frame per point, then one concatenate, the observer a
string column), each followed by a Parquet write through the parquet exporter's writer;
and the observer column's type in the written schema. Both builds run twice, alternately:
the first one in the process also pays for mapping fresh memory.
Run: python tests/benchmarks/bench_tables.py [--points 100] [--bins 50000]
"""

from __future__ import annotations

import argparse
import dataclasses
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from lagfield.engine import GroupFields
from lagfield.tables import FIELD_COLUMNS, fields_table


@dataclasses.dataclass
class Group:
    name: str
    n_points: int


def per_point_table(results) -> pd.DataFrame:
    frames = []
    for result in results:
        for point in range(result.group.n_points):
            n = int(result.n_bins[point])
            values = np.concatenate([result.e_v_per_m[point, :n], result.b_t[point, :n]], axis=1)
            frame = pd.DataFrame(values, columns=list(FIELD_COLUMNS))
            frame.insert(0, "t", result.times(point))
            frame.insert(0, "point", np.int64(point))
            frame.insert(0, "observer", result.group.name)
            frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def write(table: pd.DataFrame, path: Path) -> None:
    pq.write_table(pa.Table.from_pandas(table, preserve_index=False), path)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=100)
    parser.add_argument("--bins", type=int, default=50_000)
    options = parser.parse_args()
    rng = np.random.default_rng(2)
    n_bins = np.full(options.points, options.bins)
    n_bins[1] = options.bins // 2  # points of a group may have windows of other lengths
    shape = (options.points, options.bins, 3)
    result = GroupFields(Group("screen", options.points), 1e-13, rng.random(options.points) * 1e-9,
                    n_bins, rng.standard_normal(shape), rng.standard_normal(shape))
    with tempfile.TemporaryDirectory() as directory:
        builds = (("columnar (tables.fields_table)", fields_table),
                  ("per-point frames", per_point_table))
        for name, build in builds * 2:  # the first build of a process also maps fresh memory
            path = Path(directory) / "fields.parquet"
            start = time.perf_counter()
            table = build([result])
            built = time.perf_counter()
            write(table, path)
            done = time.perf_counter()
            observer = pq.read_schema(path).field("observer").type
            print(f"{name}: {len(table):.3g} rows, build {built - start:.2f} s, write "
                  f"{done - built:.2f} s, total {done - start:.2f} s; "
                  f"{path.stat().st_size / 2**20:.0f} MiB, observer column {observer}")
            del table


if __name__ == "__main__":
    main()
