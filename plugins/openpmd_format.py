"""openPMD import: the particle species of a series written by a particle-in-cell code, read
with openpmd-api (any backend it was built with: HDF5, ADIOS2, JSON).

One iteration is one batch: iterations are read one at a time, so lagfield's re-partition
(the rows are grouped by iteration, not by particle) assembles each macro-particle's track
from a series larger than memory. The ``id`` record joins a particle's samples across
iterations; a particle present in only some iterations has its own span.

Options, from the run file's ``[plugins.openpmd]`` table: ``species`` (required when the
series has more than one) and ``iterations = [first, last]`` (inclusive, optional).
"""

from __future__ import annotations

import contextlib
import pathlib
import re

import numpy as np
from scipy import constants

import lagfield
from lagfield.tracks import MOMENTUM_COLUMNS

NAME = "openpmd"
OPTION_KEYS = ("species", "iterations")
HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"
ADIOS_SUFFIXES = (".bp", ".bp4", ".bp5")
EXTENSIONS = (".h5", *ADIOS_SUFFIXES)
_EXPANSION = re.compile(r"%0?\d*T")  # the iteration number in a file-based series name
_NOT_THERE = ("no file of the openPMD series is there (a series of one file per iteration "
              "is named with %T for the iteration number, e.g. data_%T.h5)")
AXES = ("x", "y", "z")  # openPMD component names, also the position columns
# unitDimension exponents of (length, mass, time, current, temperature, amount, intensity)
LENGTH = (1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0)
MOMENTUM = (1.0, 1.0, -1.0, 0.0, 0.0, 0.0, 0.0)
MASS = (0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0)
CHARGE = (0.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0)
CHARGE_TO_MASS = (0.0, -1.0, 1.0, 1.0, 0.0, 0.0, 0.0)
DIMENSIONLESS = (0.0,) * 7
DIMENSIONS = {"position": (LENGTH, "a length (m)"),
              "positionOffset": (LENGTH, "a length (m)"),
              "momentum": (MOMENTUM, "a momentum (kg·m/s)"),
              "mass": (MASS, "a mass (kg)"),
              "charge": (CHARGE, "a charge (C)"),
              "chargeToMass": (CHARGE_TO_MASS, "a charge-to-mass ratio (C/kg)"),
              "weighting": (DIMENSIONLESS, "dimensionless")}


def _series_files(path: pathlib.Path) -> list[pathlib.Path]:
    """The files or directories of the series named by `path` (a file-based pattern such
    as ``data_%T.h5`` matches one per iteration)."""
    if _EXPANSION.search(path.name):
        return sorted(path.parent.glob(_EXPANSION.sub("*", path.name)))
    return [path] if path.exists() else []


def _looks_like_series(file: pathlib.Path) -> bool:
    suffix = file.suffix.lower()
    if suffix in ADIOS_SUFFIXES:
        return True
    if suffix == ".h5" and file.is_file():
        with open(file, "rb") as stream:
            return stream.read(len(HDF5_MAGIC)) == HDF5_MAGIC
    return False


@contextlib.contextmanager
def _as_track_errors(path):
    """What openpmd-api raises for a file it cannot read, as one TrackError."""
    import openpmd_api as io

    try:
        yield
    except (io.Error, RuntimeError, OSError, KeyError, IndexError) as exc:
        raise lagfield.TrackError(f"not a readable openPMD series: {type(exc).__name__}: "
                                  f"{str(exc).strip()}", path=path) from None


def _options(options, path) -> dict:
    """The [plugins.openpmd] table, checked."""
    table = dict((options.get("plugins") or {}).get(NAME) or {})
    unknown = sorted(set(table) - set(OPTION_KEYS))
    if unknown:
        raise lagfield.TrackError(f"[plugins.{NAME}] has unknown key(s) {', '.join(unknown)}; "
                                  f"the keys are {', '.join(OPTION_KEYS)}", path=path)
    species = table.get("species")
    if species is not None and (not isinstance(species, str) or not species):
        raise lagfield.TrackError(f"[plugins.{NAME}] species must be a species name such as "
                                  f"\"electrons\", got {species!r}", path=path)
    span = table.get("iterations")
    if span is not None:
        if (not isinstance(span, list | tuple) or len(span) != 2
                or not all(isinstance(i, int) and not isinstance(i, bool) for i in span)
                or span[0] > span[1]):
            raise lagfield.TrackError(f"[plugins.{NAME}] iterations must be [first, last], two "
                                      f"whole numbers with first <= last, got {span!r}",
                                      path=path)
        span = (int(span[0]), int(span[1]))
    return {"species": species, "iterations": span}


