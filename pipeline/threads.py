"""Work shared among the process's threads: compiled kernels release the GIL, so Python
threads run them side by side (the source sampling of a batch's blocks, the spectra of a
group's points). As many threads as numba has in the calling thread; one pool of that size
is kept for the process, so no call pays for starting threads. Each item's result is made
alone, so results do not depend on the number of threads."""

from __future__ import annotations

import concurrent.futures
import threading

import numba

_POOLS: dict[int, concurrent.futures.ThreadPoolExecutor] = {}
_LOCK = threading.Lock()


def count() -> int:
    """The threads work is shared among here: numba's, as set for the calling thread."""
    return numba.get_num_threads()


def each(work, items) -> list:
    """[work(item) for item in items], in `count()` threads when there are several items
    (in this thread otherwise); the first exception raised is raised here."""
    items = list(items)
    n_threads = min(count(), len(items))
    if n_threads <= 1:
        return [work(item) for item in items]
    with _LOCK:
        pool = _POOLS.get(n_threads)
        if pool is None:
            pool = _POOLS[n_threads] = concurrent.futures.ThreadPoolExecutor(
                n_threads, thread_name_prefix="lagfield")
    return list(pool.map(work, items))
