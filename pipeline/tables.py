"""SPEC's fields and spectra tables, built column by column with numpy: every float
column is written once, straight from the engine's arrays into one preallocated block
(rows of the block are columns; pandas keeps it without a copy), with no per-point frames,
no per-row Python and no intermediate copies. The observer column is a pandas
Categorical: Parquet stores it dictionary-encoded, CSV as plain strings."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .kernels import layout

FIELD_COLUMNS = ("Ex", "Ey", "Ez", "Bx", "By", "Bz")
SPECTRUM_COLUMNS = ("Ex_re", "Ex_im", "Ey_re", "Ey_im", "Ez_re", "Ez_im")


def observer_column(names, counts) -> pd.Categorical:
    """Group names[i] repeated counts[i] times, as a Categorical of the names in order."""
    categories = list(dict.fromkeys(names))
    codes = np.repeat(np.array([categories.index(name) for name in names], dtype=np.int32),
                      np.asarray(counts, dtype=np.int64))
    return pd.Categorical.from_codes(codes, categories=categories)


def _assemble(names, counts, block, floats, others) -> pd.DataFrame:
    """The table: observer, then the columns in the order of `others` (name -> array or
    None for a row of `block`) whose float ones are the rows of `block`, named `floats`."""
    table = pd.DataFrame(block.T, columns=list(floats), copy=False)
    table.insert(0, "observer", observer_column(names, counts))
    for position, (key, values) in enumerate(others.items(), start=1):
        if values is not None:
            table.insert(position, key, values)
    return table


def frame(names, counts, parts) -> pd.DataFrame:
    """A table of groups `names` with counts[i] rows each: observer, then the columns of
    `parts` (one dict {column: array} per group, in the same order), filled group after
    group into one preallocated array per column; a float column some groups lack is NaN
    in their rows."""
    keys = list(dict.fromkeys(key for part in parts for key in part))
    dtypes = {key: next(np.asarray(part[key]).dtype for part in parts if key in part)
              for key in keys}
    floats = [key for key in keys if dtypes[key] == np.float64]
    ends = np.cumsum([0, *counts])
    block = np.empty((len(floats), int(ends[-1])))
    others = {key: None if key in floats else np.empty(int(ends[-1]), dtype=dtypes[key])
              for key in keys}
    for part, start, stop in zip(parts, ends[:-1], ends[1:], strict=True):
        for key in keys:
            out = block[floats.index(key)] if key in floats else others[key]
            out[start:stop] = part[key] if key in part else np.nan
    return _assemble(names, counts, block, floats, others)


def _fill_fields(result, block, points) -> None:
    """Write one GroupFields into `block` (rows t, Ex … Bz) and `points`, point by point
    (bins past n_bins dropped), in one compiled pass (kernels/layout.py)."""
    n_bins = np.asarray(result.n_bins, dtype=np.int64)
    first_row = np.concatenate([[0], np.cumsum(n_bins)[:-1]]).astype(np.int64)
    layout.fill_fields(np.asarray(result.start_s, dtype=np.float64), float(result.step_s),
                       n_bins, result.e_v_per_m, result.b_t, first_row, block, points)


def fields_table(results) -> pd.DataFrame:
    """SPEC's fields table of the engine's GroupFields."""
    counts = [int(np.sum(r.n_bins)) for r in results]
    ends = np.cumsum([0, *counts])
    floats = ("t", *FIELD_COLUMNS)
    block = np.empty((len(floats), int(ends[-1])))
    points = np.empty(int(ends[-1]), dtype=np.int64)
    for result, start, stop in zip(results, ends[:-1], ends[1:], strict=True):
        _fill_fields(result, block[:, start:stop], points[start:stop])
    return _assemble([r.group.name for r in results], counts, block, floats,
                     {"point": points})


def spectra_table(accumulators) -> pd.DataFrame:
    """SPEC's spectra table of SpectrumAccumulators (one per group)."""
    parts = [a.columns() for a in accumulators]
    return frame([a.group.name for a in accumulators], [part["point"].size for part in parts],
                 parts)
