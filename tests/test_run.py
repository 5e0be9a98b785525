"""The run command end to end: tables on disk, run.json, refusal to overwrite, clear errors
for bad run files and impossible geometry."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest
from scipy import constants

import lagfield
from lagfield.cli import main

GAMMA = 3.0


def write_tracks(path, *, u=True, n=201, speed=None, x0=0.0):
    beta = np.sqrt(1.0 - 1.0 / GAMMA**2) if speed is None else speed
    t = np.linspace(-1e-9, 1e-9, n)
    frame = pd.DataFrame({"particle": 0, "t": t, "x": x0, "y": 0.0,
                          "z": beta * constants.c * t})
    if u:
        frame["ux"] = 0.0
        frame["uy"] = 0.0
        frame["uz"] = beta / np.sqrt(1.0 - beta**2)
    frame.to_csv(path, index=False)


def write_run(tmp_path, extra="", observers='points = [[0.05, 0.0, 0.0]]', step='"2 ps"'):
    write_tracks(tmp_path / "tracks.csv")
    text = f"""
[tracks]
path = "tracks.csv"
charge = "-1 e"

[[observers]]
name = "near"
{observers}

[time]
step = {step}
{extra}
[output]
dir = "out"
formats = ["parquet", "csv"]
"""
    (tmp_path / "run.toml").write_text(text)
    return tmp_path / "run.toml"


def test_run_writes_spec_tables_and_run_json(tmp_path):
    run_file = write_run(tmp_path)
    signals = lagfield.run(run_file)
    out = tmp_path / "out"
    for name in ("observers", "fields"):
        on_disk = pd.read_parquet(out / f"{name}.parquet")
        assert list(on_disk.columns) == list(signals[name].columns)
        assert (out / f"{name}.csv").exists()
    fields = pd.read_parquet(out / "fields.parquet")
    assert list(fields.columns) == ["observer", "point", "t", "Ex", "Ey", "Ez", "Bx", "By", "Bz"]
    # peak transverse field of a charge passing at b: γ q/(4πε0 b²) (Jackson 3rd ed. eq. 11.154)
    peak = constants.e * GAMMA / (4 * np.pi * constants.epsilon_0 * 0.05**2)
    assert fields.Ex.abs().max() == pytest.approx(peak, rel=2e-3)
    summary = json.loads((out / "run.json").read_text())
    assert summary["version"] == lagfield.__version__
    assert len(summary["inputs"]) == 2
    assert all(len(v["sha256"]) == 64 for v in summary["inputs"].values())
    assert "radiation-safety officer" in summary["note"]


def test_second_run_is_refused_without_overwrite(tmp_path, capsys):
    run_file = write_run(tmp_path)
    assert main(["run", str(run_file)]) == 0
    before = (tmp_path / "out" / "fields.parquet").stat().st_mtime_ns
    code = main(["run", str(run_file)])
    assert code != 0
    assert "--overwrite" in capsys.readouterr().err
    assert (tmp_path / "out" / "fields.parquet").stat().st_mtime_ns == before
    assert main(["run", str(run_file), "--overwrite"]) == 0


def test_failing_exporter_leaves_nothing(tmp_path):
    run_file = write_run(tmp_path)
    text = run_file.read_text().replace('formats = ["parquet", "csv"]',
                                        'formats = ["parquet", "no-such-format"]')
    run_file.write_text(text)
    with pytest.raises(lagfield.PluginError, match="no-such-format"):
        lagfield.run(run_file)
    assert not (tmp_path / "out").exists()
    assert not list(tmp_path.glob(".out*"))


def test_unknown_key_gets_nearest_match(tmp_path, capsys):
    run_file = write_run(tmp_path, extra="alignn = 'group'\n")
    assert main(["run", str(run_file)]) == 2
    err = capsys.readouterr().err
    assert "unknown key 'alignn'" in err and "did you mean 'align'" in err
    assert not (tmp_path / "out").exists()


def test_empty_observer_group_is_an_error(tmp_path, capsys):
    run_file = write_run(tmp_path, observers="points = []")
    assert main(["run", str(run_file)]) != 0
    assert "points is empty" in capsys.readouterr().err


def test_point_reached_by_track_is_an_error(tmp_path, capsys):
    # the track runs along the z axis: a point on the axis inside the window is reached
    run_file = write_run(tmp_path, observers="points = [[0.05, 0, 0], [0.0, 0.0, 0.1]]")
    assert main(["run", str(run_file)]) != 0
    err = capsys.readouterr().err
    assert "point 1" in err and "particle 0" in err and "reaches" in err


def test_superluminal_spline_is_reported(tmp_path, capsys):
    # a coarse bend at γ = 1000 without momenta: the quintic spline overshoots c
    t = np.linspace(0.0, 1e-9, 11)
    beta = np.sqrt(1.0 - 1e-6)
    angle = 0.3 * np.sin(np.linspace(0.0, 6.0, 11))
    step = np.r_[0.0, np.diff(t)] * constants.c * beta
    pd.DataFrame({"particle": 7, "t": t, "x": np.cumsum(step * np.sin(angle)), "y": 0.0,
                  "z": np.cumsum(step * np.cos(angle))}).to_csv(tmp_path / "fast.csv",
                                                                 index=False)
    run_file = write_run(tmp_path)
    run_file.write_text(run_file.read_text().replace('"tracks.csv"', '"fast.csv"'))
    assert main(["run", str(run_file)]) != 0
    err = capsys.readouterr().err
    assert "particle 7" in err and "reaches c" in err and "t = " in err


def test_units_in_strings(tmp_path):
    run_file = write_run(tmp_path, step='"0.002 ns"')
    signals = lagfield.run(run_file, write=False)
    t = signals.fields.t.to_numpy()
    assert np.diff(t) == pytest.approx(np.full(t.size - 1, 2e-12), rel=1e-9)


def test_plugins_command_lists_builtins():
    result = subprocess.run([sys.executable, "-m", "lagfield.cli", "plugins"],
                            capture_output=True, text=True, check=True)
    for name in ("csv", "parquet"):
        assert name in result.stdout
    assert "lagfield 0.1.0" in result.stdout


@pytest.mark.parametrize("how", [signal.SIGINT, signal.SIGKILL])
def test_killed_run_leaves_no_tables(tmp_path, how):
    # a run long enough to be caught midway: a fine step and a long frequency list
    run_file = write_run(tmp_path, step='"0.02 ps"', extra="""
[spectrum]
frequencies = { start = "1 GHz", stop = "5 THz", count = 200000 }
""", observers='plane = { center = [0.05, 0, 0], u = [0, 1, 0], v = [0, 0, 1], '
                 'size = ["2 cm", "2 cm"], shape = [4, 8] }')
    # SIGINT as a terminal delivers it, even when the tests run from a background shell
    # (which starts its children with SIGINT ignored)
    process = subprocess.Popen([sys.executable, "-m", "lagfield.cli", "run", str(run_file)],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    time.sleep(5.0)
    assert process.poll() is None, "the run ended before it could be interrupted"
    process.send_signal(how)
    process.wait(timeout=60)
    assert process.returncode != 0
    if how == signal.SIGINT:  # an interrupted run removes all it made
        assert not (tmp_path / "out").exists()
    else:  # a killed one leaves at most its hidden staging directory, never a table
        left = (tmp_path / "out").iterdir() if (tmp_path / "out").exists() else []
        assert [p.name for p in left if not p.name.startswith(".lagfield")] == []
    assert not list(tmp_path.glob(".out*"))
