"""The `lagfield` command as a user meets it: the README's demo in a terminal, progress,
worker and scheduler options, one-line errors, --version, --debug, signed values,
`inspect RUN.toml`, plain words, and `lagfield.run` with a dict."""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import re
import shutil
import signal
import struct
import subprocess
import sys
import termios
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants

import lagfield
from lagfield import cli, distributed, runner
from lagfield.outputs import SAFETY_NOTE

ROOT = Path(__file__).resolve().parents[1]
GAMMA = 3.0
ELECTRON_C = -constants.e  # CODATA 2018, exact


def write_tracks(path, n_particles=1, n=101):
    """Electrons at γ = 3 along z, particle p displaced by p mm in y."""
    beta = np.sqrt(1.0 - 1.0 / GAMMA**2)
    t = np.linspace(-1e-9, 1e-9, n)
    frame = pd.concat([pd.DataFrame({"particle": p, "t": t, "x": 0.0, "y": 1e-3 * p,
                                     "z": beta * constants.c * t, "ux": 0.0, "uy": 0.0,
                                     "uz": GAMMA * beta}) for p in range(n_particles)])
    frame.to_csv(path, index=False)


def run_table(n_groups=1, extra=""):
    """A run file's content (as tomllib reads it): tracks.csv, `n_groups` point groups."""
    raw = {"tracks": {"path": "tracks.csv", "charge": "-1 e"},
           "observers": [{"name": f"g{k}", "points": [[0.05, 0.0, 0.01 * k]]}
                         for k in range(n_groups)],
           "time": {"step": "2 ps"}, "output": {"dir": "out", "formats": ["parquet"]}}
    raw.update(extra or {})
    return raw


def write_run(directory, n_particles=1, n_groups=1, compute=""):
    write_tracks(directory / "tracks.csv", n_particles)
    groups = "".join(f'[[observers]]\nname = "g{k}"\npoints = [[0.05, 0.0, {0.01 * k}]]\n\n'
                     for k in range(n_groups))
    text = (f'[tracks]\npath = "tracks.csv"\ncharge = "-1 e"\n\n{groups}'
            f'[time]\nstep = "2 ps"\n\n{compute}\n[output]\ndir = "out"\n'
            'formats = ["parquet"]\n')
    (directory / "run.toml").write_text(text)
    return directory / "run.toml"


def in_terminal(command, cwd, timeout_s=300.0):
    """Run `command` with stdin, stdout and stderr on a pseudo-terminal of 100 × 24
    characters; returns (exit code, everything it wrote)."""
    leader, follower = os.openpty()
    fcntl.ioctl(follower, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))
    process = subprocess.Popen(command, cwd=cwd, stdin=follower, stdout=follower,
                               stderr=follower, close_fds=True)
    os.close(follower)
    output = bytearray()
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            chunk = os.read(leader, 65536)
        except OSError:  # the terminal closed: the program ended
            break
        if not chunk:
            break
        output += chunk
    os.close(leader)
    return process.wait(timeout=60), output.decode("utf-8", "replace")


def lagfield_command():
    """The installed `lagfield` script next to this Python (where pip puts it)."""
    script = Path(sys.executable).with_name("lagfield")
    return str(script) if script.exists() else shutil.which("lagfield")


# ------------------------------------------------------------------ the README's demo
def test_readme_demo_runs_in_a_terminal(tmp_path):
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    demo = re.search(r"&& (lagfield run sample_data/\S+/run\.toml[^\n`]*)", readme).group(1)
    shutil.copytree(ROOT / "sample_data" / "pickup", tmp_path / "sample_data" / "pickup",
                    ignore=shutil.ignore_patterns("out"))
    command = demo.split()
    assert command[0] == "lagfield" and lagfield_command() is not None
    code, output = in_terminal([lagfield_command(), *command[1:]], cwd=tmp_path)
    assert code == 0, output
    assert "Traceback" not in output and "error" not in output
    # progress with a total: 64 particles x 1 observer group (sample_data/pickup/run.toml)
    assert "/64 particle × group" in output
    assert "64 particles, 4 observer points in 1 group" in output
    assert output.count("radiation-safety officer") == 1
    assert (tmp_path / "sample_data" / "pickup" / "out" / "fields.parquet").exists()


