"""Detectors: what an instrument at observer points records.

A `[[detectors]]` entry of the run file becomes a frozen `DetectorConfig` of SI values
(`parse_detectors`), with the files it names (impulse-response tables, Touchstone files)
already read and checked, so a bad entry stops the run before any field is computed.
`detector_tables` then turns the engine's bin-averaged fields into SPEC's voltages table
(sensor, then the chain in order) and digitized table. The physics is in `sensors.py`,
`chain.py` and `digitizer.py`; this module holds the run-file keys, the checks and the tables.
"""

from __future__ import annotations

import collections
import dataclasses
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from .chain import ELEMENTS, Butterworth, Gain, ImpulseResponse, Touchstone
from .digitizer import MAX_BITS, Digitizer
from .errors import DetectorError, LagfieldError
from .sensors import REFERENCE_LOAD_OHM, SENSORS, EffectiveArea, EffectiveLength, Electrode
from .typos import nearest
from .units import gain_factor, to_si

# every key a [[detectors]] entry may hold, per table
DETECTOR_KEYS = {
    "detectors": {"name", "observer", "points", "sensor", "load", "chain", "digitizer"},
    "sensor": set(SENSORS),
    "electrode": {"area", "normal"},
    "load": {"resistance", "capacitance"},
    "chain": set(ELEMENTS),
    "butterworth": {"band", "lowpass", "highpass", "order"},
    "impulse_response": {"path"},
    "touchstone": {"path"},
    "digitizer": {"rate", "bits", "range", "noise", "seed"},
}
VOLTAGE_COLUMNS = ("detector", "point", "t", "V")
DIGITIZED_COLUMNS = ("detector", "point", "t", "code", "V")
DEFAULT_ORDER = 4
MAX_ORDER = 20
UNIFORM_TOLERANCE = 1e-3  # allowed deviation of an impulse table's spacing, relative


@dataclasses.dataclass(frozen=True, eq=False)
class DetectorConfig:
    """One detector: it reads observer group `observer` at `points` (None: all points),
    turns the field into a voltage with `sensor`, applies `chain` in order and, with a
    `digitizer`, samples and quantizes the result. inputs: the files it read."""

    name: str
    observer: str
    points: tuple | None
    sensor: EffectiveLength | EffectiveArea | Electrode
    chain: tuple = ()
    digitizer: Digitizer | None = None
    inputs: tuple = ()


# ---------------------------------------------------------------------------- reading values
def _keys(table, section: str, place: str) -> dict:
    if not isinstance(table, dict):
        raise DetectorError(f"{place}: {section} must be a table")
    allowed = sorted(DETECTOR_KEYS[section])
    for key in table:
        if key not in allowed:
            close = nearest(key, allowed)
            hint = f"did you mean '{close}'?" if close else f"known: {', '.join(allowed)}"
            raise DetectorError(f"{place}: unknown key '{key}' in {section}; {hint}")
    return table


def _require(table: dict, key: str, section: str, place: str):
    if key not in table:
        raise DetectorError(f"{place}: {section} needs '{key}'")
    return table[key]


def _quantity(value, dimension: str, place: str, *, positive: bool = False) -> float:
    try:
        number = to_si(value, dimension, where=place)
    except LagfieldError as exc:
        raise DetectorError(str(exc)) from None
    if positive and not number > 0.0:
        raise DetectorError(f"{place}: must be positive, got {value!r}")
    return number


def _gain(value, place: str) -> float:
    try:
        return gain_factor(value, where=place)
    except LagfieldError as exc:
        raise DetectorError(str(exc)) from None


def _vector(value, dimension: str, place: str) -> tuple:
    if not isinstance(value, list | tuple) or len(value) != 3:
        raise DetectorError(f"{place}: expected a list of 3 values, got {value!r}")
    vector = tuple(_quantity(item, dimension, place) for item in value)
    if not any(vector):
        raise DetectorError(f"{place}: is the zero vector")
    return vector


