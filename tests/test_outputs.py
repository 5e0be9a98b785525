"""Output directories: --overwrite replaces only lagfield's own results, results appear whole
or not at all (also when the process is killed), exporters are contained, run.json says
what the run read, did and wrote."""

from __future__ import annotations

import errno
import json
import os
import signal
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants

import lagfield
from lagfield import outputs
from lagfield.exporting import run_exporters
from lagfield.outputs import (
    JOURNAL_NAME,
    LOCK_NAME,
    MANIFEST_NAME,
    OutputWarning,
    open_output,
)
from lagfield.registry import PluginInfo, build_registry

GAMMA = 3.0


def write_tracks(path: Path) -> None:
    """One charge at γ = 3 along z, 201 samples over 2 ns, with momenta."""
    beta = np.sqrt(1.0 - 1.0 / GAMMA**2)
    t = np.linspace(-1e-9, 1e-9, 201)
    pd.DataFrame({"particle": 0, "t": t, "x": 0.0, "y": 0.0, "z": beta * constants.c * t,
                  "ux": 0.0, "uy": 0.0, "uz": beta * GAMMA}).to_csv(path, index=False)


def make_run(folder: Path, *, out="out", formats=("parquet", "csv"), step="2 ps",
             tracks="tracks.csv", extra="") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    if not (folder / tracks).exists():
        (folder / tracks).parent.mkdir(parents=True, exist_ok=True)
        write_tracks(folder / tracks)
    run_file = folder / "run.toml"
    run_file.write_text(textwrap.dedent(f"""
        [tracks]
        path = "{tracks}"
        charge = "-1 e"

        [[observers]]
        name = "near"
        points = [[0.05, 0.0, 0.0]]

        [time]
        step = "{step}"
        {extra}
        [output]
        dir = "{out}"
        formats = {json.dumps(list(formats))}
        """))
    return run_file


def contents(folder: Path) -> dict[str, bytes]:
    """Every file under folder (hidden ones included) and its bytes."""
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def visible(folder: Path) -> list[str]:
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*")
                  if p.is_file() and not p.name.startswith(".lagfield"))


def leftovers(folder: Path) -> list[str]:
    """Hidden working files of lagfield (the manifest is a result, not a leftover)."""
    return sorted(p.name for p in folder.iterdir()
                  if p.name.startswith(".lagfield") and p.name != MANIFEST_NAME)


# --------------------------------------------------------------------------- exporters
class NestedExporter:
    """Writes into sub-directories, as an exporter may."""

    name = "nested"
    description = "files in sub-directories"

    def write(self, result, directory, options):
        (directory / "figures" / "deep").mkdir(parents=True)
        (directory / "figures" / "a.txt").write_text("a")
        (directory / "figures" / "deep" / "b.txt").write_text(str(len(result.fields)))
        return ["figures/a.txt", "figures/deep/b.txt"]


class SummaryExporter:
    """Writes the summary it is given (to see what exporters receive)."""

    name = "summary-copy"
    description = "the summary handed to exporters"

    def write(self, result, directory, options):
        (directory / "summary-copy.json").write_text(json.dumps(sorted(result.summary)))
        return ["summary-copy.json"]


@lagfield.hookimpl
def lagfield_register_exporters():
    return [NestedExporter(), SummaryExporter()]


@pytest.fixture
def full_registry():
    from lagfield.plugins import csv_format, parquet_format

    return build_registry(autoload=False, extra_plugins=[
        ("csv", csv_format), ("parquet", parquet_format),
        ("test-exporters", sys.modules[__name__])])


def info(exporter, distribution="test-dist 1.0") -> PluginInfo:
    return PluginInfo("exporter", exporter.name, exporter, distribution)


def small_signals() -> lagfield.Signals:
    observers = pd.DataFrame({"observer": ["g"], "point": [0], "x": [0.0], "y": [0.0],
                              "z": [1.0]})
    fields = pd.DataFrame({"observer": "g", "point": 0, "t": np.arange(4) * 1e-12,
                           **{c: np.arange(4.0) for c in ("Ex", "Ey", "Ez", "Bx", "By", "Bz")}})
    return lagfield.Signals(observers=observers, fields=fields, summary={"run": {"a": 1}})


