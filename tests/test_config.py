"""The run file's checks: every wrong value is one ConfigError that names the key (and the
table or observer group), raised before anything is read or computed."""

from __future__ import annotations

import copy
import math

import pandas as pd
import pytest

from lagfield import config
from lagfield.cli import main
from lagfield.errors import ConfigError, UnitError
from lagfield.typos import edit_distance

BASE = {
    "tracks": {"path": "tracks.csv", "charge": "-1 e"},
    "observers": [
        {"name": "pickup", "points": [[0.05, 0.0, 0.0]]},
        {"name": "screen", "plane": {"center": [0, 0, 1], "u": [1, 0, 0], "v": [0, 1, 0],
                                     "size": ["2 cm", "2 cm"], "shape": [3, 3]}},
        {"name": "sky", "sphere": {"center": [0, 0, 0], "radius": 10.0,
                                   "theta": [0.0, 0.05, 3], "phi": [0.0, 6.0, 4]}},
    ],
    "time": {"step": "2 ps"},
    "spectrum": {"frequencies": {"start": "1 GHz", "stop": "1 THz", "count": 20}},
    "output": {"dir": "out"},
}
INF, NAN = math.inf, math.nan


def changed(path, value):
    """BASE with the entry at `path` (keys and list indices) set to `value`."""
    raw = copy.deepcopy(BASE)
    target = raw
    for key in path[:-1]:
        target = target.setdefault(key, {}) if isinstance(key, str) else target[key]
    target[path[-1]] = value
    return raw


def refusal(raw, tmp_path) -> str:
    with pytest.raises(ConfigError) as caught:
        config.parse(raw, base_dir=tmp_path)
    return str(caught.value)


