"""Distributed runs on Dask: particle chunks mapped to workers, partial fields summed by
a fixed binary tree (so the result does not depend on which worker finishes first).

Each worker reads its own chunk (a range of particle ids) from the track file; only the
observer groups, the time grids and the settings travel with a task, and only partial
field arrays come back. A worker that dies is replaced and its tasks are recomputed by
Dask. Needs the optional extra: pip install "lagfield[dask]".

The checks of a worker count and a scheduler address are here too, shared by the run file
and the command line; importing this module stays light (the engine loads in the tasks).
"""

from __future__ import annotations

import contextlib
import copy
import logging
import numbers
import signal
import threading
import urllib.parse

import numpy as np

from .errors import ConfigError, LagfieldError

CONNECT_TIMEOUT_S = 10.0
TASK_RETRIES = 3
# The default chunk: several tasks per worker, so a worker that finishes early takes
# another (the last tasks end close together); a task holds its particles' rows in memory,
# about 80 bytes a row as columns, a few times that while reading, so at most 1e6 rows.
TASKS_PER_WORKER = 4
MAX_TASK_ROWS = 1_000_000
SCHEDULER_SCHEMES = ("tcp", "tls", "ucx", "ws", "wss")  # Dask's network protocols


def check_workers(value, where: str) -> int:
    """A number of local worker processes: a whole number >= 1 (a ConfigError naming
    `where`, e.g. "--workers" or "[compute] workers", otherwise)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise ConfigError(f"{where}: expected a whole number of worker processes >= 1, "
                          f"got {value!r}")
    return int(value)


def check_scheduler_address(text, where: str) -> str:
    """A Dask scheduler address, SCHEME://HOST:PORT (HOST:PORT means tcp), returned
    stripped; a ConfigError naming `where` otherwise. Checks the form only: whether a
    scheduler listens there is found out when connecting."""
    address = text.strip() if isinstance(text, str) else ""
    parts = None
    if address:
        parts = urllib.parse.urlsplit(address if "://" in address else f"tcp://{address}")
    try:
        port = parts.port if parts is not None else None
    except ValueError:  # not a number, or out of range
        port = None
    if (parts is None or parts.scheme not in SCHEDULER_SCHEMES or not parts.hostname
            or port is None or port == 0 or parts.path not in ("", "/") or parts.query
            or parts.fragment):
        raise ConfigError(f"{where}: {text!r} is not a scheduler address; expected "
                          f"SCHEME://HOST:PORT such as tcp://head-node:8786 (SCHEME one of "
                          f"{', '.join(SCHEDULER_SCHEMES)})")
    return address


def default_chunk(n_particles: int, n_rows: int, n_workers: int) -> int:
    """Particles per task when the run file gives no `[compute] chunk`: TASKS_PER_WORKER
    tasks for each of `n_workers`, fewer particles when a task would hold more than
    MAX_TASK_ROWS rows (`n_rows` rows in all), at least 1."""
    per_worker = n_particles // (TASKS_PER_WORKER * max(n_workers, 1))
    rows_per_particle = max(n_rows, 1) / max(n_particles, 1)
    return max(1, min(per_worker, int(MAX_TASK_ROWS // rows_per_particle)))


def particle_chunks(particle_ids, chunk: int):
    """[(low, high)] id ranges of at most `chunk` particles each, in ascending order."""
    ids = np.unique(np.asarray(particle_ids, dtype=np.int64))
    return [(int(ids[i]), int(ids[min(i + chunk, ids.size) - 1]))
            for i in range(0, ids.size, chunk)]


def chunk_fields(path, read_options, particle_range, groups, settings, spectrum, windows):
    """One task: read the particles of `particle_range` and return their GroupFields."""
    import numba

    from .engine import compute_fields
    from .tracks import read_tracks

    numba.set_num_threads(1)  # one core per worker process
    tracks = read_tracks(path, particle_range=particle_range, **read_options)
    return compute_fields(tracks, groups, settings, spectrum=spectrum, windows=windows)


def warm_up() -> None:
    """Run on every worker while the client reads the tracks: imports the engine and loads
    its compiled kernels (numba's cache) with a tiny run of each kind (near and far field,
    positions and momenta), so that the first field task does not pay for them."""
    import numba

    from .constants import C
    from .engine import FieldSettings, compute_fields
    from .observers import ObserverGroup
    from .tracks import Track

    numba.set_num_threads(1)
    t = np.linspace(0.0, 1e-10, 8)
    position = np.zeros((t.size, 3))
    position[:, 2] = 0.5 * C * t
    u = np.zeros((t.size, 3))
    u[:, 2] = 0.5 / np.sqrt(0.75)
    group = ObserverGroup("warm-up", "points", np.array([[0.1, 0.0, 0.0]]), np.zeros(3))
    for momenta in (None, u):
        track = Track(1, t, position, momenta, 1.0, 1.0)  # any charge loads the same code
        for far in (False, True):
            compute_fields([track], [group], FieldSettings(step_s=1e-11, far_field=far))


def start_warm_up(client) -> list:
    """`warm_up` submitted to each worker of the client (the futures, to be released once
    the field tasks are queued; a worker that fails it fails its field tasks alike)."""
    return [client.submit(warm_up, workers=[address], pure=False, allow_other_workers=False)
            for address in client.scheduler_info()["workers"]]


def _sum(first, second):
    """A new sum of two partial results (task inputs must stay untouched for retries)."""
    from .engine import add_results

    return add_results(copy.deepcopy(first), second)


def connect(workers: int | None = None, scheduler: str | None = None):
    """A dask.distributed Client: to `scheduler`, or on a new local cluster of `workers`
    processes. Clear errors when Dask is missing or the scheduler cannot be reached."""
    try:
        import dask
        from dask.distributed import Client
    except ImportError:
        raise LagfieldError("distributed runs need Dask: pip install \"lagfield[dask]\"") \
            from None
    if scheduler:
        try:
            return Client(scheduler, timeout=f"{CONNECT_TIMEOUT_S}s")
        except (OSError, TimeoutError) as exc:
            raise LagfieldError(f"cannot reach the Dask scheduler at {scheduler} within "
                                f"{CONNECT_TIMEOUT_S:g} s ({type(exc).__name__}: {exc})") \
                from None
    # A client that makes its own local cluster also closes it when it closes. Failures of
    # tasks come back as exceptions here; the workers' own log lines (heartbeats lost while
    # a cluster closes after Ctrl-C) would only be noise on the terminal.
    with _interrupts_ignored(), dask.config.set(_local_worker_config()):
        return Client(n_workers=int(workers or 1), threads_per_worker=1, processes=True,
                      dashboard_address=":0",  # any free port
                      silence_logs=logging.CRITICAL, preload=[__name__])  # see dask_setup


def _local_worker_config() -> dict:
    """Dask's settings for the local workers, less the memory trimming it asks of the C
    library (MALLOC_TRIM_THRESHOLD_): set, it also turns off the library's adaptive mmap
    threshold, so every large array is mapped and unmapped afresh, which made the field
    tasks 36 % slower with two workers on two cores (freed memory then stays with a worker
    for reuse, as in an in-process run)."""
    import dask

    key = "distributed.nanny.pre-spawn-environ"
    environ = {name: value for name, value in dask.config.get(key, {}).items()
               if name != "MALLOC_TRIM_THRESHOLD_"}
    # nor Dask's statistical profiler, which samples the task's stack every 10 ms (a few %)
    return {key: environ, "distributed.worker.profile.enabled": False}


# Ctrl-C at a terminal reaches the whole process group; only lagfield's own process should
# answer it (one line, then it closes the cluster), not every worker with a traceback.
# Workers started by `connect` inherit an ignored SIGINT (the one setting that survives
# exec); workers Dask restarts later ignore it from their preload, `dask_setup`.
@contextlib.contextmanager
def _interrupts_ignored():
    """SIGINT ignored meanwhile (Ctrl-C during the few seconds of a cluster's start is
    lost), when called from the main thread (elsewhere: nothing changes)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def dask_setup(worker) -> None:
    """Run by Dask in every local worker process as it starts (`preload`): ignore SIGINT."""
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, signal.SIG_IGN)