class Writer:
    """An exporter writing `files` (name -> text) and returning `returns`."""

    def __init__(self, name, files, returns=None, action=None):
        self.name, self.description = name, f"test exporter {name}"
        self.files, self.returns, self.action = files, returns, action

    def write(self, result, directory, options):
        for name, text in self.files.items():
            (directory / name).parent.mkdir(parents=True, exist_ok=True)
            (directory / name).write_text(text)
        if self.action is not None:
            self.action(result, directory)
        return list(self.files) if self.returns is None else self.returns


# --------------------------------------------------------------------------- layouts
def test_output_in_the_run_folder_keeps_the_run_file_and_tracks(tmp_path):
    run_file = make_run(tmp_path, out=".")
    (tmp_path / "notes.txt").write_text("mine")
    inputs = {name: (tmp_path / name).read_bytes() for name in ("run.toml", "tracks.csv",
                                                                 "notes.txt")}
    lagfield.run(run_file)
    with pytest.raises(lagfield.OutputError, match="--overwrite"):
        lagfield.run(run_file)
    run_file.write_text(run_file.read_text().replace('"2 ps"', '"4 ps"'))
    inputs["run.toml"] = run_file.read_bytes()
    signals = lagfield.run(run_file, overwrite=True)
    for name, data in inputs.items():
        assert (tmp_path / name).read_bytes() == data
    assert {"fields.csv", "fields.parquet", "run.json"} <= set(signals.summary["files"])
    assert visible(tmp_path) == sorted(signals.summary["files"] + list(inputs))
    t = pd.read_parquet(tmp_path / "fields.parquet").t.to_numpy()
    assert np.diff(t) == pytest.approx(4e-12, rel=1e-9)  # the new results
    assert leftovers(tmp_path) == []


def test_output_in_the_tracks_folder_keeps_the_tracks(tmp_path):
    run_file = make_run(tmp_path, out="data", tracks="data/tracks.csv")
    tracks = (tmp_path / "data" / "tracks.csv").read_bytes()
    lagfield.run(run_file)
    lagfield.run(run_file, overwrite=True)
    assert (tmp_path / "data" / "tracks.csv").read_bytes() == tracks
    assert "fields.parquet" in visible(tmp_path / "data")


