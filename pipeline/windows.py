"""Observer time windows: from the first and last sample of every track to each group's
time grid (SPEC's default window, or the run's start and stop)."""

from __future__ import annotations

import numpy as np

from .errors import ObserverError

ARRIVALS_PER_PASS = 4_000_000  # tracks × points of arrival times held at once


def arrival_times(geometry, positions_m, times_s) -> np.ndarray:
    """(M, P) observer times at the points of an observers.Geometry of light emitted at
    (times_s (M,), positions_m (M, 3))."""
    return times_s[:, None] + geometry.light_delay_s(positions_m)


def time_window(group, ends, settings):
    """(start_s (P,), n_bins (P,)) of the group's time grid (settings: engine.FieldSettings).
    `ends` holds the first and last sample of every track: (t_first (M,), r_first (M, 3),
    t_last (M,), r_last (M, 3))."""
    step = settings.step_s
    t_first, r_first, t_last, r_last = ends
    geometry = group.geometry(settings.far_field)
    earliest = np.full(group.n_points, np.inf)
    latest = np.full(group.n_points, -np.inf)
    rows = max(1, ARRIVALS_PER_PASS // group.n_points)  # memory bounded at any bunch size
    for lo in range(0, t_first.size, rows):
        part = slice(lo, lo + rows)
        np.minimum(earliest, arrival_times(geometry, r_first[part], t_first[part]).min(axis=0),
                   out=earliest)
        np.maximum(latest, arrival_times(geometry, r_last[part], t_last[part]).max(axis=0),
                   out=latest)
    if settings.align == "group":
        earliest = np.full_like(earliest, earliest.min())
        latest = np.full_like(latest, latest.max())
    if settings.start_s is None:
        start = np.floor(earliest / step) * step
    else:
        start = np.full(group.n_points, settings.start_s)
    stop = latest if settings.stop_s is None else np.full(group.n_points, settings.stop_s)
    bins = np.floor((stop - start) / step * (1.0 + 1e-12) + 1e-9)
    n_bins = np.minimum(bins, 2.0**62).astype(np.int64) + 1  # no overflow: budget.py refuses
    return start, np.maximum(n_bins, 1)


class TrackEnds:
    """Collects the first and last sample and the id of every track it is shown
    (`add(track)`), for the default window and for cutting particles into chunks: 64 bytes
    per track in arrays grown by doubling (copies: no view keeps a track's arrays alive)."""

    def __init__(self):
        self._count = 0
        self._rows = np.empty((1024, 8))  # t_first, r_first (3), t_last, r_last (3)
        self._ids = np.empty(1024, dtype=np.int64)

    def add(self, track) -> None:
        if self._count == self._ids.size:
            self._rows = np.concatenate([self._rows, np.empty_like(self._rows)])
            self._ids = np.concatenate([self._ids, np.empty_like(self._ids)])
        row = self._rows[self._count]
        row[0] = track.t_s[0]
        row[1:4] = track.position_m[0]
        row[4] = track.t_s[-1]
        row[5:8] = track.position_m[-1]
        self._ids[self._count] = track.particle
        self._count += 1

    def ends(self):
        """(t_first (M,), r_first (M, 3), t_last (M,), r_last (M, 3))."""
        rows = self._rows[:self._count]
        return (rows[:, 0].copy(), rows[:, 1:4].copy(), rows[:, 4].copy(), rows[:, 5:8].copy())

    def ids(self) -> np.ndarray:
        return self._ids[:self._count].copy()


def track_ends(tracks, *, with_ids: bool = False):
    """(t_first, r_first, t_last, r_last) of every track, for the default window, in one
    pass over `tracks`; with_ids: also the particle ids, as ((...), ids)."""
    collected = TrackEnds()
    for track in tracks:
        collected.add(track)
    return (collected.ends(), collected.ids()) if with_ids else collected.ends()


def group_windows(groups, ends, settings):
    """[(start_s (P,), n_bins (P,)) per group]: the time grids, from the tracks' ends."""
    for group in groups:
        if group.n_points == 0:
            raise ObserverError(f"observer group '{group.name}' has no points")
    return [time_window(group, ends, settings) for group in groups]
