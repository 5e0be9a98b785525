"""The canonical in-memory track model, and reading it from any importer's table.

Tracks are read through an importer plugin (raw columns), then mapped, converted to SI,
sorted and validated here, once, for every importer.

Reading streams whenever the importer offers ``iter_batches`` (Parquet row groups, CSV
chunks): a first pass looks at the particle ids only, to learn whether each particle's rows
are contiguous. If they are, particles are handed on as soon as their last row has been
read. If not, the validated rows are re-partitioned once into a temporary Parquet dataset
bucketed by particle id and read back bucket by bucket. Either way only about one batch
(or one bucket) of rows is in memory at a time.
"""

from __future__ import annotations

import dataclasses
import math
import pathlib
import tempfile
from collections.abc import Iterator, Mapping, Sequence

import numpy as np
from scipy import constants

from .errors import LagfieldError, TrackError, UnitError
from .units import unit_factor

REQUIRED_COLUMNS = ("particle", "t", "x", "y", "z")
MOMENTUM_COLUMNS = ("ux", "uy", "uz")
OPTIONAL_COLUMNS = ("charge", "weight")
CANONICAL_COLUMNS = REQUIRED_COLUMNS + MOMENTUM_COLUMNS + OPTIONAL_COLUMNS
DIMENSIONS = {"particle": None, "t": "time", "x": "length", "y": "length", "z": "length",
              "ux": "dimensionless", "uy": "dimensionless", "uz": "dimensionless",
              "charge": "charge", "weight": "dimensionless"}
BUCKET_ROWS = 1_000_000  # rows held in memory at once when a file must be re-partitioned
_ROW = "row"  # internal column: data row in the file, from 1, header excluded
_NAN_SPELLINGS = {"nan", "-nan", "+nan", "inf", "-inf", "+inf", "infinity", "-infinity"}


@dataclasses.dataclass(frozen=True, eq=False)
class Track:
    """One particle's sampled trajectory, in SI units.

    t_s: (n,) source times, strictly increasing.  position_m: (n, 3).
    u: (n, 3) normalized momentum γβ, or None when the file has none.
    charge_c: charge of one physical particle.  weight: physical particles it stands for.
    """

    particle: int
    t_s: np.ndarray
    position_m: np.ndarray
    u: np.ndarray | None
    charge_c: float
    weight: float = 1.0

    @property
    def n_samples(self) -> int:
        return int(self.t_s.shape[0])


class Tracks(Sequence):
    """The tracks of one file.

    Built by `read_tracks` it holds every `Track`, sorted by particle id. Built by
    `open_tracks` it holds none: iteration and `iter_chunks` stream them from the file
    again (ascending id within each batch of the file; indexing reads them all once).
    """

    def __init__(self, tracks, *, path=None, n_rows=None, has_momentum=None):
        self.path = pathlib.Path(path) if path is not None else None
        self._stream = None
        self._tracks = sorted(tracks, key=lambda tr: tr.particle)
        self.n_particles = len(self._tracks)
        self.n_rows = (int(n_rows) if n_rows is not None
                       else sum(tr.n_samples for tr in self._tracks))
        self.has_momentum = (bool(has_momentum) if has_momentum is not None
                             else any(tr.u is not None for tr in self._tracks))

    @classmethod
    def streaming(cls, stream, *, path, n_particles, n_rows, has_momentum) -> Tracks:
        """Tracks that call `stream()` for a fresh iterator of Track on every pass."""
        tracks = cls((), path=path, n_rows=n_rows, has_momentum=has_momentum)
        tracks._tracks, tracks._stream, tracks.n_particles = None, stream, int(n_particles)
        return tracks

    @property
    def streamed(self) -> bool:
        """True when the tracks are read from the file on every pass."""
        return self._tracks is None

    def __len__(self) -> int:
        return self.n_particles

    def __iter__(self) -> Iterator[Track]:
        return iter(self._tracks) if self._tracks is not None else self._stream()

    def __getitem__(self, index):
        if self._tracks is None:
            self._tracks = sorted(self._stream(), key=lambda tr: tr.particle)
        return self._tracks[index]

    def iter_chunks(self, n_particles: int) -> Iterator[list[Track]]:
        """Lists of at most `n_particles` tracks, for the engine to process in turn."""
        if n_particles < 1:
            raise ValueError(f"n_particles must be at least 1, got {n_particles}")
        chunk = []
        for track in self:
            chunk.append(track)
            if len(chunk) == n_particles:
                yield chunk
                chunk = []
        if chunk:
            yield chunk

    def __repr__(self) -> str:
        mode = "streamed" if self.streamed else "in memory"
        return (f"Tracks({self.path}, {self.n_particles} particles, {self.n_rows} rows, "
                f"{mode})")