def test_user_files_in_the_output_folder_are_kept(tmp_path):
    run_file = make_run(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("my notes")
    (out / "mine").mkdir()
    (out / "mine" / "plot.png").write_bytes(b"\x89PNG")
    lagfield.run(run_file)  # foreign files only: no overwrite needed
    with pytest.raises(lagfield.OutputError, match="already holds results"):
        lagfield.run(run_file)
    lagfield.run(run_file, overwrite=True)
    assert (out / "notes.txt").read_text() == "my notes"
    assert (out / "mine" / "plot.png").read_bytes() == b"\x89PNG"


@pytest.mark.parametrize("name", ["fields.csv", "run.json"])
def test_a_result_name_taken_by_a_user_file_is_an_error(tmp_path, name, monkeypatch):
    run_file = make_run(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    (out / name).write_text("not lagfield's")
    if name == "run.json":  # known before the computation: it is not even started
        monkeypatch.setattr("lagfield.runner.compute_fields", _never)
    for overwrite in (False, True):
        with pytest.raises(lagfield.OutputError, match=f"{out / name}.*not written by lagfield"):
            lagfield.run(run_file, overwrite=overwrite)
        assert contents(out) == {name: b"not lagfield's"}


def _never(*args, **kwargs):
    raise AssertionError("the computation started")


def test_overwrite_removes_old_results_the_new_run_does_not_write(tmp_path):
    run_file = make_run(tmp_path, formats=("parquet", "csv"))
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "notes.txt").write_text("mine")
    lagfield.run(run_file)
    assert "fields.csv" in visible(tmp_path / "out")
    make_run(tmp_path, formats=("parquet",))
    signals = lagfield.run(run_file, overwrite=True)
    assert not [name for name in visible(tmp_path / "out") if name.endswith(".csv")]
    assert visible(tmp_path / "out") == sorted(signals.summary["files"] + ["notes.txt"])
    make_run(tmp_path, formats=("csv", "parquet"))
    signals = lagfield.run(run_file, overwrite=True)
    assert visible(tmp_path / "out") == sorted(signals.summary["files"] + ["notes.txt"])
    manifest = json.loads((tmp_path / "out" / MANIFEST_NAME).read_text())
    assert manifest["files"] == signals.summary["files"]


def test_nested_result_folders(tmp_path, full_registry):
    run_file = make_run(tmp_path, formats=("parquet", "nested"))
    out = tmp_path / "out"
    lagfield.run(run_file, registry=full_registry)
    assert {"figures/a.txt", "figures/deep/b.txt"} <= set(visible(out))
    make_run(tmp_path, formats=("parquet",))
    lagfield.run(run_file, overwrite=True, registry=full_registry)
    assert not (out / "figures").exists()  # lagfield made it, and it is empty now
    # a folder the user keeps a file in stays, with that file
    make_run(tmp_path, formats=("parquet", "nested"))
    lagfield.run(run_file, overwrite=True, registry=full_registry)
    (out / "figures" / "deep" / "mine.txt").write_text("mine")
    make_run(tmp_path, formats=("parquet",))
    signals = lagfield.run(run_file, overwrite=True, registry=full_registry)
    assert visible(out) == sorted(signals.summary["files"] + ["figures/deep/mine.txt"])
    assert not (out / "figures" / "a.txt").exists()


def test_results_honour_the_umask(tmp_path, full_registry):
    run_file = make_run(tmp_path, out="a/b/out", formats=("parquet", "csv", "nested"))
    old = os.umask(0o027)
    try:
        lagfield.run(run_file, registry=full_registry)
    finally:
        os.umask(old)
    out = tmp_path / "a" / "b" / "out"
    for folder in (tmp_path / "a", tmp_path / "a" / "b", out, out / "figures"):
        assert stat.S_IMODE(folder.stat().st_mode) == 0o750, folder
    for path in out.rglob("*"):
        if path.is_file():
            assert stat.S_IMODE(path.stat().st_mode) == 0o640, path


# --------------------------------------------------------------------------- before the work
def test_output_under_a_file_is_refused_before_the_computation(tmp_path, monkeypatch):
    run_file = make_run(tmp_path, out="tracks.csv/out")
    monkeypatch.setattr("lagfield.runner.compute_fields", _never)
    with pytest.raises(lagfield.OutputError, match="tracks.csv is a file"):
        lagfield.run(run_file)


def test_full_disk_is_found_before_the_computation(tmp_path, monkeypatch):
    run_file = make_run(tmp_path)
    monkeypatch.setattr("lagfield.runner.compute_fields", _never)
    usage = outputs.shutil.disk_usage(tmp_path)
    monkeypatch.setattr(outputs.shutil, "disk_usage",
                        lambda path: usage._replace(free=1000))
    with pytest.raises(lagfield.OutputError, match="only 1000 B is free"):
        lagfield.run(run_file)
    assert not (tmp_path / "out").exists()


def test_read_only_file_system_is_found_before_the_computation(tmp_path, monkeypatch):
    # root ignores permission bits: a read-only file system is imitated by failing the
    # first file lagfield creates there (the lock) with EROFS, as the kernel would
    run_file = make_run(tmp_path)
    real_open = os.open

    def read_only(path, flags, *args, **kwargs):
        if str(path).endswith(LOCK_NAME):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))
        return real_open(path, flags, *args, **kwargs)

    monkeypatch.setattr(outputs.os, "open", read_only)
    monkeypatch.setattr("lagfield.runner.compute_fields", _never)
    with pytest.raises(lagfield.OutputError, match="Read-only file system"):
        lagfield.run(run_file)
    assert not (tmp_path / "out").exists()  # the directory it had made is gone again


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores permission bits")
def test_unwritable_directory_is_found_before_the_computation(tmp_path, monkeypatch):
    run_file = make_run(tmp_path)
    (tmp_path / "out").mkdir(mode=0o555)
    monkeypatch.setattr("lagfield.runner.compute_fields", _never)
    with pytest.raises(lagfield.OutputError, match="Permission denied"):
        lagfield.run(run_file)


def test_a_second_run_into_a_locked_folder_is_refused(tmp_path):
    run_file = make_run(tmp_path)
    with open_output(tmp_path / "out"):
        result = subprocess.run([sys.executable, "-m", "lagfield.cli", "run", str(run_file)],
                                capture_output=True, text=True, timeout=120)
    assert result.returncode == lagfield.OutputError.exit_code
    assert f"another lagfield run (process {os.getpid()})" in result.stderr
    assert "Traceback" not in result.stderr
    assert not (tmp_path / "out").exists()  # released, and the empty folder removed
    lagfield.run(run_file)


