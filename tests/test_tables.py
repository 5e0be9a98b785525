"""The fields and spectra tables: the same values as the engine's arrays, point by point;
the observer column dictionary-encoded in Parquet and plain strings in CSV."""

from __future__ import annotations

import dataclasses

import hypothesis
import hypothesis.strategies as st
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from lagfield.registry import get_registry
from lagfield.signals import Signals
from lagfield.tables import FIELD_COLUMNS, fields_table, spectra_table


@dataclasses.dataclass
class Group:
    name: str
    n_points: int
    kind: str = "points"
    points_m: np.ndarray | None = None
    origin_m: np.ndarray | None = None


@dataclasses.dataclass
class Fields:  # the attributes of a GroupFields the table reads
    group: Group
    step_s: float
    start_s: np.ndarray
    n_bins: np.ndarray
    e_v_per_m: np.ndarray
    b_t: np.ndarray


def _results():
    rng = np.random.default_rng(4)
    out = []
    for name, n_bins in (("screen", [5, 3, 0, 4]), ("pickups", [2, 6])):
        n_bins = np.array(n_bins)
        shape = (n_bins.size, 7, 3)
        out.append(Fields(Group(name, n_bins.size), 1e-12, rng.random(n_bins.size) * 1e-9,
                          n_bins, rng.standard_normal(shape), rng.standard_normal(shape)))
    return out


def test_fields_table_holds_each_point_s_bins_in_order():
    results = _results()
    table = fields_table(results)
    assert list(table.columns) == ["observer", "point", "t", *FIELD_COLUMNS]
    assert len(table) == sum(int(r.n_bins.sum()) for r in results)
    for result in results:
        for point, n in enumerate(result.n_bins):
            rows = table[(table["observer"] == result.group.name) & (table["point"] == point)]
            assert len(rows) == n
            times = result.start_s[point] + result.step_s * np.arange(n)
            np.testing.assert_array_equal(rows["t"].to_numpy(), times)
            np.testing.assert_array_equal(rows[["Ex", "Ey", "Ez"]].to_numpy(),
                                          result.e_v_per_m[point, :n])
            np.testing.assert_array_equal(rows[["Bx", "By", "Bz"]].to_numpy(),
                                          result.b_t[point, :n])
    assert table["point"].dtype == np.int64
    assert isinstance(table["observer"].dtype, pd.CategoricalDtype)
    assert list(table["observer"].cat.categories) == ["screen", "pickups"]


def test_parquet_stores_the_observer_as_a_dictionary_and_csv_as_text(tmp_path):
    table = fields_table(_results())
    signals = Signals(observers=pd.DataFrame({"observer": ["screen"], "point": [0]}),
                      fields=table)
    registry = get_registry()
    registry.exporter("parquet").write(signals, tmp_path, {})
    registry.exporter("csv").write(signals, tmp_path, {})
    field = pq.read_schema(tmp_path / "fields.parquet").field("observer")
    assert pa.types.is_dictionary(field.type)
    assert pq.read_table(tmp_path / "fields.parquet")["observer"].to_pylist() == \
        table["observer"].astype(str).tolist()
    text = (tmp_path / "fields.csv").read_text().splitlines()
    assert text[1].split(",")[0] == "screen"
    assert text[-1].split(",")[0] == "pickups"


@dataclasses.dataclass
class Spectra:  # the part of a SpectrumAccumulator the table reads
    group: Group
    values: np.ndarray

    def columns(self):
        n_p, n_f = self.values.shape
        out = {"point": np.repeat(np.arange(n_p, dtype=np.int64), n_f),
               "f": np.tile(np.arange(1.0, n_f + 1.0), n_p), "fluence": self.values.ravel()}
        if self.group.kind == "sphere":
            out["dW_df_dOmega"] = 4.0 * self.values.ravel()
        return out


def test_spectra_table_of_groups_with_other_columns_fills_nan():
    sphere = Spectra(Group("sky", 2, kind="sphere"), np.arange(6.0).reshape(2, 3))
    points = Spectra(Group("screen", 1), np.array([[7.0, 8.0, 9.0]]))
    table = spectra_table([sphere, points])
    assert table["observer"].astype(str).tolist() == ["sky"] * 6 + ["screen"] * 3
    np.testing.assert_array_equal(table["fluence"], [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 7.0, 8.0, 9.0])
    np.testing.assert_array_equal(table["dW_df_dOmega"][:6], 4.0 * np.arange(6.0))
    assert table["dW_df_dOmega"][6:].isna().all()


@hypothesis.settings(max_examples=60, deadline=None)
@hypothesis.given(st.lists(st.lists(st.integers(0, 4), min_size=1, max_size=6),
                           min_size=1, max_size=3))
def test_fields_table_equals_a_point_by_point_build_for_any_bin_counts(counts):
    rng = np.random.default_rng(len(counts))
    results = []
    for k, n_bins in enumerate(counts):  # runs of equal lengths, empty points, any order
        shape = (len(n_bins), 5, 3)
        results.append(Fields(Group(f"g{k}", len(n_bins)), 1e-12, rng.random(len(n_bins)),
                              np.array(n_bins), rng.standard_normal(shape),
                              rng.standard_normal(shape)))
    rows = [(r.group.name, point, r.start_s[point] + r.step_s * b,
             *r.e_v_per_m[point, b], *r.b_t[point, b])
            for r in results for point, n in enumerate(r.n_bins) for b in range(n)]
    table = fields_table(results)
    assert len(table) == len(rows)
    if rows:
        names, points, *values = zip(*rows, strict=True)
        assert table["observer"].astype(str).tolist() == list(names)
        np.testing.assert_array_equal(table["point"].to_numpy(), points)
        np.testing.assert_array_equal(table[["t", *FIELD_COLUMNS]].to_numpy(),
                                      np.array(values).T)
