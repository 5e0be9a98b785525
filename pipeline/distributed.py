"""Distributed runs on Dask: particle chunks mapped to workers, partial fields summed by
a fixed binary tree (so the result does not depend on which worker finishes first).

Each worker reads its own chunk (a range of particle ids) from the track file; only the
observer groups, the time grids and the settings travel with a task, and only partial
field arrays come back. A worker that dies is replaced and its tasks are recomputed by
Dask. Needs the optional extra: pip install "lagfield[dask]".
"""

from __future__ import annotations

import copy
import logging

import numpy as np

from .engine import add_results, compute_fields
from .errors import LagfieldError

CONNECT_TIMEOUT_S = 10.0
TASK_RETRIES = 3


def particle_chunks(particle_ids, chunk: int):
    """[(low, high)] id ranges of at most `chunk` particles each, in ascending order."""
    ids = np.unique(np.asarray(particle_ids, dtype=np.int64))
    return [(int(ids[i]), int(ids[min(i + chunk, ids.size) - 1]))
            for i in range(0, ids.size, chunk)]


def chunk_fields(path, read_options, particle_range, groups, settings, spectrum, windows):
    """One task: read the particles of `particle_range` and return their GroupFields."""
    import numba

    from .tracks import read_tracks

    numba.set_num_threads(1)  # one core per worker process
    tracks = read_tracks(path, particle_range=particle_range, **read_options)
    return compute_fields(tracks, groups, settings, spectrum=spectrum, windows=windows)


def _sum(first, second):
    """A new sum of two partial results (task inputs must stay untouched for retries)."""
    return add_results(copy.deepcopy(first), second)


def connect(workers: int | None = None, scheduler: str | None = None):
    """A dask.distributed Client: to `scheduler`, or on a new local cluster of `workers`
    processes. Clear errors when Dask is missing or the scheduler cannot be reached."""
    try:
        from dask.distributed import Client, LocalCluster
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
    cluster = LocalCluster(n_workers=int(workers or 1), threads_per_worker=1, processes=True,
                           dashboard_address=None, silence_logs=logging.ERROR)
    return Client(cluster)


def compute_distributed(client, path, read_options, particle_ids, groups, settings, *,
                        spectrum=None, windows, chunk: int, progress=None):
    """GroupFields of all particles, computed chunk by chunk on the client's workers.
    progress(n) is called with the number of particles of each chunk as it completes."""
    from dask.distributed import as_completed

    ranges = particle_chunks(particle_ids, chunk)
    if not ranges:
        raise LagfieldError("the track file holds no particles")
    sizes = {}
    ids = np.unique(np.asarray(particle_ids, dtype=np.int64))
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
