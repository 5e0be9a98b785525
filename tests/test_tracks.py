"""Reading tracks: mapping, units, order, streaming, and one clear error per bad input."""

from __future__ import annotations

import os
import tempfile
import warnings

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import constants

import lagfield
from lagfield.errors import TrackError
from lagfield.registry import build_registry
from lagfield.tracks import iter_tracks, open_tracks, read_tracks

ELECTRON_CHARGE_C = -constants.e  # CODATA 2018, exact: -1.602176634e-19 C


def write_csv(table: pd.DataFrame, path) -> str:
    table.to_csv(path, index=False)
    return str(path)


def expected_track(table: pd.DataFrame, particle: int) -> pd.DataFrame:
    return table[table.particle == particle].sort_values("t")


# -- reading what is there -----------------------------------------------------------------

def test_canonical_csv_gives_si_tracks_sorted_by_particle(tmp_path, helix, registry):
    table = helix(n_particles=3)
    path = write_csv(table.iloc[::-1], tmp_path / "tracks.csv")  # particles 2, 1, 0
    tracks = read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    assert isinstance(tracks, lagfield.Tracks)
    assert [tr.particle for tr in tracks] == [0, 1, 2]
    assert len(tracks) == tracks.n_particles == 3 and tracks.n_rows == len(table)
    assert tracks.has_momentum and str(tracks.path) == path
    for track in tracks:
        want = expected_track(table, track.particle)
        np.testing.assert_array_equal(track.t_s, want.t.to_numpy())
        np.testing.assert_array_equal(track.position_m, want[["x", "y", "z"]].to_numpy())
        np.testing.assert_array_equal(track.u, want[["ux", "uy", "uz"]].to_numpy())
        assert track.charge_c == ELECTRON_CHARGE_C and track.weight == 1.0
    assert tracks[-1].particle == 2


def test_rows_in_random_order_give_the_same_tracks(tmp_path, helix, registry):
    table = helix(n_particles=4)
    shuffled = table.sample(frac=1.0, random_state=7)
    tracks = read_tracks(write_csv(shuffled, tmp_path / "t.csv"), charge=ELECTRON_CHARGE_C,
                         registry=registry)
    for track in tracks:
        assert np.all(np.diff(track.t_s) > 0)
        np.testing.assert_array_equal(
            track.position_m, expected_track(table, track.particle)[["x", "y", "z"]])


def test_column_names_and_units_are_mapped_to_si(tmp_path, helix, registry):
    table = helix(n_particles=2)
    raw = pd.DataFrame({"id": table.particle, "time": table.t * 1e9, "X": table.x * 1e3,
                        "Y": table.y * 1e2, "Z": table.z / 1e3, "px": table.ux,
                        "py": table.uy, "pz": table.uz, "q": table.particle * 0 - 1.0})
    tracks = read_tracks(
        write_csv(raw, tmp_path / "mapped.csv"), registry=registry,
        columns={"particle": "id", "t": "time", "x": "X", "y": "Y", "z": "Z", "ux": "px",
                 "uy": "py", "uz": "pz", "charge": "q"},
        units={"t": "ns", "x": "mm", "y": "cm", "z": "km", "charge": "e"})
    for track in tracks:
        want = expected_track(table, track.particle)
        np.testing.assert_allclose(track.t_s, want.t, rtol=1e-12, atol=1e-24)
        np.testing.assert_allclose(track.position_m, want[["x", "y", "z"]], rtol=1e-12,
                                   atol=1e-15)
        # the elementary charge, CODATA 2018 (exact)
        assert track.charge_c == pytest.approx(-1.602176634e-19, rel=1e-12)


def test_charge_and_weight_columns_win_over_the_default(tmp_path, helix, registry):
    table = helix(n_particles=2).assign(charge=2 * constants.e, weight=lambda d: 1e3 + d.particle)
    tracks = read_tracks(write_csv(table, tmp_path / "w.csv"), charge=ELECTRON_CHARGE_C,
                         registry=registry)
    assert [tr.charge_c for tr in tracks] == [2 * constants.e] * 2
    assert [tr.weight for tr in tracks] == [1000.0, 1001.0]


