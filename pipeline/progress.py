"""Progress of a run on a terminal: a tqdm bar with the total, the rate and the time left,
whose elapsed time keeps moving while one long particle computes (a run never looks hung).

`RunProgress` is the `progress(done, total)` callback `lagfield.run` takes, and a context
manager that starts and stops the refresh. Before the first call it shows the phase
("reading tracks") and the elapsed time; when `done` reaches `total` it shows "finishing"
(tables and files are being written)."""

from __future__ import annotations

import os
import threading

REFRESH_S = 1.0  # the display is redrawn at least this often
PHASE_FORMAT = "{desc} [{elapsed}]"  # before and after the count
COUNT_FORMAT = ("fields {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} particle × group "
                "[{elapsed}<{remaining}, {rate_noinv_fmt}]")
FALLBACK_SIZE = (80, 24)  # columns, rows


def _columns(stream) -> int:
    """Width of the terminal `stream` writes to (0 when unknown)."""
    try:
        return os.get_terminal_size(stream.fileno()).columns
    except (AttributeError, OSError, ValueError):
        return 0


class RunProgress:
    """A terminal progress display for one run, written to `stream`."""

    def __init__(self, stream, *, refresh_s: float = REFRESH_S):
        from tqdm import tqdm

        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._refresh_s = refresh_s
        # a terminal that reports no size (a new pseudo-terminal) gets a common one
        size = {} if _columns(stream) else {"ncols": FALLBACK_SIZE[0], "nrows": FALLBACK_SIZE[1]}
        self._bar = tqdm(total=None, desc="reading tracks", unit="", file=stream,
                         leave=False, dynamic_ncols=not size, mininterval=0.2,
                         bar_format=PHASE_FORMAT, **size)
        self._thread = threading.Thread(target=self._tick, name="lagfield-progress",
                                        daemon=True)

    def __call__(self, done: int, total: int) -> None:
        with self._lock:
            bar = self._bar
            if bar.total != total:  # the computation starts: count from here
                bar.bar_format = COUNT_FORMAT
                bar.reset(total=total)
            if done >= total:
                bar.bar_format = PHASE_FORMAT
                bar.set_description_str("finishing", refresh=False)
            bar.update(done - bar.n)

    def _tick(self) -> None:
        while not self._stop.wait(self._refresh_s):
            with self._lock:
                self._bar.refresh()

    def __enter__(self) -> RunProgress:
        self._thread.start()
        return self

    def __exit__(self, *exc_info) -> None:
        self._stop.set()
        self._thread.join()
        self._bar.close()  # leave=False: the line is cleared for the summary
