"""SPEC's fields and spectra tables, built column by column with numpy (one gather per
group and one concatenate per column; no per-point frames, no per-row Python). The
observer column is a pandas Categorical: Parquet stores it dictionary-encoded, CSV as
plain strings."""

from __future__ import annotations

import numpy as np
import pandas as pd

FIELD_COLUMNS = ("Ex", "Ey", "Ez", "Bx", "By", "Bz")
SPECTRUM_COLUMNS = ("Ex_re", "Ex_im", "Ey_re", "Ey_im", "Ez_re", "Ez_im")


def observer_column(names, counts) -> pd.Categorical:
    """Group names[i] repeated counts[i] times, as a Categorical of the names in order."""
    categories = list(dict.fromkeys(names))
    codes = np.repeat([categories.index(name) for name in names],
                      np.asarray(counts, dtype=np.int64)).astype(np.int32)
    return pd.Categorical.from_codes(codes, categories=categories)


def frame(names, counts, parts) -> pd.DataFrame:
    """A table of groups `names` with counts[i] rows each: observer, then the columns of
    `parts` (one dict {column: array} per group, in the same order), filled group after
    group into one preallocated block per dtype (pandas keeps it without a copy); a
    column some groups lack is NaN in their rows."""
    keys = list(dict.fromkeys(key for part in parts for key in part))
    dtypes = {key: next(np.asarray(part[key]).dtype for part in parts if key in part)
              for key in keys}
    floats = [key for key in keys if dtypes[key] == np.float64]
    ends = np.cumsum([0, *counts])
    block = np.empty((len(floats), int(ends[-1])))  # rows of the block are columns
    for row, key in enumerate(floats):
        for part, start, stop in zip(parts, ends[:-1], ends[1:], strict=True):
            block[row, start:stop] = part[key] if key in part else np.nan
    table = pd.DataFrame(block.T, columns=floats, copy=False)
    table.insert(0, "observer", observer_column(names, counts))
    for key in keys:
        if key not in floats:
            table.insert(keys.index(key) + 1, key,
                         np.concatenate([part[key] for part in parts]).astype(dtypes[key]))
    return table


def field_columns(result) -> dict:
    """{point, t, Ex … Bz} of one GroupFields, point by point (bins past n_bins dropped)."""
    n_bins = np.asarray(result.n_bins, dtype=np.int64)
    inside = np.arange(result.e_v_per_m.shape[1])[None, :] < n_bins[:, None]  # (P, bins)
    bin_index = np.broadcast_to(np.arange(inside.shape[1], dtype=float), inside.shape)
    columns = {"point": np.repeat(np.arange(n_bins.size, dtype=np.int64), n_bins),
               "t": (result.start_s[:, None] + result.step_s * bin_index)[inside]}
    for i, name in enumerate(FIELD_COLUMNS):
        values = result.e_v_per_m if i < 3 else result.b_t
        columns[name] = values[:, :, i % 3][inside]
    return columns


def fields_table(results) -> pd.DataFrame:
    """SPEC's fields table of the engine's GroupFields."""
    return frame([r.group.name for r in results], [int(np.sum(r.n_bins)) for r in results],
                 [field_columns(r) for r in results])


def spectra_table(accumulators) -> pd.DataFrame:
    """SPEC's spectra table of SpectrumAccumulators (one per group)."""
    parts = [a.columns() for a in accumulators]
    return frame([a.group.name for a in accumulators], [part["point"].size for part in parts],
                 parts)