def test_tracks_without_momentum(tmp_path, helix, registry):
    table = helix(n_particles=1).drop(columns=["ux", "uy", "uz"])
    tracks = read_tracks(write_csv(table, tmp_path / "p.csv"), charge=ELECTRON_CHARGE_C,
                         registry=registry)
    assert not tracks.has_momentum and tracks[0].u is None


# -- streaming -----------------------------------------------------------------------------

def test_iter_chunks_splits_in_order(tmp_path, helix, registry):
    path = write_csv(helix(n_particles=5), tmp_path / "c.csv")
    tracks = read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    chunks = list(tracks.iter_chunks(2))
    assert [[tr.particle for tr in chunk] for chunk in chunks] == [[0, 1], [2, 3], [4]]


def test_open_tracks_streams_the_same_tracks_again(tmp_path, helix, registry):
    table = helix(n_particles=5)
    path = tmp_path / "s.parquet"
    pq.write_table(pa.Table.from_pandas(table.sample(frac=1.0, random_state=3)), path,
                   row_group_size=30)
    lazy = open_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry, bucket_rows=70)
    assert lazy.streamed and len(lazy) == 5 and lazy.n_rows == len(table)
    for _ in range(2):  # every pass reads the file again
        chunks = list(lazy.iter_chunks(3))
        assert [len(chunk) for chunk in chunks] == [3, 2]
        for track in (tr for chunk in chunks for tr in chunk):
            np.testing.assert_array_equal(
                track.position_m, expected_track(table, track.particle)[["x", "y", "z"]])
    assert [lazy[k].particle for k in (0, -1)] == [0, 4]  # indexing reads them all once


class _CountingImporter:
    """The built-in Parquet importer, counting the row groups it has handed out."""

    def __init__(self, inner):
        self.inner, self.batches_read = inner, 0
        self.name, self.description, self.extensions = "counting", "test", (".parquet",)

    def can_read(self, path):
        return self.inner.can_read(path)

    def read(self, path, options):
        raise AssertionError("a streaming read must not load the whole file")

    def iter_batches(self, path, options):
        for batch in self.inner.iter_batches(path, options):
            self.batches_read += 1
            yield batch


def test_grouped_file_streams_particles_as_they_complete(tmp_path, helix):
    from lagfield.plugins.parquet_format import ParquetImporter

    table = helix(n_particles=6, n_samples=20)  # grouped by particle, 20 rows each
    path = tmp_path / "g.parquet"
    pq.write_table(pa.Table.from_pandas(table), path, row_group_size=10)
    importer = _CountingImporter(ParquetImporter())

    class Plugin:
        @lagfield.hookimpl
        def lagfield_register_importers(self):
            return [importer]

    reg = build_registry(autoload=False, extra_plugins=[("counting", Plugin())])
    stream = iter_tracks(path, format="counting", charge=ELECTRON_CHARGE_C, registry=reg)
    first = next(stream)
    # 12 row groups; one pass over the ids, then particle 0 is out after row group 3
    # (the second pass must see particle 1 start to know particle 0 is complete)
    assert first.particle == 0 and importer.batches_read == 12 + 3
    assert [tr.particle for tr in stream] == [1, 2, 3, 4, 5]


def test_ungrouped_file_is_repartitioned_in_a_temporary_dataset(tmp_path, helix, registry,
                                                               monkeypatch):
    table = helix(n_particles=8, n_samples=25)
    path = tmp_path / "u.parquet"
    pq.write_table(pa.Table.from_pandas(table.sample(frac=1.0, random_state=11)), path,
                   row_group_size=16)
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))
    stream = iter_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry, bucket_rows=60)
    first = next(stream)
    (dataset,) = scratch.iterdir()
    # 25 rows per particle, a new bucket where the rows before a particle pass a multiple
    # of 60: particles 0-2, 3-4, 5-7
    assert len(list(dataset.glob("*.parquet"))) == 3
    tracks = [first, *stream]
    assert list(scratch.iterdir()) == []  # removed afterwards
    assert [tr.particle for tr in tracks] == list(range(8))
    for track in tracks:
        want = expected_track(table, track.particle)
        np.testing.assert_array_equal(track.t_s, want.t)
        np.testing.assert_array_equal(track.u, want[["ux", "uy", "uz"]])


