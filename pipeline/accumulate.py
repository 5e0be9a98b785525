"""Bin integrals of E and B of one observer group, to which particles are added in batches:
the batch's source spans and samples in compiled calls (`sources.sample_motions`), then, in
chunks, the compiled deposit (kernels/deposit.py); spectra and fluence are fed the same
source samples, particle by particle."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .constants import COULOMB, C
from .fluence import FluenceAccumulator
from .kernels import deposit
from .motion import Motion
from .retarded import span_arguments
from .sources import sample_motions
from .spectra import SpectrumAccumulator, filon_cheaper

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
        # observer-time scale the source samples resolve; None: not chosen yet (near-field
        # spectra: by the first batch, see `_choose_spectra_sampling`)
        self._resolution_s = settings.sampling_resolution_s()
        if self.spectra is not None and not self.geometry.far and math.isfinite(
                self._resolution_s):
            self._resolution_s = None

    def _choose_spectra_sampling(self, motions) -> list:
        """The runs of `sources.sample_motions` for the group's first batch, sampled for the
        field alone when the spectra's Filon-type quadrature on those samples is predicted
        cheaper than refining them to resolve the top frequency (`spectra.filon_cheaper`),
        else refined; the choice holds for the group's later batches."""
        coarse = sample_motions(motions, self.group, self._span_arguments, math.inf,
                                self.settings.step_s)
        counts = np.concatenate([np.diff(offsets) for _, _, _, offsets, _ in coarse])
        if filon_cheaper(counts, self.spectra.mean_window_s(), self.spectra.settings):
            self._resolution_s = math.inf
            self.spectra.exact_phase = True
            return coarse
        self._resolution_s = self.settings.sampling_resolution_s()
        return sample_motions(motions, self.group, self._span_arguments, self._resolution_s,
                              self.settings.step_s)

    def add(self, motion: Motion) -> None:
        self.add_batch([motion])

    def add_batch(self, motions) -> None:
        """Add motions (a list of Motion), their source sampling shared among threads
        (`sources.sample_motions`)."""
        if self._resolution_s is None:
            runs = self._choose_spectra_sampling(motions)
        else:
            runs = sample_motions(motions, self.group, self._span_arguments,
                                  self._resolution_s, self.settings.step_s)
        for run, t, columns, offsets, ends in runs:
            self._per_particle(run, t, columns, offsets)
            scale = np.array([m.track.charge_c * m.track.weight for m in run])
            self._pending.append((t, columns, offsets, scale, ends))
            self._pending_samples += t.size
            self.source_samples += t.size
            if self._pending_samples >= SAMPLES_PER_KERNEL_CALL:
                self.flush()

    def _per_particle(self, run, t, columns, offsets) -> None:
        """Spectra and exact fluence, which take particles one at a time; skipped when
        neither is asked (a coherent fluence of more than one track is no longer exact)."""
        fluence = self.fluence
        if self.spectra is None and fluence.coherent and fluence.tracks > 1:
            fluence.tracks += len(run)
            return
        for i, motion in enumerate(run):
            a, b = offsets[i], offsets[i + 1]
            if a == b:
                continue  # nothing seen (far field: only the extensions)
            state = tuple(column[a:b] for column in columns[:4])
            charge_c, weight = motion.track.charge_c, motion.track.weight
            folded = (self.spectra is not None
                      and self.spectra.add(t[a:b], state, charge_c, weight, exact=fluence))
            if not folded:
                fluence.add(t[a:b], state, charge_c, weight)

    def flush(self) -> None:
        if not self._pending:
            return
        pending, self._pending, self._pending_samples = self._pending, [], 0
        if len(pending) == 1:
            t, columns, offsets, scale, ends = pending[0]
        else:
            t = np.concatenate([p[0] for p in pending])
            columns = tuple(np.concatenate([p[1][i] for p in pending]) for i in range(7))
            bases = np.cumsum([0] + [p[0].size for p in pending[:-1]])
            offsets = np.concatenate([[0]] + [p[2][1:] + base
                                              for p, base in zip(pending, bases, strict=True)])
            scale = np.concatenate([p[3] for p in pending])
            ends = np.concatenate([p[4] for p in pending])
        pos, beta, inv_g2, beta_dot = columns[:4]
        args = (t, pos, beta, inv_g2, beta_dot, offsets.astype(np.int64), scale)
        geometry = self.geometry
        if geometry.far:
            deposit.deposit_far(*args, geometry.targets, geometry.distance_m, geometry.origins_m(),
                                self.edge0, self.settings.step_s, self.n_bins, self.integrals,
                                ends, columns[4:])
        else:
            deposit.deposit_near(*args, geometry.targets, self.edge0, self.settings.step_s,
                                 self.n_bins, self.integrals, ends, columns[4:])

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
            a.spectra.transforms.update(b.spectra.transforms)
        if a.fluence is not None:
            a.fluence.merge(b.fluence)
        a.source_samples += b.source_samples
    return first
