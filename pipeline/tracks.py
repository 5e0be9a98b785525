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

import collections
import dataclasses
import math
import os
import pathlib
import stat
import tempfile
from collections.abc import Iterable, Iterator, Mapping, Sequence

import numpy as np
from scipy import constants

from .errors import PluginError, TrackError, UnitError
from .registry import contained
from .units import to_si, unit_factor
from .wording import plural

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
INT64_MAX = np.iinfo(np.int64).max
EXACT_FLOAT_INT = 2**53  # every integer up to this magnitude is exact in a float64
# Largest |ux|, |uy|, |uz| read: γ = 1e12 is an electron of 5e17 eV or a proton of 9e20 eV,
# beyond any accelerator and any cosmic ray seen; a larger value is a unit mistake (and its
# square would leave the floating-point range on the way to γ).
MAX_MOMENTUM = 1e12


@dataclasses.dataclass(frozen=True, eq=False)
class Track:
    """One particle's sampled trajectory, in SI units.

    t_s: (n,) source times, strictly increasing.  position_m: (n, 3).
    u: (n, 3) normalized momentum γβ, or None when the file has none.
    charge_c: charge of one physical particle.  weight: physical particles it stands for.
    The arrays are the track's own (never views of a larger batch of rows).
    """

    particle: int
    t_s: np.ndarray
    position_m: np.ndarray
    u: np.ndarray | None
    charge_c: float
    weight: float = 1.0
    u_offset_s: float | None = None  # ux, uy, uz were sampled at t + u_offset_s (None: 0)

    @property
    def n_samples(self) -> int:
        return int(self.t_s.shape[0])


class Tracks(Sequence):
    """The tracks of one file.

    Built by `read_tracks` it holds every `Track`, sorted by particle id. Built by
    `open_tracks` it holds none: iteration and `iter_chunks` stream them from the file
    again (ascending id within each batch of the file; indexing reads them all once).

    importer: which importer read them, "name (distribution version)", or None.
    u_offset_s: the importer's offset of the momentum samples (ux, uy, uz sampled at
    t + u_offset_s), or None when the importer gave none.
    """

    def __init__(self, tracks, *, path=None, n_rows=None, has_momentum=None, importer=None,
                 u_offset_s=None):
        self.path = pathlib.Path(path) if path is not None else None
        self.importer, self.u_offset_s = importer, u_offset_s
        self.warnings: list[str] = []  # for run.json, filled by the caller (runner)
        self._stream = None
        self._tracks = sorted(tracks, key=lambda tr: tr.particle)
        self.n_particles = len(self._tracks)
        self.n_rows = (int(n_rows) if n_rows is not None
                       else sum(tr.n_samples for tr in self._tracks))
        self.has_momentum = (bool(has_momentum) if has_momentum is not None
                             else any(tr.u is not None for tr in self._tracks))

    @classmethod
    def streaming(cls, stream, *, n_particles, **facts) -> Tracks:
        """Tracks that call `stream()` for a fresh iterator of Track on every pass; `facts`
        are the keyword arguments of the constructor (path, n_rows, ...)."""
        tracks = cls((), **facts)
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
                registry=None, options=None, particle_range=None) -> Tracks:
    """Read and validate every track of the file at `path` (all held in memory).

    format: importer name (default: the one claiming the file's suffix).
    columns: canonical name -> column name in the file (a canonical name whose own name
    another one is mapped to is not read under that name).  units: canonical name -> unit
    string of that column.  charge: per physical particle when the file has no charge
    column, in C or as a string with a unit ("-1 e").  min_samples: fewest samples a
    particle may have (2: a shorter track's spline has a lower degree, `Motion.degree_used`).
    options: further [tracks] keys, passed to the importer.
    particle_range: (low, high) reads only the particles with low <= id <= high.
    Raises TrackError naming file, column, particle and row or time for any bad input.
    """
    reader = _Reader(path, format=format, columns=columns, units=units, charge=charge,
                     min_samples=min_samples, registry=registry, options=options,
                     particle_range=particle_range)
    tracks = list(reader.iter_tracks())
    return Tracks(tracks, **reader.facts())


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
                            n_particles=n_particles, **reader.facts())