def test_error_rows_survive_repartitioning(tmp_path, helix, registry):
    table = helix(n_particles=4, n_samples=25).sample(frac=1.0, random_state=5)
    table = table.reset_index(drop=True)
    fifth = np.sort(table.t[table.particle == 3])[4]
    i = int(np.flatnonzero((table.particle == 3) & (table.t == fifth))[0])
    table.loc[i, "x"] = table.loc[i, "x"] + 1.0  # a 1 m jump in 25 ps: faster than light
    path = tmp_path / "bad.parquet"
    pq.write_table(pa.Table.from_pandas(table), path, row_group_size=16)
    with pytest.raises(TrackError) as error:
        list(iter_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry, bucket_rows=30))
    assert error.value.particle == 3
    assert f"row {i + 1}" in str(error.value)


# -- one clear error per bad input ---------------------------------------------------------

def read_bad(tmp_path, registry, table, name="bad.csv", **options):
    path = write_csv(table, tmp_path / name)
    options.setdefault("charge", ELECTRON_CHARGE_C)
    with pytest.raises(TrackError) as error:
        read_tracks(path, registry=registry, **options)
    message = str(error.value)
    assert path in message, message
    return error.value, message


def test_missing_required_column(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix().drop(columns=["y"]))
    assert "column 'y'" in message and "missing" in message


def test_missing_mapped_column_names_the_file_column(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix(), columns={"t": "time"})
    assert "'time' (for 't')" in message and error.column == "time"


def test_incomplete_momentum_columns(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix().drop(columns=["uz"]))
    assert "all three or none" in message and "uz" in message


def test_non_numeric_value(tmp_path, helix, registry):
    table = helix().astype({"z": object})
    table.loc[47, "z"] = "0.1x"
    error, message = read_bad(tmp_path, registry, table)
    assert (error.column, error.particle, error.row) == ("z", 1, 48)
    assert "'0.1x' is not a number" in message


@pytest.mark.parametrize(("value", "word"), [(np.nan, "NaN"), (np.inf, "infinite"),
                                             (-np.inf, "infinite")])
def test_nan_or_infinite_value(tmp_path, helix, registry, value, word):
    table = helix()
    table.loc[85, "ux"] = value
    error, message = read_bad(tmp_path, registry, table)
    assert (error.column, error.particle, error.row) == ("ux", 2, 86) and word in message


def test_non_integer_particle_id(tmp_path, helix, registry):
    table = helix().astype({"particle": float})
    table.loc[3, "particle"] = 0.5
    error, message = read_bad(tmp_path, registry, table)
    assert error.row == 4 and "not an integer" in message


def test_two_samples_at_the_same_time(tmp_path, helix, registry):
    table = helix()
    duplicate = table.iloc[[45]]
    table = pd.concat([table, duplicate], ignore_index=True)  # data row 121 repeats row 46
    error, message = read_bad(tmp_path, registry, table)
    assert error.particle == 1 and error.time_s == table.t[45]
    assert "rows 46 and 121" in message and "same time" in message


def test_order_alone_is_no_error(tmp_path, helix, registry):
    table = helix()
    tracks = read_tracks(write_csv(table.iloc[::-1], tmp_path / "rev.csv"),
                         charge=ELECTRON_CHARGE_C, registry=registry)
    assert all(np.all(np.diff(tr.t_s) > 0) for tr in tracks)


def test_too_few_samples_for_the_spline(tmp_path, helix, registry):
    table = helix(n_samples=8)
    table = table[(table.particle != 1) | (table.t <= table.t[2])]  # particle 1: 3 samples
    error, message = read_bad(tmp_path, registry, table, min_samples=6)
    assert error.particle == 1 and "3 samples" in message and "at least 6" in message