def test_no_progress_display_without_a_terminal(tmp_path):
    run_file = write_run(tmp_path)
    result = subprocess.run([sys.executable, "-m", "lagfield", "run", str(run_file)],
                            capture_output=True, text=True, timeout=300)
    assert result.returncode == 0, result.stderr
    assert "particle × group" not in result.stderr and "\r" not in result.stderr
    assert result.stderr.count(SAFETY_NOTE) == 1
    assert SAFETY_NOTE not in result.stdout and "1 particle," in result.stdout


# ------------------------------------------------------------------ progress
def test_progress_counts_particles_times_groups(tmp_path):
    write_tracks(tmp_path / "tracks.csv", n_particles=3)
    calls = []
    lagfield.run(run_table(n_groups=2), base_dir=tmp_path, write=False,
                 progress=lambda done, total: calls.append((done, total)))
    assert calls[0] == (0, 6) and calls[-1] == (6, 6)  # 3 particles x 2 groups
    done = [d for d, _ in calls]  # the particles of a batch advance together, group by group
    assert done == sorted(done) and len(set(done)) == len(done) and len(done) >= 3


def test_progress_display_keeps_time_moving_while_nothing_completes():
    import io

    from lagfield.progress import RunProgress

    stream = io.StringIO()
    with RunProgress(stream, refresh_s=0.05) as progress:
        time.sleep(0.4)  # reading: no count yet, the elapsed time is redrawn
        redraws_while_reading = stream.getvalue().count("reading tracks")
        progress(0, 8)
        progress(3, 8)
        time.sleep(0.3)  # one long particle
        counted = stream.getvalue()
        progress(8, 8)
    assert redraws_while_reading >= 3
    assert "3/8 particle × group" in counted
    assert counted.count("3/8 particle × group") >= 3  # redrawn while waiting
    assert "finishing" in stream.getvalue()


# ------------------------------------------------------------------ workers and scheduler
@pytest.mark.parametrize("value", ["-1", "0", "2.5", "two"])
def test_bad_worker_count_is_one_line_naming_the_flag(tmp_path, capsys, value):
    run_file = write_run(tmp_path)
    assert cli.main(["run", str(run_file), "--workers", value]) == 2
    err = capsys.readouterr().err
    assert err.startswith("lagfield: error: --workers:") and err.count("\n") == 1
    assert "whole number" in err and not (tmp_path / "out").exists()


def test_bad_worker_count_in_the_run_file_names_the_key(tmp_path, capsys):
    run_file = write_run(tmp_path, compute="[compute]\nworkers = 0\n")
    assert cli.main(["run", str(run_file)]) == 2
    err = capsys.readouterr().err
    assert "[compute] workers" in err and "whole number" in err and err.count("\n") == 1


@pytest.mark.parametrize("address", ["head-node", "tcp://head-node", "http://head:8786",
                                     "tcp://head:99999"])
def test_malformed_scheduler_address_is_one_line(tmp_path, capsys, address):
    run_file = write_run(tmp_path)
    assert cli.main(["run", str(run_file), "--scheduler", address]) == 2
    err = capsys.readouterr().err
    assert err.startswith("lagfield: error: --scheduler:") and err.count("\n") == 1
    assert "tcp://" in err


@pytest.mark.parametrize("address", ["tcp://head-node:8786", "head-node:8786",
                                     "tls://10.0.0.1:8786", "tcp://[::1]:8786"])
def test_scheduler_addresses_dask_accepts(address):
    assert distributed.check_scheduler_address(f" {address} ", "--scheduler") == address


@pytest.fixture
def placements(monkeypatch):
    """Where runs would go: connect() records its arguments and stops the run there."""
    seen = []

    def fake_connect(workers=None, scheduler=None):
        seen.append((workers, scheduler))
        raise lagfield.LagfieldError("stopped before connecting")

    monkeypatch.setattr(distributed, "connect", fake_connect)
    return seen


