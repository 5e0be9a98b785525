"""The run file (TOML): read, checked and turned into a frozen `RunConfig` of SI floats
and resolved paths.

Every value is checked for type, unit, finiteness and magnitude (`units.LIMITS`) before
anything is computed; an error names the run file, the table and the key (and the
observer group). Unknown keys are errors with a nearest-match hint.
"""

from __future__ import annotations

import codecs
import dataclasses
import tomllib
from pathlib import Path

from .detectors import parse_detectors
from .distributed import check_scheduler_address, check_workers
from .errors import ConfigError
from .observers import plane_axes, point_count
from .tracks import CANONICAL_COLUMNS, DIMENSIONS
from .typos import nearest
from .units import to_si, unit_factor

# every key the run file may hold, per table
KNOWN_KEYS = {
    "": {"tracks", "motion", "observers", "fields", "time", "spectrum", "compute", "output",
         "plugins", "detectors"},
    "tracks": {"path", "format", "charge", "columns", "units", "u_offset"},
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
DEGREES = (3, 5)  # spline degrees the run file may ask for (odd: symmetric interpolation)
# Points of one observer group and frequencies of a spectrum: both are allocated before the
# memory check (budget.py) can weigh the run, so they are bounded here.
MAX_POINTS_PER_GROUP = 10_000_000
MAX_FREQUENCIES = 10_000_000
# keys of earlier versions, with what replaced them (an error, never silently ignored)
REPLACED_KEYS = {
    ("tracks", "u_tolerance"): "was replaced by the slip check of positions against "
    "momenta, which needs no setting (README, 'Motion with momenta': the slip rule); remove "
    "the key",
}


@dataclasses.dataclass(frozen=True)
class TracksConfig:
    path: Path
    format: str | None = None
    charge_c: float | None = None
    columns: dict = dataclasses.field(default_factory=dict)
    units: dict = dataclasses.field(default_factory=dict)
    # ux, uy, uz were sampled at t + u_offset_s; None: the importer's offset, else 0
    u_offset_s: float | None = None
    plugins: dict = dataclasses.field(default_factory=dict)  # [plugins], for the importer

    def read_options(self) -> dict:
        """The keyword options of `lagfield.read_tracks` for this table (path aside)."""
        return dict(format=self.format, columns=self.columns, units=self.units,
                    charge=self.charge_c, options={"plugins": self.plugins})


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
    chunk: int | None = None  # particles per task; None: chosen for the workers


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
    detectors: tuple = ()  # DetectorConfig of each [[detectors]] entry (lagfield.detectors)


# ---------------------------------------------------------------------------- key names
def _unknown(word: str, choices, what: str) -> str:
    """"unknown key 'stpe'; did you mean 'step'?" (or the known names, when none is close)."""
    close = nearest(word, choices)
    hint = f"; did you mean '{close}'?" if close else f"; known: {', '.join(sorted(choices))}"
    return f"unknown {what} '{word}'{hint}"


def _check_keys(table: dict, section: str, label: str) -> None:
    for key in table:
        if (section, key) in REPLACED_KEYS:
            raise ConfigError(f"{label} {key} {REPLACED_KEYS[section, key]}")
        if key not in KNOWN_KEYS[section]:
            raise ConfigError(f"{label}: {_unknown(key, KNOWN_KEYS[section], 'key')}")


# ---------------------------------------------------------------------------- values
def _kind(value) -> str:
    names = {bool: "true/false", int: "a whole number", float: "a number", str: "a string",
             list: "a list", dict: "a table"}
    return f"{names.get(type(value), type(value).__name__)} ({value!r})"


def _text(value, label: str) -> str:
    """A non-empty string without control characters (a NUL cannot be in a path)."""
    if not isinstance(value, str) or not value.strip():
        raise ConfigError(f"{label}: expected a non-empty string, got {_kind(value)}")
    if not value.isprintable():
        raise ConfigError(f"{label}: {value!r} contains a control character")
    return value


def _choice(value, label: str, choices: tuple) -> str:
    if not isinstance(value, str) or value not in choices:
        options = " or ".join(f"'{c}'" for c in choices)
        raise ConfigError(f"{label}: must be {options}, got {_kind(value)}")
    return value


def _flag(value, label: str) -> bool:
    if not isinstance(value, bool):
        raise ConfigError(f"{label}: must be true or false, got {_kind(value)}")
    return value


def _whole(value, label: str, minimum: int = 1, maximum: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ConfigError(f"{label}: expected a whole number, got {_kind(value)}")
    if value < minimum or (maximum is not None and value > maximum):
        top = f" and <= {maximum:,}" if maximum is not None else ""
        raise ConfigError(f"{label}: must be >= {minimum}{top}, got {value}")
    return value


def _positive(value: float, label: str) -> float:
    if not value > 0.0:
        raise ConfigError(f"{label}: must be positive, got {value!r}")
    return value


def _vector(value, dimension: str, label: str, length: int = 3) -> tuple:
    if not isinstance(value, list) or len(value) != length:
        raise ConfigError(f"{label}: expected a list of {length} numbers, got {_kind(value)}")
    return tuple(to_si(item, dimension, where=f"{label}[{i}]") for i, item in enumerate(value))


def _table(parent: dict, key: str, section: str, label: str, *, default=None) -> dict:
    value = parent.get(key, {} if default is None else default)
    if not isinstance(value, dict):
        raise ConfigError(f"{label}: must be a table, got {_kind(value)}")
    _check_keys(value, section, label)
    return value


def _path(value, base_dir: Path, label: str) -> Path:
    return (base_dir / _text(value, label)).resolve()


def _listing(value, label: str, parts: str, maximum: int) -> tuple:
    """(first, last, count) of an evenly spaced list with both ends included: count 1
    needs first == last (one value cannot include two different ends)."""
    first, last, count = value
    if count == 1 and first != last:
        raise ConfigError(f"{label}: count = 1 cannot include both ends {parts}; give equal "
                          "ends for a single value, or count >= 2")
    return first, last, _whole(count, f"{label} count", maximum=maximum)


# ---------------------------------------------------------------------------- tables
def _tracks(raw: dict, base_dir: Path) -> TracksConfig:
    tracks = _table(raw, "tracks", "tracks", "[tracks]")
    if "path" not in tracks:
        raise ConfigError("[tracks] needs a path (the track file, relative to the run file)")
    mappings = {}
    for key in ("columns", "units"):
        mapping = tracks.get(key, {})
        if not isinstance(mapping, dict):
            raise ConfigError(f"[tracks] {key}: must be a table such as {{ t = \"time\" }}, "
                              f"got {_kind(mapping)}")
        for name, entry in mapping.items():
            if name not in CANONICAL_COLUMNS:
                raise ConfigError(f"[tracks] {key}: "
                                  f"{_unknown(name, CANONICAL_COLUMNS, 'column')}")
            _text(entry, f"[tracks] {key}.{name}")
        mappings[key] = dict(mapping)
    for name, unit in mappings["units"].items():
        if DIMENSIONS[name] is None:
            raise ConfigError(f"[tracks] units.{name}: column '{name}' has no unit")
        unit_factor(unit, DIMENSIONS[name], where=f"[tracks] units.{name}")
    charge = None
    if "charge" in tracks:
        charge = to_si(tracks["charge"], "charge", where="[tracks] charge")
        if charge == 0.0:
            raise ConfigError("[tracks] charge: must not be 0 (a neutral particle radiates "
                              "nothing)")
    u_offset = tracks.get("u_offset")
    return TracksConfig(
        path=_path(tracks["path"], base_dir, "[tracks] path"),
        format=None if "format" not in tracks else _text(tracks["format"], "[tracks] format"),
        charge_c=charge, columns=mappings["columns"], units=mappings["units"],
        u_offset_s=None if u_offset is None else to_si(u_offset, "time",
                                                       where="[tracks] u_offset"),
        plugins=raw["plugins"] if isinstance(raw.get("plugins"), dict) else {})


def _motion(raw: dict) -> MotionConfig:
    motion = _table(raw, "motion", "motion", "[motion]")
    degree = motion.get("degree", 5)
    if isinstance(degree, bool) or not isinstance(degree, int) or degree not in DEGREES:
        raise ConfigError(f"[motion] degree: the spline degree must be the whole number "
                          f"{' or '.join(map(str, DEGREES))}, got {_kind(degree)}")
    smoothing = to_si(motion.get("smoothing", 0.0), "length", where="[motion] smoothing")
    if smoothing < 0.0:
        raise ConfigError(f"[motion] smoothing: must be 0 or positive, got {smoothing!r}")
    return MotionConfig(degree=degree, smoothing_m=smoothing,
                        extend=_choice(motion.get("extend", "ballistic"), "[motion] extend",
                                       ("ballistic", "none")))


def _plane(spec: dict, label: str, center: tuple) -> dict:
    for key in ("u", "v", "size", "shape"):
        if key not in spec:
            raise ConfigError(f"{label}: plane needs '{key}'")
    shape = spec["shape"]
    if not isinstance(shape, list) or len(shape) != 2:
        raise ConfigError(f"{label} plane shape: expected [n_u, n_v] (two whole numbers), "
                          f"got {_kind(shape)}")
    shape = tuple(_whole(n, f"{label} plane shape[{i}]") for i, n in enumerate(shape))
    u = _vector(spec["u"], "dimensionless", f"{label} plane u")
    v = _vector(spec["v"], "dimensionless", f"{label} plane v")
    try:
        plane_axes(u, v)
    except ValueError as exc:
        raise ConfigError(f"{label}: {exc}") from None
    size = _vector(spec["size"], "length", f"{label} plane size", length=2)
    for i, (extent, count) in enumerate(zip(size, shape, strict=True)):
        if extent < 0.0 or (count > 1 and extent == 0.0):
            raise ConfigError(f"{label} plane size[{i}]: must be positive for {count} points "
                              f"along that axis, got {extent!r}")
    return dict(center_m=center, u=u, v=v, size_m=size, shape=shape)


def _sphere(spec: dict, label: str, center: tuple) -> dict:
    for key in ("radius", "theta", "phi"):
        if key not in spec:
            raise ConfigError(f"{label}: sphere needs '{key}'")
    angles = {}
    for key in ("theta", "phi"):
        value = spec[key]
        if not isinstance(value, list) or len(value) != 3:
            raise ConfigError(f"{label} sphere {key}: expected [first, last, count], got "
                              f"{_kind(value)}")
        ends = [to_si(item, "angle", where=f"{label} sphere {key}[{i}]")
                for i, item in enumerate(value[:2])]
        angles[key] = _listing((*ends, value[2]), f"{label} sphere {key}",
                               "first and last", MAX_POINTS_PER_GROUP)
    radius = to_si(spec["radius"], "length", where=f"{label} sphere radius")
    return dict(center_m=center, radius_m=_positive(radius, f"{label} sphere radius"),
                theta_rad=angles["theta"], phi_rad=angles["phi"])


def _observer(entry, index: int) -> ObserverConfig:
    label = f"[[observers]] #{index + 1}"
    if not isinstance(entry, dict):
        raise ConfigError(f"{label}: must be a table, got {_kind(entry)}")
    _check_keys(entry, "observers", label)
    if "name" not in entry:
        raise ConfigError(f"{label}: needs a name")
    name = _text(entry["name"], f"{label} name")
    label = f"[[observers]] '{name}'"
    shapes = [key for key in ("points", "plane", "sphere") if key in entry]
    if len(shapes) != 1:
        raise ConfigError(f"{label}: give exactly one of points, plane or sphere")
    kind = shapes[0]
    if kind == "points":
        points = entry["points"]
        if not isinstance(points, list) or not points:
            raise ConfigError(f"{label}: points is empty; give at least one [x, y, z]")
        if len(points) > MAX_POINTS_PER_GROUP:
            raise ConfigError(f"{label}: more than {MAX_POINTS_PER_GROUP:,} points")
        return ObserverConfig(name, kind, points_m=tuple(
            _vector(p, "length", f"{label} points[{i}]") for i, p in enumerate(points)))
    spec = _table(entry, kind, f"observers.{kind}", f"{label} {kind}")
    center = _vector(spec.get("center", [0.0, 0.0, 0.0]), "length", f"{label} {kind} center")
    shape = _plane(spec, label, center) if kind == "plane" else _sphere(spec, label, center)
    config = ObserverConfig(name, kind, **shape)
    if point_count(config) > MAX_POINTS_PER_GROUP:
        raise ConfigError(f"{label}: {point_count(config):,} points, more than the "
                          f"{MAX_POINTS_PER_GROUP:,} a group may hold")
    return config


def _observers(raw: dict) -> tuple:
    entries = raw.get("observers", [])
    if isinstance(entries, dict):
        raise ConfigError("[observers] must be written [[observers]] (a list of groups)")
    if not isinstance(entries, list) or not entries:
        raise ConfigError("no [[observers]] group; add at least one")
    observers = tuple(_observer(entry, i) for i, entry in enumerate(entries))
    names = [o.name for o in observers]
    duplicated = sorted({n for n in names if names.count(n) > 1})
    if duplicated:
        raise ConfigError(f"[[observers]] name '{duplicated[0]}' is used twice")
    return observers


def _time(raw: dict) -> TimeConfig:
    time = _table(raw, "time", "time", "[time]")
    if "step" not in time:
        raise ConfigError("[time] needs a step (e.g. step = \"1 ps\")")
    step = _positive(to_si(time["step"], "time", where="[time] step"), "[time] step")
    start, stop = (None if key not in time else to_si(time[key], "time", where=f"[time] {key}")
                   for key in ("start", "stop"))
    if start is not None and stop is not None and stop < start:
        raise ConfigError(f"[time] stop ({stop:g} s) is before start ({start:g} s)")
    return TimeConfig(step_s=step, start_s=start, stop_s=stop,
                      align=_choice(time.get("align", "group"), "[time] align",
                                    ("group", "point")))


def _spectrum(raw: dict) -> SpectrumConfig | None:
    if "spectrum" not in raw:
        return None
    spectrum = _table(raw, "spectrum", "spectrum", "[spectrum]")
    if "frequencies" not in spectrum:
        raise ConfigError("[spectrum] needs frequencies = { start = ..., stop = ..., "
                          "count = ..., spacing = \"log\" }")
    label = "[spectrum] frequencies"
    frequencies = _table(spectrum, "frequencies", "spectrum.frequencies", label)
    for key in ("start", "stop", "count"):
        if key not in frequencies:
            raise ConfigError(f"{label}: needs '{key}'")
    spacing = _choice(frequencies.get("spacing", "linear"), f"{label} spacing",
                      ("linear", "log"))
    start, stop = (to_si(frequencies[key], "frequency", where=f"{label} {key}")
                   for key in ("start", "stop"))
    if start < 0.0:
        raise ConfigError(f"{label} start: must be 0 or positive, got {start:g} Hz")
    if stop < start:
        raise ConfigError(f"{label}: stop ({stop:g} Hz) is below start ({start:g} Hz)")
    if spacing == "log" and start == 0.0:
        raise ConfigError(f"{label}: log spacing needs a positive start")
    _, _, count = _listing((start, stop, frequencies["count"]), label,
                           "start and stop", MAX_FREQUENCIES)
    return SpectrumConfig(
        start_hz=start, stop_hz=stop, count=count, spacing=spacing,
        coherent=_flag(spectrum.get("coherent", True), "[spectrum] coherent"),
        taper=_choice(spectrum.get("taper", "none"), "[spectrum] taper", ("none", "hann")))


def _compute(raw: dict) -> ComputeConfig:
    compute = _table(raw, "compute", "compute", "[compute]")
    return ComputeConfig(
        workers=None if "workers" not in compute
        else check_workers(compute["workers"], "[compute] workers"),
        scheduler=None if "scheduler" not in compute
        else check_scheduler_address(compute["scheduler"], "[compute] scheduler"),
        chunk=None if "chunk" not in compute else _whole(compute["chunk"], "[compute] chunk"))


def _output(raw: dict, base_dir: Path) -> OutputConfig:
    output = _table(raw, "output", "output", "[output]")
    formats = output.get("formats", ["parquet"])
    if isinstance(formats, str):
        formats = [formats]
    if not isinstance(formats, list) or not formats:
        got = "an empty list" if formats == [] else _kind(formats)
        raise ConfigError(f"[output] formats: expected a list of exporter names, such as "
                          f"[\"parquet\", \"plots\"], got {got}")
    names = tuple(_text(name, f"[output] formats[{i}]") for i, name in enumerate(formats))
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise ConfigError(f"[output] formats: '{repeated[0]}' is listed twice")
    return OutputConfig(dir=_path(output.get("dir", "out"), base_dir, "[output] dir"),
                        formats=names)


def _plugins(raw: dict) -> dict:
    plugins = raw.get("plugins", {})
    if not isinstance(plugins, dict):
        raise ConfigError(f"[plugins]: must be a table of per-plugin tables such as "
                          f"[plugins.plots], got {_kind(plugins)}")
    for name, table in plugins.items():
        if not isinstance(table, dict):
            raise ConfigError(f"[plugins] {name}: must be a table ([plugins.{name}]), got "
                              f"{_kind(table)}")
    return dict(plugins)


def _parse(raw, base_dir: Path, source) -> RunConfig:
    if not isinstance(raw, dict):
        raise ConfigError(f"expected a table of run settings, got {_kind(raw)}")
    _check_keys(raw, "", "the top level")
    tracks = _tracks(raw, base_dir)
    motion = _motion(raw)
    observers = _observers(raw)
    far_field = _flag(_table(raw, "fields", "fields", "[fields]").get("far_field", False),
                      "[fields] far_field")
    time = _time(raw)
    detectors = parse_detectors(raw.get("detectors", []), base_dir=base_dir, where="",
                                groups={o.name: point_count(o) for o in observers},
                                step_s=time.step_s)
    return RunConfig(source=source, raw=raw, tracks=tracks, motion=motion,
                     observers=observers, far_field=far_field, time=time,
                     spectrum=_spectrum(raw), compute=_compute(raw),
                     output=_output(raw, base_dir), plugins=_plugins(raw), detectors=detectors)


def parse(raw: dict, *, base_dir: Path, source: Path | None = None) -> RunConfig:
    """Check a run-file dictionary and return the RunConfig (paths relative to base_dir).
    Errors name the run file (`source`) first."""
    try:
        return _parse(raw, Path(base_dir), source)
    except ConfigError as exc:
        where = str(source) if source else "run file"
        raise type(exc)(f"{where}: {exc}") from None


# ---------------------------------------------------------------------------- the file
def read_text(path: Path) -> str:
    """The run file's text: UTF-8 (a byte-order mark is skipped), never empty."""
    if path.is_dir():
        raise ConfigError(f"run file {path} is a directory; give the .toml file inside it")
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise ConfigError(f"run file {path} does not exist") from None
    except PermissionError:
        raise ConfigError(f"run file {path} cannot be read (permission denied)") from None
    except OSError as exc:
        raise ConfigError(f"run file {path} cannot be read ({exc.strerror})") from None
    if data.startswith(codecs.BOM_UTF8):
        data = data[len(codecs.BOM_UTF8):]
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)) or b"\x00" in data:
        raise ConfigError(f"run file {path} is saved as UTF-16 (or holds NUL bytes); "
                          "save it as UTF-8")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise ConfigError(f"run file {path} is not UTF-8 (byte 0x{data[exc.start]:02X} on "
                          f"line {line}; Latin-1 or Windows-1252?); save it as UTF-8") from None
    if not text.strip():
        raise ConfigError(f"run file {path} is empty")
    return text


def load(path) -> RunConfig:
    """Read and check the run file at `path`."""
    path = Path(path)
    text = read_text(path)
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"run file {path} is not valid TOML: {exc}") from None
    return parse(raw, base_dir=path.resolve().parent, source=path)