def test_step_at_or_beyond_the_speed_of_light(tmp_path, registry):
    t = np.arange(5) * 1e-9
    z = np.array([0.0, 0.29, 0.58, 0.58 + 1.2 * constants.c * 1e-9, 1.5])  # 3rd step: 1.2 c
    table = pd.DataFrame({"particle": 4, "t": t, "x": 0.0, "y": 0.0, "z": z})
    error, message = read_bad(tmp_path, registry, table)
    assert (error.particle, error.row) == (4, 4) and error.time_s == pytest.approx(2e-9)
    assert "1.2 c" in message and "speed of light" in message


def test_unknown_unit(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix(), units={"t": "fortnights-ish"})
    assert error.column == "t" and "fortnights-ish" in message


def test_unit_of_the_wrong_dimension(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix(), units={"x": "ns"})
    assert error.column == "x" and "length" in message


def test_unknown_canonical_name_in_a_mapping(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix(), columns={"time": "t"})
    assert "time" in message and "canonical" in message


def test_no_charge_anywhere(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix(), charge=None)
    assert "[tracks] charge" in message


def test_charge_changing_along_a_track(tmp_path, helix, registry):
    table = helix().assign(charge=ELECTRON_CHARGE_C)
    table.loc[50, "charge"] = -2 * constants.e
    error, message = read_bad(tmp_path, registry, table)
    assert (error.column, error.particle, error.row) == ("charge", 1, 51)


def test_non_positive_weight(tmp_path, helix, registry):
    table = helix().assign(weight=np.where(helix().particle == 2, -5.0, 1.0))
    error, message = read_bad(tmp_path, registry, table)
    assert (error.column, error.particle) == ("weight", 2) and "not positive" in message


def test_header_only_csv(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix().iloc[:0])
    assert "no data rows" in message


@pytest.mark.parametrize("name", ["empty.csv", "empty.parquet"])
def test_zero_byte_file(tmp_path, registry, name):
    path = tmp_path / name
    path.write_bytes(b"")
    with pytest.raises(TrackError, match="empty"):
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)


def test_empty_parquet_table(tmp_path, helix, registry):
    path = tmp_path / "none.parquet"
    pq.write_table(pa.Table.from_pandas(helix().iloc[:0]), path)
    with pytest.raises(TrackError, match="no data rows"):
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)


def test_text_in_a_parquet_file(tmp_path, helix, registry):
    path = tmp_path / "text.parquet"
    helix().to_csv(path, index=False)
    with pytest.raises(TrackError, match="not a parquet file"):
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)


def test_binary_in_a_csv_file(tmp_path, helix, registry):
    path = tmp_path / "binary.csv"
    pq.write_table(pa.Table.from_pandas(helix()), path)
    with pytest.raises(TrackError, match="not a csv file"):
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)


def test_missing_file(tmp_path, registry):
    with pytest.raises(TrackError, match="not found"):
        read_tracks(tmp_path / "nowhere.csv", charge=ELECTRON_CHARGE_C, registry=registry)


# -- particle ids: integers that fit int64, or one error naming the row --------------------

def write_ids(tmp_path, ids, name="ids.csv") -> str:
    """Two samples per id, straight slow motion; `ids` spelled as given (strings)."""
    lines = ["particle,t,x,y,z"]
    for k, pid in enumerate(ids):
        lines += [f"{pid},0.0,{k},0,0", f"{pid},1e-9,{k},0,0.1"]
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n")
    return str(path)


@pytest.mark.parametrize(("spelled", "reason"), [
    ("1e+19", r"particle id 1e\+19 does not fit a 64-bit signed integer"),
    ("10000000000000000000", r"particle id 10000000000000000000 does not fit"),
    ("-100000000000000000000", r"does not fit a 64-bit signed integer"),
    ("1.5", r"particle id 1.5 is not an integer"),
    ("9007199254740993.0", r"2\*\*53 or beyond, where floating-point numbers skip"),
    ("", r"value is empty or NaN"),
    ("nan", r"value is empty or NaN"),
])
def test_particle_id_that_is_no_int64_is_an_error(tmp_path, registry, spelled, reason):
    path = write_ids(tmp_path, ["0", "1", spelled])
    with pytest.raises(TrackError, match=reason) as error:
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    assert (error.value.column, error.value.row) == ("particle", 5)
    assert path in str(error.value)