CASES = [
    # non-finite and absurd numbers
    (("time", "step"), INF, ["[time] step", "not a finite number"]),
    (("time", "start"), NAN, ["[time] start", "not a finite number"]),
    (("time", "stop"), INF, ["[time] stop", "not a finite number"]),
    (("time", "step"), "1e400 s", ["[time] step", "too large"]),
    (("time", "start"), 1e300, ["[time] start", "beyond the accepted magnitude"]),
    (("time", "step"), -1e-12, ["[time] step", "must be positive"]),
    (("time", "step"), 0, ["[time] step", "must be positive"]),
    (("observers", 0, "points"), [[NAN, 0.0, 0.0]], ["'pickup' points[0][0]", "finite"]),
    (("observers", 0, "points"), [[0.0, INF, 0.0]], ["'pickup' points[0][1]", "finite"]),
    (("observers", 0, "points"), [[0.0, 0.0, 1e300]], ["'pickup' points[0][2]", "beyond"]),
    (("observers", 1, "plane", "center"), [0, INF, 1], ["'screen' plane center[1]", "finite"]),
    (("observers", 1, "plane", "u"), [NAN, 0, 0], ["'screen' plane u[0]", "finite"]),
    (("observers", 1, "plane", "v"), [0, 1e300, 0], ["'screen' plane v[1]", "beyond"]),
    (("observers", 1, "plane", "size"), [INF, 0.02], ["'screen' plane size[0]", "finite"]),
    (("observers", 1, "plane", "size"), [-0.02, 0.02], ["'screen' plane size[0]", "positive"]),
    (("observers", 2, "sphere", "radius"), NAN, ["'sky' sphere radius", "finite"]),
    (("observers", 2, "sphere", "radius"), "1e300 km", ["'sky' sphere radius", "beyond"]),
    (("observers", 2, "sphere", "theta"), [0.0, INF, 3], ["'sky' sphere theta[1]", "finite"]),
    (("spectrum", "frequencies", "start"), NAN, ["[spectrum] frequencies start", "finite"]),
    (("spectrum", "frequencies", "stop"), INF, ["[spectrum] frequencies stop", "finite"]),
    (("spectrum", "frequencies", "start"), "-1 GHz", ["frequencies start", "0 or positive"]),
    (("tracks", "charge"), NAN, ["[tracks] charge", "finite"]),
    (("tracks", "charge"), "1e400 C", ["[tracks] charge", "too large"]),
    (("tracks", "charge"), 0, ["[tracks] charge", "must not be 0"]),
    (("observers", 1, "plane", "u"), [0, 0, 0], ["'screen'", "plane u", "no direction"]),
    (("observers", 1, "plane", "v"), [0.0, 0.0, 0.0], ["'screen'", "plane v", "no direction"]),
    # geometry and ranges
    (("observers", 1, "plane", "v"), [1, 1, 0], ["'screen'", "not perpendicular"]),
    (("observers", 1, "plane", "v"), [1e-4, 1, 0], ["'screen'", "not perpendicular"]),
    (("spectrum", "frequencies", "stop"), "0.5 GHz", ["[spectrum] frequencies", "below start"]),
    (("spectrum", "frequencies", "count"), 1, ["[spectrum] frequencies", "count = 1"]),
    (("observers", 2, "sphere", "phi"), [0.0, 1.0, 1], ["'sky' sphere phi", "count = 1"]),
    (("spectrum", "frequencies", "count"), 10**9, ["frequencies count", "<= 10,000,000"]),
    (("observers", 1, "plane", "shape"), [10**5, 10**5], ["'screen'", "more than"]),
    (("time", "start"), "2 ns", ["[time] stop", "before start"]),
    # wrong types
    (("motion", "degree"), "five", ["[motion] degree", "3 or 5", "'five'"]),
    (("motion", "degree"), 5.0, ["[motion] degree", "3 or 5", "5.0"]),
    (("motion", "degree"), 4, ["[motion] degree", "3 or 5"]),
    (("motion", "extend"), True, ["[motion] extend", "'ballistic' or 'none'"]),
    (("tracks", "format"), ["csv"], ["[tracks] format", "non-empty string", "a list"]),
    (("tracks", "path"), 5, ["[tracks] path", "non-empty string"]),
    (("tracks", "path"), "tracks\x00.csv", ["[tracks] path", "control character"]),
    (("output", "dir"), 1.5, ["[output] dir", "non-empty string"]),
    (("output", "formats"), ["parquet", 5], ["[output] formats[1]", "non-empty string"]),
    (("output", "formats"), [], ["[output] formats", "list of exporter names"]),
    (("output", "formats"), ["csv", "csv"], ["[output] formats", "'csv' is listed twice"]),
    (("compute", "scheduler"), "head node", ["[compute] scheduler", "not a scheduler address"]),
    (("compute", "scheduler"), "tcp://head-node", ["[compute] scheduler"]),
    (("compute", "scheduler"), 8786, ["[compute] scheduler"]),
    (("compute", "workers"), 2.0, ["[compute] workers", "whole number"]),
    (("compute", "chunk"), 0, ["[compute] chunk", ">= 1"]),
    (("plugins",), 5, ["[plugins]", "table"]),
    (("plugins", "plots"), "yes", ["[plugins] plots", "[plugins.plots]"]),
    (("observers", 0, "name"), 5, ["[[observers]] #1 name", "non-empty string"]),
    (("observers", 0, "name"), "", ["[[observers]] #1 name"]),
    (("observers", 1, "plane", "shape"), [3.0, 3], ["'screen' plane shape[0]", "whole"]),
    (("observers", 1, "plane", "shape"), [0, 3], ["'screen' plane shape[0]", ">= 1"]),
    (("observers", 1, "plane", "shape"), [3], ["'screen' plane shape", "[n_u, n_v]"]),
    (("observers", 2, "sphere", "theta"), [0.0, 0.05, 3.0], ["'sky' sphere theta count"]),
    (("spectrum", "frequencies", "count"), 20.0, ["frequencies count", "whole number"]),
    (("spectrum", "coherent"), "yes", ["[spectrum] coherent", "true or false"]),
    (("fields", "far_field"), 1, ["[fields] far_field", "true or false"]),
    (("observers",), {"name": "x", "points": [[1, 0, 0]]}, ["[[observers]]"]),
    (("tracks", "u_offset"), "1 m", ["[tracks] u_offset", "length, not a time"]),
    (("tracks", "u_offset"), INF, ["[tracks] u_offset", "finite"]),
    (("tracks", "units"), {"t": "10**10**10 ps"}, ["[tracks] units.t", "cannot read"]),
    (("tracks", "units"), {"t": "m"}, ["[tracks] units.t", "length, not a time"]),
    (("tracks", "units"), {"particle": "s"}, ["[tracks] units.particle", "has no unit"]),
    (("tracks", "columns"), {"tt": "time"}, ["[tracks] columns", "did you mean 't'"]),
    (("tracks", "columns"), {"t": 3}, ["[tracks] columns.t", "non-empty string"]),
    (("time", "stpe"), "1 ps", ["[time]", "unknown key 'stpe'", "did you mean 'step'"]),
    (("spectrum", "frequencies", "cuont"), 3, ["[spectrum] frequencies", "'count'"]),
]