# --------------------------------------------------------------------------- exporters
def test_exporter_that_raises_is_one_error_naming_it(tmp_path):
    def fail(result, directory):
        raise ValueError("no luck")

    with open_output(tmp_path / "out") as target:
        with pytest.raises(lagfield.PluginError,
                           match=r"exporter 'bad' \(test-dist 1.0\).*ValueError: no luck"):
            target.commit(small_signals(), [info(Writer("bad", {"x.txt": "x"}, action=fail))],
                          {})
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("returns, message", [
    ("x.txt", "returned str"),
    (7, "returned int"),
    ([7], "among its file names"),
    (["/tmp/x.txt"], "must be relative"),
    (["../x.txt"], "without '..'"),
    (["missing.txt"], "no such file"),
])
def test_exporter_returning_wrong_names_is_an_error(tmp_path, returns, message):
    staging = tmp_path / "staging"
    staging.mkdir()
    with pytest.raises(lagfield.PluginError, match=message):
        run_exporters(small_signals(), staging, [info(Writer("w", {"x.txt": "x"}, returns))],
                      {})


def test_exporter_returning_a_link_out_of_its_folder_is_an_error(tmp_path):
    staging = tmp_path / "staging"
    staging.mkdir()
    (tmp_path / "secret").write_text("s")

    def link(result, directory):
        (directory / "link").symlink_to(tmp_path / "secret")

    with pytest.raises(lagfield.PluginError, match="leads outside"):
        run_exporters(small_signals(), staging, [info(Writer("w", {}, ["link"], link))], {})


def test_exporters_cannot_change_what_the_next_one_sees(tmp_path):
    signals = small_signals()
    original = signals.fields.copy(deep=True)

    def vandal(result, directory):
        result.fields["Ex"] *= 0.0
        result.fields.loc[:, "Ey"] = -1.0
        result.observers.pop("x")
        result.summary["run"]["a"] = "changed"
        result.fields = None

    seen = {}

    def look(result, directory):
        seen.update(fields=result.fields.copy(), observers=list(result.observers.columns),
                    summary=result.summary)

    staging = tmp_path / "staging"
    staging.mkdir()
    run_exporters(signals, staging, [info(Writer("vandal", {}, [], vandal)),
                                     info(Writer("look", {}, [], look))], {})
    pd.testing.assert_frame_equal(seen["fields"], original)
    pd.testing.assert_frame_equal(signals.fields, original)
    assert "x" in seen["observers"] and seen["summary"] == {"run": {"a": 1}}


def test_files_an_exporter_did_not_name_are_results_too(tmp_path):
    staging = tmp_path / "staging"
    staging.mkdir()
    files = run_exporters(small_signals(), staging,
                          [info(Writer("w", {"a.txt": "a", "sub/b.txt": "b"}, ["a.txt"]))], {})
    assert files == ["a.txt", "sub/b.txt"]


@pytest.mark.parametrize("files, message", [
    ({"run.json": "{}"}, "a name lagfield keeps"),
    ({".lagfield-results.json": "{}"}, "a name lagfield keeps"),
])
def test_exporter_writing_lagfield_names_is_an_error(tmp_path, files, message):
    staging = tmp_path / "staging"
    staging.mkdir()
    with pytest.raises(lagfield.PluginError, match=message):
        run_exporters(small_signals(), staging, [info(Writer("w", files))], {})


def test_exporter_replacing_an_earlier_exporters_file_is_an_error(tmp_path):
    staging = tmp_path / "staging"
    staging.mkdir()
    first, second = Writer("one", {"t.csv": "1"}), Writer("two", {"t.csv": "two"})
    with pytest.raises(lagfield.PluginError, match="exporter 'two'.*changed or removed 't.csv'"):
        run_exporters(small_signals(), staging, [info(first), info(second)], {})