def test_ids_written_as_whole_floats_are_accepted(tmp_path, registry):
    tracks = read_tracks(write_ids(tmp_path, ["3.0", "-7.0", "1e3"]), charge=ELECTRON_CHARGE_C,
                         registry=registry)
    assert [tr.particle for tr in tracks] == [-7, 3, 1000]


def test_large_integer_ids_stay_distinct(tmp_path, registry):
    big = [2**63 - 1, 2**63 - 2, 2**53 + 1, 2**53]  # neighbours a float64 would merge
    tracks = read_tracks(write_ids(tmp_path, [str(i) for i in big]), charge=ELECTRON_CHARGE_C,
                         registry=registry)
    assert [tr.particle for tr in tracks] == sorted(big)


def test_unsigned_parquet_ids_beyond_int64(tmp_path, helix, registry):
    table = helix(n_particles=2)
    ids = np.where(table.particle == 1, 2**63, 5).astype(np.uint64)
    path = tmp_path / "u64.parquet"
    pq.write_table(pa.Table.from_pandas(table.assign(particle=ids)), path)
    with pytest.raises(TrackError, match="does not fit") as error:
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    assert error.value.row == 41  # helix rows: 40 of particle 0, then particle 1


# -- duplicated columns, in the file or through the mapping --------------------------------

def test_duplicated_csv_column(tmp_path, helix, registry):
    path = tmp_path / "dup.csv"
    helix(n_particles=1).rename(columns={"y": "x"}).to_csv(path, index=False)
    assert path.read_text().startswith("particle,t,x,x,z,")
    with pytest.raises(TrackError, match="the file has 2 columns named 'x'") as error:
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    assert error.value.column == "x"


def test_duplicated_parquet_column(tmp_path, helix, registry):
    table = pa.Table.from_pandas(helix(n_particles=1), preserve_index=False)
    names = ["particle", "t", "x", "y", "z", "ux", "ux", "uz"]  # uy stored as a second ux
    path = tmp_path / "dup.parquet"
    pq.write_table(table.rename_columns(names), path)
    with pytest.raises(TrackError, match="2 columns named 'ux'") as error:
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    assert error.value.column == "ux"


def test_unused_duplicated_column_is_no_error(tmp_path, helix, registry):
    table = helix(n_particles=1)
    frame = pd.concat([table, pd.DataFrame({"note": 1, "note2": 2}, index=table.index)],
                      axis=1).rename(columns={"note2": "note"})
    path = tmp_path / "notes.csv"
    frame.to_csv(path, index=False)
    assert len(read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)) == 1


def test_two_names_mapped_to_one_column(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix(), columns={"x": "pos", "y": "pos"})
    assert "maps both 'x' and 'y' to the file column 'pos'" in message


def test_mapping_onto_another_canonical_name(tmp_path, helix, registry):
    error, message = read_bad(tmp_path, registry, helix(), columns={"t": "x"})
    assert error.column == "x" and "required column 'x' is missing" in message
    assert "the file column 'x' is read as 't'" in message


def test_mapped_name_wins_over_the_file_column_of_that_name(tmp_path, helix, registry):
    table = helix(n_particles=1)
    path = write_csv(table.assign(x_corrected=table.x + 0.5), tmp_path / "both.csv")
    (track,) = read_tracks(path, columns={"x": "x_corrected"}, charge=ELECTRON_CHARGE_C,
                           registry=registry)
    np.testing.assert_array_equal(track.position_m[:, 0], table.x + 0.5)


# -- what is given as a track file ----------------------------------------------------------

def test_directory_given_as_track_file(tmp_path, registry):
    folder = tmp_path / "tracks.csv"
    folder.mkdir()
    with pytest.raises(TrackError, match="is a directory"):
        read_tracks(folder, charge=ELECTRON_CHARGE_C, registry=registry)


def test_named_pipe_given_as_track_file_is_refused_without_opening_it(tmp_path, registry):
    fifo = tmp_path / "tracks.csv"
    os.mkfifo(fifo)  # opening it for reading would wait for a writer forever
    with pytest.raises(TrackError, match=r"named pipe \(FIFO\)"):
        open_tracks(fifo, charge=ELECTRON_CHARGE_C, registry=registry)


