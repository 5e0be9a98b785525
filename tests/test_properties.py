"""Property-based tests of the promise made to users about their input (SPEC.md, "Track
tables" and "Outputs"; README, "Errors"):

- bad input (a broken track table or run file) gives exactly one line on stderr, starting
  "lagfield: error:", a non-zero exit code that is not the one for an unexpected failure,
  no traceback, and nothing written: every file beside the run file, and any output
  directory already there, is left as it was;
- valid input gives finite tables.

Each defect is a small, named generator applied to a valid input, so a failure names the
kind of damage and hypothesis shrinks it to a minimal example. Most runs are in-process
(`lagfield.cli.main`) for speed; a few go through the installed `lagfield` command.
Profiles (tests/conftest.py): "ci" by default, "slow" with LAGFIELD_HYPOTHESIS_PROFILE=slow.
"""

from __future__ import annotations

import contextlib
import copy
import dataclasses
import datetime
import io
import math
import re
import shutil
import subprocess
import sys
import tempfile
import tomllib
import traceback
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import constants

import lagfield
from lagfield import cli

C_M_PER_S = constants.c
ELECTRON_C = -constants.e  # CODATA 2018, exact
EXIT_BUG = getattr(cli, "EXIT_BUG", 1)  # the CLI's code for an unexpected exception
FIELD_COLUMNS = ["observer", "point", "t", "Ex", "Ey", "Ez", "Bx", "By", "Bz"]  # SPEC, Outputs
OBSERVER_COLUMNS = ["observer", "point", "x", "y", "z"]  # SPEC, Outputs
SPHERE_COLUMNS = ("theta", "phi", "dW_df_dOmega")  # SPEC, Outputs: "for spheres"
SPHERE_GROUPS = ("sky",)  # names of the sphere groups of the runs built here
REQUIRED_COLUMNS = ("particle", "t", "x", "y", "z")  # SPEC, Track tables
MOMENTUM_COLUMNS = ("ux", "uy", "uz")
# warning classes Python's default filters do not print, so a user never sees them
UNSHOWN_WARNINGS = (DeprecationWarning, PendingDeprecationWarning, ImportWarning,
                    ResourceWarning)
SPAN_S = 1e-10  # time span of every generated track
MIN_DEGREE_SAMPLES = 6  # default spline degree 5 needs 6 samples (README, [motion] degree)