# --------------------------------------------------------------------------- run.json
def test_run_json_says_what_was_read_done_and_written(tmp_path, monkeypatch, full_registry):
    monkeypatch.setenv("LAGFIELD_EXAMPLE", "1")
    monkeypatch.setenv("OMP_NUM_THREADS", "2")
    monkeypatch.setenv("UNRELATED_VARIABLE", "x")
    for name in ("NUMBA_NUM_THREADS", "NUMBA_THREADING_LAYER", "NUMBA_DISABLE_JIT",
                 "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS"):  # set by other libraries
        monkeypatch.delenv(name, raising=False)
    run_file = make_run(tmp_path, formats=("parquet", "nested", "summary-copy"),
                        extra='start = "0.1 ns"\nstop = "0.3 ns"')
    signals = lagfield.run(run_file, registry=full_registry)
    out = tmp_path / "out"
    summary = json.loads((out / "run.json").read_text())
    assert summary["files"] == visible(out)
    assert summary["files"] == signals.summary["files"]
    assert summary["inputs"].keys() == {"tracks.csv", "run.toml"}
    assert summary["output_dir"] == "out"
    assert summary["environment"] == {"LAGFIELD_EXAMPLE": "1", "OMP_NUM_THREADS": "2"}
    assert summary["exporters"] == [f"{name} (registered in-process)"
                                    for name in ("parquet", "nested", "summary-copy")]
    window = summary["groups"]["near"]["window"]
    assert window["start_s"] == pytest.approx(1e-10)
    assert window["step_s"] == pytest.approx(2e-12)
    assert window["bins"] == 101 == len(signals.fields)  # (0.3 - 0.1) ns / 2 ps + 1
    assert window["stop_s"] == pytest.approx(3e-10)
    # the engine puts at least 4 source samples in every bin (DEVELOPERS.md)
    assert summary["groups"]["near"]["source_samples_per_bin"] >= 4.0
    assert "radiation-safety officer" in summary["note"]
    # exporters see the summary without the list of files (not known yet)
    assert "run" in json.loads((out / "summary-copy.json").read_text())


def test_run_json_windows_per_point(tmp_path):
    run_file = make_run(tmp_path, extra='align = "point"')
    run_file.write_text(run_file.read_text().replace(
        "points = [[0.05, 0.0, 0.0]]", "points = [[0.05, 0.0, 0.0], [0.05, 0.0, 3.0]]"))
    signals = lagfield.run(run_file)
    window = signals.summary["groups"]["near"]["window"]
    starts = [p["start_s"] for p in window["points"]]
    # the far point sees the light about 3 m / c later: its own window starts later
    assert starts[1] - starts[0] == pytest.approx(3.0 / constants.c, abs=0.2e-9)
    for point in window["points"]:
        t = signals.fields[signals.fields.point == point["point"]].t
        assert point["bins"] == len(t)
        assert point["start_s"] == pytest.approx(t.min()) and point["stop_s"] == pytest.approx(
            t.max())


# --------------------------------------------------------------------------- interruptions
DRIVER = textwrap.dedent('''
    """Runs lagfield with a test exporter or a slowed rename, for kill tests."""
    import os
    import pathlib
    import sys
    import time

    import lagfield
    import lagfield.cli
    import lagfield.runner
    from lagfield.plugins import csv_format, parquet_format
    from lagfield.registry import build_registry

    run_file, mode, marker = sys.argv[1], sys.argv[2], pathlib.Path(sys.argv[3])


    class SlowExporter:
        name = "slow"
        description = "writes one file, then waits"

        def write(self, result, directory, options):
            (directory / "slow.txt").write_text("partial")
            marker.write_text("ready")
            time.sleep(120)
            return ["slow.txt"]


    @lagfield.hookimpl
    def lagfield_register_exporters():
        return [SlowExporter()]


    if mode.startswith("rename"):
        real_replace, moved = os.replace, []

        def slow_replace(source, target):
            real_replace(source, target)
            if ".lagfield-staging-" in str(source):
                moved.append(target)
                if len(moved) == 2:
                    marker.write_text("ready")
                    time.sleep(120 if mode == "rename-kill" else 3)

        os.replace = slow_replace

    registry = build_registry(autoload=False, extra_plugins=[
        ("csv", csv_format), ("parquet", parquet_format), ("driver", sys.modules[__name__])])
    lagfield.runner.get_registry = lambda: registry
    sys.exit(lagfield.cli.main(["run", run_file, "--overwrite"]))
''')


