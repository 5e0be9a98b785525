"""CSV import and export: a text table with one header line, delimited by commas (or
tabs or semicolons, recognised from the header line)."""

from __future__ import annotations

import contextlib
import csv
import pathlib
import re

import lagfield

_HEAD_BYTES = 65536
_DELIMITERS = (",", "\t", ";")
BATCH_ROWS = 500_000
_LINE = re.compile(r"line (\d+)")


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


def _header_names(header: str, delimiter: str) -> list[str]:
    """The column names as the header line spells them (pandas renames a repeated name
    'x' to 'x.1'; lagfield must see the repetition to report it)."""
    return next(csv.reader([header], delimiter=delimiter, skipinitialspace=True), [])


def _unmangled(frame, names: list[str]):
    """`frame` with the names pandas made unique put back as the header spells them."""
    if len(names) == len(frame.columns) and len(set(names)) < len(names):
        frame.columns = [name if str(column).startswith(f"{name}.") else column
                         for name, column in zip(names, frame.columns, strict=True)]
    return frame


@contextlib.contextmanager
def _as_track_errors(path):
    """Parser failures of a malformed file as one TrackError naming the data row."""
    import pandas as pd

    try:
        yield
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        text = str(exc).replace("Error tokenizing data. C error: ", "").strip()
        line = _LINE.search(text)
        row = int(line.group(1)) - 1 if line else None
        raise lagfield.TrackError(f"not a well-formed delimited table: {text}", path=path,
                                  row=row) from None
    except UnicodeDecodeError as exc:
        raise lagfield.TrackError(f"the text is not UTF-8 (it holds the byte "
                                  f"0x{exc.object[exc.start]:02x}); save the file as UTF-8",
                                  path=path) from None


class CsvImporter:
    """Reads a delimited text table with a header line."""

    name = "csv"
    description = "delimited text table with one header line (comma, tab or semicolon)"
    extensions = (".csv", ".tsv")
    requires = ()

    def can_read(self, path) -> bool:
        header = _header_line(pathlib.Path(path))
        return header is not None and _delimiter(header) is not None

    def _frames(self, path, chunksize=None):
        """The table's pieces (one without chunksize), names as in the header."""
        import pandas as pd

        header = _header_line(pathlib.Path(path)) or ""
        delimiter = _delimiter(header) or ","
        names = _header_names(header, delimiter)
        with _as_track_errors(path), pd.read_csv(
                path, sep=delimiter, encoding="utf-8-sig", skipinitialspace=True,
                chunksize=chunksize or BATCH_ROWS) as reader:
            for frame in reader if chunksize else [reader.read()]:
                if not isinstance(frame.index, pd.RangeIndex):
                    # pandas takes a first column without a header name as the index
                    raise lagfield.TrackError(
                        f"the data rows have more fields than the header's {len(names)} "
                        "names", path=path, row=1)
                yield _unmangled(frame, names)

    def read(self, path, options):
        (frame,) = self._frames(path)
        return frame

    def iter_batches(self, path, options):
        yield from self._frames(path, chunksize=int(options.get("batch_rows", BATCH_ROWS)))


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
