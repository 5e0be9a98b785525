"""The built-in CSV importer and exporter, round-tripped through tmp_path."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import constants

import lagfield
from lagfield.plugins import csv_format
from lagfield.signals import Signals
from lagfield.tracks import read_tracks

ELECTRON_CHARGE_C = -constants.e  # CODATA 2018, exact: -1.602176634e-19 C

IMPORTER = csv_format.CsvImporter()


def small_signals() -> Signals:
    t = np.arange(4) * 1e-13
    observers = pd.DataFrame({"observer": ["pickup", "pickup"], "point": [0, 1],
                              "x": [0.0, 0.01], "y": [0.02, 0.02], "z": [0.0, 0.0]})
    fields = pd.DataFrame({"observer": "pickup", "point": np.repeat([0, 1], 4),
                           "t": np.tile(t, 2), "Ex": np.linspace(-1.0, 1.0, 8) / 3,
                           "Ey": 0.0, "Ez": 1e-30, "Bx": 0.0, "By": np.pi * 1e-9, "Bz": 0.0})
    return Signals(observers, fields)


def test_can_read_is_cheap_and_checks_text(tmp_path):
    good = tmp_path / "a.csv"
    good.write_text("particle,t,x,y,z\n0,0,0,0,0\n")
    tabbed = tmp_path / "b.tsv"
    tabbed.write_text("particle\tt\tx\ty\tz\n")
    binary = tmp_path / "c.csv"
    binary.write_bytes(bytes(range(256)))
    latin = tmp_path / "d.csv"
    latin.write_bytes("t,\xb5s\n".encode("latin-1"))
    single = tmp_path / "e.csv"
    single.write_text("just one word\n")
    empty = tmp_path / "f.csv"
    empty.write_bytes(b"")
    assert IMPORTER.can_read(good) and IMPORTER.can_read(tabbed)
    assert not any(IMPORTER.can_read(p) for p in (binary, latin, single, empty))


def test_read_keeps_raw_columns(tmp_path, helix):
    table = helix(n_particles=2).rename(columns={"t": "time_ns"})
    path = tmp_path / "raw.csv"
    table.to_csv(path, index=False)
    frame = IMPORTER.read(path, {})
    assert list(frame.columns) == list(table.columns)
    np.testing.assert_array_equal(frame.to_numpy(), table.to_numpy())  # repr round-trips


def test_iter_batches_gives_the_rows_in_file_order(tmp_path, helix):
    table = helix(n_particles=3)
    path = tmp_path / "chunks.csv"
    table.to_csv(path, index=False)
    batches = list(IMPORTER.iter_batches(path, {"batch_rows": 50}))
    assert [len(b) for b in batches] == [50, 50, 20]
    np.testing.assert_array_equal(pd.concat(batches).to_numpy(), table.to_numpy())


@pytest.mark.parametrize("separator", [",", "\t", ";"])
def test_delimiters_round_trip_to_tracks(tmp_path, helix, registry, separator):
    table = helix(n_particles=2)
    path = tmp_path / "tracks.csv"
    table.sample(frac=1.0, random_state=1).to_csv(path, index=False, sep=separator)
    tracks = read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    for track in tracks:
        want = table[table.particle == track.particle]
        np.testing.assert_array_equal(track.position_m, want[["x", "y", "z"]])


def test_exporter_writes_every_table(tmp_path):
    signals = small_signals()
    exporter = csv_format.CsvExporter()
    assert exporter.write(signals, tmp_path, {}) == ["observers.csv", "fields.csv"]
    for name, table in signals.tables().items():
        back = pd.read_csv(tmp_path / f"{name}.csv")
        assert list(back.columns) == list(table.columns)
        np.testing.assert_array_equal(back.to_numpy(), table.to_numpy())  # exact floats


def test_exporter_writes_spectra_when_present(tmp_path):
    signals = small_signals()
    signals.spectra = pd.DataFrame({"observer": "pickup", "point": [0, 0], "f": [1e11, 1e12],
                                    "fluence": [1e-20, 2e-21]})
    names = csv_format.CsvExporter().write(signals, tmp_path, {})
    assert names[-1] == "spectra.csv"
    np.testing.assert_array_equal(pd.read_csv(tmp_path / "spectra.csv").f, [1e11, 1e12])


def test_repeated_header_name_is_kept_for_lagfield_to_report(tmp_path):
    path = tmp_path / "dup.csv"
    path.write_text("particle, t, x, x, z, x.1\n0, 0, 1, 2, 3, 4\n")
    for frame in (IMPORTER.read(path, {}), *IMPORTER.iter_batches(path, {"batch_rows": 1})):
        assert list(frame.columns) == ["particle", "t", "x", "x", "z", "x.1"]
        assert frame.iloc[0].tolist() == [0, 0, 1, 2, 3, 4]


def bad_file(tmp_path, text: bytes, name="bad.csv"):
    path = tmp_path / name
    path.write_bytes(text)
    with pytest.raises(lagfield.TrackError) as error:
        IMPORTER.read(path, {})
    with pytest.raises(lagfield.TrackError):
        list(IMPORTER.iter_batches(path, {"batch_rows": 2}))
    assert str(path) in str(error.value)
    return error.value


def test_row_with_more_fields_than_the_header(tmp_path):
    error = bad_file(tmp_path, b"particle,t,x,y,z\n0,0,0,0,0\n0,1,0,0,0\n0,2,0,0,0,9\n")
    assert error.row == 3 and "Expected 5 fields in line 4, saw 6" in str(error)


def test_every_row_with_one_field_more_than_the_header(tmp_path):
    # pandas alone would take the first column as an index and shift every name by one
    error = bad_file(tmp_path, b"particle,t,x,y,z\n0,0,0,0,0,9\n0,1,0,0,0,9\n")
    assert error.row == 1 and "more fields than the header's 5 names" in str(error)


def test_text_that_is_not_utf8_after_the_first_line(tmp_path):
    error = bad_file(tmp_path, b"particle,t,x,y,z\n0,0,0,0,0\n0,1,\xb5,0,0\n")
    assert "not UTF-8" in str(error) and "0xb5" in str(error)


def test_unterminated_quote(tmp_path):
    error = bad_file(tmp_path, b'particle,t,x,y,z\n0,0,0,0,0\n0,"1,0,0,0\n')
    assert "not a well-formed delimited table" in str(error)