@pytest.mark.parametrize(("path", "value", "expected"), CASES,
                         ids=[f"{'.'.join(map(str, c[0]))}={c[1]!r}" for c in CASES])
def test_bad_value_is_one_clear_error(tmp_path, path, value, expected):
    raw = changed(path, value)
    if path == ("time", "start"):  # a start after the stop
        raw["time"]["stop"] = "1 ns"
    message = refusal(raw, tmp_path)
    for fragment in expected:
        assert fragment in message, message
    assert "Error:" not in message and "Traceback" not in message  # no library class names


def test_error_names_the_run_file(tmp_path):
    path = tmp_path / "run.toml"
    path.write_text('[tracks]\npath = "t.csv"\n[[observers]]\nname = "a"\n'
                    'points = [[0, 0, 1]]\n[time]\nstep = inf\n', encoding="utf-8")
    with pytest.raises(ConfigError, match=r"run\.toml: \[time\] step: inf is not a finite"):
        config.load(path)


def test_unit_errors_are_unit_errors(tmp_path):
    with pytest.raises(UnitError):
        config.parse(changed(("time", "step"), "2 cm"), base_dir=tmp_path)


def test_valid_run_is_read_in_si(tmp_path):
    raw = changed(("tracks", "u_offset"), "-0.5 ps")
    raw["plugins"] = {"plots": {"dpi": 80}, "openpmd": {"species": "electrons"}}
    raw["compute"] = {"scheduler": "tcp://head-node:8786"}
    run = config.parse(raw, base_dir=tmp_path)
    assert run.tracks.u_offset_s == pytest.approx(-5e-13, rel=1e-12)
    assert run.tracks.charge_c == pytest.approx(-1.602176634e-19, rel=1e-12)  # SI: e exact
    assert run.time.step_s == pytest.approx(2e-12, rel=1e-12)
    assert run.spectrum.start_hz == pytest.approx(1e9, rel=1e-12)
    assert run.plugins == {"plots": {"dpi": 80}, "openpmd": {"species": "electrons"}}
    assert run.compute.scheduler == "tcp://head-node:8786"
    assert run.tracks.path == (tmp_path / "tracks.csv").resolve()


def test_u_offset_defaults_to_none(tmp_path):
    """None: an importer's offset stands (else 0), see tests/test_inspect_motion.py."""
    assert config.parse(copy.deepcopy(BASE), base_dir=tmp_path).tracks.u_offset_s is None


def test_single_value_lists_with_equal_ends_are_accepted(tmp_path):
    raw = changed(("spectrum", "frequencies"), {"start": "1 THz", "stop": "1 THz", "count": 1})
    raw["observers"][2]["sphere"]["phi"] = [0.0, 0.0, 1]
    run = config.parse(raw, base_dir=tmp_path)
    assert run.spectrum.count == 1 and run.observers[2].phi_rad == (0.0, 0.0, 1)


