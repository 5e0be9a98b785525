"""CSV import and export: a text table with one header line, delimited by commas (or
tabs or semicolons, recognised from the header line)."""

from __future__ import annotations

import pathlib

import lagfield

_HEAD_BYTES = 65536
_DELIMITERS = (",", "\t", ";")
BATCH_ROWS = 500_000


def _header_line(path: pathlib.Path) -> str | None:
    """The first line of the file as text, or None if it is not text."""
    with open(path, "rb") as stream:
        head = stream.read(_HEAD_BYTES)
    if not head or b"\x00" in head:
        return None
    line = head.split(b"\n", 1)[0].rstrip(b"\r")
    try:
        return line.decode("utf-8-sig")
    except UnicodeDecodeError:
        return None


def _delimiter(header: str) -> str | None:
    for delimiter in _DELIMITERS:
        if delimiter in header:
            return delimiter
    return None


class CsvImporter:
    """Reads a delimited text table with a header line."""

    name = "csv"
    description = "delimited text table with one header line (comma, tab or semicolon)"
    extensions = (".csv", ".tsv")
    requires = ()

    def can_read(self, path) -> bool:
        header = _header_line(pathlib.Path(path))
        return header is not None and _delimiter(header) is not None

    def _read_csv(self, path, **kwargs):
        import pandas as pd

        delimiter = _delimiter(_header_line(pathlib.Path(path)) or "") or ","
        return pd.read_csv(path, sep=delimiter, encoding="utf-8-sig", skipinitialspace=True,
                           **kwargs)

    def read(self, path, options):
        return self._read_csv(path)

    def iter_batches(self, path, options):
        with self._read_csv(path, chunksize=int(options.get("batch_rows", BATCH_ROWS))
                            ) as reader:
            yield from reader


class CsvExporter:
    """Writes every result table as <name>.csv (full float precision, no index)."""

    name = "csv"
    description = "one .csv file per result table (observers, fields, spectra)"
    requires = ()

    def write(self, result, directory, options) -> list[str]:
        return result.write_tables(directory, ".csv",
                                   lambda table, path: table.to_csv(path, index=False))


@lagfield.hookimpl
def lagfield_register_importers():
    return [CsvImporter()]


@lagfield.hookimpl
def lagfield_register_exporters():
    return [CsvExporter()]