def read_tracks(path, *, format=None, columns=None, units=None, charge=None, min_samples=2,
                u_tolerance=0.05, registry=None, options=None, particle_range=None) -> Tracks:
    """Read and validate every track of the file at `path` (all held in memory).

    format: importer name (default: the one claiming the file's suffix).
    columns: canonical name -> column name in the file.  units: canonical name -> unit
    string of that column.  charge: C per physical particle when the file has no charge
    column.  min_samples: fewest samples a particle may have (spline degree + 1).
    u_tolerance: largest relative difference allowed between the speed |u| implies and the
    chord speed of the positions.  options: further [tracks] keys, passed to the importer.
    particle_range: (low, high) reads only the particles with low <= id <= high.
    Raises TrackError naming file, column, particle and row or time for any bad input.
    """
    reader = _Reader(path, format=format, columns=columns, units=units, charge=charge,
                     min_samples=min_samples, u_tolerance=u_tolerance, registry=registry,
                     options=options, particle_range=particle_range)
    tracks = list(reader.iter_tracks())
    return Tracks(tracks, path=reader.path, n_rows=reader.n_rows,
                  has_momentum=reader.has_momentum)


def open_tracks(path, *, visit=None, **read_options) -> Tracks:
    """Validate the file at `path` in one streaming pass and return `Tracks` that stream
    from it again on every iteration (bounded memory). `visit(track)`, when given, sees
    every track of that pass (so a caller needs no pass of its own for, e.g., the tracks'
    ends). Options as for `read_tracks`."""
    reader = _Reader(path, **read_options)
    n_particles = 0
    for track in reader.iter_tracks():
        n_particles += 1
        if visit is not None:
            visit(track)
    return Tracks.streaming(lambda: _Reader(path, **read_options).iter_tracks(),
                            path=reader.path, n_particles=n_particles, n_rows=reader.n_rows,
                            has_momentum=reader.has_momentum)


def iter_tracks(path, *, bucket_rows=BUCKET_ROWS, **read_options) -> Iterator[Track]:
    """Validated tracks of the file at `path`, one by one, with bounded memory.

    Options as for `read_tracks`; `bucket_rows` is how many rows of a file not grouped by
    particle are re-partitioned into each temporary bucket (and held in memory at once).
    """
    return _Reader(path, bucket_rows=bucket_rows, **read_options).iter_tracks()


