"""The run file (TOML): read, checked and turned into a frozen `RunConfig` of SI floats
and resolved paths. Unknown keys are errors with a nearest-match hint."""

from __future__ import annotations

import dataclasses
import difflib
import tomllib
from pathlib import Path

from .errors import ConfigError
from .units import to_si

# every key the run file may hold, per table
KNOWN_KEYS = {
    "": {"tracks", "motion", "observers", "fields", "time", "spectrum", "compute", "output",
         "plugins"},
    "tracks": {"path", "format", "charge", "columns", "units", "u_tolerance"},
    "motion": {"degree", "extend", "smoothing"},
    "observers": {"name", "points", "plane", "sphere"},
    "observers.plane": {"center", "u", "v", "size", "shape"},
    "observers.sphere": {"center", "radius", "theta", "phi"},
    "fields": {"far_field"},
    "time": {"step", "start", "stop", "align"},
    "spectrum": {"frequencies", "coherent", "taper"},
    "spectrum.frequencies": {"start", "stop", "count", "spacing"},
    "compute": {"workers", "scheduler", "chunk"},
    "output": {"dir", "formats"},
}
CANONICAL_COLUMNS = ("particle", "t", "x", "y", "z", "ux", "uy", "uz", "charge", "weight")


@dataclasses.dataclass(frozen=True)
class TracksConfig:
    path: Path
    format: str | None = None
    charge_c: float | None = None
    columns: dict = dataclasses.field(default_factory=dict)
    units: dict = dataclasses.field(default_factory=dict)
    u_tolerance: float = 0.05


@dataclasses.dataclass(frozen=True)
class MotionConfig:
    degree: int = 5
    extend: str = "ballistic"
    smoothing_m: float = 0.0


@dataclasses.dataclass(frozen=True)
class ObserverConfig:
    name: str
    kind: str  # "points", "plane" or "sphere"
    points_m: tuple = ()
    center_m: tuple = (0.0, 0.0, 0.0)
    u: tuple = (1.0, 0.0, 0.0)
    v: tuple = (0.0, 1.0, 0.0)
    size_m: tuple = (0.0, 0.0)
    shape: tuple = (1, 1)
    radius_m: float = 0.0
    theta_rad: tuple = (0.0, 0.0, 1)
    phi_rad: tuple = (0.0, 0.0, 1)


@dataclasses.dataclass(frozen=True)
class TimeConfig:
    step_s: float
    start_s: float | None = None
    stop_s: float | None = None
    align: str = "group"


@dataclasses.dataclass(frozen=True)
class SpectrumConfig:
    start_hz: float
    stop_hz: float
    count: int
    spacing: str = "linear"
    coherent: bool = True
    taper: str = "none"


@dataclasses.dataclass(frozen=True)
class ComputeConfig:
    workers: int | None = None
    scheduler: str | None = None
    chunk: int = 2000


@dataclasses.dataclass(frozen=True)
class OutputConfig:
    dir: Path
    formats: tuple = ("parquet",)


@dataclasses.dataclass(frozen=True)
class RunConfig:
    source: Path | None
    raw: dict
    tracks: TracksConfig
    motion: MotionConfig
    observers: tuple
    far_field: bool
    time: TimeConfig
    spectrum: SpectrumConfig | None
    compute: ComputeConfig
    output: OutputConfig
    plugins: dict


def _check_keys(table: dict, section: str, where: str) -> None:
    allowed = KNOWN_KEYS[section]
    for key in table:
        if key not in allowed:
            close = difflib.get_close_matches(key, sorted(allowed), n=1, cutoff=0.5)
            hint = f"; did you mean '{close[0]}'?" if close else \
                f"; known keys: {', '.join(sorted(allowed))}"
            label = f"[{section}]" if section else "the top level"
            raise ConfigError(f"{where}: unknown key '{key}' in {label}{hint}")


def _table(raw: dict, name: str, where: str) -> dict:
    value = raw.get(name, {})
    if not isinstance(value, dict):
        raise ConfigError(f"{where}: [{name}] must be a table")
    _check_keys(value, name, where)
    return value


def _vector(value, dimension: str, where: str, length: int = 3) -> tuple:
    if not isinstance(value, list | tuple) or len(value) != length:
        raise ConfigError(f"{where}: expected a list of {length} numbers, got {value!r}")
    return tuple(to_si(item, dimension, where=where) for item in value)


def _positive(value: float, where: str) -> float:
    if not value > 0.0:
        raise ConfigError(f"{where}: must be positive, got {value!r}")
    return value