def test_file_no_importer_recognises(tmp_path, registry):
    path = tmp_path / "beam.dat"
    path.write_bytes(bytes(range(256)) * 4)
    with pytest.raises(TrackError, match=r"no importer recognises the file .*'\.dat'"):
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)


def test_unclaimed_ending_is_read_by_content(tmp_path, helix, registry):
    table = helix(n_particles=2)
    text = write_csv(table, tmp_path / "beam.dat")
    binary = tmp_path / "beam.bin"
    pq.write_table(pa.Table.from_pandas(table), binary)
    for path, name in ((text, "csv"), (binary, "parquet")):
        tracks = read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
        assert tracks.importer == f"{name} (registered in-process)" and len(tracks) == 2


# -- charge given with a unit; tracks that own their arrays ----------------------------------

def test_charge_given_with_a_unit(tmp_path, helix, registry):
    path = write_csv(helix(n_particles=2), tmp_path / "q.csv")
    for tracks in (read_tracks(path, charge="-1 e", registry=registry),
                   open_tracks(path, charge="-2 e", registry=registry)):
        want = -constants.e * (1 if not tracks.streamed else 2)  # CODATA 2018, exact
        assert [tr.charge_c for tr in tracks] == pytest.approx([want, want], rel=1e-15)
    with pytest.raises(lagfield.UnitError, match="charge"):
        read_tracks(path, charge="1 mm", registry=registry)


def test_tracks_own_their_arrays(tmp_path, helix, registry):
    """A track keeps no view of the batch it was cut from: keeping one track (or one
    position of it) must not keep every row of the batch in memory."""
    table = helix(n_particles=4, n_samples=30)
    path = tmp_path / "own.parquet"
    pq.write_table(pa.Table.from_pandas(table), path, row_group_size=50)
    for tracks in (read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry),
                   list(iter_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry))):
        for track in tracks:
            assert track.t_s.base is None and track.position_m.base is None
            assert track.u.base is None and track.position_m.shape == (30, 3)


# -- values at the ends of the floating-point range ------------------------------------------

def test_integer_beyond_the_float_range(tmp_path, helix, registry):
    table = helix(n_particles=2).astype({"y": object})
    table.loc[52, "y"] = -(10**400)
    error, message = read_bad(tmp_path, registry, table)
    assert (error.column, error.particle, error.row) == ("y", 1, 53)
    assert "beyond the floating-point range" in message


@pytest.mark.parametrize(("column", "value", "reason"), [
    ("x", 1.7976931348623157e308, "speed of light"),  # the step overflows to inf
    ("ux", 1e300, "beyond the largest normalized momentum"),  # tracks.MAX_MOMENTUM
])
def test_huge_values_fail_one_check_without_warnings(tmp_path, helix, registry, column, value,
                                                     reason):
    table = helix(n_particles=1, gamma=1.2)  # β = 0.55: |u| → inf means a speed of c
    table.loc[[3, 4], column] = [-value, value]
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an overflow warning would be a second message
        error, message = read_bad(tmp_path, registry, table)
    assert reason in message and error.row == 4


@pytest.mark.parametrize("values", [
    [True, False] * 20,
    pd.date_range("2020-01-01", periods=40, freq="s").to_list(),
    pd.to_timedelta(np.arange(40), unit="ns").to_list(),
])
def test_column_of_booleans_or_dates_is_no_number(tmp_path, helix, registry, values):
    table = helix(n_particles=1).assign(y=values)
    path = tmp_path / "types.parquet"
    pq.write_table(pa.Table.from_pandas(table), path)
    with pytest.raises(TrackError, match="values, not numbers") as error:
        read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    assert (error.value.column, error.value.row) == ("y", 1)


def test_true_and_false_in_a_csv_column(tmp_path, helix, registry):
    table = helix(n_particles=1).assign(weight=[True, False] * 20)
    error, message = read_bad(tmp_path, registry, table)
    assert error.column == "weight" and "bool values, not numbers" in message