class _Reader:
    """One pass over one file: importer, column names, unit factors and checks."""

    def __init__(self, path, *, format=None, columns=None, units=None, charge=None,
                 min_samples=2, u_tolerance=0.05, registry=None, options=None,
                 bucket_rows=BUCKET_ROWS, particle_range=None):
        self.path = pathlib.Path(path)
        self.particle_range = None if particle_range is None else tuple(particle_range)
        if int(min_samples) < 1:
            raise ValueError(f"min_samples must be at least 1, got {min_samples}")
        if not u_tolerance > 0:
            raise ValueError(f"u_tolerance must be positive, got {u_tolerance}")
        self.min_samples, self.u_tolerance = int(min_samples), float(u_tolerance)
        self.default_charge_c = None if charge is None else float(charge)
        self.bucket_rows = int(bucket_rows)
        self.names = self._mapping(columns or {}, "columns")
        self.factors = {canon: self._factor(canon, unit)
                        for canon, unit in self._mapping(units or {}, "units").items()}
        self.options = dict(options or {}, format=format, columns=dict(columns or {}),
                            units=dict(units or {}), charge=charge,
                            particle_range=self.particle_range)
        self.importer = self._importer(format, registry)
        self.n_rows = 0
        self.has_momentum = False
        self._present = None  # canonical columns found in the file

    # -- set-up ---------------------------------------------------------------------
    def _mapping(self, mapping: Mapping, key: str) -> dict:
        unknown = [name for name in mapping if name not in CANONICAL_COLUMNS]
        if unknown:
            raise TrackError(f"[tracks] {key} names unknown column(s) {', '.join(unknown)}; "
                             f"the canonical names are {', '.join(CANONICAL_COLUMNS)}",
                             path=self.path)
        return {str(k): str(v) for k, v in mapping.items()}

    def _factor(self, canon: str, unit: str) -> float:
        dimension = DIMENSIONS[canon]
        if dimension is None:
            raise TrackError(f"[tracks] units gives a unit to '{canon}', which has none",
                             path=self.path, column=canon)
        try:
            return unit_factor(unit, dimension, where=f"column '{canon}'")
        except UnitError as exc:
            raise TrackError(f"[tracks] units: {exc}", path=self.path,
                             column=self.names.get(canon, canon)) from None

    def _importer(self, format, registry):
        if registry is None:
            from .registry import get_registry
            registry = get_registry()
        if not self.path.is_file():
            raise TrackError("track file not found", path=self.path)
        if self.path.stat().st_size == 0:
            raise TrackError("the track file is empty (0 bytes)", path=self.path)
        importer = (registry.importer(format) if format
                    else registry.importer_for(self.path))
        if not importer.can_read(self.path):
            claim = (f"[tracks] format = '{format}'" if format
                     else f"the name ending '{self.path.suffix}'")
            raise TrackError(f"the file is not a {importer.name} file, as {claim} says "
                             f"({importer.description}); check the file or set "
                             "[tracks] format", path=self.path)
        return importer

    # -- reading ----------------------------------------------------------------------
    def _raw_batches(self):
        """The importer's raw tables, with importer failures turned into TrackError."""
        batches = getattr(self.importer, "iter_batches", None)
        try:
            if batches is None:
                yield self.importer.read(self.path, self.options)
            else:
                yield from batches(self.path, self.options)
        except LagfieldError:
            raise
        except Exception as exc:
            raise TrackError(f"cannot read the file as {self.importer.name}: "
                             f"{type(exc).__name__}: {exc}", path=self.path) from None

    def _batches(self, particle_only=False):
        """Canonical SI columns (dict of arrays, `row` included) of each batch."""
        first_row = 1
        for frame in self._raw_batches():
            first_row = frame.attrs.get("first_row", first_row)
            n = len(frame)
            if self._present is None:
                self._present = self._check_columns(frame)
            if n:
                cols = self._canonical(frame, first_row, particle_only)
                if self.particle_range is not None:
                    low, high = self.particle_range
                    cols = _take(cols, (cols["particle"] >= low) & (cols["particle"] <= high))
                yield cols
            first_row += n
        self.n_rows = first_row - 1
        if self.n_rows == 0 and self.particle_range is None:
            raise TrackError("the track file has no data rows", path=self.path)

    def _check_columns(self, frame) -> tuple:
        found = [str(c) for c in frame.columns]
        def label(canon):
            name = self.names.get(canon, canon)
            return f"'{name}'" + (f" (for '{canon}')" if name != canon else "")
        for canon in REQUIRED_COLUMNS:
            if self.names.get(canon, canon) not in found:
                raise TrackError(f"required column {label(canon)} is missing; the file has "
                                 f"{', '.join(found) or 'no columns'} (map names with "
                                 "[tracks] columns)", path=self.path,
                                 column=self.names.get(canon, canon))
        momentum = [c for c in MOMENTUM_COLUMNS if self.names.get(c, c) in found]
        if momentum and len(momentum) < 3:
            absent = [label(c) for c in MOMENTUM_COLUMNS if c not in momentum]
            raise TrackError(f"ux, uy, uz must be given all three or none; "
                             f"{', '.join(absent)} missing", path=self.path)
        present = [c for c in CANONICAL_COLUMNS if self.names.get(c, c) in found]
        if "charge" not in present and self.default_charge_c is None:
            raise TrackError("the file has no charge column; set [tracks] charge (C per "
                             "physical particle, e.g. -1.602176634e-19 for electrons)",
                             path=self.path)
        self.has_momentum = bool(momentum)
        return tuple(present)

    def _canonical(self, frame, first_row, particle_only) -> dict:
        import pandas as pd

        rows = np.arange(first_row, first_row + len(frame), dtype=np.int64)
        out = {_ROW: rows}
        for canon in ("particle",) if particle_only else self._present:
            name = self.names.get(canon, canon)
            raw = frame[name]
            values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=np.float64,
                                                                   na_value=np.nan)
            nonnumeric = np.isnan(values) & raw.notna().to_numpy()
            if nonnumeric.any():
                spelled = raw[nonnumeric].astype(str).str.strip().str.lower()
                nonnumeric[nonnumeric] = ~spelled.isin(_NAN_SPELLINGS).to_numpy()
            if nonnumeric.any():
                i = int(np.argmax(nonnumeric))
                raise TrackError(f"value {raw.iloc[i]!r} is not a number", path=self.path,
                                 column=name, particle=self._particle_at(frame, i),
                                 row=int(rows[i]))
            bad = ~np.isfinite(values)
            if bad.any():
                i = int(np.argmax(bad))
                what = "empty or NaN" if np.isnan(values[i]) else "infinite"
                raise TrackError(f"value is {what}", path=self.path, column=name,
                                 particle=self._particle_at(frame, i), row=int(rows[i]))
            if canon == "particle":
                ids = np.rint(values)
                if (ids != values).any():
                    i = int(np.argmax(ids != values))
                    raise TrackError(f"particle id {values[i]:g} is not an integer",
                                     path=self.path, column=name, row=int(rows[i]))
                if raw.dtype.kind in "iu":
                    out[canon] = raw.to_numpy(dtype=np.int64)
                else:
                    out[canon] = ids.astype(np.int64)
            else:
                out[canon] = values * self.factors.get(canon, 1.0)
        return out

    def _particle_at(self, frame, i):
        import pandas as pd

        name = self.names.get("particle", "particle")
        value = pd.to_numeric(frame[name].iloc[i:i + 1], errors="coerce").iloc[0]
        return int(value) if np.isfinite(value) and value == int(value) else None

    # -- streaming ----------------------------------------------------------------------
    def iter_tracks(self) -> Iterator[Track]:
        if self.particle_range is not None:  # one chunk of particles: group in memory
            cols = [c for c in self._batches() if len(c["particle"])]
            if cols:
                yield from self._group(_concat(cols))
            return
        if getattr(self.importer, "iter_batches", None) is None:
            yield from self._group(_concat(list(self._batches())))
            return
        grouped, counts = self._scan()
        if grouped:
            yield from self._stream_grouped()
        elif self.n_rows <= self.bucket_rows:
            yield from self._group(_concat(list(self._batches())))
        else:
            yield from self._stream_buckets(counts)

    def _scan(self):
        """First pass, particle ids only: are each particle's rows contiguous, and how
        many rows has each particle?"""
        counts: dict[int, int] = {}
        grouped, last = True, None
        for cols in self._batches(particle_only=True):
            ids = cols["particle"]
            starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]])
            run_ids, run_counts = ids[starts], np.diff(np.r_[starts, len(ids)])
            for pid, count in zip(run_ids.tolist(), run_counts.tolist(), strict=True):
                if pid != last and pid in counts:
                    grouped = False
                counts[pid] = counts.get(pid, 0) + count
                last = pid
        return grouped, counts

    def _stream_grouped(self):
        pending = None
        for cols in self._batches():
            if pending is not None:
                cols = _concat([pending, cols])
            ids = cols["particle"]
            done = ids != ids[-1]
            pending = _take(cols, ~done)
            if done.any():
                yield from self._group(_take(cols, done))
        if pending is not None:
            yield from self._group(pending)

    def _stream_buckets(self, counts):
        import pyarrow as pa
        import pyarrow.parquet as pq

        ids = np.array(sorted(counts), dtype=np.int64)
        before = np.cumsum([0] + [counts[i] for i in ids.tolist()])[:-1]
        lower = ids[np.r_[True, np.diff(before // self.bucket_rows) > 0]]
        with tempfile.TemporaryDirectory(prefix="lagfield-tracks-") as tmp:
            files = [pathlib.Path(tmp) / f"bucket-{k:05d}.parquet" for k in range(len(lower))]
            writers = {}
            try:
                for cols in self._batches():
                    bucket = np.searchsorted(lower, cols["particle"], side="right") - 1
                    for k in np.unique(bucket).tolist():
                        table = pa.table(_take(cols, bucket == k))
                        if k not in writers:
                            writers[k] = pq.ParquetWriter(files[k], table.schema)
                        writers[k].write_table(table)
            finally:
                for writer in writers.values():
                    writer.close()
            for file in files:
                table = pq.read_table(file)
                yield from self._group({name: table.column(name).to_numpy()
                                        for name in table.column_names})

    # -- checks and Track objects ---------------------------------------------------------
    def _group(self, cols) -> list[Track]:
        """Tracks from rows holding every sample of the particles they name."""
        order = np.lexsort((cols["t"], cols["particle"]))
        cols = _take(cols, order)
        ids, t, rows = cols["particle"], cols["t"], cols[_ROW]
        starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]])
        ends = np.r_[starts[1:], len(ids)]
        position = np.column_stack([cols["x"], cols["y"], cols["z"]])
        u = (np.column_stack([cols[c] for c in MOMENTUM_COLUMNS])
             if "ux" in cols else None)
        few = (ends - starts) < self.min_samples
        if few.any():
            k = int(np.argmax(few))
            n = int(ends[k] - starts[k])
            raise TrackError(f"only {n} sample{'s' * (n != 1)}, but the motion spline needs at "
                             f"least {self.min_samples} (min_samples, spline degree + 1)",
                             path=self.path, particle=int(ids[starts[k]]),
                             row=int(rows[starts[k]]))
        self._check_steps(ids, t, rows, position, u)
        charge = self._per_particle(cols, "charge", starts, self.default_charge_c)
        weight = self._per_particle(cols, "weight", starts, 1.0)
        return [Track(int(ids[s]), t[s:e], position[s:e], None if u is None else u[s:e],
                      float(charge[k]), float(weight[k]))
                for k, (s, e) in enumerate(zip(starts.tolist(), ends.tolist(), strict=True))]

    def _check_steps(self, ids, t, rows, position, u):
        same = ids[1:] == ids[:-1]
        dt = np.diff(t)
        duplicate = same & (dt == 0)
        if duplicate.any():
            i = int(np.argmax(duplicate))
            raise TrackError(f"two samples at the same time (rows {rows[i]} and "
                             f"{rows[i + 1]})", path=self.path, column=self._name("t"),
                             particle=int(ids[i]), row=int(rows[i + 1]), time_s=float(t[i]))
        with np.errstate(divide="ignore", invalid="ignore"):
            chord = np.linalg.norm(np.diff(position, axis=0), axis=1) / np.where(same, dt, 1)
        c = constants.c
        too_fast = same & (chord >= c)
        if too_fast.any():
            i = int(np.argmax(too_fast))
            raise TrackError(f"the step from row {rows[i]} to row {rows[i + 1]} moves at "
                             f"{chord[i] / c:.6g} c (distance / time between the samples); "
                             "nothing moves at the speed of light or faster: check the "
                             "position and time units", path=self.path,
                             particle=int(ids[i]), row=int(rows[i + 1]), time_s=float(t[i]))
        if u is None:
            return
        u2 = np.einsum("ij,ij->i", u, u)
        beta = np.sqrt(u2 / (1.0 + u2))
        mean = 0.5 * (beta[1:] + beta[:-1]) * c
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = np.where(mean > 0, np.abs(chord - mean) / mean,
                           np.where(chord > 0, np.inf, 0.0))
        wrong = same & (rel > self.u_tolerance)
        if wrong.any():
            i = int(np.argmax(wrong))
            raise TrackError(f"|u| gives a mean speed of {mean[i] / c:.6g} c between rows "
                             f"{rows[i]} and {rows[i + 1]}, but the positions move at "
                             f"{chord[i] / c:.6g} c: they differ by {_percent(rel[i])}, more "
                             f"than the tolerance of {_percent(self.u_tolerance)} "
                             "(u_tolerance); check the units of ux, uy, uz (γβ, "
                             "dimensionless) and of the positions", path=self.path,
                             column=self._name("ux"), particle=int(ids[i]),
                             row=int(rows[i + 1]), time_s=float(t[i]))

    def _per_particle(self, cols, canon, starts, default):
        if canon not in cols:
            return np.full(len(starts), default, dtype=np.float64)
        values, ids, rows = cols[canon], cols["particle"], cols[_ROW]
        changed = (values[1:] != values[:-1]) & (ids[1:] == ids[:-1])
        if changed.any():
            i = int(np.argmax(changed))
            raise TrackError(f"{canon} changes along the track ({values[i]:.9g} at row "
                             f"{rows[i]}, {values[i + 1]:.9g} here); it must be constant "
                             "per particle", path=self.path, column=self._name(canon),
                             particle=int(ids[i]), row=int(rows[i + 1]))
        if canon == "weight" and (values <= 0).any():
            i = int(np.argmax(values <= 0))
            raise TrackError(f"weight {values[i]:.9g} is not positive", path=self.path,
                             column=self._name(canon), particle=int(ids[i]),
                             row=int(rows[i]))
        return values[starts]

    def _name(self, canon):
        return self.names.get(canon, canon)


def _take(cols: dict, index) -> dict:
    return {name: values[index] for name, values in cols.items()}


def _concat(parts: list[dict]) -> dict:
    if len(parts) == 1:
        return parts[0]
    return {name: np.concatenate([p[name] for p in parts]) for name in parts[0]}


def _percent(fraction: float) -> str:
    return "infinitely much" if math.isinf(fraction) else f"{100 * fraction:.3g}%"