def test_command_line_overrides_the_run_files_compute(tmp_path, placements):
    run_file = write_run(tmp_path, compute='[compute]\nscheduler = "tcp://head-node:8786"\n')
    assert cli.main(["run", str(run_file), "--workers", "3"]) == 2
    run_file = write_run(tmp_path, compute="[compute]\nworkers = 2\n")
    assert cli.main(["run", str(run_file), "--scheduler", "tcp://other:8786"]) == 2
    assert cli.main(["run", str(run_file)]) == 2
    assert placements == [(3, None), (None, "tcp://other:8786"), (2, None)]


def test_workers_flag_runs_locally_despite_a_scheduler_in_the_file(tmp_path):
    pytest.importorskip("dask.distributed")
    # the file's scheduler does not exist: the run succeeds only if it is not used
    run_file = write_run(tmp_path, n_particles=2,
                         compute='[compute]\nscheduler = "tcp://127.0.0.1:9"\n')
    in_process = lagfield.run(run_table(), base_dir=tmp_path, write=False)  # no [compute]
    calls = []
    on_workers = lagfield.run(run_file, write=False, workers=1,
                              progress=lambda done, total: calls.append((done, total)))
    assert calls[0] == (0, 2) and calls[-1] == (2, 2)
    pd.testing.assert_frame_equal(on_workers.fields, in_process.fields, rtol=1e-12)


# ------------------------------------------------------------------ errors and flags
def test_version(capsys):
    assert cli.main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"lagfield {lagfield.__version__}"


@pytest.mark.parametrize("launcher", ["script", "module"])
def test_script_and_module_both_work(launcher):
    start = [lagfield_command()] if launcher == "script" else [sys.executable, "-m", "lagfield"]
    result = subprocess.run([*start, "--version"], capture_output=True, text=True, timeout=60)
    assert result.returncode == 0 and result.stdout.strip() == f"lagfield {lagfield.__version__}"
    result = subprocess.run([*start, "plugins"], capture_output=True, text=True, timeout=60)
    assert result.returncode == 0 and "parquet" in result.stdout


def test_debug_is_accepted_after_the_subcommand(tmp_path, capsys):
    missing = str(tmp_path / "missing.toml")
    assert cli.main(["run", missing]) == 2
    assert capsys.readouterr().err == f"lagfield: error: run file {missing} does not exist\n"
    for argv in (["--debug", "run", missing], ["run", missing, "--debug"]):
        with pytest.raises(lagfield.ConfigError, match="does not exist"):
            cli.main(argv)


