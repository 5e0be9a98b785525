"""Spectra of the field over the time window: Ẽ(f) = ∫ E(t) e^(−2πi f t) dt (V·s/m),
spectral fluence F(f) = 2 ε0 c |Ẽ(f)|² (J/(m²·Hz)), and R² F on spheres (J/(Hz·sr)).

The integral runs over the observer times of the source samples (not over the output
bins, so there is no sinc attenuation from the step), by the trapezoid rule with its
Euler–Maclaurin end correction, which splits into two sums of the form Σ c_j e^(−iωt_j):
any frequency list, linear or logarithmic over many decades, is then a set of nonuniform
Fourier sums, evaluated by the route `transforms` predicts to be cheapest (a compiled
direct sum or a type-3 NUFFT). The source sampling puts at least SAMPLES_PER_PERIOD
samples in the period of the top frequency.

Where each particle's window at a point spans few periods of the band's width (far field,
short pulses) the accumulator instead hands a particle (or the held particles) to one
compiled call over all points (kernels/point_spectra.py): fields, quadrature and the sums
by the Jacobi–Anger expansion, whose cost grows with samples × orders rather than samples
× frequencies, and no Python step per point. `transforms` counts these as "expansion".

In a coherent run the sums are linear in the samples of all particles: the accumulator
keeps the source samples of several particles and, per point, makes one transform over
all of them (or one per particle, if that is predicted cheaper), when SPECTRUM_BUFFER_SAMPLES
are held and whenever the spectra are read. An incoherent run needs |Ẽ|² of each particle:
one transform per particle and point.

Near-field runs (whose ballistic extensions put each particle's light over the whole
window) may instead keep the source samples the field alone needs and integrate them by
the Filon-type quadrature (kernels/filon.py: the Hermite interpolant of the samples
against the exact phase, any number of periods between two samples). `filon_cheaper`
decides from a group's first batch: that quadrature costs samples × frequencies, the
refinement SAMPLES_PER_PERIOD samples per period over the window and their transforms.
"""

from __future__ import annotations

import collections
import dataclasses
import threading

import numpy as np

from . import threads, transforms
from .constants import COULOMB, EPS0_C
from .kernels import expansion, point_spectra, quadrature
from .tables import SPECTRUM_COLUMNS, spectra_table

SAMPLES_PER_PERIOD = 16.0  # source samples (in observer time) per period of the top frequency
SPECTRUM_BUFFER_SAMPLES = 1_000_000  # source samples (~100 bytes each) held before a transform
_COUNTING = threading.Lock()
EXPANSION_TABLE_MAX = 2**22  # orders × samples of one particle (8 bytes each, per thread)


@dataclasses.dataclass(frozen=True)
class SpectrumSettings:
    frequencies_hz: np.ndarray
    coherent: bool = True
    taper: str = "none"  # or "hann"


def frequency_list(start_hz: float, stop_hz: float, count: int, spacing: str) -> np.ndarray:
    """The frequencies of a [spectrum] table, both ends included."""
    if spacing == "log":
        return np.geomspace(start_hz, stop_hz, count)
    return np.linspace(start_hz, stop_hz, count)


def quadrature_terms(t_obs_s, e_v_per_m, start_s, stop_s, top_hz, taper="none"):
    """(t (n,), values (n, 6)): the samples inside [start_s, stop_s] (t_obs_s increasing)
    and the coefficients of the two Fourier sums of the corrected trapezoid rule, the
    second scaled by 2π·top_hz (so that both weigh alike at the top frequency, where a
    transform's error relative to its largest input matters most)."""
    first = int(np.searchsorted(t_obs_s, start_s, side="left"))
    last = int(np.searchsorted(t_obs_s, stop_s, side="right"))
    t = t_obs_s[first:last]
    e = e_v_per_m[first:last]
    if t.size < 2:
        return t[:0], np.empty((0, transforms.N_VECTORS))
    if taper == "hann":
        e = e * (0.5 - 0.5 * np.cos(2.0 * np.pi * (t - start_s) / (stop_s - start_s)))[:, None]
    ab = np.empty((transforms.N_VECTORS, t.size))
    quadrature.corrected_trapezoid(t, np.ascontiguousarray(e), start_s, stop_s, ab[:3], ab[3:])
    ab[3:] *= 2.0 * np.pi * top_hz
    return t, ab.T


