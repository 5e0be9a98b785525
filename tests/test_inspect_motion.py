"""`lagfield inspect` and `lagfield run` judge tracks with momenta by the same rule (the slip
check of lagfield.motion), u_offset from the run file or the importer, short tracks, the
resolution guard and the strongest bend measured on the samples."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants

import lagfield
from lagfield.cli import main
from lagfield.diagnose import inspect_tracks
from lagfield.errors import ConfigError, MotionError, TrackError
from lagfield.resolution import check_resolution
from lagfield.tracks import Track, read_tracks

C = constants.c
E = constants.e
ROOT = Path(__file__).resolve().parents[1]


def circle(gamma=3.0, radius_m=0.05, n=60, samples_per_turn=40, u_shift=0.0):
    """A charge on a circle (x-z plane); momenta sampled at t + u_shift."""
    beta = math.sqrt(1 - 1 / gamma**2)
    omega = beta * C / radius_m
    t = np.arange(n) * (2 * math.pi / omega / samples_per_turn)
    phase, phase_u = omega * t, omega * (t + u_shift)
    position = np.column_stack([radius_m * (1 - np.cos(phase)), 0 * t, radius_m * np.sin(phase)])
    u = gamma * beta * np.column_stack([np.sin(phase_u), 0 * t, np.cos(phase_u)])
    return t, position, u


def circle_step(gamma=3.0, radius_m=0.05, samples_per_turn=40):
    """The sample interval of `circle`."""
    return 2 * math.pi * radius_m / (math.sqrt(1 - 1 / gamma**2) * C) / samples_per_turn


def stopping(n=30):
    """A charge decelerated uniformly to rest, then at rest (a stop between samples)."""
    t = np.linspace(0, 1e-9, n)
    stop_s = 0.63e-9
    v0 = 1e6
    vz = np.where(t < stop_s, v0 * (1 - t / stop_s), 0.0)
    tc = np.minimum(t, stop_s)
    z = v0 * (tc - tc**2 / (2 * stop_s))
    position = np.column_stack([0 * t, 0 * t, z])
    return t, position, np.column_stack([0 * t, 0 * t, vz / C / np.sqrt(1 - (vz / C) ** 2)])


def oscillator(n=200):
    """A slow charge on a spring: x = A sin(ωt), many turning points, 50 samples a period."""
    omega, amplitude = 2 * math.pi * 1e9, 1e-4
    t = np.arange(n) * (2 * math.pi / omega / 50)
    v = amplitude * omega * np.cos(omega * t)
    position = np.column_stack([amplitude * np.sin(omega * t), 0 * t, 0 * t])
    beta = v / C
    return t, position, np.column_stack([beta / np.sqrt(1 - beta**2), 0 * t, 0 * t])


def write_csv(path, t, position, u, particle=0):
    frame = pd.DataFrame({"particle": particle, "t": t, "x": position[:, 0],
                          "y": position[:, 1], "z": position[:, 2], "ux": u[:, 0],
                          "uy": u[:, 1], "uz": u[:, 2]})
    frame.to_csv(path, index=False)
    return path


def run_dict(tracks: str, step_s: float, **tracks_keys) -> dict:
    return {"tracks": {"path": tracks, "charge": -E, **tracks_keys},
            "observers": [{"name": "p", "points": [[0.3, 0.2, 0.1]]}],
            "time": {"step": step_s}, "output": {"dir": "out"}}


def run_outcome(tmp_path, run):
    """(accepted, message) of `lagfield.run` on a run dict."""
    try:
        lagfield.run(run, base_dir=tmp_path, write=False)
    except MotionError as error:
        return False, str(error)
    return True, None


def inspect_outcome(tmp_path, run):
    run_file = tmp_path / "run.toml"
    lines = [f"{k} = {json.dumps(v)}" for k, v in run["tracks"].items()]
    run_file.write_text("[tracks]\n" + "\n".join(lines) + "\n[[observers]]\nname = \"p\"\n"
                        "points = [[0.3, 0.2, 0.1]]\n[time]\nstep = "
                        f"{run['time']['step']!r}\n[output]\ndir = \"out\"\n")
    report = lagfield.diagnose.inspect_run(run_file)
    return report["valid"], (report["refused"][0]["message"] if report["refused"] else None)


@pytest.mark.parametrize("case, expect_valid", [
    ("staggered circle", False), ("stopping charge", True), ("slow oscillator", True),
    ("staggered circle with u_offset", True)])
def test_inspect_and_run_agree_on_validity(tmp_path, case, expect_valid):
    """A track run refuses, inspect refuses with the same message; one run accepts,
    inspect does not call invalid (SPEC, Motion with momenta: turning points and stopping
    charges are valid motion)."""
    keys = {}
    if case.startswith("staggered"):
        t, position, u = circle(u_shift=-0.5 * circle_step())
        step_s = np.diff(t)[0]
        if case.endswith("u_offset"):
            keys["u_offset"] = f"{-0.5 * float(step_s)!r} s"
        step_s = step_s / 8
    elif case == "stopping charge":
        t, position, u = stopping()
        step_s = np.diff(t)[0] / 4
    else:
        t, position, u = oscillator()
        step_s = np.diff(t)[0] / 4
    write_csv(tmp_path / "tracks.csv", t, position, u)
    run = run_dict("tracks.csv", float(step_s), **keys)
    accepted, run_message = run_outcome(tmp_path, run)
    valid, inspect_message = inspect_outcome(tmp_path, run)
    assert accepted is expect_valid and valid is expect_valid
    if not accepted:
        assert "particle 0" in run_message and "u_offset" in run_message
        assert inspect_message.endswith(run_message)


def test_inspect_refusal_is_one_error_line_and_exit_code(tmp_path, capsys):
    t, position, u = circle(u_shift=-0.5 * circle_step())
    write_csv(tmp_path / "tracks.csv", t, position, u)
    code = main(["inspect", str(tmp_path / "tracks.csv")])
    err = capsys.readouterr().err.splitlines()
    assert code == MotionError.exit_code and len(err) == 1
    assert err[0].startswith("lagfield: error: 1 track would be refused") and "u_offset" in err[0]


def test_u_offset_run_file_wins_over_importer_and_is_recorded(tmp_path):
    """The importer's offset (frame.attrs) stands when the run file gives none; the run
    file's value wins; run.json records the offset used and its source."""
    h = circle_step()
    t, position, u = circle(u_shift=-0.5 * h)
    tracks = read_tracks(write_csv(tmp_path / "tracks.csv", t, position, u), charge=-E)
    assert tracks.u_offset_s is None and tracks[0].u_offset_s is None
    run = run_dict("tracks.csv", h / 8, u_offset=f"{-0.5 * h!r} s")
    summary = lagfield.run(run, base_dir=tmp_path, write=False).summary
    assert summary["u_offset"] == {"u_offset_s": pytest.approx(-0.5 * h, rel=1e-12),
                                   "from": "run file"}
    with pytest.raises(MotionError, match="u_offset"):  # the same track without it
        lagfield.run(run_dict("tracks.csv", h), base_dir=tmp_path, write=False)
    write_csv(tmp_path / "plain.csv", *circle())
    plain = lagfield.run(run_dict("plain.csv", h), base_dir=tmp_path, write=False)
    assert plain.summary["u_offset"] == {"u_offset_s": 0.0, "from": "default"}
    assert lagfield.config.parse(run_dict("t.csv", 1e-12), base_dir=tmp_path) \
        .tracks.u_offset_s is None