def test_usage_error_is_one_line(capsys):
    assert cli.main(["run"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("lagfield: error: ") and "RUN.toml" in err and err.count("\n") == 1


def test_unexpected_exception_is_one_line_asking_for_debug(tmp_path, capsys, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("something\nunforeseen")

    monkeypatch.setattr(runner, "run", broken)
    run_file = write_run(tmp_path)
    assert cli.main(["run", str(run_file)]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "RuntimeError: something unforeseen" in err and "bug" in err and "--debug" in err
    with pytest.raises(RuntimeError):
        cli.main(["run", str(run_file), "--debug"])


def test_python_warnings_are_one_line_each_and_once(tmp_path, capsys, monkeypatch):
    import warnings

    def warns_then_fails(*args, **kwargs):
        for _ in range(3):  # as a numerical warning repeats for every particle
            warnings.warn_explicit("invalid value\nencountered", RuntimeWarning, "m.py", 1)
        raise lagfield.TrackError("bad row", row=3)

    monkeypatch.setattr(runner, "run", warns_then_fails)
    assert cli.main(["run", str(write_run(tmp_path))]) == 3
    assert capsys.readouterr().err.splitlines() == [
        "lagfield: warning: RuntimeWarning: invalid value encountered",
        "lagfield: error: bad row (row 3)"]


def test_ctrl_c_is_one_line_and_exit_130(tmp_path, capsys, monkeypatch):
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(runner, "run", interrupted)
    assert cli.main(["run", str(write_run(tmp_path))]) == 130
    err = capsys.readouterr().err
    assert err.startswith("lagfield: interrupted") and err.count("\n") == 1


def test_ctrl_c_in_a_terminal_during_the_computation(tmp_path):
    # a long run: a fine step and a long frequency list on a plane of 32 points
    run_file = write_run(tmp_path, n_particles=1)
    text = run_file.read_text().replace('step = "2 ps"', 'step = "0.02 ps"')
    run_file.write_text(text.replace(
        '[[observers]]\nname = "g0"\npoints = [[0.05, 0.0, 0.0]]',
        '[[observers]]\nname = "g0"\nplane = { center = [0.05, 0, 0], u = [0, 1, 0], '
        'v = [0, 0, 1], size = ["2 cm", "2 cm"], shape = [4, 8] }\n\n[spectrum]\n'
        'frequencies = { start = "1 GHz", stop = "5 THz", count = 200000 }'))
    leader, follower = os.openpty()
    fcntl.ioctl(follower, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))
    # SIGINT as a terminal delivers it, even when the tests run from a background shell
    # (which starts its children with SIGINT ignored)
    process = subprocess.Popen([sys.executable, "-m", "lagfield", "run", str(run_file)],
                               stdin=follower, stdout=follower, stderr=follower,
                               preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    os.close(follower)
    output = b""
    deadline = time.monotonic() + 120
    while b"particle \xc3\x97 group" not in output and time.monotonic() < deadline:
        output += os.read(leader, 65536)  # until the computation shows its progress
    process.send_signal(signal.SIGINT)
    code = process.wait(timeout=60)
    with contextlib.suppress(OSError):
        while chunk := os.read(leader, 65536):
            output += chunk
    os.close(leader)
    text = output.decode("utf-8", "replace")
    assert code == 130, text
    lines = [line.strip() for line in re.split(r"[\r\n]+", text) if line.strip()]
    assert lines[-1] == "lagfield: interrupted; no results were written"
    assert "Traceback" not in text and not (tmp_path / "out").exists()


def test_help_texts_give_units(capsys):
    assert cli.main(["inspect", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "charge per physical particle in C" in text


# ------------------------------------------------------------------ inspect
@pytest.fixture
def captured_inspect(monkeypatch):
    """inspect_tracks replaced by a recorder of its arguments."""
    seen = {}

    def record(path, **options):
        seen.update(options, path=Path(path))
        raise lagfield.LagfieldError("recorded")

    monkeypatch.setattr("lagfield.diagnose.inspect_tracks", record)
    return seen


@pytest.mark.parametrize("value", ["-1e", "-1 e", "-1.602176634e-19"])
def test_signed_charge_values(tmp_path, captured_inspect, value):
    write_tracks(tmp_path / "tracks.csv")
    cli.main(["inspect", str(tmp_path / "tracks.csv"), "--charge", value])
    assert captured_inspect["charge"] == pytest.approx(ELECTRON_C, rel=1e-12)


def test_charge_of_the_wrong_dimension_names_the_flag(tmp_path, capsys):
    write_tracks(tmp_path / "tracks.csv")
    assert cli.main(["inspect", str(tmp_path / "tracks.csv"), "--charge", "-1mm"]) == 2
    assert capsys.readouterr().err.startswith("lagfield: error: --charge:")


def write_renamed_run(directory):
    """Tracks with other column names and units (ns, mm) and no charge, and a run file
    that maps them."""
    beta = np.sqrt(1.0 - 1.0 / GAMMA**2)
    t_ns = np.linspace(-1.0, 1.0, 101)
    pd.DataFrame({"id": 4, "time": t_ns, "px": 0.0, "py": 0.0,
                  "pz": beta * constants.c * t_ns * 1e-9 * 1e3}).to_csv(
        directory / "renamed.csv", index=False)
    text = """[tracks]
path = "renamed.csv"
charge = "-1 e"
columns = { particle = "id", t = "time", x = "px", y = "py", z = "pz" }
units = { t = "ns", x = "mm", y = "mm", z = "mm" }

[[observers]]
name = "side"
points = [[0.05, 0, 0]]

[time]
step = "2 ps"
"""
    (directory / "run.toml").write_text(text)
    return directory / "run.toml"


def test_inspect_a_run_file_uses_its_tracks_table(tmp_path, capsys):
    run_file = write_renamed_run(tmp_path)
    assert cli.main(["inspect", str(tmp_path / "renamed.csv")]) == 3
    err = capsys.readouterr().err
    assert "'particle'" in err and "lagfield inspect RUN.toml" in err and err.count("\n") == 1
    assert cli.main(["inspect", str(run_file), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["run_file"] == str(run_file) and report["n_particles"] == 1
    # the time column is in ns: the span is 2 ns in seconds
    assert report["time_span_s"]["stop"] - report["time_span_s"]["start"] == pytest.approx(
        2e-9, rel=1e-12)
    # the speed comes from positions in mm over times in ns: γ = 3 as written
    assert report["lorentz_factor"]["max"] == pytest.approx(GAMMA, rel=1e-6)
    assert cli.main(["inspect", str(run_file)]) == 0
    text = capsys.readouterr().out
    assert text.startswith(f"run file: {run_file}\n")
    assert "particles: 1 (101 rows;" in text


def test_inspect_says_one_track_in_the_singular(tmp_path, capsys):
    # a coarsely sampled circle (γ = 10, radius 1 m, steps of 6 formation times)
    gamma, radius_m = 10.0, 1.0
    beta = np.sqrt(1 - 1 / gamma**2)
    t = np.arange(40) * 6 * radius_m / (constants.c * gamma)
    phase = beta * constants.c / radius_m * t
    pd.DataFrame({"particle": 0, "t": t, "x": radius_m * np.cos(phase),
                  "y": radius_m * np.sin(phase), "z": 0.0}).to_csv(tmp_path / "c.csv",
                                                                   index=False)
    assert cli.main(["inspect", str(tmp_path / "c.csv")]) == 0
    text = capsys.readouterr().out
    assert "sampling: 1 track not resolved" in text
    assert "(1 bent track, 0 straight tracks)" in text
    assert "(s)" not in text and "1 tracks" not in text


# ------------------------------------------------------------------ Python API
def test_run_takes_the_run_files_content_as_a_dict(tmp_path, monkeypatch):
    run_file = write_run(tmp_path, n_particles=2)
    from_file = lagfield.run(run_file, write=False)
    from_dict = lagfield.run(run_table(), base_dir=tmp_path, write=False)
    pd.testing.assert_frame_equal(from_dict.fields, from_file.fields)
    assert from_dict.summary["run_file"] is None
    (only_input,) = from_dict.summary["inputs"]  # the tracks; there is no run file
    assert Path(only_input).name == "tracks.csv"
    monkeypatch.chdir(tmp_path)  # default base: the current directory
    here = lagfield.run(run_table(), write=False)
    pd.testing.assert_frame_equal(here.fields, from_file.fields)
    with pytest.raises(lagfield.ConfigError, match="base_dir"):
        lagfield.run(run_file, base_dir=tmp_path, write=False)


def test_one_particle_run_speaks_in_the_singular(tmp_path, capsys):
    run_file = write_run(tmp_path, n_particles=1)
    assert cli.main(["run", str(run_file)]) == 0
    captured = capsys.readouterr()
    assert re.match(r"lagfield \S+: 1 particle, 1 observer point in 1 group, \d+ field "
                    r"samples in ", captured.out)
    assert captured.err.count(SAFETY_NOTE) == 1 and SAFETY_NOTE not in captured.out


def test_readme_lists_every_exit_code():
    from lagfield import errors

    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    table = readme[readme.index("| exit code | meaning |"):].split("\n\n")[0]
    listed = {int(code) for code in re.findall(r"^\| (\d+) \| ", table, flags=re.M)}
    classes = [c for c in vars(errors).values()
               if isinstance(c, type) and issubclass(c, errors.LagfieldError)]
    assert listed == ({0, cli.EXIT_BUG, cli.EXIT_USAGE, cli.EXIT_INTERRUPTED}
                      | {error.exit_code for error in classes})