def spectrum_of_sums(sums: np.ndarray, frequencies_hz: np.ndarray) -> np.ndarray:
    """Ẽ (F, 3) of the two sums (F, 6) of `quadrature_terms` (top: frequencies_hz.max())."""
    top = frequencies_hz.max()
    ratio = frequencies_hz / top if top > 0 else np.zeros(frequencies_hz.size)  # f = 0 alone
    return sums[:, :3] - 1j * ratio[:, None] * sums[:, 3:]


def window_spectrum(t_obs_s, e_v_per_m, start_s, stop_s, frequencies_hz, taper="none",
                    route=None):
    """Ẽ(f) (F, 3) of the field samples (t_obs_s (N,), increasing; e (N, 3)) over
    [start_s, stop_s]; route: "direct", "nufft" or None (the cheaper)."""
    t, values = quadrature_terms(t_obs_s, e_v_per_m, start_s, stop_s, frequencies_hz.max(),
                                 taper)
    sums = transforms.fourier_sums(t, values, frequencies_hz, route)
    return spectrum_of_sums(sums, frequencies_hz)


def coherent_plan(counts, spans_s, together_span_s, frequencies_hz, model=transforms.COST):
    """How to sum the spectra of several particles at one point: ("together", route) for
    one transform over all their samples (count sum(counts), time span together_span_s),
    or ("each", [route per particle]) for one per particle (counts, spans_s), whichever
    is predicted cheaper (a tie goes to "together")."""
    routes = [transforms.choose(n, frequencies_hz, span, model)
              for n, span in zip(counts, spans_s, strict=True)]
    each_s = sum(transforms.predicted_s(n, frequencies_hz, span, route, model)
                 for n, span, route in zip(counts, spans_s, routes, strict=True))
    total = int(sum(counts))
    route = transforms.choose(total, frequencies_hz, together_span_s, model)
    together_s = transforms.predicted_s(total, frequencies_hz, together_span_s, route, model)
    return ("together", route) if together_s <= each_s else ("each", routes)


def transforms_s(counts, spans_s, together_span_s, frequencies_hz, coherent: bool,
                 model=transforms.COST) -> float:
    """Predicted seconds of the transforms of several particles at one point: one per
    particle (counts, spans_s), or in a coherent run the cheaper of that and one over all
    their samples (together_span_s)."""
    each_s = sum(transforms.cheapest_s(int(n), frequencies_hz, span, model)
                 for n, span in zip(counts, spans_s, strict=True))
    if not coherent:
        return each_s
    together_s = transforms.cheapest_s(int(sum(counts)), frequencies_hz, together_span_s, model)
    return min(each_s, together_s)


def filon_cheaper(coarse_counts, window_s: float, settings: SpectrumSettings,
                  model=transforms.COST) -> bool:
    """Whether the Filon-type quadrature on samples that follow the field alone (coarse_counts
    per particle, as the sampling gives them without a frequency) is predicted cheaper than
    the corrected trapezoid's routes on samples refined to SAMPLES_PER_PERIOD per period of
    the top frequency over a window of window_s (each particle's light covering it, as the
    ballistic extensions make it in the near field). The refined side counts its transforms
    only, not its extra sampling and fields: a tie goes to the refined samples."""
    f = settings.frequencies_hz
    counts = np.asarray(coarse_counts, dtype=float)
    if counts.size == 0:
        return False
    refined = counts + SAMPLES_PER_PERIOD * float(f.max()) * window_s
    return model.filon_s(float(counts.sum()), f.size) < transforms_s(
        refined, [window_s] * refined.size, window_s, f, settings.coherent, model)


def fluence(spectrum: np.ndarray) -> np.ndarray:
    """F(f) = 2 ε0 c |Ẽ(f)|² summed over components, J/(m²·Hz)."""
    return 2.0 * EPS0_C * np.sum(np.abs(spectrum) ** 2, axis=-1)


def kernel_geometry(geometry, n_points: int) -> tuple:
    """(far, targets (P, 3), distance_m (P,), origin_m (3,)) of an observers.Geometry as the
    compiled per-point kernels take them (contiguous; distances 1 in the near field)."""
    distance = geometry.distance_m if geometry.far else np.ones(n_points)
    return (bool(geometry.far), np.ascontiguousarray(geometry.targets, dtype=float),
            np.ascontiguousarray(distance, dtype=float),
            np.ascontiguousarray(geometry.origin_m, dtype=float))