def start_driver(tmp_path, run_file, mode):
    (tmp_path / "driver.py").write_text(DRIVER)
    marker = tmp_path / "marker"
    process = subprocess.Popen([sys.executable, str(tmp_path / "driver.py"), str(run_file),
                                mode, str(marker)], stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while not marker.exists():
        assert process.poll() is None, process.communicate()
        assert time.monotonic() < deadline, "the driver never reached the point to stop at"
        time.sleep(0.05)
    return process


@pytest.fixture
def old_results(tmp_path):
    """A run file and the bytes of the results of a first run with it (step 2 ps)."""
    run_file = make_run(tmp_path)
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "notes.txt").write_text("mine")
    lagfield.run(run_file)
    return run_file, contents(tmp_path / "out")


@pytest.mark.parametrize("how", [signal.SIGKILL, signal.SIGTERM])
def test_killed_while_exporting_leaves_the_old_results(tmp_path, old_results, how):
    run_file, before = old_results
    make_run(tmp_path, formats=("parquet", "slow"), step="4 ps")
    process = start_driver(tmp_path, run_file, "slow")
    process.send_signal(how)
    _, err = process.communicate(timeout=60)
    assert process.returncode != 0
    out = tmp_path / "out"
    after = {k: v for k, v in contents(out).items() if not k.startswith(".lagfield-staging")}
    after.pop(LOCK_NAME, None)
    assert after == before
    if how == signal.SIGTERM:  # an interruption: lagfield cleans up itself
        assert "interrupted" in err and "Traceback" not in err
        assert leftovers(out) == []
        return
    assert any(name.startswith(".lagfield-staging") for name in leftovers(out))
    # the next run clears what the killed one left, and says so
    make_run(tmp_path, step="4 ps")
    signals = lagfield.run(run_file, overwrite=True)
    assert any("interrupted run" in w for w in signals.summary["warnings"])
    assert leftovers(out) == []
    assert (out / "notes.txt").read_text() == "mine"


def test_killed_between_renames_is_completed_by_the_next_run(tmp_path, old_results):
    run_file, before = old_results
    make_run(tmp_path, step="4 ps")
    process = start_driver(tmp_path, run_file, "rename-kill")
    process.kill()
    process.communicate(timeout=60)
    out = tmp_path / "out"
    assert (out / JOURNAL_NAME).exists()
    # the next run completes the moves, says so, and then finds results (no --overwrite)
    with pytest.warns(OutputWarning, match="interrupted; lagfield completed it"):
        with pytest.raises(lagfield.OutputError, match="already holds results"):
            lagfield.run(run_file)
    assert leftovers(out) == []
    summary = json.loads((out / "run.json").read_text())
    assert summary["run"]["time"]["step"] == "4 ps"
    assert visible(out) == sorted(summary["files"] + ["notes.txt"])
    for name in ("fields.parquet", "fields.csv"):
        frame = pd.read_parquet(out / name) if name.endswith("parquet") else pd.read_csv(
            out / name)
        assert np.diff(frame.t.to_numpy()) == pytest.approx(4e-12, rel=1e-6), name
    assert (out / "notes.txt").read_bytes() == before["notes.txt"]


def test_terminated_between_renames_finishes_the_moves(tmp_path, old_results):
    run_file, _ = old_results
    make_run(tmp_path, step="4 ps")
    process = start_driver(tmp_path, run_file, "rename-term")
    process.send_signal(signal.SIGTERM)
    _, err = process.communicate(timeout=60)
    assert process.returncode == 0, err
    out = tmp_path / "out"
    assert leftovers(out) == []
    summary = json.loads((out / "run.json").read_text())
    assert summary["run"]["time"]["step"] == "4 ps"
    assert visible(out) == sorted(summary["files"] + ["notes.txt"])


def test_a_manifest_naming_files_outside_the_folder_is_not_followed(tmp_path):
    run_file = make_run(tmp_path)
    lagfield.run(run_file)
    victim = tmp_path / "victim.txt"
    victim.write_text("keep me")
    manifest = tmp_path / "out" / MANIFEST_NAME
    data = json.loads(manifest.read_text())
    manifest.write_text(json.dumps(dict(data, files=data["files"] + ["../victim.txt"])))
    with pytest.raises(lagfield.OutputError, match="damaged"):
        lagfield.run(run_file, overwrite=True)
    assert victim.read_text() == "keep me"