def examples(n: int) -> int:
    """`n` examples under the "ci" profile (10 per test), scaled up with the profile."""
    return max(1, n * settings.default.max_examples // 10)


# ------------------------------------------------------------------------------------------
# running the command and checking the promise
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass
class Outcome:
    """What a user would see: exit code, stdout, stderr (with the warnings Python would
    print and the traceback of an exception that escaped `main`)."""

    code: int
    stdout: str
    stderr: str
    escaped: BaseException | None = None

    def describe(self) -> str:
        return f"exit code {self.code}\n--- stderr ---\n{self.stderr}--- stdout ---\n{self.stdout}"


def run_cli(argv: list[str]) -> Outcome:
    """`lagfield ARGV` in this process."""
    out, err = io.StringIO(), io.StringIO()
    escaped = None
    with (contextlib.redirect_stdout(out), contextlib.redirect_stderr(err),
          warnings.catch_warnings(record=True) as caught):
        warnings.simplefilter("always")
        try:
            code = cli.main(argv)
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
        except Exception as exc:  # the installed command would print a traceback
            code, escaped = 1, exc
    shown = [w for w in caught if not issubclass(w.category, UNSHOWN_WARNINGS)]
    stderr = err.getvalue() + "".join(
        warnings.formatwarning(w.message, w.category, w.filename, w.lineno) for w in shown)
    if escaped is not None:
        stderr += "".join(traceback.format_exception(escaped))
    return Outcome(code, out.getvalue(), stderr, escaped)


def lagfield_command() -> list[str]:
    """The installed `lagfield` script (the one beside this Python, else on PATH)."""
    script = Path(sys.executable).with_name("lagfield")
    if script.exists():
        return [str(script)]
    found = shutil.which("lagfield")
    return [found] if found else [sys.executable, "-m", "lagfield"]


def run_command(argv: list[str]) -> Outcome:
    """`lagfield ARGV` as a separate process, as a user runs it."""
    done = subprocess.run(lagfield_command() + argv, capture_output=True, text=True,
                          timeout=300, check=False)
    return Outcome(done.returncode, done.stdout, done.stderr)


def snapshot(root: Path) -> dict:
    """Every file and directory under `root`: kind, size, modification time, content."""
    state = {}
    for path in sorted(root.rglob("*")):
        key = path.relative_to(root).as_posix()
        if path.is_dir():
            state[key] = "dir"
        else:
            stat = path.stat()
            state[key] = (stat.st_size, stat.st_mtime_ns, path.read_bytes())
    return state


def changes(before: dict, after: dict) -> list[str]:
    return sorted({k for k in before.keys() | after.keys() if before.get(k) != after.get(k)})


def assert_refused(outcome: Outcome, before: dict, after: dict, names=()) -> None:
    """The promise for bad input; `names` must appear in the error line."""
    detail = outcome.describe()
    assert outcome.escaped is None, f"an exception escaped:\n{detail}"
    assert "Traceback" not in outcome.stderr, detail
    assert outcome.code != 0, f"bad input was accepted:\n{detail}"
    assert outcome.code != EXIT_BUG, f"reported as an unexpected failure:\n{detail}"
    lines = outcome.stderr.splitlines()
    assert len(lines) == 1, f"stderr is not one line:\n{detail}"
    assert lines[0].startswith("lagfield: error:"), detail
    for name in names:
        assert str(name) in lines[0], f"the error does not name {name!r}:\n{detail}"
    assert not changes(before, after), f"files changed: {changes(before, after)}\n{detail}"


def assert_finite_results(out_dir: Path, n_points: int | None = None,
                          step_s: float | None = None) -> None:
    """SPEC's tables in `out_dir` (CSV or Parquet) exist and hold finite numbers."""
    tables = {}
    for name in ("observers", "fields", "spectra"):
        for suffix, read in ((".csv", pd.read_csv), (".parquet", pd.read_parquet)):
            if (out_dir / f"{name}{suffix}").exists():
                tables[name] = read(out_dir / f"{name}{suffix}")
    assert {"observers", "fields"} <= tables.keys(), sorted(p.name for p in out_dir.iterdir())
    observers, fields = tables["observers"], tables["fields"]
    assert list(observers.columns[:5]) == OBSERVER_COLUMNS
    assert list(fields.columns) == FIELD_COLUMNS
    for name, table in tables.items():
        numbers = table.drop(columns=list(SPHERE_COLUMNS), errors="ignore")
        numbers = numbers.select_dtypes(include="number").to_numpy(dtype=float)
        assert np.isfinite(numbers).all(), f"{name} holds non-finite values"
        sphere = table[table["observer"].isin(SPHERE_GROUPS)]
        for column in set(SPHERE_COLUMNS) & set(table.columns):
            assert np.isfinite(sphere[column].to_numpy(dtype=float)).all(), (name, column)
    if n_points is not None:
        assert len(observers) == n_points
        assert fields.groupby(["observer", "point"]).ngroups == n_points
    if step_s is not None:  # SPEC, Time grid: t_k = start + k step
        for _, group in fields.groupby(["observer", "point"]):
            dt = np.diff(group["t"].to_numpy())
            np.testing.assert_allclose(dt, step_s, rtol=1e-6)


def assert_clean(outcome: Outcome, before: dict, after: dict, out_dir: Path) -> None:
    """Input that may be accepted or refused: either finite tables, or the promise for bad
    input; never a crash."""
    if outcome.code == 0 and outcome.escaped is None:
        assert_finite_results(out_dir)
        outside = [k for k in changes(before, after) if not k.startswith(out_dir.name)]
        assert not outside, f"files outside the output directory changed: {outside}"
    else:
        assert_refused(outcome, before, after)


# ------------------------------------------------------------------------------------------
# run files: a small TOML writer (the standard library reads TOML but does not write it)
# ------------------------------------------------------------------------------------------

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")


def toml_key(key: str) -> str:
    return key if _BARE_KEY.fullmatch(key) else toml_string(key)


def toml_string(text: str) -> str:
    escaped = "".join(
        "\\" + ch if ch in '"\\' else f"\\u{ord(ch):04X}" if ord(ch) < 0x20 or ord(ch) == 0x7F
        else ch for ch in text)
    return f'"{escaped}"'


def toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float) and math.isnan(value):
        return "nan"
    if isinstance(value, float) and math.isinf(value):
        return "inf" if value > 0 else "-inf"
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, datetime.date | datetime.time):
        return value.isoformat()
    if isinstance(value, list | tuple):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{toml_key(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(f"no TOML form for {value!r}")


def _is_table_array(value) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)


def toml_document(run: dict) -> str:
    """The run dictionary as a TOML document: top-level tables as [sections], lists of
    tables as [[arrays]], everything below them inline."""
    def body(table):
        return [f"{toml_key(k)} = {toml_value(v)}" for k, v in table.items()]

    sectioned = {k: v for k, v in run.items() if isinstance(v, dict) or _is_table_array(v)}
    lines = body({k: v for k, v in run.items() if k not in sectioned})
    for key, value in sectioned.items():
        for table in (value if isinstance(value, list) else [value]):
            lines += [f"[[{toml_key(key)}]]" if isinstance(value, list)
                      else f"[{toml_key(key)}]", *body(table)]
    return "\n".join(lines) + "\n"


def base_run(tracks_name: str = "tracks.csv") -> dict:
    """A valid run using every run-file key whose value is cheap to compute: a points
    group, a plane and a sphere, an explicit window, a spectrum. Tracks move in the x-z
    plane within 1 mm of y = 0; every observer point is at y >= 5 cm."""
    return {
        "tracks": {"path": tracks_name, "charge": "-1 e", "columns": {"t": "t"},
                   "units": {"t": "s", "x": "m"}, "u_offset": "0 ps"},
        "motion": {"degree": 5, "extend": "ballistic", "smoothing": 0.0},
        "observers": [
            {"name": "pickup", "points": [[0.0, 0.05, 0.0], ["2 cm", 0.06, 0.01]]},
            {"name": "screen", "plane": {"center": [0.0, 0.2, 0.0], "u": [1.0, 0.0, 0.0],
                                         "v": [0.0, 0.0, 1.0], "size": [0.02, "2 cm"],
                                         "shape": [2, 2]}},
            {"name": "sky", "sphere": {"center": [0.0, 0.0, 0.0], "radius": "50 cm",
                                       "theta": [1.2, 1.4, 2], "phi": [1.4, "97 deg", 2]}},
        ],
        "fields": {"far_field": False},
        "time": {"step": "5 ps", "start": "-0.1 ns", "stop": 3e-10, "align": "group"},
        "spectrum": {"frequencies": {"start": "1 GHz", "stop": 1e11, "count": 4,
                                     "spacing": "log"},
                     "coherent": True, "taper": "none"},
        "compute": {"chunk": 100},
        "output": {"dir": "out", "formats": ["csv"]},
    }


BASE_POINTS = 2 + 4 + 4  # points of base_run's groups


def dig(run: dict, path: tuple):
    """The container holding the last key of `path`, and that key."""
    node = run
    for key in path[:-1]:
        node = node[key]
    return node, path[-1]


def with_value(run: dict, path: tuple, value) -> dict:
    run = copy.deepcopy(run)
    node, key = dig(run, path)
    node[key] = value
    return run


def without(run: dict, path: tuple) -> dict:
    run = copy.deepcopy(run)
    node, key = dig(run, path)
    del node[key]
    return run


# ------------------------------------------------------------------------------------------
# track tables
# ------------------------------------------------------------------------------------------

def motion_frame(particle: int, n_samples: int, gamma: float, radius_m: float | None,
                 offset_m: tuple, momentum: bool) -> pd.DataFrame:
    """One electron on a straight line along z, or on an arc of radius `radius_m` in the
    x-z plane, at constant speed; u = γβ along the motion."""
    beta = math.sqrt(1.0 - 1.0 / gamma**2)
    t = np.linspace(-SPAN_S / 2, SPAN_S / 2, n_samples)
    path_m = beta * C_M_PER_S * t
    if radius_m is None:
        angle = np.zeros_like(t)
        x, z = np.zeros_like(t), path_m
    else:
        angle = path_m / radius_m
        x, z = radius_m * (1.0 - np.cos(angle)), radius_m * np.sin(angle)
    frame = pd.DataFrame({"particle": particle, "t": t, "x": x + offset_m[0],
                          "y": np.full_like(t, offset_m[1]), "z": z})
    if momentum:
        u = gamma * beta
        frame["ux"], frame["uy"], frame["uz"] = u * np.sin(angle), 0.0, u * np.cos(angle)
    return frame


@st.composite
def track_frames(draw, *, momentum=None, extras=None, max_particles=3, shuffle=True):
    """Valid track tables: 1-3 electrons, 8-14 samples each over 100 ps, modest γ, straight
    or gently curved, optional u, charge and weight columns, rows in any order."""
    n_particles = draw(st.integers(1, max_particles))
    ids = draw(st.lists(st.integers(-1000, 10**6), min_size=n_particles,
                        max_size=n_particles, unique=True))
    momentum = draw(st.booleans()) if momentum is None else momentum
    extras = draw(st.sampled_from([(), ("charge",), ("weight",), ("charge", "weight")])) \
        if extras is None else extras
    parts = []
    for particle in ids:
        frame = motion_frame(
            particle, draw(st.integers(8, 14)), draw(st.floats(1.2, 5.0)),
            draw(st.none() | st.floats(0.2, 5.0)),
            (draw(st.floats(-1e-3, 1e-3)), draw(st.floats(-1e-3, 1e-3))), momentum)
        if "charge" in extras:
            frame["charge"] = ELECTRON_C
        if "weight" in extras:
            frame["weight"] = draw(st.floats(1.0, 1e6))
        parts.append(frame)
    frame = pd.concat(parts, ignore_index=True)
    if shuffle and draw(st.booleans()):
        order = draw(st.permutations(range(len(frame))))
        frame = frame.iloc[list(order)].reset_index(drop=True)
    return frame


def write_tracks(content, path: Path) -> None:
    """A DataFrame (duplicate column names allowed) as CSV or Parquet, or raw bytes."""
    if isinstance(content, bytes):
        path.write_bytes(content)
    elif path.suffix == ".csv":
        content.to_csv(path, index=False)
    else:
        arrays = [pa.array(content.iloc[:, i].tolist()) for i in range(content.shape[1])]
        pq.write_table(pa.Table.from_arrays(arrays, names=[str(c) for c in content.columns]),
                       path)


def track_run(tracks_name: str) -> dict:
    """A run for generated tracks: one points group, a 1 ps step (finer than the time
    between samples, 100 ps / 13 or more, so the run resolves the sampled motion), an
    explicit window."""
    return {"tracks": {"path": tracks_name, "charge": ELECTRON_C},
            "observers": [{"name": "near", "points": [[0.0, 0.05, 0.0]]}],
            "time": {"step": "1 ps", "start": "-0.1 ns", "stop": "0.2 ns"},
            "output": {"dir": "out", "formats": ["csv"]}}


def rows_of(frame: pd.DataFrame, particle) -> list[int]:
    """Row positions of one particle, in time order."""
    return frame.index[frame["particle"] == particle][
        np.argsort(frame.loc[frame["particle"] == particle, "t"].to_numpy())].tolist()


def first_bad_row(frame: pd.DataFrame, column: str, bad: Callable) -> int:
    """1-based data row of the first value in `column` for which bad(value) holds."""
    return 1 + next(i for i, v in enumerate(frame[column].tolist()) if bad(v))


# ------------------------------------------------------------------------------------------
# defects of track tables
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass
class Broken:
    """A damaged input: the content to write, and what the error line must name."""

    content: object
    names: tuple = ()


@dataclasses.dataclass(frozen=True)
class TrackDefect:
    """make(data, frame, suffix) -> Broken. `formats`: where the defect can exist.
    `momentum`: whether the valid table needs ux, uy, uz. `inspect`: whether reading the
    table alone must find it (so `lagfield inspect` refuses it too)."""

    make: Callable
    formats: tuple = (".csv", ".parquet")
    momentum: bool | None = None
    inspect: bool = True


def missing_column(data, frame, suffix):
    column = data.draw(st.sampled_from(REQUIRED_COLUMNS))
    return Broken(frame.drop(columns=column), (column,))


def partial_momentum(data, frame, suffix):
    dropped = data.draw(st.lists(st.sampled_from(MOMENTUM_COLUMNS), min_size=1, max_size=2,
                                 unique=True))
    return Broken(frame.drop(columns=dropped), tuple(dropped))


BAD_TEXT = st.sampled_from(["abc", "1,5", "--", "0x1G", "1e", "12 mm", "true", "∞", "1.2.3",
                            "O.5", "_"]) | st.from_regex(r"[a-mo-z][a-z_]{0,7}", fullmatch=True)


def text_value(data, frame, suffix):
    """A cell that is not a number (the column is text in Parquet)."""
    column = data.draw(st.sampled_from(list(frame.columns)))
    row = data.draw(st.integers(0, len(frame) - 1))
    frame = frame.copy()
    frame[column] = frame[column].astype(str).astype(object)
    frame.loc[row, column] = data.draw(BAD_TEXT)
    return Broken(frame, (column, f"row {row + 1}"))


def non_finite(data, frame, suffix):
    column = data.draw(st.sampled_from(list(frame.columns)))
    row = data.draw(st.integers(0, len(frame) - 1))
    frame = frame.astype({column: float})
    frame.loc[row, column] = data.draw(st.sampled_from([math.nan, math.inf, -math.inf]))
    return Broken(frame, (column, f"row {row + 1}"))


def huge_position(data, frame, suffix):
    """A position of 1e150 m or more: a step faster than light."""
    column = data.draw(st.sampled_from(["x", "y", "z"]))
    frame = frame.copy()
    frame.loc[data.draw(st.integers(0, len(frame) - 1)), column] = data.draw(
        st.sampled_from([1e150, -1e300, 1.7976931348623157e308]))
    return Broken(frame)


def overlong_integer(data, frame, suffix):
    """A CSV cell of 309-500 digits: an integer beyond the largest float."""
    column = data.draw(st.sampled_from(list(frame.columns)))
    row = data.draw(st.integers(0, len(frame) - 1))
    frame = frame.astype({column: object})
    frame.loc[row, column] = data.draw(st.sampled_from([-1, 1])) * 10 ** data.draw(
        st.integers(309, 500))
    return Broken(frame, (column, f"row {row + 1}"))


def huge_momentum(data, frame, suffix):
    """A momentum of 1e150 or more (γ ~ |u|): the positions do not move at that speed."""
    column = data.draw(st.sampled_from(MOMENTUM_COLUMNS))
    frame = frame.copy()
    frame.loc[data.draw(st.integers(0, len(frame) - 1)), column] = data.draw(
        st.sampled_from([1e150, -1e200, 1e300, 1.7976931348623157e308]))
    return Broken(frame, (column,))


def particle_id_out_of_range(data, frame, suffix):
    """Every row of one particle gets an id that int64 cannot hold (the digits in CSV, a
    float in Parquet)."""
    particle = data.draw(st.sampled_from(sorted(set(frame["particle"]))))
    big = data.draw(st.sampled_from(
        [2**63, 2**64 + 5, -(2**63) - 1, 10**30, 10**400] if suffix == ".csv"
        else [9.3e18, 1e19, -1e19, 1e30, 1e300]))
    frame = frame.astype({"particle": object})
    frame.loc[frame["particle"] == particle, "particle"] = big
    return Broken(frame, ("particle",))


def particle_id_not_integer(data, frame, suffix):
    particle = data.draw(st.sampled_from(sorted(set(frame["particle"]))))
    fraction = data.draw(st.sampled_from([0.5, 0.25, 1e-3, -0.5]))
    frame = frame.astype({"particle": float})
    frame.loc[frame["particle"] == particle, "particle"] = particle + fraction
    return Broken(frame, ("particle", f"row {first_bad_row(frame, 'particle', _fractional)}"))


def _fractional(value) -> bool:
    return value != math.floor(value)


def duplicated_time(data, frame, suffix):
    particle = data.draw(st.sampled_from(sorted(set(frame["particle"]))))
    rows = rows_of(frame, particle)
    k = data.draw(st.integers(1, len(rows) - 1))
    frame = frame.copy()
    frame.loc[rows[k], "t"] = frame.loc[rows[k - 1], "t"]
    return Broken(frame, (f"particle {particle}",))


def swapped_times(data, frame, suffix):
    """Two neighbouring samples swap times: the track jumps two steps forward in one, at
    twice its speed, 2β >= 1.1 (γ >= 1.2)."""
    particle = data.draw(st.sampled_from(sorted(set(frame["particle"]))))
    rows = rows_of(frame, particle)
    k = data.draw(st.integers(1, len(rows) - 1))
    frame = frame.copy()
    frame.loc[[rows[k - 1], rows[k]], "t"] = frame.loc[[rows[k], rows[k - 1]], "t"].to_numpy()
    return Broken(frame, (f"particle {particle}",))


def faster_than_light(data, frame, suffix):
    """Positions scaled up until the chord speed is at least 1.05 c (β >= 0.55)."""
    factor = data.draw(st.floats(1.05 / 0.55, 1e3))
    frame = frame.copy()
    frame[["x", "y", "z"]] *= factor
    return Broken(frame)


def momentum_too_small(data, frame, suffix):
    """u scaled by 0.05-0.25: the speed it gives is at least 25 % below the chord speed
    (γβ 0.66-4.9 becomes at most 1.2)."""
    frame = frame.copy()
    frame[list(MOMENTUM_COLUMNS)] *= data.draw(st.floats(0.05, 0.25))
    return Broken(frame)


def momentum_against_motion(data, frame, suffix):
    """u of the right size pointing the wrong way (reversed, or turned by 90 degrees): the
    arrival-time slip over each interval, |Δr - ∫cβ dt′|/c >= √2 β Δt >= 4 ps, is several
    steps of 1 ps (SPEC, Motion with momenta)."""
    frame = frame.copy()
    if data.draw(st.booleans()):
        frame[list(MOMENTUM_COLUMNS)] *= -1.0
    else:
        frame[["ux", "uy", "uz"]] = frame[["uz", "ux", "uy"]].to_numpy()
    return Broken(frame)


def duplicated_column(data, frame, suffix):
    """A second column of the same name (other values): which one is meant?"""
    column = data.draw(st.sampled_from(list(frame.columns)))
    position = data.draw(st.integers(0, frame.shape[1]))
    other = frame[column].to_numpy() + data.draw(st.sampled_from([1.0, -7.0, 0.5]))
    frame = frame.copy()
    frame.insert(position, column, other, allow_duplicates=True)
    return Broken(frame, (column,))


def too_few_samples(data, frame, suffix):
    particle = data.draw(st.sampled_from(sorted(set(frame["particle"]))))
    keep = 1  # tracks of 2 or more samples run (at a lower spline degree)
    rows = rows_of(frame, particle)
    return Broken(frame.drop(index=rows[keep:]).reset_index(drop=True),
                  (f"particle {particle}",))


def weight_not_positive(data, frame, suffix):
    particle = data.draw(st.sampled_from(sorted(set(frame["particle"]))))
    frame = frame.copy()
    frame["weight"] = 1.0
    frame.loc[frame["particle"] == particle, "weight"] = data.draw(
        st.sampled_from([0.0, -1.0, -1e6]))
    return Broken(frame, ("weight", f"particle {particle}"))


def charge_changes(data, frame, suffix):
    particle = data.draw(st.sampled_from(sorted(set(frame["particle"]))))
    rows = rows_of(frame, particle)
    frame = frame.copy()
    frame["charge"] = ELECTRON_C
    frame.loc[rows[data.draw(st.integers(0, len(rows) - 1))], "charge"] = -ELECTRON_C
    return Broken(frame, ("charge", f"particle {particle}"))


def empty_table(data, frame, suffix):
    """No bytes, blank lines, a header without rows, or a Parquet schema without rows."""
    if suffix == ".parquet":
        return Broken(frame.iloc[:0] if data.draw(st.booleans()) else b"")
    header = ",".join(frame.columns)
    return Broken(data.draw(st.sampled_from(
        [b"", b"\n", b"\n\n  \n", header.encode(), (header + "\n").encode()])))


def garbage_bytes(data, frame, suffix):
    return Broken(data.draw(st.binary(min_size=1, max_size=300)))


def truncated_or_corrupted(data, frame, suffix):
    """A valid file cut short, or with a few bytes changed in its first 64."""
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"valid{suffix}"
        write_tracks(frame, path)
        raw = path.read_bytes()
    if suffix == ".csv" or data.draw(st.booleans()):
        cut = data.draw(st.integers(1, len(raw) - 1))
        if suffix == ".csv":  # a CSV cut anywhere may still be a table: add an invalid byte
            return Broken(raw[:cut] + b"\n\xff\xfe")
        return Broken(raw[:cut])
    position = data.draw(st.integers(0, 3))  # the magic number "PAR1"
    return Broken(raw[:position] + b"\x00" + raw[position + 1:])


def ragged_row(data, frame, suffix):
    """A CSV row with a field too many or too few."""
    lines = frame.to_csv(index=False).splitlines()
    k = data.draw(st.integers(1, len(lines) - 1))
    lines[k] = lines[k] + ",1.0" if data.draw(st.booleans()) else lines[k].rsplit(",", 1)[0]
    return Broken(("\n".join(lines) + "\n").encode(), (f"row {k}",))


WRONG_ARROW_TYPES = {
    "bool": lambda values: pa.array([bool(i % 2) for i in range(len(values))]),
    "timestamp": lambda values: pa.array(
        [datetime.datetime(2020, 1, 1) + datetime.timedelta(seconds=i)
         for i in range(len(values))]),
    "list": lambda values: pa.array([[v, v] for v in values]),
}


def wrong_parquet_type(data, frame, suffix):
    """A Parquet column of booleans, timestamps or lists instead of numbers (numbers
    written as text are read, as from CSV)."""
    column = data.draw(st.sampled_from(list(frame.columns)))
    kind = data.draw(st.sampled_from(sorted(WRONG_ARROW_TYPES)))
    arrays = [WRONG_ARROW_TYPES[kind](frame[c].tolist()) if c == column
              else pa.array(frame[c].tolist()) for c in frame.columns]
    buffer = pa.BufferOutputStream()
    pq.write_table(pa.Table.from_arrays(arrays, names=list(frame.columns)), buffer)
    return Broken(buffer.getvalue().to_pybytes(), (column,))


TRACK_DEFECTS = {
    "missing required column": TrackDefect(missing_column),
    "only some of ux, uy, uz": TrackDefect(partial_momentum, momentum=True),
    "text in a number column": TrackDefect(text_value),
    "NaN or infinity in any column": TrackDefect(non_finite),
    "huge position": TrackDefect(huge_position),
    "huge momentum": TrackDefect(huge_momentum, momentum=True),
    "particle id beyond int64": TrackDefect(particle_id_out_of_range),
    "integer beyond the float range": TrackDefect(overlong_integer, formats=(".csv",)),
    "particle id not an integer": TrackDefect(particle_id_not_integer),
    "two samples at one time": TrackDefect(duplicated_time),
    "times out of step with positions": TrackDefect(swapped_times),
    "chord speed above c": TrackDefect(faster_than_light),
    "momentum too small for the chords": TrackDefect(momentum_too_small, momentum=True,
                                                     inspect=False),
    "momentum against the motion": TrackDefect(momentum_against_motion, momentum=True,
                                               inspect=False),
    "duplicated column name": TrackDefect(duplicated_column),
    "fewer samples than the spline needs": TrackDefect(too_few_samples, inspect=False),
    "weight not positive": TrackDefect(weight_not_positive),
    "charge changes along a track": TrackDefect(charge_changes),
    "empty file": TrackDefect(empty_table),
    "garbage bytes": TrackDefect(garbage_bytes),
    "truncated or corrupted file": TrackDefect(truncated_or_corrupted),
    "ragged CSV row": TrackDefect(ragged_row, formats=(".csv",)),
    "column of a non-numeric Parquet type": TrackDefect(wrong_parquet_type,
                                                        formats=(".parquet",)),
}


@pytest.mark.parametrize("kind", sorted(TRACK_DEFECTS))
@settings(max_examples=examples(8))
@given(data=st.data())
def test_broken_track_table_is_refused(kind, data):
    defect = TRACK_DEFECTS[kind]
    suffix = data.draw(st.sampled_from(defect.formats), label="format")
    frame = data.draw(track_frames(momentum=defect.momentum), label="valid table")
    broken = defect.make(data, frame, suffix)
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        tracks = root / f"tracks{suffix}"
        write_tracks(broken.content, tracks)
        run_file = root / "run.toml"
        run_file.write_text(toml_document(track_run(tracks.name)), encoding="utf-8")
        before = snapshot(root)
        outcome = run_cli(["run", str(run_file)])
        assert_refused(outcome, before, snapshot(root), (tracks.name, *broken.names))
        if defect.inspect:
            outcome = run_cli(["inspect", str(tracks)])
            assert_refused(outcome, before, snapshot(root), (tracks.name, *broken.names))


# ------------------------------------------------------------------------------------------
# defects of run files
# ------------------------------------------------------------------------------------------

QUANTITY_KEYS = {  # path in the run dictionary -> dimension
    ("tracks", "charge"): "charge",
    ("tracks", "u_offset"): "time",
    ("motion", "smoothing"): "length",
    ("time", "step"): "time",
    ("time", "start"): "time",
    ("time", "stop"): "time",
    ("spectrum", "frequencies", "start"): "frequency",
    ("spectrum", "frequencies", "stop"): "frequency",
    ("observers", 2, "sphere", "radius"): "length",
    ("observers", 0, "points", 0, 1): "length",
    ("observers", 1, "plane", "center", 2): "length",
    ("observers", 1, "plane", "u", 0): "dimensionless",
    ("observers", 1, "plane", "size", 1): "length",
    ("observers", 2, "sphere", "center", 0): "length",
    ("observers", 2, "sphere", "theta", 0): "angle",
    ("observers", 2, "sphere", "phi", 1): "angle",
}
NUMBER_KEYS = ()
VECTOR_KEYS = {  # path -> length
    ("observers", 0, "points", 0): 3,
    ("observers", 1, "plane", "center"): 3,
    ("observers", 1, "plane", "u"): 3,
    ("observers", 1, "plane", "v"): 3,
    ("observers", 1, "plane", "size"): 2,
    ("observers", 2, "sphere", "center"): 3,
}
WHOLE_NUMBER_KEYS = {  # path -> allowed values (None: any >= 1)
    ("motion", "degree"): (3, 5),
    ("spectrum", "frequencies", "count"): None,
    ("compute", "chunk"): None,
    ("compute", "workers"): None,
    ("observers", 1, "plane", "shape", 0): None,
    ("observers", 2, "sphere", "theta", 2): None,
}
BOOLEAN_KEYS = (("fields", "far_field"), ("spectrum", "coherent"))
CHOICE_KEYS = {
    ("motion", "extend"): ("ballistic", "none"),
    ("time", "align"): ("group", "point"),
    ("spectrum", "frequencies", "spacing"): ("linear", "log"),
    ("spectrum", "taper"): ("none", "hann"),
    ("tracks", "format"): ("csv", "parquet"),
}
TEXT_KEYS = (("tracks", "path"), ("output", "dir"), ("observers", 0, "name"),
             ("compute", "scheduler"))
TABLE_KEYS = (("tracks",), ("motion",), ("time",), ("fields",), ("spectrum",), ("output",),
              ("tracks", "columns"), ("tracks", "units"), ("observers", 1, "plane"),
              ("observers", 2, "sphere"), ("spectrum", "frequencies"), ("compute",))
LIST_KEYS = (("observers",), ("observers", 0, "points"), ("output", "formats"),
             ("observers", 1, "plane", "shape"), ("observers", 2, "sphere", "theta"))
REQUIRED_KEYS = (("tracks",), ("tracks", "path"), ("tracks", "charge"), ("observers",),
                 ("observers", 0, "name"), ("observers", 0, "points"),
                 ("observers", 1, "plane", "u"), ("observers", 1, "plane", "v"),
                 ("observers", 1, "plane", "size"), ("observers", 1, "plane", "shape"),
                 ("observers", 2, "sphere", "radius"), ("observers", 2, "sphere", "theta"),
                 ("observers", 2, "sphere", "phi"), ("time",), ("time", "step"),
                 ("spectrum", "frequencies"), ("spectrum", "frequencies", "start"),
                 ("spectrum", "frequencies", "stop"), ("spectrum", "frequencies", "count"))
# every table name and key SPEC.md and the README give a run file (never generated as unknown)
DOCUMENTED_KEYS = frozenset(
    "tracks path format charge columns units u_offset motion degree extend "
    "smoothing observers name points plane center u v size shape sphere radius theta phi "
    "fields far_field time step start stop align spectrum frequencies count spacing coherent "
    "taper detectors observer sensor electrode area normal effective_length effective_area "
    "load resistance capacitance chain butterworth band order lowpass highpass "
    "impulse_response touchstone gain digitizer rate bits range noise seed compute workers "
    "scheduler chunk output dir formats plugins".split())
UNIT_OF = {"time": "ns", "length": "mm", "frequency": "GHz", "charge": "nC", "angle": "mrad",
           "dimensionless": "%", "mass": "kg", "temperature": "K"}
ACCEPTED_BY = {  # pint converts radians and plain numbers into each other
    "angle": {"angle", "dimensionless"}, "dimensionless": {"angle", "dimensionless"}}

DATETIMES = st.datetimes(min_value=datetime.datetime(1900, 1, 1),
                         max_value=datetime.datetime(2100, 1, 1)) | st.dates()
NOT_A_NUMBER_OR_TEXT = st.one_of(st.booleans(), DATETIMES, st.just([1.0]), st.just({"a": 1}),
                                 st.lists(st.integers(0, 3), max_size=3))


def wrong_type_values(path: tuple):
    """Values of a type the key at `path` never takes."""
    if path in QUANTITY_KEYS or path in NUMBER_KEYS:
        return NOT_A_NUMBER_OR_TEXT
    if path in VECTOR_KEYS:
        n = VECTOR_KEYS[path]
        return st.one_of(st.floats(-1, 1), st.just("1 m"), st.just({"x": 0.0}), st.booleans(),
                         st.lists(st.floats(-1, 1), min_size=0, max_size=5).filter(
                             lambda v: len(v) != n),
                         st.just([[0.0] * n]), st.just([True] * n), st.just(["x"] * n))
    if path in WHOLE_NUMBER_KEYS:
        allowed = WHOLE_NUMBER_KEYS[path]
        outside = st.integers(-10, 0) if allowed is None else st.integers(-10, 10).filter(
            lambda n: n not in allowed)
        return st.one_of(st.floats(-1e3, 1e3).filter(lambda v: v != math.floor(v)),
                         st.just("5"), st.booleans(), st.just([5]), DATETIMES, outside)
    if path in BOOLEAN_KEYS:
        return st.one_of(st.integers(0, 1), st.just("true"), st.just("yes"), st.just([True]),
                         st.floats(0, 1), DATETIMES)
    if path in CHOICE_KEYS:
        words = st.from_regex(r"[A-Za-z_]{1,10}", fullmatch=True).filter(
            lambda w: w not in CHOICE_KEYS[path])
        return st.one_of(words, st.integers(-3, 3), st.booleans(), st.just([CHOICE_KEYS[path][0]]))
    if path in TEXT_KEYS:
        return st.one_of(st.integers(-5, 5), st.floats(-1, 1), st.booleans(), DATETIMES,
                         st.just(["out"]), st.just({"dir": "out"}))
    if path in TABLE_KEYS:
        return st.one_of(st.just("x"), st.integers(), st.booleans(), st.just([1, 2]))
    return st.one_of(st.just("x y"), st.integers(), st.just({"a": 1}), st.just([1]),
                     st.just([["csv"]]), st.just([{"name": "x"}]))  # LIST_KEYS


@st.composite
def unit_strings_of_other_kinds(draw, dimension: str):
    """'<number> <unit>' of a dimension the key does not accept, or text pint cannot
    read, or a unit string that overflows to infinity."""
    wrong = sorted(d for d in UNIT_OF if d not in ACCEPTED_BY.get(dimension, {dimension}))
    number = draw(st.floats(0.1, 10.0)) * draw(st.sampled_from([-1, 1]))
    unit = UNIT_OF[dimension]
    texts = [f"{number:.3g} blorbs", "3 ns extra", "(1 mm", "1 ** ns", f"1e999 {unit}",
             f"nan {unit}", f"-inf {unit}"]
    if dimension not in ACCEPTED_BY:  # pint reads these as plain numbers (or unit squared)
        texts += ["", "   ", "1 2 3 4", f"{number:.3g} {unit} {unit}"]
    return draw(st.one_of(st.sampled_from(wrong).map(lambda d: f"{number:.3g} {UNIT_OF[d]}"),
                          st.sampled_from(texts)))


def _unknown_key_defect(data, run):
    tables = [("",)] + [p for p in TABLE_KEYS if p not in (("tracks", "columns"),
                                                           ("tracks", "units"))]
    tables += [("observers", i) for i in range(3)]
    table = data.draw(st.sampled_from(tables))
    key = data.draw(st.from_regex(r"[a-z][a-z_]{0,11}", fullmatch=True).filter(
        lambda k: k not in DOCUMENTED_KEYS), label="unknown key")
    return with_value(run, table + (key,) if table != ("",) else (key,), 1.0), (key,)


def _wrong_type_defect(data, run):
    keys = [*QUANTITY_KEYS, *NUMBER_KEYS, *VECTOR_KEYS, *WHOLE_NUMBER_KEYS, *BOOLEAN_KEYS,
            *CHOICE_KEYS, *TEXT_KEYS, *TABLE_KEYS, *LIST_KEYS]
    path = data.draw(st.sampled_from(keys), label="key")
    return with_value(run, path, data.draw(wrong_type_values(path), label="value")), ()


def _non_finite_defect(data, run):
    path = data.draw(st.sampled_from([*QUANTITY_KEYS, *NUMBER_KEYS]), label="key")
    value = data.draw(st.sampled_from([math.nan, math.inf, -math.inf, 1e400]))
    return with_value(run, path, value), ()


def _bad_unit_defect(data, run):
    path = data.draw(st.sampled_from(sorted(QUANTITY_KEYS, key=str)), label="key")
    text = data.draw(unit_strings_of_other_kinds(QUANTITY_KEYS[path]), label="value")
    return with_value(run, path, text), ()


def _missing_key_defect(data, run):
    path = data.draw(st.sampled_from(REQUIRED_KEYS), label="key")
    return without(run, path), (path[-1],)


def _reversed_range_defect(data, run):
    """stop before start, in time or frequency."""
    table = data.draw(st.sampled_from([("time",), ("spectrum", "frequencies")]))
    low = data.draw(st.floats(1.0, 100.0))
    high = low * data.draw(st.floats(1.01, 10.0))
    unit = "ps" if table == ("time",) else "GHz"
    run = with_value(run, table + ("start",), f"{high} {unit}")
    return with_value(run, table + ("stop",), f"{low} {unit}"), ()


def _unknown_plugin_defect(data, run):
    name = data.draw(st.from_regex(r"[a-z]{3,10}", fullmatch=True).filter(
        lambda n: n not in {"csv", "parquet", "plots", "openpmd"}), label="name")
    path = data.draw(st.sampled_from([("tracks", "format"), ("output", "formats")]))
    return with_value(run, path, name if path[-1] == "format" else ["csv", name]), (name,)


def _bad_column_mapping_defect(data, run):
    """columns / units naming a column that is not canonical, a unit of the wrong kind, or
    mapping a column to a name the file lacks."""
    choice = data.draw(st.sampled_from(["unknown canonical", "wrong unit", "absent column"]))
    if choice == "unknown canonical":
        name = data.draw(st.from_regex(r"[a-z]{2,8}", fullmatch=True).filter(
            lambda n: n not in (*REQUIRED_COLUMNS, *MOMENTUM_COLUMNS, "charge", "weight")))
        return with_value(run, ("tracks", "columns", name), "x"), (name,)
    if choice == "wrong unit":
        column = data.draw(st.sampled_from(["t", "x", "y", "z"]))
        unit = data.draw(st.sampled_from(["kg", "K", "blorbs", "ns ns", "wrong dimension"]))
        unit = ("Hz" if column == "t" else "s") if unit == "wrong dimension" else unit
        return with_value(run, ("tracks", "units", column), unit), (column,)
    return with_value(run, ("tracks", "columns", "t"), "time_s"), ("time_s",)


RUN_DEFECTS = {
    "unknown key": _unknown_key_defect,
    "wrong type for a key": _wrong_type_defect,
    "non-finite number": _non_finite_defect,
    "bad unit string": _bad_unit_defect,
    "missing required key": _missing_key_defect,
    "reversed range": _reversed_range_defect,
    "unknown importer or exporter": _unknown_plugin_defect,
    "bad column mapping": _bad_column_mapping_defect,
}


def straight_tracks(path: Path) -> None:
    """Two electrons at γ = 2 along z, 12 samples over 100 ps, with u."""
    write_tracks(pd.concat([motion_frame(p, 12, 2.0, None, (1e-3 * p, 0.0), True)
                            for p in range(2)], ignore_index=True), path)


def prepare(root: Path, content: bytes, earlier: Path | None = None) -> list[str]:
    """Tracks, the run file and (when `earlier` is given) a copy of the output directory
    of an earlier run; returns the command line (with --overwrite when there are earlier
    results, so only bad input can stop the run)."""
    straight_tracks(root / "tracks.csv")
    (root / "run.toml").write_bytes(content)
    if earlier is None:
        return ["run", str(root / "run.toml")]
    shutil.copytree(earlier, root / "out")
    return ["run", str(root / "run.toml"), "--overwrite"]


@pytest.fixture(scope="module")
def earlier_results(tmp_path_factory) -> Path:
    """The output directory of one valid run of `base_run`."""
    root = tmp_path_factory.mktemp("earlier")
    outcome = run_cli(prepare(root, toml_document(base_run()).encode()))
    assert outcome.code == 0, outcome.describe()
    return root / "out"


def test_base_run_is_valid_and_written_faithfully(tmp_path):
    """The valid run every run-file defect starts from: TOML that reads back as written,
    and a run giving finite tables at every point."""
    run = base_run()
    assert tomllib.loads(toml_document(run)) == run
    outcome = run_cli(prepare(tmp_path, toml_document(run).encode()))
    assert outcome.code == 0, outcome.describe()
    assert_finite_results(tmp_path / "out", n_points=BASE_POINTS, step_s=5e-12)


@pytest.mark.parametrize("kind", sorted(RUN_DEFECTS))
@settings(max_examples=examples(12))
@given(data=st.data())
def test_broken_run_file_is_refused(kind, data, earlier_results):
    run, names = RUN_DEFECTS[kind](data, base_run())
    earlier = data.draw(st.sampled_from([None, earlier_results]), label="earlier results")
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        argv = prepare(root, toml_document(run).encode(), earlier)
        before = snapshot(root)
        outcome = run_cli(argv)
        assert_refused(outcome, before, snapshot(root), names)


def _encoded(data, text: str) -> bytes:
    """The run file's text with a non-ASCII name, in an encoding other than UTF-8, or
    with bytes that are not UTF-8."""
    text = text.replace('"pickup"', '"écran µ"')
    how = data.draw(st.sampled_from(["utf-16", "utf-32", "latin-1", "cp1252", "insert"]))
    if how != "insert":
        return text.encode(how)
    raw = text.encode()
    at = data.draw(st.integers(0, len(raw)))
    junk = data.draw(st.binary(min_size=1, max_size=8).filter(_not_utf8))
    return raw[:at] + junk + raw[at:]


def _not_utf8(raw: bytes) -> bool:
    try:
        raw.decode("utf-8")
    except UnicodeDecodeError:
        return True
    return False


def _not_toml(data, text: str) -> bytes:
    """TOML syntax errors: a key given twice, an unclosed bracket or string, garbage."""
    how = data.draw(st.sampled_from(["twice", "bracket", "string", "garbage", "binary"]))
    if how == "twice":
        return (text + '[time]\nstep = "1 ps"\n').encode()
    if how == "bracket":
        return text.replace("[output]", "[output").encode()
    if how == "string":
        return text.replace('"5 ps"', '"5 ps').encode()
    if how == "garbage":
        return data.draw(st.from_regex(r"[=\[\]{}\"',.a-z ]{1,40}", fullmatch=True).filter(
            _not_a_run_table)).encode()
    return data.draw(st.binary(min_size=1, max_size=200))


def _not_a_run_table(text: str) -> bool:
    """True unless `text` happens to be TOML (an empty document is still not a run)."""
    try:
        return not tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        return True


@settings(max_examples=examples(16))
@given(data=st.data())
def test_run_file_in_bad_encoding_or_syntax_is_refused(data, earlier_results):
    text = toml_document(base_run())
    maker = data.draw(st.sampled_from([_encoded, _not_toml]), label="defect")
    content = maker(data, text)
    earlier = data.draw(st.sampled_from([None, earlier_results]), label="earlier results")
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        argv = prepare(root, content, earlier)
        before = snapshot(root)
        outcome = run_cli(argv)
        assert_refused(outcome, before, snapshot(root), ("run.toml",))


@settings(max_examples=examples(6))
@given(data=st.data())
def test_truncated_run_file_fails_cleanly_or_runs(data):
    """A run file cut anywhere: either the part left is a valid run or it is refused."""
    text = toml_document(base_run()).encode()
    cut = data.draw(st.integers(0, len(text) - 1), label="length kept")
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        argv = prepare(root, text[:cut])
        before = snapshot(root)
        outcome = run_cli(argv)
        assert_clean(outcome, before, snapshot(root), root / "out")


# fixed cases: files and directories where the run expects something else
def _run_file_is_directory(root):
    (root / "run.toml").unlink()
    (root / "run.toml").mkdir()


def _tracks_path_is_directory(root):
    (root / "tracks.csv").unlink()
    (root / "tracks.csv").mkdir()


def _output_path_is_file(root):
    (root / "out").write_text("a file of the user's\n")


def _run_file_missing(root):
    (root / "run.toml").unlink()


def _tracks_missing(root):
    (root / "tracks.csv").unlink()


def _tracks_is_the_run_file(root):
    (root / "run.toml").write_text(toml_document(with_value(base_run(), ("tracks", "path"),
                                                            "run.toml")))


@pytest.mark.parametrize("damage", [_run_file_is_directory, _tracks_path_is_directory,
                                    _output_path_is_file,
                                    _run_file_missing, _tracks_missing,
                                    _tracks_is_the_run_file],
                         ids=lambda f: f.__name__.strip("_"))
def test_misplaced_files_are_refused(tmp_path, damage):
    argv = prepare(tmp_path, toml_document(base_run()).encode())
    damage(tmp_path)
    before = snapshot(tmp_path)
    outcome = run_cli(argv)
    assert_refused(outcome, before, snapshot(tmp_path))


@pytest.mark.parametrize("overwrite", [[], ["--overwrite"]], ids=["plain", "overwrite"])
def test_results_beside_the_inputs_keep_the_users_files(tmp_path, overwrite):
    """SPEC, Commands: --overwrite replaces what an earlier run of lagfield wrote there and
    nothing else. An output directory that is the run's own directory holds the user's run
    file, tracks and notes; a run there (twice, to exercise the replacement) leaves them."""
    run = with_value(base_run(), ("output", "dir"), ".")
    argv = prepare(tmp_path, toml_document(run).encode()) + overwrite
    (tmp_path / "notes.txt").write_text("the user's notes\n")
    before = snapshot(tmp_path)
    for _ in range(2):
        outcome = run_cli(argv)
        after = snapshot(tmp_path)
        assert outcome.escaped is None and outcome.code != EXIT_BUG, outcome.describe()
        for name in ("run.toml", "tracks.csv", "notes.txt"):
            assert after.get(name) == before[name], f"{name} changed\n{outcome.describe()}"


@pytest.mark.parametrize("option", [["--workers", "0"], ["--workers", "-3"],
                                    ["--scheduler", "not an address"]])
def test_bad_command_line_values_are_refused(tmp_path, option):
    argv = prepare(tmp_path, toml_document(base_run()).encode())
    before = snapshot(tmp_path)
    outcome = run_cli(argv + option)
    assert_refused(outcome, before, snapshot(tmp_path), (option[0],))


# ------------------------------------------------------------------------------------------
# valid input gives finite tables
# ------------------------------------------------------------------------------------------

@st.composite
def valid_runs(draw):
    """(run dictionary, track table, suffix, number of points, step): tracks from
    `track_frames`, 1-2 points at least 3 cm off the tracks' plane and sometimes a small
    plane, the default window or an explicit one, sometimes a spectrum."""
    frame = draw(track_frames())
    suffix = draw(st.sampled_from([".csv", ".parquet"]))
    step_ps = draw(st.sampled_from([1, 2, 5]))
    points = draw(st.lists(st.tuples(st.floats(-0.05, 0.05), st.floats(0.03, 0.3),
                                     st.floats(-0.05, 0.05)).map(list),
                           min_size=1, max_size=2))
    run = {"tracks": {"path": f"tracks{suffix}"},
           "observers": [{"name": "probe", "points": points}],
           "time": {"step": f"{step_ps} ps"},
           "output": {"dir": "out", "formats": [draw(st.sampled_from(["csv", "parquet"]))]}}
    if "charge" not in frame.columns:
        run["tracks"]["charge"] = "-1 e"
    n_points = len(points)
    if draw(st.booleans()):
        run["observers"].append({"name": "screen", "plane": {
            "center": [0.0, draw(st.floats(0.05, 1.0)), 0.0], "u": [1, 0, 0], "v": [0, 0, 1],
            "size": [0.01, 0.01], "shape": [2, 1]}})
        n_points += 2
    if draw(st.booleans()):
        run["time"].update(start="-0.2 ns", stop="0.4 ns")
    if draw(st.booleans()):
        run["spectrum"] = {"frequencies": {"start": 1e9, "stop": 1e11, "count": 5,
                                           "spacing": draw(st.sampled_from(["log", "linear"]))},
                           "coherent": draw(st.booleans())}
    return run, frame, suffix, n_points, step_ps * 1e-12


@settings(max_examples=examples(4))
@given(scenario=valid_runs())
def test_valid_input_gives_finite_tables(scenario):
    run, frame, suffix, n_points, step_s = scenario
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        write_tracks(frame, root / f"tracks{suffix}")
        (root / "run.toml").write_text(toml_document(run), encoding="utf-8")
        outcome = run_cli(["run", str(root / "run.toml")])
        assert outcome.code == 0 and outcome.escaped is None, outcome.describe()
        assert "Traceback" not in outcome.stderr
        assert_finite_results(root / "out", n_points=n_points, step_s=step_s)


@settings(max_examples=examples(2))
@given(frame=track_frames(shuffle=False), order=st.randoms(use_true_random=False))
def test_row_order_does_not_change_the_fields(frame, order):
    """SPEC, Track tables: rows may come in any order. The same samples, shuffled, give the
    same fields to rounding."""
    shuffled = frame.sample(frac=1.0, random_state=order.randrange(2**32))
    assume(not shuffled.index.equals(frame.index))
    fields = []
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        for name, table in (("sorted", frame), ("shuffled", shuffled)):
            write_tracks(table.reset_index(drop=True), root / f"{name}.csv")
            run = track_run(f"{name}.csv")
            if "charge" in table.columns:
                del run["tracks"]["charge"]
            (root / f"{name}.toml").write_text(toml_document(run), encoding="utf-8")
            fields.append(lagfield.run(root / f"{name}.toml", write=False).fields)
    assert fields[0][["observer", "point"]].equals(fields[1][["observer", "point"]])
    for column in FIELD_COLUMNS[2:]:
        a, b = fields[0][column].to_numpy(), fields[1][column].to_numpy()
        np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 * np.abs(a).max(),
                                   err_msg=column)