def transverse_bases(directions) -> np.ndarray:
    """(P, 2, 3): for each unit vector n of directions (P, 3), two unit vectors orthogonal
    to n and to each other."""
    n = np.asarray(directions, dtype=float)
    helper = np.zeros_like(n)
    helper[np.arange(n.shape[0]), np.argmin(np.abs(n), axis=1)] = 1.0  # least parallel axis
    first = np.cross(n, helper)
    first /= np.linalg.norm(first, axis=1)[:, None]
    return np.stack([first, np.cross(n, first)], axis=1)


def window_arrays(start_s, stop_s, n_points: int) -> tuple:
    """(start (P,), stop (P,)) s of the points' windows, contiguous, as the compiled per-point
    kernels take them (a scalar applies to every point)."""
    return tuple(np.ascontiguousarray(np.broadcast_to(np.asarray(v, dtype=float), (n_points,)))
                 for v in (start_s, stop_s))


class SpectrumAccumulator:
    """Spectra of one group's points, to which particles' source samples are added.
    `transforms` counts the transforms made by route ("direct", "nufft")."""

    def __init__(self, group, start_s, stop_s, settings: SpectrumSettings, geometry=None):
        self.group = group
        self.start_s = start_s
        self.stop_s = stop_s
        self.settings = settings
        self.geometry = group.geometry(False) if geometry is None else geometry
        self._kernel = kernel_geometry(self.geometry, group.n_points)
        self._window_s = window_arrays(start_s, stop_s, group.n_points)
        n_f = settings.frequencies_hz.size
        self._spectrum = np.zeros((group.n_points, n_f, 3), dtype=complex)
        self.fluence = np.zeros((group.n_points, n_f))
        self.transforms = collections.Counter()
        self._pending = []  # (t, state, field scale) of particles not yet transformed
        self._pending_samples = 0
        self._weights = (0, None, None)  # (orders, re, im) of the expansion's band
        self.exact_phase = False  # True: Filon-type quadrature (samples need not resolve f)
        # far field: per point two unit vectors across the direction n (P, 2, 3); near
        # field: none (0, 2, 3), all three components summed
        self._across = (transverse_bases(self.geometry.targets) if self.geometry.far
                        else np.empty((0, 2, 3)))

    @property
    def spectrum(self) -> np.ndarray:
        """Ẽ (P, F, 3), V·s/m, of every particle added so far (coherent runs)."""
        self.flush()
        return self._spectrum

    @spectrum.setter
    def spectrum(self, value) -> None:
        self.flush()
        self._spectrum = value

    def mean_window_s(self) -> float:
        """The points' windows' mean length (s)."""
        start, stop = self._window_s
        return float(np.mean(stop - start))

    def __getstate__(self):  # a pickled accumulator (sent between processes) is flushed
        self.flush()
        return dict(self.__dict__)

    def add(self, t, state, charge_c: float, weight: float, exact=None) -> bool:
        """Add one particle's samples; True when its exact ∫|E|² dt went to `exact` (a
        fluence.FluenceAccumulator of the same windows and geometry) on the way."""
        if self.settings.coherent:
            self._pending.append((t, state, COULOMB * charge_c * weight))
            self._pending_samples += t.size
            if self._pending_samples >= SPECTRUM_BUFFER_SAMPLES:
                self.flush()
            return False
        if t.size:
            batch = [(t, state, COULOMB * charge_c)]
            if self.exact_phase:
                self._filon(batch, [weight], self._claim(exact, charge_c, weight))
                return exact is not None
            halves = self._half_spans(batch)
            if self._expansion_cheaper(batch, halves, False):
                self._expansion(batch, halves, [weight], self._claim(exact, charge_c, weight))
                return exact is not None
        packed = self._packed([(t, state, COULOMB * charge_c)])

        def point(p):
            terms, _ = self._point_terms(packed, p)
            for t_p, values in terms:
                self.fluence[p] += weight * fluence(self._transform(t_p, values, None, p))

        self._each_point(point)
        return False

    @staticmethod
    def _claim(exact, charge_c: float, weight: float):
        """(factors (1,), out (P,)) for the compiled kernels to add one particle's exact
        ∫|E|² dt to `exact` (a fluence.FluenceAccumulator), or None without one."""
        if exact is None:
            return None
        return np.array([exact.claim(charge_c, weight)]), exact.energy

    def flush(self) -> None:
        """Transform the held particles' samples into the coherent spectra."""
        if not self._pending:
            return
        pending, self._pending, self._pending_samples = self._pending, [], 0
        f = self.settings.frequencies_hz
        pending = [item for item in pending if item[0].size]
        if pending and self.exact_phase:
            self._filon(pending, None)
            return
        halves = self._half_spans(pending)
        if pending and self._expansion_cheaper(pending, halves, True):
            self._expansion(pending, halves, None)
            return
        packed = self._packed(pending)

        def point(p):
            terms, together = self._point_terms(packed, p)
            if not terms:
                return
            spans = [float(t[-1] - t[0]) for t, _ in terms]
            together_span = (max(float(t[-1]) for t, _ in terms)
                             - min(float(t[0]) for t, _ in terms))
            how, routes = coherent_plan([t.size for t, _ in terms], spans, together_span, f)
            if how == "together":
                self._spectrum[p] += self._transform(*together, routes, p)
            else:
                for (t, values), route in zip(terms, routes, strict=True):
                    self._spectrum[p] += self._transform(t, values, route, p)

        self._each_point(point)

    @staticmethod
    def _packed(batch) -> tuple:
        """(t, [pos, beta, inv_g2, beta_dot], offsets, scales) of particles
        [(t, state, field scale)], one after another, as the compiled kernels take them."""
        t = np.concatenate([item[0] for item in batch])
        state = [np.ascontiguousarray(np.concatenate([item[1][i] for item in batch]),
                                      dtype=float) for i in range(4)]
        offsets = np.cumsum([0] + [item[0].size for item in batch]).astype(np.int64)
        scales = np.array([item[2] for item in batch], dtype=float)
        return t, state, offsets, scales

    def _point_terms(self, packed, p) -> tuple:
        """(terms, together): the quadrature terms (t_obs (n,), values (n, 6)) at point p of
        each packed particle with samples in p's window (`quadrature_terms` of its fields ×
        scale; one compiled call), and all of them joined (they are packed in order)."""
        t, state, offsets, scales = packed
        far, targets, distance_m, origin_m = self._kernel
        start, stop = self._window_s
        t_out, values = np.empty(t.size), np.empty((transforms.N_VECTORS, t.size))
        firsts, counts = (np.empty(scales.size, dtype=np.int64) for _ in range(2))
        rows = point_spectra.point_terms(
            t, *state, offsets, scales, far, targets, distance_m, origin_m, start, stop, p,
            2.0 * np.pi * float(self.settings.frequencies_hz.max()),
            self.settings.taper == "hann", self._across, t_out, values, firsts, counts)
        if self._across.shape[0]:  # transverse: 4 projected vectors
            values = values[:4]
        terms = [(t_out[a:a + n], values[:, a:a + n].T)
                 for a, n in zip(firsts.tolist(), counts.tolist(), strict=True) if n]
        return terms, (t_out[:rows], values[:, :rows].T)

    def _each_point(self, work) -> None:
        """work(p) for every point p, shared among threads (`threads.each`: each point
        writes its own rows; plans are per thread, so results do not depend on the number
        of threads)."""
        threads.each(work, range(self.group.n_points))

    def _half_spans(self, batch) -> list:
        """Per particle of batch [(t, state, …)], half its longest observer-time span over
        the points (observer time is monotonic in source time, so its end samples give
        it; a window cuts it shorter), with a margin for rounding."""
        n_p = self.group.n_points
        window = np.broadcast_to(self.stop_s, (n_p,)) - np.broadcast_to(self.start_s, (n_p,))
        halves = []
        for t, state, *_ in batch:
            delay = self.geometry.light_delay_s(state[0][[0, -1]])
            span = (t[-1] - t[0]) + delay[1] - delay[0]
            halves.append(float(np.max(np.minimum(span, window))) * 0.5 * 1.01)
        return halves

    def _expansion_cheaper(self, batch, halves, coherent) -> bool:
        """Whether the expansion over all points is predicted cheaper than the transforms
        (per particle, or for the coherent sum the cheaper of together and each); halves:
        `_half_spans` of batch."""
        f = self.settings.frequencies_hz
        model = transforms.COST
        counts = [item[0].size for item in batch]
        orders = [transforms.expansion_orders(f, half) for half in halves]
        if max(orders) * max(counts) > EXPANSION_TABLE_MAX:
            return False
        expansion_s = sum(model.expansion_s(n, f.size, order)
                          for n, order in zip(counts, orders, strict=True))
        return expansion_s <= transforms_s(counts, [2.0 * half for half in halves],
                                           2.0 * max(halves), f, coherent, model)

    def _expansion(self, batch, halves, weights, energy=None) -> None:
        """Add the particles of batch [(t, state, field scale)] (`_half_spans`: halves) at
        every point in one compiled call; weights: per particle, for the incoherent fluence
        (else None); energy: (factors per particle, out (P,)) to add their ∫|E|² dt to."""
        f = self.settings.frequencies_hz
        centre, half_width = transforms.expansion_band(f)
        orders = transforms.expansion_orders(f, max(halves))
        if orders > self._weights[0]:
            omega = 2.0 * np.pi * f
            self._weights = (orders, *expansion.chebyshev_weights(omega, centre,
                                                                  half_width, orders))
        _, weights_re, weights_im = self._weights
        t, state, offsets, scales = self._packed(batch)
        point_spectra.point_spectra(
            t, *state, offsets, scales, *self._kernel, *self._window_s,
            2.0 * np.pi * f, 2.0 * np.pi * float(f.max()), self.settings.taper == "hann",
            centre, half_width, weights_re, weights_im,
            self._across, *self._sinks(len(batch), weights, energy))
        self.transforms["expansion"] += len(batch) * self.group.n_points

    def _filon(self, batch, weights, energy=None) -> None:
        """As `_expansion`, by the Filon-type quadrature (kernels/filon.py), which any
        spacing of the samples against the period suits."""
        t, state, offsets, scales = self._packed(batch)
        point_spectra.point_filon(
            t, *state, offsets, scales, *self._kernel, *self._window_s,
            2.0 * np.pi * self.settings.frequencies_hz, self.settings.taper == "hann",
            *self._sinks(len(batch), weights, energy))
        self.transforms["filon"] += len(batch) * self.group.n_points

    def _sinks(self, n_particles: int, weights, energy) -> tuple:
        """(coherent, fluence weights, spectrum, fluence, energy factors, energy) as the
        compiled per-point kernels take them (see `_expansion`)."""
        coherent = weights is None
        fluence_weights = np.zeros(n_particles) if coherent else (
            2.0 * EPS0_C * np.asarray(weights, dtype=float))
        factors, out = energy if energy is not None else (np.zeros(n_particles), np.zeros(1))
        return coherent, fluence_weights, self._spectrum, self.fluence, factors, out

    def _transform(self, t, values, route, p):
        """Ẽ (F, 3) at point p of the quadrature terms (t (n,), values (n, 6), or in the far
        field (n, 4): the radiation field is transverse, E·n = 0, so `_point_terms` projects
        the terms on two unit vectors across n, a third less to transform)."""
        f = self.settings.frequencies_hz
        if t.size == 0:
            return np.zeros((f.size, 3), dtype=complex)
        if route is None:
            route = transforms.choose(t.size, f, float(t.max() - t.min()))
        with _COUNTING:  # points run in threads
            self.transforms[route] += 1
        sums = transforms.fourier_sums(t, values, f, route)
        if self._across.shape[0]:  # back from the projections (`_point_terms`)
            across = self._across[p]  # (2, 3)
            sums = np.concatenate([sums[:, :2] @ across, sums[:, 2:] @ across], axis=1)
        return spectrum_of_sums(sums, f)

    def columns(self) -> dict:
        """{point, f, Ex_re … Ez_im (coherent), fluence, dW_df_dOmega (spheres)}: the
        columns of SPEC's spectra table for this group, as numpy arrays."""
        f = self.settings.frequencies_hz
        n_p = self.group.n_points
        columns = {"point": np.repeat(np.arange(n_p, dtype=np.int64), f.size),
                   "f": np.tile(f, n_p)}
        if self.settings.coherent:
            flat = self.spectrum.reshape(n_p * f.size, 3)
            pairs = zip(SPECTRUM_COLUMNS[::2], SPECTRUM_COLUMNS[1::2], strict=True)
            for i, (real, imaginary) in enumerate(pairs):
                columns[real] = flat[:, i].real.copy()
                columns[imaginary] = flat[:, i].imag.copy()
            values = fluence(self.spectrum)
        else:
            values = self.fluence
        columns["fluence"] = values.reshape(-1)
        if self.group.kind == "sphere":
            offset = self.group.points_m - self.group.origin_m
            radius2 = np.einsum("ij,ij->i", offset, offset)
            columns["dW_df_dOmega"] = (values * radius2[:, None]).reshape(-1)
        return columns

    def table(self):
        """SPEC's spectra table for this group."""
        return spectra_table([self])