def test_importer_offset_reaches_the_tracks(tmp_path):
    """frame.attrs['u_offset_s'] of an importer becomes each Track's offset, which Motion
    uses when the run file gives none."""
    from lagfield.motion import Motion
    from lagfield.registry import Registry  # noqa: F401  (fixture registries live there)

    h = 1e-12
    t, position, u = circle(u_shift=-0.5 * h)
    path = write_csv(tmp_path / "tracks.csv", t, position, u)
    reader = lagfield.tracks._Reader(path, charge=-E)
    reader.u_offset_s = -0.5 * h  # as _check_frame records an importer's attrs
    track = reader._group({k: v for k, v in _columns(path).items()})[0]
    assert track.u_offset_s == -0.5 * h and Motion(track).u_offset_s == -0.5 * h
    assert Motion(track, u_offset_s=0.0).u_offset_s == 0.0


def _columns(path):
    frame = pd.read_csv(path)
    cols = {name: frame[name].to_numpy(dtype=float) for name in frame.columns}
    cols["particle"] = frame["particle"].to_numpy(dtype=np.int64)
    cols["row"] = np.arange(1, len(frame) + 1)
    return cols


def test_u_tolerance_key_is_one_clear_error(tmp_path):
    with pytest.raises(ConfigError, match=r"\[tracks\] u_tolerance was replaced by the slip "
                                          r"check.*README"):
        lagfield.config.parse(run_dict("t.csv", 1e-12, u_tolerance=0.05), base_dir=tmp_path)