def iter_tracks(path, *, bucket_rows=BUCKET_ROWS, **read_options) -> Iterator[Track]:
    """Validated tracks of the file at `path`, one by one, with bounded memory.

    Options as for `read_tracks`; `bucket_rows` is how many rows of a file not grouped by
    particle are re-partitioned into each temporary bucket (and held in memory at once).
    """
    return _Reader(path, bucket_rows=bucket_rows, **read_options).iter_tracks()


class _Reader:
    """One pass over one file: importer, column names, unit factors and checks."""

    def __init__(self, path, *, format=None, columns=None, units=None, charge=None,
                 min_samples=2, registry=None, options=None,
                 bucket_rows=BUCKET_ROWS, particle_range=None):
        self.path = pathlib.Path(path)
        self.particle_range = None if particle_range is None else tuple(particle_range)
        if int(min_samples) < 1:
            raise ValueError(f"min_samples must be at least 1, got {min_samples}")
        self.min_samples = int(min_samples)
        self.default_charge_c = (None if charge is None
                                 else to_si(charge, "charge", where="[tracks] charge"))
        self.bucket_rows = int(bucket_rows)
        self.names = self._file_names(self._mapping(columns or {}, "columns"))
        self.factors = {canon: self._factor(canon, unit)
                        for canon, unit in self._mapping(units or {}, "units").items()}
        self.options = dict(options or {}, format=format, columns=dict(columns or {}),
                            units=dict(units or {}), charge=self.default_charge_c,
                            particle_range=self.particle_range)
        self.info = self._importer(format, registry)
        self.importer = self.info.plugin
        self.n_rows = 0
        self.has_momentum = False
        self.u_offset_s = None
        self._present = None  # canonical columns found in the file

    def facts(self) -> dict:
        """What a pass has learnt about the file, as keyword arguments of Tracks."""
        return dict(path=self.path, n_rows=self.n_rows, has_momentum=self.has_momentum,
                    importer=self.info.label, u_offset_s=self.u_offset_s)

    # -- set-up ---------------------------------------------------------------------
    def _mapping(self, mapping: Mapping, key: str) -> dict:
        unknown = [name for name in mapping if name not in CANONICAL_COLUMNS]
        if unknown:
            raise TrackError(f"[tracks] {key} names unknown column(s) {', '.join(unknown)}; "
                             f"the canonical names are {', '.join(CANONICAL_COLUMNS)}",
                             path=self.path)
        return {str(k): str(v) for k, v in mapping.items()}

    def _file_names(self, mapping: dict) -> dict:
        """Canonical name -> the file column read for it, or None. Mapped names win over
        the default ones: with t = "x", the file column 'x' is t and x is not read."""
        claimed = {}
        for canon, name in mapping.items():
            if name in claimed:
                raise TrackError(f"[tracks] columns maps both '{claimed[name]}' and '{canon}' "
                                 f"to the file column '{name}'; a column can stand for one "
                                 "quantity only", path=self.path, column=name)
            claimed[name] = canon
        return {canon: mapping.get(canon, None if canon in claimed else canon)
                for canon in CANONICAL_COLUMNS}

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
        named = registry.importer_info(format) if format else None
        candidates = [named] if named else registry.importers_claiming(self.path)
        if not any(getattr(c.plugin, "series", False) for c in candidates):
            _check_file(self.path)  # a series importer checks its own pattern or directory
        info = named or registry.importer_for(self.path)
        if info is None:
            known = ", ".join(sorted(registry.importers)) or "none"
            raise TrackError("no importer recognises the file by its ending "
                             f"('{self.path.suffix}') or its content (installed: {known}); "
                             "check the file or set [tracks] format", path=self.path)
        with contained(info, f"checking whether it can read {self.path}"):
            readable = info.plugin.can_read(self.path)
        if not readable:
            claim = (f"[tracks] format = '{format}'" if format
                     else f"the name ending '{self.path.suffix}'")
            raise TrackError(f"the file is not a {info.name} file, as {claim} says "
                             f"({info.plugin.description}); check the file or set "
                             "[tracks] format", path=self.path)
        return info

    # -- reading ----------------------------------------------------------------------
    def _raw_batches(self):
        """The importer's raw tables, checked; its failures become one PluginError."""
        batches = getattr(self.importer, "iter_batches", None)
        method = "read" if batches is None else "iter_batches"
        with contained(self.info, f"reading {self.path}"):
            frames = ([self.importer.read(self.path, self.options)] if batches is None
                      else batches(self.path, self.options))
            if not isinstance(frames, Iterable):
                self._fault(f"{method} returned {type(frames).__name__}, not an iterator "
                            "of pandas DataFrames")
            for frame in frames:
                self._check_frame(frame, method)
                yield frame

    def _fault(self, what: str):
        raise PluginError(f"{self.info.quoted} is faulty: {what} (reading {self.path}; "
                          "see lagfield.hookspecs)")

    def _check_frame(self, frame, method):
        import pandas as pd

        if not isinstance(frame, pd.DataFrame):
            self._fault(f"{method} gave {type(frame).__name__}, not a pandas DataFrame")
        first_row = frame.attrs.get("first_row", 1)
        if isinstance(first_row, bool) or not isinstance(first_row, int | np.integer) \
                or first_row < 1:
            self._fault(f"frame.attrs['first_row'] is {first_row!r}, not a row number >= 1")
        offset = frame.attrs.get("u_offset_s")
        if offset is None:
            return
        if isinstance(offset, bool) or not isinstance(offset, int | float | np.number) \
                or not math.isfinite(offset):
            self._fault(f"frame.attrs['u_offset_s'] is {offset!r}, not a finite number "
                        "of seconds")
        if self.u_offset_s is not None and float(offset) != self.u_offset_s:
            self._fault(f"frame.attrs['u_offset_s'] changes between pieces "
                        f"({self.u_offset_s!r} s, then {float(offset)!r} s)")
        self.u_offset_s = float(offset)

    def _batches(self, particle_only=False):
        """Canonical SI columns (dict of arrays, `row` included) of each batch."""
        first_row = 1
        for frame in self._raw_batches():
            first_row = int(frame.attrs.get("first_row", first_row))
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
        counts = collections.Counter(found)
        for name in (self.names[canon] for canon in CANONICAL_COLUMNS):
            if name is not None and counts[name] > 1:
                raise TrackError(f"the file has {counts[name]} columns named '{name}'; "
                                 "rename or remove all but one (or map another name with "
                                 "[tracks] columns)", path=self.path, column=name)
        present = [c for c in CANONICAL_COLUMNS if self.names[c] in counts]

        def label(canon):
            name = self._name(canon)
            return f"'{name}'" + (f" (for '{canon}')" if name != canon else "")
        for canon in REQUIRED_COLUMNS:
            if canon in present:
                continue
            taken = ("" if self.names[canon] is not None else
                     f"; the file column '{canon}' is read as '{self._claimant(canon)}' "
                     f"([tracks] columns), so map '{canon}' to a column of its own")
            raise TrackError(f"required column {label(canon)} is missing; the file has "
                             f"{', '.join(found) or 'no columns'} (map names with "
                             f"[tracks] columns){taken}", path=self.path,
                             column=self._name(canon))
        momentum = [c for c in MOMENTUM_COLUMNS if c in present]
        if momentum and len(momentum) < 3:
            absent = [label(c) for c in MOMENTUM_COLUMNS if c not in momentum]
            raise TrackError(f"ux, uy, uz must be given all three or none; "
                             f"{', '.join(absent)} missing", path=self.path)
        if "charge" not in present and self.default_charge_c is None:
            raise TrackError("the file has no charge column; set [tracks] charge (C per "
                             "physical particle, e.g. -1.602176634e-19 for electrons)",
                             path=self.path)
        self.has_momentum = bool(momentum)
        return tuple(present)

    def _claimant(self, canon):
        """The canonical name whose mapping reads the file column named `canon`."""
        return next(c for c in CANONICAL_COLUMNS if self.names[c] == canon)

    def _canonical(self, frame, first_row, particle_only) -> dict:
        rows = np.arange(first_row, first_row + len(frame), dtype=np.int64)
        out = {_ROW: rows}
        for canon in ("particle",) if particle_only else self._present:
            name = self.names[canon]
            raw = frame[name]
            if raw.dtype.kind in "bmM":  # booleans, dates, durations: no quantity of ours
                raise TrackError(f"the column holds {raw.dtype} values, not numbers",
                                 path=self.path, column=name, particle=_at(out.get("particle"), 0),
                                 row=int(rows[0]))
            values = _floats(raw)
            nonnumeric = np.isnan(values) & raw.notna().to_numpy()
            if nonnumeric.any():
                spelled = raw[nonnumeric].astype(str).str.strip().str.lower()
                nonnumeric[nonnumeric] = ~spelled.isin(_NAN_SPELLINGS).to_numpy()
            ids = out.get("particle")
            if nonnumeric.any():
                i = int(np.argmax(nonnumeric))
                raise TrackError(f"value {raw.iloc[i]!r} is not a number", path=self.path,
                                 column=name, particle=_at(ids, i), row=int(rows[i]))
            bad = ~np.isfinite(values)
            if bad.any():
                i = int(np.argmax(bad))
                what = ("empty or NaN" if np.isnan(values[i]) else
                        "infinite or beyond the floating-point range (±1.8e308)")
                raise TrackError(f"value is {what}", path=self.path, column=name,
                                 particle=_at(ids, i), row=int(rows[i]))
            if canon == "particle":
                out[canon] = self._ids(raw, values, rows, name)
            else:
                with np.errstate(over="ignore"):
                    out[canon] = values * self.factors.get(canon, 1.0)
                beyond = ~np.isfinite(out[canon])
                if beyond.any():
                    i = int(np.argmax(beyond))
                    raise TrackError(f"value {values[i]:g} is beyond the floating-point "
                                     "range once converted to SI units", path=self.path,
                                     column=name, particle=_at(ids, i), row=int(rows[i]))
        return out

    def _ids(self, raw, values, rows, name) -> np.ndarray:
        """The particle column as int64, or a TrackError for an id that is no integer or
        does not fit (never a silent wrap-around that would merge particles)."""
        kind = raw.dtype.kind
        if kind == "i":
            return raw.to_numpy(dtype=np.int64)
        if kind == "u":
            bad = raw.to_numpy(dtype=np.uint64) > np.uint64(INT64_MAX)
            if bad.any():
                i = int(np.argmax(bad))
                raise TrackError(f"particle id {raw.iloc[i]} does not fit a 64-bit signed "
                                 f"integer (at most {INT64_MAX})", path=self.path,
                                 column=name, row=int(rows[i]))
            return raw.to_numpy(dtype=np.int64)
        fraction = np.rint(values) != values
        large = np.abs(values) >= EXACT_FLOAT_INT
        bad = fraction | large
        if bad.any():
            i = int(np.argmax(bad))
            if fraction[i]:
                why = "is not an integer"
            elif abs(values[i]) > INT64_MAX:
                why = f"does not fit a 64-bit signed integer (at most {INT64_MAX})"
            else:
                why = ("is 2**53 or beyond, where floating-point numbers skip integers, so "
                       "distinct ids could merge; write the ids as integers, not floats")
            raise TrackError(f"particle id {values[i]:.17g} {why}", path=self.path,
                             column=name, row=int(rows[i]))
        return values.astype(np.int64)

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
            raise TrackError(f"only {plural(n, 'sample')}, but a track needs at least "
                             f"{self.min_samples} (the motion between samples is a spline)",
                             path=self.path, particle=int(ids[starts[k]]),
                             row=int(rows[starts[k]]))
        self._check_steps(ids, t, rows, position, u)
        charge = self._per_particle(cols, "charge", starts, self.default_charge_c)
        weight = self._per_particle(cols, "weight", starts, 1.0)
        # copies: a view would keep the whole batch of rows alive as long as the track
        return [Track(int(ids[s]), t[s:e].copy(), position[s:e].copy(),
                      None if u is None else u[s:e].copy(), float(charge[k]), float(weight[k]),
                      u_offset_s=self.u_offset_s)
                for k, (s, e) in enumerate(zip(starts.tolist(), ends.tolist(), strict=True))]

    # huge but finite values may overflow to inf below: they then fail a check, quietly
    @np.errstate(over="ignore", divide="ignore", invalid="ignore")
    def _check_steps(self, ids, t, rows, position, u):
        same = ids[1:] == ids[:-1]
        dt = np.diff(t)
        duplicate = same & (dt == 0)
        if duplicate.any():
            i = int(np.argmax(duplicate))
            raise TrackError(f"two samples at the same time (rows {rows[i]} and "
                             f"{rows[i + 1]})", path=self.path, column=self._name("t"),
                             particle=int(ids[i]), row=int(rows[i + 1]), time_s=float(t[i]))
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
        if u is not None:
            self._check_momenta(ids, t, rows, u)

    def _check_momenta(self, ids, t, rows, u):
        """A cheap sanity check of ux, uy, uz: |u| beyond MAX_MOMENTUM is a unit mistake.
        Whether momenta and positions describe one motion is the slip check of
        `lagfield.motion`, made when the motion is built (turning points and stopping
        charges are valid motion)."""
        absurd = np.abs(u) > MAX_MOMENTUM
        if absurd.any():
            i, k = (int(v) for v in np.argwhere(absurd)[0])
            raise TrackError(f"{MOMENTUM_COLUMNS[k]} = {u[i, k]:.6g} is beyond the largest "
                             f"normalized momentum γβ read ({MAX_MOMENTUM:g}, a Lorentz factor "
                             "beyond any particle); check the units of ux, uy, uz (γβ, "
                             "dimensionless)", path=self.path,
                             column=self._name(MOMENTUM_COLUMNS[k]), particle=int(ids[i]),
                             row=int(rows[i]), time_s=float(t[i]))

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
        return self.names[canon] or canon