def test_plane_with_slightly_skewed_axes_within_tolerance(tmp_path):
    # |û·v̂| = 1e-7 is below the documented tolerance of 1e-6
    raw = changed(("observers", 1, "plane", "v"), [1e-7, 1.0, 0.0])
    assert config.parse(raw, base_dir=tmp_path).observers[1].v[0] == 1e-7


# ---------------------------------------------------------------------------- typo hints
def test_transposition_counts_as_one_edit():
    assert edit_distance("stpe", "step") == 1
    assert edit_distance("stpe", "stop") == 2
    assert edit_distance("", "abc") == 3
    assert edit_distance("kitten", "sitting") == 3  # Levenshtein's standard example (from memory)


def test_nearest_key_prefers_the_transposed_one():
    assert config.nearest("stpe", config.KNOWN_KEYS["time"]) == "step"
    assert config.nearest("alignn", config.KNOWN_KEYS["time"]) == "align"
    assert config.nearest("frequncies", config.KNOWN_KEYS["spectrum"]) == "frequencies"
    assert config.nearest("zzzz", config.KNOWN_KEYS["time"]) is None


# ---------------------------------------------------------------------------- the file
GOOD = ('[tracks]\npath = "t.csv"\n[[observers]]\nname = "café"\npoints = [[0, 0, 1]]\n'
        '[time]\nstep = "1 ps"\n')


def test_utf8_with_byte_order_mark_is_accepted(tmp_path):
    path = tmp_path / "run.toml"
    path.write_bytes(b"\xef\xbb\xbf" + GOOD.encode("utf-8"))
    assert config.load(path).observers[0].name == "café"


@pytest.mark.parametrize(("encoding", "expected"), [
    ("latin-1", "is not UTF-8 (byte 0xE9 on line 4"), ("utf-16", "UTF-16")])
def test_other_encodings_are_refused(tmp_path, encoding, expected):
    path = tmp_path / "run.toml"
    path.write_bytes(GOOD.encode(encoding))
    with pytest.raises(ConfigError, match="save it as UTF-8") as caught:
        config.load(path)
    assert expected in str(caught.value)


def test_directory_empty_and_missing_run_files(tmp_path):
    with pytest.raises(ConfigError, match="is a directory"):
        config.load(tmp_path)
    (tmp_path / "empty.toml").write_text(" \n", encoding="utf-8")
    with pytest.raises(ConfigError, match="is empty"):
        config.load(tmp_path / "empty.toml")
    with pytest.raises(ConfigError, match="does not exist"):
        config.load(tmp_path / "nowhere.toml")


def test_unreadable_run_file(tmp_path, monkeypatch):
    path = tmp_path / "run.toml"
    path.write_text(GOOD, encoding="utf-8")

    def denied(self):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(type(path), "read_bytes", denied)  # as for a file mode 000
    with pytest.raises(ConfigError, match=r"cannot be read \(permission denied\)"):
        config.load(path)


# ---------------------------------------------------------------------------- as a user
def _run_file(tmp_path, time_table: str):
    pd.DataFrame({"particle": 0, "t": [0.0, 1e-9, 2e-9, 3e-9, 4e-9, 5e-9], "x": 0.0,
                  "y": 0.0, "z": [0.0, 0.1, 0.2, 0.3, 0.4, 0.5]}).to_csv(
        tmp_path / "tracks.csv", index=False)
    path = tmp_path / "run.toml"
    path.write_text('[tracks]\npath = "tracks.csv"\ncharge = "-1 e"\n[[observers]]\n'
                    'name = "near"\npoints = [[0.05, 0, 0]]\n'
                    f'[time]\n{time_table}\n[output]\ndir = "out"\n', encoding="utf-8")
    return path


@pytest.mark.parametrize("time_table", ['step = "1 ps"\nstop = inf', "step = inf",
                                        'step = "1 ps"\nstart = nan'])
def test_cli_refuses_without_traceback_or_output(tmp_path, capsys, time_table):
    code = main(["run", str(_run_file(tmp_path, time_table))])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "[time]" in err and "not a finite number" in err
    assert "Traceback" not in err
    assert not (tmp_path / "out").exists()