def _integer(value, place: str, lowest: int, highest: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not lowest <= value <= highest:
        raise DetectorError(f"{place}: expected a whole number from {lowest} to {highest}, "
                            f"got {value!r}")
    return value


def _file(value, base_dir: Path, place: str) -> Path:
    if not isinstance(value, str) or not value:
        raise DetectorError(f"{place}: path must be a file name, got {value!r}")
    path = (Path(base_dir) / value).resolve()
    if not path.is_file():
        raise DetectorError(f"{place}: file {value} does not exist (looked in {path.parent})")
    return path


# ---------------------------------------------------------------------------- files
def read_impulse_response(path: Path, place: str) -> ImpulseResponse:
    """An impulse-response table: CSV with columns t (s, uniform, ≥ 0) and h (1/s)."""
    try:
        table = pd.read_csv(path)
    except Exception as exc:  # pandas raises several classes; all mean "unreadable"
        raise DetectorError(f"{place}: cannot read {path.name} as CSV "
                            f"({type(exc).__name__}: {exc})") from None
    columns = {}
    for column in ("t", "h"):
        if column not in table.columns:
            raise DetectorError(f"{place}: {path.name} has no column '{column}' (columns: "
                                f"{', '.join(map(str, table.columns))}); it needs t (s), h (1/s)")
        values = pd.to_numeric(table[column], errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(~np.isfinite(values))
        if bad.size:
            raise DetectorError(f"{place}: {path.name} column '{column}' row {bad[0] + 1}: "
                                f"not a finite number ({table[column].iloc[bad[0]]!r})")
        columns[column] = values
    t_s = columns["t"]
    if t_s.size < 2:
        raise DetectorError(f"{place}: {path.name} needs at least 2 rows")
    if t_s[0] < 0.0:
        raise DetectorError(f"{place}: {path.name} column 't' row 1: negative time "
                            f"{t_s[0]:.6g} s (a response cannot precede its cause)")
    spacing = np.diff(t_s)
    uneven = np.flatnonzero((np.abs(spacing - spacing[0]) > UNIFORM_TOLERANCE * spacing[0])
                            | (spacing <= 0.0))
    if uneven.size:
        raise DetectorError(f"{place}: {path.name} column 't' row {int(uneven[0]) + 2}: times "
                            f"must increase uniformly (the first rows are {spacing[0]:.6g} s "
                            f"apart)")
    return ImpulseResponse(t_s=t_s, h_per_s=columns["h"], source=path.name)


def read_touchstone(path: Path, place: str) -> Touchstone:
    """S21 of a 2-port Touchstone file, read with scikit-rf."""
    try:
        import skrf
    except ModuleNotFoundError:
        raise DetectorError(f"{place}: reading Touchstone files needs scikit-rf "
                            "(pip install scikit-rf)") from None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            network = skrf.Network(str(path))
    except Exception as exc:  # the reader raises many classes for malformed files
        raise DetectorError(f"{place}: cannot read {path.name} as a Touchstone file "
                            f"({type(exc).__name__}: {exc})") from None
    if network.nports != 2:
        raise DetectorError(f"{place}: {path.name} is a {network.nports}-port file; a "
                            "touchstone element needs a 2-port (.s2p) file for its S21")
    frequency_hz = np.asarray(network.f, dtype=float)
    s21 = np.asarray(network.s[:, 1, 0], dtype=complex)
    if frequency_hz.size < 2 or np.any(np.diff(frequency_hz) <= 0.0) or frequency_hz[0] < 0.0:
        raise DetectorError(f"{place}: {path.name} needs at least 2 distinct, ascending, "
                            "non-negative frequencies")
    bad = np.flatnonzero(~np.isfinite(s21))
    if bad.size:
        raise DetectorError(f"{place}: {path.name}: S21 is not finite at "
                            f"{frequency_hz[bad[0]]:.6g} Hz")
    return Touchstone(frequency_hz=frequency_hz, s21=s21, source=path.name)


# the chain elements read from a file, and their readers
FILE_READERS = {"impulse_response": read_impulse_response, "touchstone": read_touchstone}


# ---------------------------------------------------------------------------- entries
def _sensor(entry: dict, place: str):
    table = _keys(_require(entry, "sensor", "a detector", place), "sensor", place)
    if len(table) != 1:
        given = " and ".join(table) if table else "nothing"
        raise DetectorError(f"{place}: sensor must hold exactly one of "
                            f"{', '.join(sorted(SENSORS))}; it holds {given}")
    (kind, spec), = table.items()
    where = f"{place}: sensor {kind}"
    if kind == "effective_length":
        sensor = EffectiveLength(length_m=_vector(spec, "length", where))
    elif kind == "effective_area":
        sensor = EffectiveArea(area_m2=_vector(spec, "area", where))
    else:
        _keys(spec, "electrode", place)
        area = _quantity(_require(spec, "area", "electrode", place), "area",
                         f"{where} area", positive=True)
        normal = np.array(_vector(_require(spec, "normal", "electrode", place),
                                  "dimensionless", f"{where} normal"))
        resistance, capacitance = _load(entry, place)
        sensor = Electrode(area_m2=area, normal=tuple(float(c) for c in
                                                      normal / np.linalg.norm(normal)),
                           resistance_ohm=resistance, capacitance_f=capacitance)
    if "load" in entry and kind != "electrode":
        raise DetectorError(f"{place}: load applies to an electrode sensor only, not to "
                            f"{kind}")
    return sensor


def _load(entry: dict, place: str) -> tuple[float, float]:
    """(resistance_ohm, capacitance_f) of the electrode's load: 50 Ω without a load,
    R = ∞ when only a capacitance is given, C = 0 when only a resistance is."""
    if "load" not in entry:
        return REFERENCE_LOAD_OHM, 0.0
    load = _keys(entry["load"], "load", place)
    if not load:
        raise DetectorError(f"{place}: load needs a resistance, a capacitance or both")
    resistance = math.inf if "resistance" not in load else _quantity(
        load["resistance"], "resistance", f"{place}: load resistance", positive=True)
    capacitance = 0.0 if "capacitance" not in load else _quantity(
        load["capacitance"], "capacitance", f"{place}: load capacitance", positive=True)
    return resistance, capacitance


def _butterworth(spec, place: str) -> Butterworth:
    _keys(spec, "butterworth", place)
    given = [key for key in ("band", "lowpass", "highpass") if key in spec]
    if len(given) != 1:
        raise DetectorError(f"{place}: give exactly one of band = [low, high], lowpass = f "
                            "or highpass = f")
    order = _integer(spec.get("order", DEFAULT_ORDER), f"{place} order", 1, MAX_ORDER)
    if given[0] == "lowpass":
        return Butterworth(order, high_hz=_quantity(spec["lowpass"], "frequency",
                                                    f"{place} lowpass", positive=True))
    if given[0] == "highpass":
        return Butterworth(order, low_hz=_quantity(spec["highpass"], "frequency",
                                                   f"{place} highpass", positive=True))
    band = spec["band"]
    if not isinstance(band, list | tuple) or len(band) != 2:
        raise DetectorError(f"{place} band: expected [low, high], got {band!r}")
    low, high = (_quantity(f, "frequency", f"{place} band", positive=True) for f in band)
    if not low < high:
        raise DetectorError(f"{place} band: low edge {low:.6g} Hz is not below the high edge "
                            f"{high:.6g} Hz")
    return Butterworth(order, low_hz=low, high_hz=high)


def _chain(entry: dict, base_dir: Path, place: str) -> tuple[tuple, tuple]:
    """(elements, files read) of the entry's chain."""
    chain = entry.get("chain", [])
    if not isinstance(chain, list):
        raise DetectorError(f"{place}: chain must be a list of elements, e.g. "
                            "[{ gain = \"20 dB\" }]")
    elements, inputs = [], []
    for index, item in enumerate(chain):
        where = f"{place}: chain element {index + 1}"
        _keys(item, "chain", where)
        if len(item) != 1:
            raise DetectorError(f"{where}: each element holds exactly one of "
                                f"{', '.join(sorted(ELEMENTS))}")
        (kind, spec), = item.items()
        where = f"{where} ({kind})"
        if kind == "butterworth":
            elements.append(_butterworth(spec, where))
        elif kind == "gain":
            elements.append(Gain(factor=_gain(spec, where)))
        else:
            _keys(spec, kind, where)
            path = _file(_require(spec, "path", kind, where), base_dir, where)
            elements.append(FILE_READERS[kind](path, where))
            inputs.append(path)
    return tuple(elements), tuple(inputs)


def _digitizer(spec, place: str) -> Digitizer:
    place = f"{place}: digitizer"
    _keys(spec, "digitizer", place)
    span = _require(spec, "range", "digitizer", place)
    if not isinstance(span, list | tuple) or len(span) != 2:
        raise DetectorError(f"{place} range: expected [low, high], got {span!r}")
    low, high = (_quantity(v, "voltage", f"{place} range") for v in span)
    if not high > 0.0 or abs(low + high) > 1e-9 * high:
        raise DetectorError(f"{place} range: must be symmetric about 0 as [-V, V] with V > 0, "
                            f"got [{low:.6g} V, {high:.6g} V]")
    seed = spec.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise DetectorError(f"{place} seed: expected a whole number >= 0, got {seed!r}")
    noise = _quantity(spec.get("noise", 0.0), "voltage", f"{place} noise")
    if noise < 0.0:
        raise DetectorError(f"{place} noise: an rms cannot be negative, got {noise:.6g} V")
    return Digitizer(
        rate_hz=_quantity(_require(spec, "rate", "digitizer", place), "frequency",
                          f"{place} rate", positive=True),
        bits=_integer(_require(spec, "bits", "digitizer", place), f"{place} bits", 1, MAX_BITS),
        full_scale_v=high, noise_v=noise, seed=seed)


def _points(entry: dict, place: str) -> tuple | None:
    if "points" not in entry:
        return None
    points = entry["points"]
    if not isinstance(points, list) or not points:
        raise DetectorError(f"{place}: points must be a non-empty list of point indices")
    for point in points:
        _integer(point, f"{place}: points", 0, 2**62)
    repeated = sorted(p for p, times in collections.Counter(points).items() if times > 1)
    if repeated:
        raise DetectorError(f"{place}: point {repeated[0]} is listed twice in points")
    return tuple(points)


def _check_reach(detector: DetectorConfig, groups: dict, place: str) -> None:
    if detector.observer not in groups:
        close = nearest(detector.observer, groups)
        hint = f"; did you mean '{close}'?" if close else \
            f"; groups: {', '.join(sorted(groups)) or 'none'}"
        raise DetectorError(f"{place}: observer group '{detector.observer}' does not "
                            f"exist{hint}")
    count = groups[detector.observer]
    beyond = [p for p in detector.points or () if p >= count]
    if beyond:
        raise DetectorError(f"{place}: point {beyond[0]} is out of range; observer group "
                            f"'{detector.observer}' has points 0 … {count - 1}")


def _lead(where: str) -> str:
    """The prefix of a message: "run.toml: ", or nothing for an empty `where`."""
    return f"{where}: " if where else ""


def check_step(detector: DetectorConfig, step_s: float, where: str = "run file") -> None:
    """DetectorError when the step is too coarse for the detector's band or rate."""
    for index, element in enumerate(detector.chain):
        problem = element.check_step(step_s)
        if problem:
            raise DetectorError(f"{_lead(where)}detector '{detector.name}': chain element "
                                f"{index + 1}: {problem}")
    if detector.digitizer is not None:
        problem = detector.digitizer.check_step(step_s)
        if problem:
            raise DetectorError(f"{_lead(where)}detector '{detector.name}': {problem}")


def parse_detectors(entries, *, base_dir, where: str = "run file", groups: dict | None = None,
                    step_s: float | None = None) -> tuple[DetectorConfig, ...]:
    """The run file's `[[detectors]]` entries as DetectorConfigs (SI values, files read).

    base_dir: where relative paths start (the run file's folder). where: what messages
    start with (the run file; "" for none, when the caller adds it). groups: observer group
    name → number of points, to check `observer` and `points` now (None: checked later by
    detector_tables). step_s: the run's step, to check bands and rates now.
    """
    if not isinstance(entries, list):
        raise DetectorError(f"{_lead(where)}detectors must be a list of [[detectors]] tables "
                            "(write [[detectors]], not [detectors])")
    detectors = []
    for index, entry in enumerate(entries):
        place = f"{_lead(where)}[[detectors]] #{index + 1}"
        if not isinstance(entry, dict):
            raise DetectorError(f"{place}: must be a table")
        name = entry.get("name")
        if not isinstance(name, str) or not name:
            raise DetectorError(f"{place}: needs a name")
        place = f"{_lead(where)}detector '{name}'"
        _keys(entry, "detectors", place)
        if any(d.name == name for d in detectors):
            raise DetectorError(f"{place}: the name is used by another detector")
        observer = _require(entry, "observer", "a detector", place)
        if not isinstance(observer, str):
            raise DetectorError(f"{place}: observer must name an observer group")
        chain, inputs = _chain(entry, base_dir, place)
        detector = DetectorConfig(
            name=name, observer=observer, points=_points(entry, place),
            sensor=_sensor(entry, place), chain=chain,
            digitizer=None if "digitizer" not in entry else _digitizer(entry["digitizer"],
                                                                       place),
            inputs=inputs)
        if groups is not None:
            _check_reach(detector, groups, place)
        if step_s is not None:
            check_step(detector, step_s, where)
        detectors.append(detector)
    return tuple(detectors)


# ---------------------------------------------------------------------------- tables
def point_voltage(detector: DetectorConfig, fields, point: int) -> np.ndarray:
    """The analog voltage (n_bins,) of one point: the sensor, then the chain in order."""
    n = int(fields.n_bins[point])
    step_s = fields.step_s
    volts = detector.sensor.voltage(fields.e_v_per_m[point, :n], fields.b_t[point, :n], step_s)
    for index, element in enumerate(detector.chain):
        try:
            volts = element.apply(volts, step_s)
        except DetectorError as exc:
            raise DetectorError(f"detector '{detector.name}', point {point}: chain element "
                                f"{index + 1}: {exc}") from None
    return volts


def _detector_frame(name: str, parts: list, columns: tuple) -> pd.DataFrame:
    """One detector's rows from per-point dicts of equal-length arrays (detector set once,
    as a scalar, which pandas stores far faster than a column of repeated names)."""
    frame = pd.DataFrame({column: np.concatenate([part[column] for part in parts])
                          for column in columns[1:]})
    frame.insert(0, "detector", name)
    return frame


def _stack(frames: list, columns: tuple) -> pd.DataFrame:
    if frames:
        return pd.concat(frames, ignore_index=True)
    types = {"detector": str, "point": np.int64, "code": np.int64}
    return pd.DataFrame({c: pd.Series(dtype=types.get(c, float)) for c in columns})


def detector_tables(detectors, group_fields_by_name: dict):
    """(voltages, digitized or None): SPEC's tables for `detectors`, from the engine's
    GroupFields by observer group name. digitized is None when no detector digitizes."""
    voltages, digitized = [], []
    counts = {name: len(fields.n_bins) for name, fields in group_fields_by_name.items()}
    for detector in detectors:
        _check_reach(detector, counts, f"detector '{detector.name}'")
        fields = group_fields_by_name[detector.observer]
        count = counts[detector.observer]
        check_step(detector, fields.step_s, "")
        rng = detector.digitizer.rng() if detector.digitizer else None
        analog, sampled = [], []
        for point in detector.points if detector.points is not None else range(count):
            times = fields.times(point)
            volts = point_voltage(detector, fields, point)
            analog.append({"point": np.full(times.size, point, dtype=np.int64), "t": times,
                           "V": volts})
            if rng is not None:
                t, codes, levels = detector.digitizer.digitize(times, volts, rng)
                sampled.append({"point": np.full(t.size, point, dtype=np.int64), "t": t,
                                "code": codes, "V": levels})
        if analog:
            voltages.append(_detector_frame(detector.name, analog, VOLTAGE_COLUMNS))
        if sampled:
            digitized.append(_detector_frame(detector.name, sampled, DIGITIZED_COLUMNS))
    has_digitizer = any(d.digitizer is not None for d in detectors)
    return (_stack(voltages, VOLTAGE_COLUMNS),
            _stack(digitized, DIGITIZED_COLUMNS) if has_digitizer else None)