def compute_distributed(client, path, read_options, particle_ids, groups, settings, *,
                        spectrum=None, windows, chunk: int | None = None, n_rows=None,
                        progress=None):
    """GroupFields of all particles, computed chunk by chunk on the client's workers.
    chunk: particles per task; None: `default_chunk` for the cluster's worker threads
    (and `n_rows`, the rows of the track file, default 50 a particle).
    progress(n) is called with the number of particles of each chunk as it completes."""
    from dask.distributed import as_completed

    ids = np.unique(np.asarray(particle_ids, dtype=np.int64))
    if chunk is None:
        chunk = default_chunk(ids.size, 50 * ids.size if n_rows is None else n_rows,
                              sum(client.nthreads().values()))
    ranges = particle_chunks(ids, chunk)
    if not ranges:
        raise LagfieldError("the track file holds no particles")
    sizes = {}
    futures = []
    for low, high in ranges:
        future = client.submit(chunk_fields, path, read_options, (low, high), groups, settings,
                               spectrum, windows, pure=False, retries=TASK_RETRIES)
        sizes[future.key] = int(np.count_nonzero((ids >= low) & (ids <= high)))
        futures.append(future)
    level = list(futures)
    while len(level) > 1:  # a fixed binary tree: the sum is the same in every run
        paired = [client.submit(_sum, level[i], level[i + 1], pure=False,
                                retries=TASK_RETRIES) for i in range(0, len(level) - 1, 2)]
        if len(level) % 2:
            paired.append(level[-1])
        level = paired
    for finished in as_completed(futures):
        if finished.status == "error":
            finished.result()  # raises the task's error here
        if progress is not None:
            progress(sizes[finished.key])
    return level[0].result()
