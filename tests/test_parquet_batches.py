"""Parquet track files are read in batches of bounded size, also when a row group is far
larger: the same tracks as one whole read, and error rows still counted from the file's
first data row."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from lagfield.errors import TrackError
from lagfield.registry import get_registry
from lagfield.tracks import open_tracks, read_tracks

N_PARTICLES, N_SAMPLES = 40, 50  # 2000 rows in one row group, read 300 rows at a time


def _table(bad_row=None) -> pa.Table:
    t = np.tile(np.arange(N_SAMPLES) * 1e-11, N_PARTICLES)
    particle = np.repeat(np.arange(N_PARTICLES), N_SAMPLES)
    z = 0.5 * 3e8 * t + 1e-3 * particle
    if bad_row is not None:
        z[bad_row - 1] = np.nan
    zeros = np.zeros_like(t)
    return pa.table({"particle": particle, "t": t, "x": zeros, "y": zeros, "z": z})


@pytest.fixture
def small_batches(monkeypatch):
    plugin = get_registry().importer("parquet")
    monkeypatch.setattr(type(plugin).__module__ + ".BATCH_ROWS", 300)
    return plugin


def test_a_large_row_group_is_read_in_small_batches(tmp_path, small_batches):
    path = tmp_path / "tracks.parquet"
    pq.write_table(_table(), path, row_group_size=10**6)
    assert pq.ParquetFile(path).num_row_groups == 1
    frames = list(small_batches.iter_batches(path, {}))
    assert max(len(frame) for frame in frames) == 300
    assert [frame.attrs["first_row"] for frame in frames] == list(range(1, 2001, 300))
    whole = pq.read_table(path).to_pandas()  # one read of the whole file
    for tracks in (read_tracks(path, charge=-1.6e-19), open_tracks(path, charge=-1.6e-19)):
        assert [track.particle for track in tracks] == list(range(N_PARTICLES))
        assert tracks.n_rows == len(whole)
        np.testing.assert_array_equal(np.concatenate([tr.t_s for tr in tracks]), whole["t"])
        np.testing.assert_array_equal(np.concatenate([tr.position_m[:, 2] for tr in tracks]),
                                      whole["z"])


def test_error_row_is_counted_across_batches(tmp_path, small_batches):
    path = tmp_path / "tracks.parquet"
    pq.write_table(_table(bad_row=1234), path, row_group_size=10**6)
    with pytest.raises(TrackError) as error:
        read_tracks(path, charge=-1.6e-19)
    assert error.value.row == 1234
    assert error.value.particle == (1234 - 1) // N_SAMPLES
