"""Distributed runs on a Dask LocalCluster: same tables as in-process, also when a worker
is killed mid-run; a scheduler that cannot be reached is a clear error."""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import hypothesis
import hypothesis.strategies as st
import numpy as np
import pytest
from scipy import constants

from lagfield.engine import FieldSettings, compute_fields, group_windows, track_ends
from lagfield.errors import LagfieldError
from lagfield.observers import ObserverGroup
from lagfield.spectra import SpectrumSettings
from lagfield.tracks import read_tracks

distributed = pytest.importorskip("dask.distributed")
from lagfield.distributed import (  # noqa: E402
    MAX_TASK_ROWS,
    TASKS_PER_WORKER,
    compute_distributed,
    connect,
    default_chunk,
)

PICKUP = Path(__file__).resolve().parents[1] / "sample_data" / "pickup" / "tracks.parquet"
READ = {"charge": -constants.e, "min_samples": 6}


@pytest.fixture(scope="module")
def client():
    with connect(workers=2) as client:
        yield client


@pytest.fixture(scope="module")
def job():
    tracks = read_tracks(PICKUP, **READ)
    ends, ids = track_ends(tracks, with_ids=True)
    group = ObserverGroup("pickup", "points",
                          np.array([[0.02, 0.0, 0.0], [0.0, 0.02, 0.0], [0.0, 0.0, 0.5]]),
                          np.zeros(3))
    settings = FieldSettings(step_s=2e-12, start_s=0.44e-9, stop_s=0.56e-9,
                             max_frequency_hz=2e11)
    spectrum = SpectrumSettings(np.linspace(1e9, 2e11, 50))
    windows = group_windows([group], ends, settings)
    return tracks, ids, [group], settings, spectrum, windows


def _distributed(client, job, progress=None, chunk=8):
    tracks, ids, groups, settings, spectrum, windows = job
    return compute_distributed(client, PICKUP, READ, ids, groups, settings,
                               spectrum=spectrum, windows=windows, chunk=chunk,
                               progress=progress)


def _arrays(results):
    r = results[0]
    return r.e_v_per_m, r.b_t, r.spectra.spectrum


def test_local_cluster_equals_in_process_run(client, job):
    tracks, ids, groups, settings, spectrum, windows = job
    local = compute_fields(tracks, groups, settings, spectrum=spectrum, windows=windows)
    remote = _distributed(client, job)
    for a, b in zip(_arrays(local), _arrays(remote), strict=True):
        assert np.max(np.abs(a - b)) <= 1e-12 * np.max(np.abs(a))


def test_killed_worker_is_replaced_and_tables_are_identical(client, job):
    undisturbed = _distributed(client, job)
    killed = []

    def kill_one_worker(_n_particles):
        if not killed:
            pids = client.run(os.getpid)
            victim = sorted(pids.values())[0]
            os.kill(victim, signal.SIGKILL)
            killed.append(victim)

    disturbed = _distributed(client, job, progress=kill_one_worker)
    assert killed
    for a, b in zip(_arrays(undisturbed), _arrays(disturbed), strict=True):
        np.testing.assert_array_equal(a, b)
    deadline = time.monotonic() + 30
    while len(client.scheduler_info()["workers"]) < 2 and time.monotonic() < deadline:
        time.sleep(0.2)
    assert len(client.scheduler_info()["workers"]) == 2  # the nanny restarted it


def test_unreachable_scheduler_is_a_clear_error():
    started = time.monotonic()
    with pytest.raises(LagfieldError, match="cannot reach the Dask scheduler"):
        connect(scheduler="tcp://127.0.0.1:9")
    assert time.monotonic() - started < 30


def test_default_chunk_gives_every_worker_several_tasks():
    assert default_chunk(1000, 50_000, 2) == 125  # 8 tasks: 4 for each of 2 workers
    assert default_chunk(1_000_000, 50_000_000, 2) == 20_000  # 1e6 rows a task at most
    assert default_chunk(3, 150, 8) == 1


@hypothesis.given(st.integers(1, 10**7), st.integers(1, 10**4), st.integers(1, 512))
def test_default_chunk_balances_within_the_memory_bound(n_particles, samples, workers):
    chunk = default_chunk(n_particles, n_particles * samples, workers)
    assert chunk >= 1
    assert chunk * samples <= MAX_TASK_ROWS or chunk == 1  # a task's rows stay bounded
    n_tasks = -(-n_particles // chunk)
    assert n_tasks >= min(n_particles, TASKS_PER_WORKER * workers)  # no worker idles


def test_default_chunk_run_equals_in_process(client, job):
    tracks, ids, groups, settings, spectrum, windows = job
    local = compute_fields(tracks, groups, settings, spectrum=spectrum, windows=windows)
    chunks = []
    remote = _distributed(client, job, progress=chunks.append, chunk=None)
    assert len(chunks) == min(len(ids), TASKS_PER_WORKER * 2)  # 2 workers, 4 tasks each
    assert sum(chunks) == len(ids)
    for a, b in zip(_arrays(local), _arrays(remote), strict=True):
        assert np.max(np.abs(a - b)) <= 1e-12 * np.max(np.abs(a))
