"""The memory estimate: never below what the engine really allocates, proportional to
the grid, and a refusal naming the group and what to change when a run cannot fit."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import lagfield.runner
from lagfield.budget import (
    available_memory_bytes,
    check_memory,
    estimate_group,
    format_bytes,
)
from lagfield.cli import main
from lagfield.config import ObserverConfig
from lagfield.engine import FieldSettings, compute_fields, group_windows, track_ends
from lagfield.errors import ConfigError
from lagfield.observers import build_group
from lagfield.runner import fields_table
from lagfield.spectra import SpectrumSettings
from lagfield.tracks import read_tracks

GIB = 2.0**30


def _group(name="screen", shape=(3, 2)):
    return build_group(ObserverConfig(name, "plane", center_m=(0.0, 0.0, 2.0),
                                      size_m=(0.02, 0.02), shape=shape))


def _part(estimate, prefix):
    return next(p for p in estimate.parts if p.what.startswith(prefix))


def test_estimate_is_not_below_what_the_engine_allocates(tmp_path, helix, registry):
    helix(n_particles=2, n_samples=30).to_csv(tmp_path / "helix.csv", index=False)
    tracks = read_tracks(tmp_path / "helix.csv", charge=-1.602176634e-19, registry=registry)
    groups = [_group()]
    settings = FieldSettings(step_s=5e-12)
    spectrum = SpectrumSettings(np.linspace(1e9, 2e11, 40))
    windows = group_windows(groups, track_ends(tracks), settings)
    (estimate,) = check_memory(groups, windows, settings, spectrum)
    (result,) = compute_fields(tracks, groups, settings, spectrum=spectrum, windows=windows)
    arrays = result.e_v_per_m.nbytes + result.b_t.nbytes
    assert _part(estimate, "time grid").bytes >= arrays
    table = fields_table([result]).memory_usage(index=True).sum()
    assert _part(estimate, "fields table").bytes >= table
    spectra = result.spectra.spectrum.nbytes + result.spectra.fluence.nbytes
    spectra += result.spectra.table().memory_usage(index=True).sum()
    assert _part(estimate, "spectra").bytes >= spectra


def test_estimate_scales_with_points_bins_and_frequencies():
    settings = FieldSettings(step_s=1e-12)
    small = estimate_group(_group(shape=(2, 2)), np.zeros(4), np.full(4, 1000), settings)
    wide = estimate_group(_group(shape=(4, 2)), np.zeros(8), np.full(8, 1000), settings)
    long = estimate_group(_group(shape=(2, 2)), np.zeros(4), np.full(4, 3000), settings)
    grid = "time grid"
    assert _part(wide, grid).bytes == pytest.approx(2.0 * _part(small, grid).bytes, rel=1e-12)
    assert _part(long, grid).bytes == pytest.approx(3.0 * _part(small, grid).bytes, rel=1e-12)
    few = SpectrumSettings(np.linspace(1e9, 1e11, 10))
    many = SpectrumSettings(np.linspace(1e9, 1e11, 50))
    with_few = estimate_group(_group(), np.zeros(6), np.full(6, 10), settings, few)
    with_many = estimate_group(_group(), np.zeros(6), np.full(6, 10), settings, many)
    assert _part(with_many, "spectra").bytes == pytest.approx(
        5.0 * _part(with_few, "spectra").bytes, rel=1e-12)


def test_refusal_names_group_size_and_the_remedy():
    groups = [_group("screen")]
    windows = [(np.zeros(6), np.full(6, 10**9))]  # 6 points × 1e9 bins: far beyond 1 GiB
    with pytest.raises(ConfigError) as caught:
        check_memory(groups, windows, FieldSettings(step_s=1e-15), available_bytes=GIB)
    message = str(caught.value)
    assert "observer group 'screen'" in message
    assert "GiB" in message and "[time] step" in message and "time grid" in message


def test_spectrum_heavy_run_is_told_to_use_fewer_frequencies():
    groups = [_group("sky", shape=(100, 100))]
    windows = [(np.zeros(10_000), np.full(10_000, 10))]
    spectrum = SpectrumSettings(np.linspace(1e9, 1e10, 100_000))
    with pytest.raises(ConfigError, match=r"'sky'.*fewer \[spectrum\] frequencies"):
        check_memory(groups, windows, FieldSettings(step_s=1e-9), spectrum,
                     available_bytes=4 * GIB)


def test_groups_that_fit_alone_but_not_together():
    groups = [_group("a"), _group("b")]
    windows = [(np.zeros(6), np.full(6, 2 * 10**6))] * 2  # ~2 GiB each
    settings = FieldSettings(step_s=1e-12, extend="none")
    single = estimate_group(groups[0], *windows[0], settings).total_bytes
    available = 1.5 * single / 0.8  # room for one group and a half
    with pytest.raises(ConfigError, match="the observer groups 'a', 'b' together"):
        check_memory(groups, windows, settings, available_bytes=available)
    assert len(check_memory(groups[:1], windows[:1], settings, available_bytes=available)) == 1


def test_format_bytes():
    assert format_bytes(512) == "512 B"
    assert format_bytes(43.7 * 2.0**40) == "43.7 TiB"
    assert format_bytes(3 * 2.0**60 * 1000) == "3e+03 EiB"


def test_available_memory_is_read_on_this_system():
    available = available_memory_bytes()
    assert available is None or available > 0


def test_run_with_an_absurd_grid_is_refused_before_computing(tmp_path, capsys, monkeypatch):
    def forbidden(*args, **kwargs):
        raise AssertionError("fields were computed")

    monkeypatch.setattr(lagfield.runner, "compute_fields", forbidden)
    t = np.linspace(0.0, 1e-9, 11)
    pd.DataFrame({"particle": 0, "t": t, "x": 0.0, "y": 0.0, "z": 0.1 * 3e8 * t}).to_csv(
        tmp_path / "tracks.csv", index=False)
    (tmp_path / "run.toml").write_text(
        '[tracks]\npath = "tracks.csv"\ncharge = "-1 e"\n[[observers]]\nname = "near"\n'
        'points = [[0.05, 0, 0]]\n[time]\nstep = 1e-18\nstart = 0.0\nstop = "1 us"\n'
        '[output]\ndir = "out"\n', encoding="utf-8")
    assert main(["run", str(tmp_path / "run.toml")]) == 2
    err = capsys.readouterr().err
    assert "observer group 'near'" in err and "TiB" in err and "[time] step" in err
    assert "Traceback" not in err and err.count("\n") == 1
    assert not (tmp_path / "out").exists()