def _check_file(path: pathlib.Path) -> None:
    """A TrackError unless `path` is a non-empty regular file that can be opened. Checked
    with stat before anything opens it: opening a named pipe would wait for a writer."""
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise TrackError("track file not found", path=path) from None
    except OSError as exc:
        raise TrackError(f"cannot look at the track file: {exc.strerror}", path=path) from None
    if stat.S_ISDIR(info.st_mode):
        raise TrackError("this is a directory, not a track file; give the path of the "
                         "file itself", path=path)
    if stat.S_ISFIFO(info.st_mode):
        raise TrackError("this is a named pipe (FIFO), not a track file: tracks are read "
                         "more than once, so they must be a regular file", path=path)
    if not stat.S_ISREG(info.st_mode):
        raise TrackError("this is not a regular file (a device or socket?); give a track "
                         "file", path=path)
    if info.st_size == 0:
        raise TrackError("the track file is empty (0 bytes)", path=path)
    try:
        with open(path, "rb"):
            pass
    except OSError as exc:
        raise TrackError(f"cannot open the track file: {exc.strerror}", path=path) from None


def _floats(raw) -> np.ndarray:
    """A column as float64: NaN where it is no number, ±inf where an integer is beyond the
    floating-point range (pandas raises for those)."""
    import pandas as pd

    try:
        numbers = pd.to_numeric(raw, errors="coerce")
    except OverflowError:
        numbers = pd.Series([_float(v) for v in raw.tolist()], dtype=np.float64)
    return numbers.to_numpy(dtype=np.float64, na_value=np.nan)


def _float(value) -> float:
    try:
        return float(value)
    except OverflowError:
        return math.inf if value > 0 else -math.inf
    except (TypeError, ValueError):
        return math.nan


def _at(ids, i):
    """The particle id of row `i` when the ids are known, else None."""
    return None if ids is None else int(ids[i])


def _take(cols: dict, index) -> dict:
    return {name: values[index] for name, values in cols.items()}


def _concat(parts: list[dict]) -> dict:
    if len(parts) == 1:
        return parts[0]
    return {name: np.concatenate([p[name] for p in parts]) for name in parts[0]}