class _Iteration:
    """One iteration of one species: records loaded into numpy arrays in SI units."""

    def __init__(self, path, index: int, iteration, species_name: str):
        self.path, self.index, self.name = path, index, species_name
        self.species = iteration.particles[species_name]
        self.time_unit_s = float(iteration.time_unit_SI)
        self.time_s = float(iteration.time) * self.time_unit_s
        self.records = set(self.species)

    def where(self) -> str:
        return f"iteration {self.index}, species '{self.name}'"

    def fail(self, message: str):
        raise lagfield.TrackError(f"{message} ({self.where()})", path=self.path)

    def record(self, name: str, required: bool = True):
        if name not in self.records:
            if required:
                self.fail(f"the series has no '{name}' record")
            return None
        record = self.species[name]
        if name in DIMENSIONS:
            expected, meaning = DIMENSIONS[name]
            found = tuple(float(d) for d in record.unit_dimension)
            if found != expected:
                self.fail(f"the record '{name}' has unitDimension {list(found)}, which is not "
                          f"{meaning}; check how the series was written")
        return record

    def components(self, name: str, axes=AXES, required: bool = True):
        """Pending loads of the record's components (each × its unitSI once flushed)."""
        record = self.record(name, required)
        if record is None:
            return None
        have = list(record)
        missing = [axis for axis in axes if axis not in have]
        if missing:
            self.fail(f"the record '{name}' has no component {', '.join(missing)} (it has "
                      f"{', '.join(have) or 'none'})")
        return [(record[axis].load_chunk(), float(record[axis].unit_SI)) for axis in axes]

    def scalar(self, name: str, required: bool = True):
        record = self.record(name, required)
        if record is None:
            return None
        import openpmd_api as io

        component = record[io.Record_Component.SCALAR]
        return [(component.load_chunk(), float(component.unit_SI))]

    def time_offset_s(self, name: str) -> float:
        record = self.species[name]
        return float(record.time_offset) * self.time_unit_s

    def single(self, name: str, values: np.ndarray, weight: np.ndarray | None) -> np.ndarray:
        """Per physical particle: a macro-weighted record divided by weighting^power."""
        record = self.species[name]
        if not record.contains_attribute("macroWeighted"):
            return values
        if not int(record.get_attribute("macroWeighted")):
            return values
        power = float(record.get_attribute("weightingPower")) \
            if record.contains_attribute("weightingPower") else 1.0
        if weight is None:
            self.fail(f"the record '{name}' is macro-weighted but the series has no "
                      "'weighting' record")
        return values / weight[:, None] ** power if values.ndim == 2 else values / weight**power


def _si(pending) -> np.ndarray:
    """Loaded components × unitSI, as columns of one (n, k) array."""
    return np.column_stack([np.asarray(values, dtype=np.float64) * unit
                            for values, unit in pending])


