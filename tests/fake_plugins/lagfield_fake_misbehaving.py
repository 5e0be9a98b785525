"""Importers that read a comma-separated track table (files ending .fake) and then fail
in the ways a plugin can: raising, exiting, returning the wrong type, or reporting a
problem of the file on purpose. One also claims '.csv', and one gives a momentum offset."""

import sys

import lagfield


def _table(path):
    import pandas as pd

    return pd.read_csv(path)


class _Base:
    description = "test importer"
    extensions = (".fake",)

    def can_read(self, path):
        return True

    def read(self, path, options):
        return _table(path)


class RaisingImporter(_Base):
    name = "raising"

    def read(self, path, options):
        raise ValueError("column 7 of the binary header is garbled")


class ExitingImporter(_Base):
    name = "exiting"

    def read(self, path, options):
        sys.exit(2)


class ListImporter(_Base):
    name = "list"

    def read(self, path, options):
        return _table(path).to_numpy().tolist()


class NoBatchesImporter(_Base):
    name = "nobatches"

    def iter_batches(self, path, options):
        return None


class FailingBatchesImporter(_Base):
    name = "failingbatches"

    def iter_batches(self, path, options):
        frame = _table(path)
        yield frame.iloc[:10]
        raise OSError("the network share went away")


class BrokenCheckImporter(_Base):
    name = "brokencheck"

    def can_read(self, path):
        raise RuntimeError("cannot look at the file")


class DeliberateImporter(_Base):
    name = "deliberate"

    def read(self, path, options):
        raise lagfield.TrackError("the record header says version 9; this reader knows 1-3",
                                  path=path, row=1)


class OffsetImporter(_Base):
    name = "offset"
    extensions = (".half-step",)

    def read(self, path, options):
        frame = _table(path)
        frame.attrs["u_offset_s"] = -5e-13
        return frame

    def iter_batches(self, path, options):
        frame = _table(path)
        for start in range(0, len(frame), 25):
            piece = frame.iloc[start:start + 25].copy()
            piece.attrs = {"u_offset_s": -5e-13, "first_row": start + 1}
            yield piece


class CsvTooImporter(_Base):
    name = "csvtoo"
    extensions = (".csv", ".fake")


@lagfield.hookimpl
def lagfield_register_importers():
    return [RaisingImporter(), ExitingImporter(), ListImporter(), NoBatchesImporter(),
            FailingBatchesImporter(), BrokenCheckImporter(), DeliberateImporter(),
            OffsetImporter(), CsvTooImporter()]