# ------------------------------------------------------------------------------------------
# the same promise through the installed command
# ------------------------------------------------------------------------------------------

def _nan_in_tracks(root):
    frame = pd.read_csv(root / "tracks.csv")
    frame.loc[4, "x"] = math.nan
    frame.to_csv(root / "tracks.csv", index=False)
    return ["run", str(root / "run.toml"), "--overwrite"], ("tracks.csv", "'x'", "row 5")


def _latin1_run_file(root):
    text = toml_document(base_run()).replace('"pickup"', '"écran"')
    (root / "run.toml").write_bytes(text.encode("latin-1"))
    return ["run", str(root / "run.toml"), "--overwrite"], ("run.toml",)


def _garbage_parquet_inspected(root):
    (root / "tracks.parquet").write_bytes(b"PAR1" + bytes(range(256)) + b"PAR1")
    return ["inspect", str(root / "tracks.parquet")], ("tracks.parquet",)


def _unknown_key(root):
    run = with_value(base_run(), ("time", "stepp"), "1 ps")
    (root / "run.toml").write_text(toml_document(run))
    return ["run", str(root / "run.toml"), "--overwrite"], ("stepp",)


def _non_finite_start(root):
    (root / "run.toml").write_text(toml_document(with_value(base_run(), ("time", "start"),
                                                            math.nan)))
    return ["run", str(root / "run.toml"), "--overwrite"], ("start",)


@pytest.mark.parametrize("damage", [_nan_in_tracks, _latin1_run_file,
                                    _garbage_parquet_inspected, _unknown_key,
                                    _non_finite_start],
                         ids=lambda f: f.__name__.strip("_"))
def test_installed_command_keeps_the_promise(tmp_path, damage, earlier_results):
    prepare(tmp_path, toml_document(base_run()).encode(), earlier_results)
    argv, names = damage(tmp_path)
    before = snapshot(tmp_path)
    outcome = run_command(argv)
    assert_refused(outcome, before, snapshot(tmp_path), names)