@pytest.mark.parametrize("value", [1.5e12, -1e200, 1e150])
def test_absurd_momentum_is_a_track_error_naming_row(tmp_path, value):
    t, position, u = oscillator(n=10)
    u[4, 1] = value
    path = write_csv(tmp_path / "tracks.csv", t, position, u, particle=7)
    with pytest.raises(TrackError) as info:
        read_tracks(path, charge=-E)
    text = str(info.value)
    assert "tracks.csv" in text and "uy" in text and "particle 7" in text and "row 5" in text


def test_short_tracks_run_with_one_aggregated_warning(tmp_path):
    """Tracks of 2 to 5 samples run at a lower degree, with one warning for all."""
    frames = []
    for particle, n in enumerate([3, 4, 4, 20]):
        t, position, u = oscillator(n=n)
        frame = pd.DataFrame({"particle": particle, "t": t, "x": position[:, 0],
                              "y": 0.0, "z": 0.0})
        frames.append(frame)
    pd.concat(frames).to_csv(tmp_path / "tracks.csv", index=False)
    summary = lagfield.run(run_dict("tracks.csv", 1e-11), base_dir=tmp_path,
                           write=False).summary
    short = [w for w in summary["warnings"] if "fewer than 6 samples" in w]
    assert short == ["3 particles with fewer than 6 samples used degree 2–3 instead of 5 "
                     "([motion] degree)"]


def test_fast_arc_sampled_every_three_formation_times_is_resolved():
    """γ = 1e4 on a 10 m arc sampled every 3 ρ/(cγ) turns by 3e-4 rad a sample: the spline
    follows it, so no resolution finding (the formation time ρ/(cγ): Jackson, Classical
    Electrodynamics, 3rd ed., sec. 14.6)."""
    gamma, radius = 1e4, 10.0
    h = 3 * radius / (C * gamma)
    samples_per_turn = 2 * math.pi * radius / (C * h)
    t, position, u = circle(gamma=gamma, radius_m=radius, n=40,
                            samples_per_turn=samples_per_turn)
    assert check_resolution(Track(0, t, position, u, -E)) is None


def test_undersampled_oscillation_is_found():
    """6 samples a period: β̇ changes by 2π/6 ≈ 105 % of its peak between intervals."""
    t, position, u = oscillator(n=40)
    coarse = slice(None, None, 8)  # 50/8 ≈ 6 samples a period
    finding = check_resolution(Track(3, t[coarse], position[coarse], u[coarse], -E))
    assert finding is not None and finding.particle == 3 and finding.factor >= 2
    assert "more often" in finding.sentence()


def test_strongest_bend_of_the_shipped_hard_edge_dipole():
    """sample_data/bend: ρ = γmc/(eB) = 1.7045 m and f_c = 3.3591e14 Hz (sample_data/
    README.md, make_samples.py; the radius of gyration: Jackson, Classical Electrodynamics,
    3rd ed., sec. 12.2, from memory; f_c = 3γ³c/(4πρ): eq. 14.85); the samples' bend within
    2 %, not the spline's overshoot."""
    report = inspect_tracks(ROOT / "sample_data" / "bend" / "tracks.parquet")
    bend = report["strongest_bend"]
    assert bend["radius_m"] == pytest.approx(1.7045, rel=0.02)
    assert bend["critical_frequency_hz"] == pytest.approx(3.3591e14, rel=0.06)


def test_inspect_into_a_closed_pipe_is_quiet():
    """`lagfield inspect ... | head -1`: no message, exit 0 or 141 (SIGPIPE)."""
    process = subprocess.Popen(
        [sys.executable, "-m", "lagfield", "inspect",
         str(ROOT / "sample_data" / "pickup" / "tracks.parquet")],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    process.stdout.close()  # the reader goes away before anything is written
    err = process.stderr.read().decode()
    assert process.wait(timeout=120) in (0, 141)
    assert err == ""