def _integer(value, where: str, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise ConfigError(f"{where}: expected a whole number >= {minimum}, got {value!r}")
    return value


def _angles(value, where: str) -> tuple:
    if not isinstance(value, list | tuple) or len(value) != 3:
        raise ConfigError(f"{where}: expected [first, last, count], got {value!r}")
    first = to_si(value[0], "angle", where=where)
    last = to_si(value[1], "angle", where=where)
    return (first, last, _integer(value[2], f"{where} count"))


def _observer(entry: dict, index: int, where: str) -> ObserverConfig:
    place = f"{where}: [[observers]] #{index + 1}"
    if not isinstance(entry, dict):
        raise ConfigError(f"{place} must be a table")
    _check_keys(entry, "observers", where)
    name = entry.get("name")
    if not isinstance(name, str) or not name:
        raise ConfigError(f"{place}: needs a name")
    shapes = [key for key in ("points", "plane", "sphere") if key in entry]
    if len(shapes) != 1:
        raise ConfigError(f"{place} ('{name}'): give exactly one of points, plane or sphere")
    kind = shapes[0]
    place = f"{where}: observer group '{name}'"
    if kind == "points":
        points = entry["points"]
        if not isinstance(points, list) or not points:
            raise ConfigError(f"{place}: points is empty; give at least one [x, y, z]")
        return ObserverConfig(name, kind, points_m=tuple(
            _vector(p, "length", f"{place} point {i}") for i, p in enumerate(points)))
    spec = entry[kind]
    if not isinstance(spec, dict):
        raise ConfigError(f"{place}: {kind} must be a table")
    _check_keys(spec, f"observers.{kind}", where)
    center = _vector(spec.get("center", [0.0, 0.0, 0.0]), "length", f"{place} center")
    if kind == "plane":
        for key in ("u", "v", "size", "shape"):
            if key not in spec:
                raise ConfigError(f"{place}: plane needs '{key}'")
        shape = spec["shape"]
        if not isinstance(shape, list) or len(shape) != 2:
            raise ConfigError(f"{place}: shape must be [n_u, n_v]")
        return ObserverConfig(
            name, kind, center_m=center,
            u=_vector(spec["u"], "dimensionless", f"{place} u"),
            v=_vector(spec["v"], "dimensionless", f"{place} v"),
            size_m=_vector(spec["size"], "length", f"{place} size", length=2),
            shape=(_integer(shape[0], f"{place} shape"), _integer(shape[1], f"{place} shape")))
    for key in ("radius", "theta", "phi"):
        if key not in spec:
            raise ConfigError(f"{place}: sphere needs '{key}'")
    return ObserverConfig(
        name, kind, center_m=center,
        radius_m=_positive(to_si(spec["radius"], "length", where=f"{place} radius"),
                           f"{place} radius"),
        theta_rad=_angles(spec["theta"], f"{place} theta"),
        phi_rad=_angles(spec["phi"], f"{place} phi"))


def parse(raw: dict, *, base_dir: Path, source: Path | None = None) -> RunConfig:
    """Check a run-file dictionary and return the RunConfig (paths relative to base_dir)."""
    where = str(source) if source else "run file"
    _check_keys(raw, "", where)
    tracks = _table(raw, "tracks", where)
    if "path" not in tracks:
        raise ConfigError(f"{where}: [tracks] needs a path")
    for key in ("columns", "units"):
        mapping = tracks.get(key, {})
        if not isinstance(mapping, dict):
            raise ConfigError(f"{where}: [tracks] {key} must be a table")
        for name in mapping:
            if name not in CANONICAL_COLUMNS:
                close = difflib.get_close_matches(name, CANONICAL_COLUMNS, n=1)
                hint = f"; did you mean '{close[0]}'?" if close else ""
                raise ConfigError(f"{where}: [tracks] {key} names unknown column '{name}'{hint}")
    charge = tracks.get("charge")
    tracks_config = TracksConfig(
        path=(base_dir / tracks["path"]).resolve(),
        format=tracks.get("format"),
        charge_c=None if charge is None else to_si(charge, "charge", where="[tracks] charge"),
        columns=dict(tracks.get("columns", {})),
        units=dict(tracks.get("units", {})),
        u_tolerance=float(tracks.get("u_tolerance", 0.05)))

    motion = _table(raw, "motion", where)
    degree = motion.get("degree", 5)
    if degree not in (3, 5):
        raise ConfigError(f"{where}: [motion] degree must be 3 or 5, got {degree!r}")
    extend = motion.get("extend", "ballistic")
    if extend not in ("ballistic", "none"):
        raise ConfigError(f"{where}: [motion] extend must be 'ballistic' or 'none', "
                          f"got {extend!r}")
    motion_config = MotionConfig(degree=degree, extend=extend, smoothing_m=to_si(
        motion.get("smoothing", 0.0), "length", where="[motion] smoothing"))

    entries = raw.get("observers", [])
    if not isinstance(entries, list) or not entries:
        raise ConfigError(f"{where}: no [[observers]] group; add at least one")
    observers = tuple(_observer(entry, i, where) for i, entry in enumerate(entries))
    names = [o.name for o in observers]
    duplicated = sorted({n for n in names if names.count(n) > 1})
    if duplicated:
        raise ConfigError(f"{where}: observer group name '{duplicated[0]}' is used twice")

    fields = _table(raw, "fields", where)
    far_field = fields.get("far_field", False)
    if not isinstance(far_field, bool):
        raise ConfigError(f"{where}: [fields] far_field must be true or false")

    time = _table(raw, "time", where)
    if "step" not in time:
        raise ConfigError(f"{where}: [time] needs a step (e.g. step = \"1 ps\")")
    align = time.get("align", "group")
    if align not in ("group", "point"):
        raise ConfigError(f"{where}: [time] align must be 'group' or 'point', got {align!r}")
    time_config = TimeConfig(
        step_s=_positive(to_si(time["step"], "time", where="[time] step"), "[time] step"),
        start_s=None if "start" not in time else to_si(time["start"], "time",
                                                       where="[time] start"),
        stop_s=None if "stop" not in time else to_si(time["stop"], "time", where="[time] stop"),
        align=align)
    if (time_config.start_s is not None and time_config.stop_s is not None
            and time_config.stop_s < time_config.start_s):
        raise ConfigError(f"{where}: [time] stop is before start")

    spectrum_config = None
    if "spectrum" in raw:
        spectrum = _table(raw, "spectrum", where)
        frequencies = spectrum.get("frequencies")
        if not isinstance(frequencies, dict):
            raise ConfigError(f"{where}: [spectrum] needs frequencies = {{ start = ..., "
                              "stop = ..., count = ..., spacing = \"log\" }")
        _check_keys(frequencies, "spectrum.frequencies", where)
        spacing = frequencies.get("spacing", "linear")
        if spacing not in ("linear", "log"):
            raise ConfigError(f"{where}: [spectrum] spacing must be 'linear' or 'log'")
        for key in ("start", "stop", "count"):
            if key not in frequencies:
                raise ConfigError(f"{where}: [spectrum] frequencies needs '{key}'")
        start = to_si(frequencies["start"], "frequency", where="[spectrum] start")
        stop = to_si(frequencies["stop"], "frequency", where="[spectrum] stop")
        if spacing == "log" and not (start > 0.0 and stop > 0.0):
            raise ConfigError(f"{where}: [spectrum] log spacing needs positive start and stop")
        coherent = spectrum.get("coherent", True)
        if not isinstance(coherent, bool):
            raise ConfigError(f"{where}: [spectrum] coherent must be true or false")
        taper = spectrum.get("taper", "none")
        if taper not in ("none", "hann"):
            raise ConfigError(f"{where}: [spectrum] taper must be 'none' or 'hann'")
        spectrum_config = SpectrumConfig(
            start_hz=start, stop_hz=stop,
            count=_integer(frequencies["count"], "[spectrum] count"),
            spacing=spacing, coherent=coherent, taper=taper)

    compute = _table(raw, "compute", where)
    compute_config = ComputeConfig(
        workers=None if "workers" not in compute else _integer(compute["workers"],
                                                               "[compute] workers"),
        scheduler=compute.get("scheduler"),
        chunk=_integer(compute.get("chunk", 2000), "[compute] chunk"))

    output = _table(raw, "output", where)
    formats = output.get("formats", ["parquet"])
    if isinstance(formats, str):
        formats = [formats]
    if not isinstance(formats, list) or not all(isinstance(f, str) for f in formats):
        raise ConfigError(f"{where}: [output] formats must be a list of exporter names")
    output_config = OutputConfig(dir=(base_dir / output.get("dir", "out")).resolve(),
                                 formats=tuple(formats))
    plugins = raw.get("plugins", {})
    if not isinstance(plugins, dict):
        raise ConfigError(f"{where}: [plugins] must be a table of per-plugin tables")
    return RunConfig(source=source, raw=raw, tracks=tracks_config, motion=motion_config,
                     observers=observers, far_field=far_field, time=time_config,
                     spectrum=spectrum_config, compute=compute_config, output=output_config,
                     plugins=dict(plugins))


def load(path) -> RunConfig:
    """Read and check the run file at `path`."""
    path = Path(path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"run file {path} does not exist") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"run file {path} is not valid TOML: {exc}") from None
    return parse(raw, base_dir=path.resolve().parent, source=path)
