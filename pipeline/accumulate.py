"""Bin integrals of E and B of one observer group, to which particles are added: per
particle the source span and samples (`sources`), then, in chunks, the compiled deposit
(kernels/deposit.py); spectra and fluence are fed the same source samples."""

from __future__ import annotations

import dataclasses

import numpy as np

from .constants import COULOMB, C
from .fluence import FluenceAccumulator
from .kernels import deposit
from .motion import Motion
from .retarded import span_arguments
from .sources import accelerated_part, radiation_stops, source_samples, source_span
from .spectra import SpectrumAccumulator

# Source samples buffered per deposit call: 14 floats each, held twice while a call is
# assembled (100,000: about 22 MiB at the peak; 500,000 cost 90 MiB more, no faster).
SAMPLES_PER_KERNEL_CALL = 100_000


@dataclasses.dataclass
class GroupFields:
    """Bin-averaged fields of one group. start_s (P,): first bin centre of each point;
    n_bins (P,); e_v_per_m, b_t (P, max_bins, 3), zero past n_bins[p]; spectra: a
    SpectrumAccumulator when spectra were asked."""

    group: object
    step_s: float
    start_s: np.ndarray
    n_bins: np.ndarray
    e_v_per_m: np.ndarray
    b_t: np.ndarray
    spectra: object = None
    fluence: object = None  # fluence.FluenceAccumulator: exact ε0c∫|E|²dt
    source_samples: int = 0  # source-time samples used, summed over particles

    def times(self, point: int) -> np.ndarray:
        return self.start_s[point] + self.step_s * np.arange(self.n_bins[point])


def extension_ends(motion: Motion, extend: str) -> np.ndarray:
    """(2, deposit.END_COLUMNS): time, position, velocity and 1/γ² of the track's first and
    last sample, where its ballistic extensions start (none with extend = "none")."""
    ends = np.empty((2, deposit.END_COLUMNS))
    times = np.array([motion.t_first, motion.t_last])
    r, beta, inv_g2, _ = motion.evaluate(times)
    ends[:, deposit.END_T] = times
    ends[:, deposit.END_X:deposit.END_X + 3] = r
    ends[:, deposit.END_BX:deposit.END_BX + 3] = beta
    ends[:, deposit.END_IG2] = inv_g2
    if extend == "none":
        ends[:, deposit.END_T] = (-np.inf, np.inf)
    return ends


class FieldAccumulator:
    """Bin integrals of one group, to which chunks of particles are added."""

    def __init__(self, group, start_s, n_bins, settings, spectrum=None):
        """settings: engine.FieldSettings; spectrum: spectra.SpectrumSettings or None."""
        self.group = group
        self.settings = settings
        self.start_s = start_s
        self.n_bins = n_bins
        self.edge0 = start_s - 0.5 * settings.step_s
        self.integrals = np.zeros((group.n_points, int(n_bins.max()), 6))
        self.geometry = group.geometry(settings.far_field)
        self._edges = (self.edge0, self.edge0 + n_bins * settings.step_s)  # observer times
        self._span_arguments = span_arguments(self.geometry, *self._edges, settings.extend)
        self._pending = []
        self._pending_samples = 0
        self.source_samples = 0
        stop_s = start_s + (n_bins - 1) * settings.step_s
        self.spectra = None
        if spectrum is not None:
            self.spectra = SpectrumAccumulator(group, start_s, stop_s, spectrum, self.geometry)
        self.fluence = FluenceAccumulator(group, start_s, stop_s, self.geometry,
                                          spectrum is None or spectrum.coherent)

    def add(self, motion: Motion) -> None:
        span, seen = source_span(motion, self.geometry, *self._edges, self.settings.extend,
                                 self._span_arguments)
        far = self.geometry.far
        if far:
            span, seen = accelerated_part(span, seen, motion)
            if span is None:
                return  # the window sees only extensions: no radiation
        t, state = source_samples(motion, self.group, self.geometry, span,
                                  self.settings.sampling_resolution_s(), seen,
                                  bin_s=self.settings.step_s)
        if far:
            t, state = radiation_stops(t, state, motion)
        scale = motion.track.charge_c * motion.track.weight
        ends = extension_ends(motion, self.settings.extend)
        state, reference = state[:4], state[4:]  # references: observer times keep digits
        charge_c, weight = motion.track.charge_c, motion.track.weight
        folded = (self.spectra is not None
                  and self.spectra.add(t, state, charge_c, weight, exact=self.fluence))
        if not folded:
            self.fluence.add(t, state, charge_c, weight)
        self._pending.append((t, state, scale, ends, reference))
        self._pending_samples += t.size
        self.source_samples += t.size
        if self._pending_samples >= SAMPLES_PER_KERNEL_CALL:
            self.flush()

    def flush(self) -> None:
        if not self._pending:
            return
        t = np.concatenate([p[0] for p in self._pending])
        pos, beta, inv_g2, beta_dot = (np.ascontiguousarray(np.concatenate(
            [p[1][i] for p in self._pending])) for i in range(4))
        offsets = np.concatenate([[0], np.cumsum([p[0].size for p in self._pending])])
        scale = np.array([p[2] for p in self._pending])
        ends = np.stack([p[3] for p in self._pending])
        reference = tuple(np.ascontiguousarray(np.concatenate([p[4][i] for p in self._pending]))
                          for i in range(3))
        args = (t, pos, beta, inv_g2, beta_dot, offsets.astype(np.int64), scale)
        geometry = self.geometry
        if geometry.far:
            deposit.deposit_far(*args, geometry.targets, geometry.distance_m, geometry.origins_m(),
                                self.edge0, self.settings.step_s, self.n_bins, self.integrals,
                                ends, reference)
        else:
            deposit.deposit_near(*args, geometry.targets, self.edge0, self.settings.step_s,
                                 self.n_bins, self.integrals, ends, reference)
        self._pending = []
        self._pending_samples = 0

    def result(self) -> GroupFields:
        """The group's fields; the accumulator is spent (its bin integrals become the fields,
        scaled in place: a copy of a large grid costs more than the deposit)."""
        self.flush()
        step = self.settings.step_s
        fields, self.integrals = self.integrals, None
        fields[:, :, :3] *= COULOMB / step
        fields[:, :, 3:] *= COULOMB / (C * step)
        e, b = fields[:, :, :3], fields[:, :, 3:]
        return GroupFields(self.group, step, self.start_s, self.n_bins, e, b, self.spectra,
                           self.fluence, source_samples=self.source_samples)


def add_results(first, second):
    """The sum of two lists of GroupFields of the same groups and grids (partial sums of
    different particles), written into `first`."""
    for a, b in zip(first, second, strict=True):
        a.e_v_per_m += b.e_v_per_m
        a.b_t += b.b_t
        if a.spectra is not None:
            a.spectra.spectrum += b.spectra.spectrum
            a.spectra.fluence += b.spectra.fluence
        if a.fluence is not None:
            a.fluence.merge(b.fluence)
        a.source_samples += b.source_samples
    return first
