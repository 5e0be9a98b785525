"""The retarded-field engine: from tracks and observer groups to bin-averaged E and B.

For each observer group: (1) the time window (`windows`: SPEC's default or the run's),
(2) per particle the source-time samples (`sources`), chosen from the step and the local κ
so that the bins' primitives are interpolated accurately and no dip of κ is stepped over
(`kernels.sampling`), (3) the compiled kernels add each particle's exact bin integrals of E
and B, weighted by charge × weight (`accumulate`). This module holds the settings and the
driver; the arithmetic is in `lagfield.kernels`.
"""

from __future__ import annotations

import dataclasses
import math

from .accumulate import SAMPLES_PER_KERNEL_CALL, FieldAccumulator, GroupFields, add_results
from .motion import checked_motions
from .sources import (
    ANGLE_TOLERANCE,
    MAX_REFINEMENTS,
    MAX_SAMPLES_PER_PARTICLE,
    REACH_DISTANCE_M,
    SAMPLES_PER_BIN,
    SUBDIVISIONS_PER_INTERVAL,
    UNIFORM_SPLIT_MAX,
    source_samples,
    source_span,
)
from .spectra import SAMPLES_PER_PERIOD
from .windows import TrackEnds, arrival_times, group_windows, time_window, track_ends

MOTIONS_PER_BATCH = 256  # tracks whose motions are built together (motion.checked_motions)
SAMPLES_PER_BATCH = 16_384  # at most this many track samples among them (memory)


def _batches(tracks):
    """Lists of consecutive tracks: MOTIONS_PER_BATCH, or fewer once they hold
    SAMPLES_PER_BATCH samples (the motions of a batch are alive together)."""
    batch, samples = [], 0
    for track in tracks:
        batch.append(track)
        samples += track.t_s.size
        if len(batch) == MOTIONS_PER_BATCH or samples >= SAMPLES_PER_BATCH:
            yield batch
            batch, samples = [], 0
    if batch:
        yield batch

__all__ = [  # the engine's names, wherever they are defined
    "ANGLE_TOLERANCE", "MAX_REFINEMENTS", "MAX_SAMPLES_PER_PARTICLE", "REACH_DISTANCE_M",
    "SAMPLES_PER_BIN", "SAMPLES_PER_KERNEL_CALL", "SUBDIVISIONS_PER_INTERVAL",
    "UNIFORM_SPLIT_MAX", "FieldAccumulator", "FieldSettings", "GroupFields", "TrackEnds",
    "add_results", "arrival_times", "compute_fields", "group_windows", "source_samples",
    "source_span", "time_window", "track_ends"]


@dataclasses.dataclass(frozen=True)
class FieldSettings:
    step_s: float
    start_s: float | None = None
    stop_s: float | None = None
    align: str = "group"
    far_field: bool = False
    degree: int = 5
    extend: str = "ballistic"
    smoothing_m: float = 0.0
    u_offset_s: float | None = None  # momenta sampled at t + u_offset_s (None: each track's)
    max_frequency_hz: float | None = None  # top frequency of the spectra, when asked

    def resolution_s(self) -> float:
        """Observer-time scale the source sampling must resolve: the step, or a fraction
        of the period of the top frequency when spectra are asked."""
        return min(self.step_s, self.sampling_resolution_s())

    def sampling_resolution_s(self) -> float:
        """Observer-time scale in which the source samples must put SAMPLES_PER_BIN samples:
        with spectra, a fraction of the period of the top frequency (their quadrature needs
        the phase resolved); for fields alone none (inf): a bin integral is the exact
        primitive interpolated between samples, so the samples need only follow the field's
        own variation, which the distance and angle limits of `kernels.sampling` do.
        A near-field group whose spectra take the Filon-type quadrature samples as for fields
        alone (`accumulate.FieldAccumulator`, `spectra.filon_cheaper`)."""
        if not self.max_frequency_hz:
            return math.inf
        return SAMPLES_PER_BIN / (SAMPLES_PER_PERIOD * self.max_frequency_hz)


def compute_fields(tracks, groups, settings: FieldSettings, *, spectrum=None, ends=None,
                   windows=None, progress=None):
    """Bin-averaged E, B of every group (list of GroupFields), coherently summed over
    the tracks, and their spectra when `spectrum` (SpectrumSettings) is given.
    `tracks` is an iterable of Track. The time grids come from `windows` (see
    `group_windows`), else from `ends` (see `track_ends`), else from the tracks themselves
    (a second pass). progress(n) is called as n particles are done in a group (len(tracks) ×
    len(groups) in all). The source sampling of a batch of particles is shared among numba's
    threads (results do not depend on their number)."""
    path = getattr(tracks, "path", None)  # the track file, for errors
    if windows is None:
        if ends is None:
            tracks = list(tracks)
            ends = track_ends(tracks)
        windows = group_windows(groups, ends, settings)
    accumulators = [FieldAccumulator(group, start, n_bins, settings, spectrum)
                    for group, (start, n_bins) in zip(groups, windows, strict=True)]
    for batch in _batches(tracks):
        motions = checked_motions(batch, settings.resolution_s(), path=path,
                                  degree=settings.degree, extend=settings.extend,
                                  smoothing_m=settings.smoothing_m,
                                  u_offset_s=settings.u_offset_s)
        for accumulator in accumulators:
            accumulator.add_batch(motions)
            if progress is not None:
                progress(len(motions))
    return [accumulator.result() for accumulator in accumulators]
