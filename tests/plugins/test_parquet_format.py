"""The built-in Parquet importer and exporter, round-tripped through tmp_path."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import constants

import lagfield
from lagfield.plugins import parquet_format
from lagfield.signals import Signals
from lagfield.tracks import iter_tracks, read_tracks

ELECTRON_CHARGE_C = -constants.e  # CODATA 2018, exact: -1.602176634e-19 C

IMPORTER = parquet_format.ParquetImporter()


def write(table: pd.DataFrame, path, row_group_size=None):
    pq.write_table(pa.Table.from_pandas(table, preserve_index=False), path,
                   row_group_size=row_group_size)
    return path


def test_can_read_checks_magic_bytes_at_both_ends(tmp_path, helix):
    good = write(helix(), tmp_path / "a.parquet")
    text = tmp_path / "b.parquet"
    text.write_text("particle,t,x,y,z\n")
    truncated = tmp_path / "c.parquet"
    truncated.write_bytes(good.read_bytes()[:100])
    assert IMPORTER.can_read(good)
    assert not IMPORTER.can_read(text) and not IMPORTER.can_read(truncated)


def test_iter_batches_walks_row_groups(tmp_path, helix):
    table = helix(n_particles=3).assign(notes="unused")
    path = write(table, tmp_path / "groups.parquet", row_group_size=25)
    assert pq.ParquetFile(path).num_row_groups == 5
    batches = list(IMPORTER.iter_batches(path, {}))
    assert [len(b) for b in batches] == [25, 25, 25, 25, 20]
    joined = pd.concat(batches, ignore_index=True)
    assert "notes" not in joined.columns  # columns lagfield cannot use are not read
    np.testing.assert_array_equal(joined.to_numpy(), table.drop(columns="notes").to_numpy())


def test_mapped_columns_are_read(tmp_path, helix):
    table = helix(n_particles=1).rename(columns={"t": "time"})
    path = write(table, tmp_path / "m.parquet")
    frame = IMPORTER.read(path, {"columns": {"t": "time"}})
    assert "time" in frame.columns and set(frame.columns) == set(table.columns)


def test_multi_row_group_file_round_trips(tmp_path, helix, registry):
    table = helix(n_particles=4, n_samples=30)
    path = write(table, tmp_path / "multi.parquet", row_group_size=7)  # splits particles
    tracks = read_tracks(path, charge=ELECTRON_CHARGE_C, registry=registry)
    assert tracks.n_particles == 4 and tracks.n_rows == 120
    for track in tracks:
        want = table[table.particle == track.particle]
        np.testing.assert_array_equal(track.t_s, want.t)
        np.testing.assert_array_equal(track.position_m, want[["x", "y", "z"]])
        np.testing.assert_array_equal(track.u, want[["ux", "uy", "uz"]])


def test_ungrouped_file_gives_the_same_tracks_as_a_grouped_one(tmp_path, helix, registry):
    table = helix(n_particles=6, n_samples=30)
    grouped = write(table, tmp_path / "grouped.parquet", row_group_size=40)
    mixed = write(table.sample(frac=1.0, random_state=4), tmp_path / "mixed.parquet",
                  row_group_size=40)
    options = {"charge": ELECTRON_CHARGE_C, "registry": registry}
    reference = read_tracks(grouped, **options)
    # 180 rows, at most about 50 per bucket: the mixed file goes through re-partitioning
    repartitioned = list(iter_tracks(mixed, bucket_rows=50, **options))
    in_memory = read_tracks(mixed, **options)
    for other in (repartitioned, in_memory):
        assert [tr.particle for tr in other] == [tr.particle for tr in reference]
        for a, b in zip(reference, other, strict=True):
            np.testing.assert_array_equal(a.t_s, b.t_s)
            np.testing.assert_array_equal(a.position_m, b.position_m)
            np.testing.assert_array_equal(a.u, b.u)
            assert a.charge_c == b.charge_c and a.weight == b.weight


def test_exporter_writes_every_table(tmp_path):
    observers = pd.DataFrame({"observer": ["sky"] * 3, "point": [0, 1, 2], "x": [0.0, 1, 2],
                              "y": 0.0, "z": 100.0, "theta": [0.0, 0.01, 0.02], "phi": 0.0})
    fields = pd.DataFrame({"observer": "sky", "point": [0, 1, 2], "t": 1e-9, "Ex": 1.5,
                           "Ey": -2.5, "Ez": 0.0, "Bx": 0.0, "By": 5e-9, "Bz": 0.0})
    spectra = pd.DataFrame({"observer": "sky", "point": [0, 1, 2], "f": 1e12,
                            "fluence": [1e-20, 2e-20, 3e-20], "dW_df_dOmega": 1e-16})
    signals = Signals(observers, fields, spectra)
    names = parquet_format.ParquetExporter().write(signals, tmp_path, {})
    assert names == ["observers.parquet", "fields.parquet", "spectra.parquet"]
    for name, table in signals.tables().items():
        back = pd.read_parquet(tmp_path / f"{name}.parquet")
        pd.testing.assert_frame_equal(back, table, check_dtype=False)


def test_repeated_column_name_is_kept_for_lagfield_to_report(tmp_path, helix):
    table = pa.Table.from_pandas(helix(n_particles=1), preserve_index=False)
    path = tmp_path / "dup.parquet"
    pq.write_table(table.rename_columns(["particle", "t", "x", "x", "z", "ux", "uy", "uz"]),
                   path, row_group_size=15)
    for frame in (IMPORTER.read(path, {}), next(IMPORTER.iter_batches(path, {}))):
        assert list(frame.columns) == ["particle", "t", "x", "x", "z", "ux", "uy", "uz"]


def test_corrupt_file_is_a_track_error(tmp_path, helix):
    good = write(helix(), tmp_path / "good.parquet").read_bytes()
    path = tmp_path / "corrupt.parquet"
    path.write_bytes(good[:4] + bytes(len(good) - 8) + good[-4:])  # magic bytes intact
    assert IMPORTER.can_read(path)
    for attempt in (lambda: IMPORTER.read(path, {}),
                    lambda: list(IMPORTER.iter_batches(path, {}))):
        with pytest.raises(lagfield.TrackError, match="not a readable Parquet file"):
            attempt()
