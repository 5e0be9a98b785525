"""Parquet import and export (pyarrow). Import walks the file one row group at a time, so
files larger than memory can be streamed."""

from __future__ import annotations

import contextlib
import pathlib

import lagfield
from lagfield.tracks import CANONICAL_COLUMNS

MAGIC = b"PAR1"
BATCH_ROWS = 100_000  # rows read at once, however large the file's row groups


def _wanted_columns(schema_names, options) -> list[str] | None:
    """The file columns lagfield can use (canonical or mapped names); None: all. A name
    the schema repeats is listed once: pyarrow then reads every column of that name, and
    lagfield reports the repetition."""
    mapping = dict(options.get("columns") or {})
    names = {mapping.get(canon, canon) for canon in CANONICAL_COLUMNS}
    wanted = list(dict.fromkeys(name for name in schema_names if name in names))
    return wanted or None


@contextlib.contextmanager
def _as_track_errors(path):
    """A file pyarrow cannot decode (corrupt, truncated) as one TrackError."""
    import pyarrow as pa

    try:
        yield
    except (pa.ArrowException, OSError) as exc:
        raise lagfield.TrackError(f"not a readable Parquet file: {type(exc).__name__}: "
                                  f"{str(exc).strip()}", path=path) from None


class ParquetImporter:
    """Reads an Apache Parquet table."""

    name = "parquet"
    description = "Apache Parquet table, read one row group at a time"
    extensions = (".parquet", ".pq")
    requires = ("pyarrow",)

    def can_read(self, path) -> bool:
        path = pathlib.Path(path)
        if path.stat().st_size < 2 * len(MAGIC) + 4:
            return False
        with open(path, "rb") as stream:
            head = stream.read(len(MAGIC))
            stream.seek(-len(MAGIC), 2)
            tail = stream.read(len(MAGIC))
        return head == MAGIC and tail == MAGIC

    def read(self, path, options):
        import pyarrow.parquet as pq

        with _as_track_errors(path), pq.ParquetFile(path) as parquet_file:
            columns = _wanted_columns(parquet_file.schema_arrow.names, options)
            return parquet_file.read(columns=columns).to_pandas()

    def iter_batches(self, path, options):
        import pyarrow.parquet as pq

        wanted = options.get("particle_range")
        with _as_track_errors(path), pq.ParquetFile(path) as parquet_file:
            columns = _wanted_columns(parquet_file.schema_arrow.names, options)
            id_column = dict(options.get("columns") or {}).get("particle", "particle")
            first_row = 1
            for index in range(parquet_file.num_row_groups):
                group = parquet_file.metadata.row_group(index)
                if wanted is not None and not _may_hold(group, id_column, wanted):
                    first_row += group.num_rows
                    continue
                for batch in parquet_file.iter_batches(BATCH_ROWS, row_groups=[index],
                                                       columns=columns):  # bounded memory
                    frame = batch.to_pandas()
                    frame.attrs["first_row"] = first_row
                    first_row += len(frame)
                    yield frame


def _may_hold(row_group, id_column: str, particle_range) -> bool:
    """False only when the row group's statistics show no particle id in the range."""
    for i in range(row_group.num_columns):
        column = row_group.column(i)
        if column.path_in_schema == id_column:
            stats = column.statistics
            if stats is None or not stats.has_min_max:
                return True
            low, high = particle_range
            return not (stats.max < low or stats.min > high)
    return True


class ParquetExporter:
    """Writes every result table as <name>.parquet."""

    name = "parquet"
    description = "one .parquet file per result table (observers, fields, spectra)"
    requires = ("pyarrow",)

    def write(self, result, directory, options) -> list[str]:
        import pyarrow as pa
        import pyarrow.parquet as pq

        return result.write_tables(
            directory, ".parquet",
            lambda table, path: pq.write_table(pa.Table.from_pandas(table,
                                                                    preserve_index=False), path))


@lagfield.hookimpl
def lagfield_register_importers():
    return [ParquetImporter()]


@lagfield.hookimpl
def lagfield_register_exporters():
    return [ParquetExporter()]