class OpenPmdImporter:
    """Reads one particle species of an openPMD series."""

    name = NAME
    description = ("openPMD series of a particle-in-cell code (HDF5, ADIOS2), one species, "
                   "one iteration at a time; needs lagfield[openpmd]")
    extensions = EXTENSIONS
    requires = ("openpmd_api",)
    series = True  # `path` may name a pattern (data_%T.h5) or a directory (.bp)

    def can_read(self, path) -> bool:
        files = _series_files(pathlib.Path(path))
        if not files:
            raise lagfield.TrackError(_NOT_THERE, path=path)
        return _looks_like_series(files[0])

    def read(self, path, options):
        import pandas as pd

        frames = list(self.iter_batches(path, options))
        frame = pd.concat(frames, ignore_index=True)
        frame.attrs = dict(frames[-1].attrs, first_row=1)
        return frame

    def iter_batches(self, path, options):
        import openpmd_api as io

        path = pathlib.Path(path)
        wanted = _options(options, path)
        if not _series_files(path):
            raise lagfield.TrackError(_NOT_THERE, path=path)
        with _as_track_errors(path):
            series = io.Series(str(path), io.Access.read_only)
        try:
            indices = self._indices(path, series, wanted["iterations"])
            species = self._species(path, series, indices, wanted["species"])
            first_row = 1
            for index in indices:
                with _as_track_errors(path):
                    frame = self._frame(path, series, index, species)
                if frame is None:  # the species has no particle in this iteration
                    continue
                frame.attrs["first_row"] = first_row
                first_row += len(frame)
                yield frame
        finally:
            series.close()

    def describe(self, path, options) -> dict:
        """Facts of the series for `lagfield inspect`, from its metadata only (label ->
        text)."""
        import openpmd_api as io

        path = pathlib.Path(path)
        wanted = _options(options, path)
        with _as_track_errors(path):
            series = io.Series(str(path), io.Access.read_only)
        try:
            indices = self._indices(path, series, wanted["iterations"])
            species = self._species(path, series, indices, wanted["species"])
            every = sorted(series.iterations[indices[0]].particles)
            backend = series.backend
        finally:
            series.close()
        return {"openPMD series": backend, "species": f"{species} (of {', '.join(every)})",
                "iterations": f"{indices[0]} to {indices[-1]} ({len(indices)} read)"}

    # -- metadata -----------------------------------------------------------------------
    @staticmethod
    def _indices(path, series, span) -> list[int]:
        indices = sorted(int(i) for i in series.iterations)
        if not indices:
            raise lagfield.TrackError("the openPMD series has no iterations", path=path)
        if span is not None:
            chosen = [i for i in indices if span[0] <= i <= span[1]]
            if not chosen:
                raise lagfield.TrackError(
                    f"[plugins.{NAME}] iterations = [{span[0]}, {span[1]}] selects none of "
                    f"the series' iterations ({indices[0]} to {indices[-1]})", path=path)
            indices = chosen
        return indices

    @staticmethod
    def _species(path, series, indices, named) -> str:
        """The species to read, from the first selected iteration's particle groups."""
        every = sorted(series.iterations[indices[0]].particles)
        listed = ", ".join(every) or "none"
        if named is not None:
            if named not in every:
                raise lagfield.TrackError(
                    f"[plugins.{NAME}] species '{named}' is not in the series (iteration "
                    f"{indices[0]} has: {listed})", path=path)
            return named
        if len(every) == 1:
            return every[0]
        if not every:
            raise lagfield.TrackError(f"iteration {indices[0]} of the openPMD series has no "
                                      "particle species", path=path)
        raise lagfield.TrackError(f"the series has {len(every)} particle species ({listed}); "
                                  f"choose one with [plugins.{NAME}] species", path=path)

    # -- one iteration --------------------------------------------------------------------
    def _frame(self, path, series, index: int, species: str):
        import pandas as pd

        iteration = series.iterations[index]
        if species not in iteration.particles:
            iteration.close()
            return None
        it = _Iteration(path, index, iteration, species)
        pending = {"position": it.components("position"),
                   "positionOffset": it.components("positionOffset", required=False),
                   "id": it.scalar("id"),
                   "momentum": it.components("momentum", required=False),
                   "weighting": it.scalar("weighting", required=False),
                   "charge": it.scalar("charge", required=False)}
        if pending["momentum"] is not None:
            pending["mass"] = it.scalar("mass", required=False)
            if pending["mass"] is None:
                if "charge" not in it.records or "chargeToMass" not in it.records:
                    it.fail("the series has no 'mass' record (nor 'charge' and "
                            "'chargeToMass'), needed to turn 'momentum' into ux, uy, uz")
                pending["chargeToMass"] = it.scalar("chargeToMass")
        series.flush()
        columns = self._columns(it, pending)
        iteration.close()
        frame = pd.DataFrame(columns)
        if pending["momentum"] is not None:
            offset = it.time_offset_s("momentum") - it.time_offset_s("position")
            frame.attrs["u_offset_s"] = offset
        return frame

    @staticmethod
    def _columns(it: _Iteration, pending: dict) -> dict:
        ids = np.asarray(pending["id"][0][0]).reshape(-1)
        n = ids.size
        unique, counts = np.unique(ids, return_counts=True)
        if (counts > 1).any():
            repeated = unique[counts > 1][0]
            it.fail(f"the 'id' record holds the id {repeated} {int(counts.max())} times; ids "
                    "must be unique within an iteration")
        position = _si(pending["position"])
        if pending["positionOffset"] is not None:
            position = position + _si(pending["positionOffset"])
        weight = None if pending["weighting"] is None else _si(pending["weighting"])[:, 0]
        columns = {"particle": ids, "t": np.full(n, it.time_s + it.time_offset_s("position"))}
        columns.update(zip(AXES, position.T, strict=True))
        charge = (None if pending["charge"] is None
                  else it.single("charge", _si(pending["charge"])[:, 0], weight))
        if pending["momentum"] is not None:
            momentum = it.single("momentum", _si(pending["momentum"]), weight)
            if pending.get("mass") is not None:
                mass = it.single("mass", _si(pending["mass"])[:, 0], weight)
            else:
                mass = charge / _si(pending["chargeToMass"])[:, 0]
            u = momentum / (mass * constants.c)[:, None]
            columns.update(zip(MOMENTUM_COLUMNS, u.T, strict=True))
        if weight is not None:
            columns["weight"] = weight
        if charge is not None:
            columns["charge"] = charge
        return columns


@lagfield.hookimpl
def lagfield_register_importers():
    return [OpenPmdImporter()]
