"""Readout-chain elements: linear, time-invariant operations on one point's voltage samples
(bin averages on a uniform grid of step Δ, the signal taken as zero before the first).

- Butterworth: scipy.signal.butter(output="sos", fs = 1/Δ), run causally with sosfilt from
  rest, so no output precedes its input.
- ImpulseResponse: convolution with a tabulated h(t) (1/s), h linear between table rows and
  zero outside them. The samples are taken as linear between grid times, so sample k of the
  output is Σ_m w_m x_(k−m) with w_m = ∫ h(s) Λ(s/Δ − m) ds (Λ the unit hat): exact for a
  linear input whatever the table's spacing (both factors are linear between the merged
  breakpoints, where Simpson's rule is exact). The convolution of bin averages is the bin
  average of the convolution, so the output keeps SPEC's meaning of a sample.
- Touchstone: Y(f) = S21(f)·X(f). Touchstone data use the engineering phasor e^(+jωt), under
  which a delay τ reads S21 = e^(−j2πfτ); SPEC's transform ∫x(t) e^(−2πift) dt (and numpy's
  rfft) gives a delayed signal the same factor, so S21 multiplies the transform as it is, no
  conjugate. S21 is interpolated in magnitude and unwrapped phase onto the FFT grid and is
  zero outside the file's range; the signal must hold all but BAND_ENERGY_FRACTION of its
  energy inside that range. The input is zero-padded by the longest response the file can
  describe (1/its finest frequency spacing, or twice its largest group delay) so nothing
  wraps around; the output is cut back to the window.
- Gain: a constant factor ("20 dB" of voltage is 10).

Elements raise DetectorError for what the data make impossible (a file that does not cover
the signal's band); the caller adds the detector's name.
"""

from __future__ import annotations

import dataclasses
import functools
import math

import numpy as np
from scipy import fft, signal

from .errors import DetectorError

BAND_ENERGY_FRACTION = 1e-6  # energy a Touchstone file may leave outside its range
MAX_PAD_SAMPLES = 1 << 24  # longest zero padding a Touchstone response may ask for


@functools.lru_cache(maxsize=32)
def _butterworth_sos(order: int, low_hz: float | None, high_hz: float | None,
                     step_s: float) -> np.ndarray:
    """scipy's second-order sections of the design (cached: every point of a detector uses
    the same one)."""
    if low_hz is not None and high_hz is not None:
        btype, edges = "bandpass", [low_hz, high_hz]
    elif high_hz is not None:
        btype, edges = "lowpass", high_hz
    else:
        btype, edges = "highpass", low_hz
    return signal.butter(order, edges, btype=btype, fs=1.0 / step_s, output="sos")


@dataclasses.dataclass(frozen=True)
class Butterworth:
    """order; low_hz: lower edge (highpass, or band), high_hz: upper edge (lowpass, or band)."""

    order: int
    low_hz: float | None = None
    high_hz: float | None = None

    kind = "butterworth"

    def check_step(self, step_s: float) -> str | None:
        nyquist_hz = 0.5 / step_s
        top = max(f for f in (self.low_hz, self.high_hz) if f is not None)
        if top >= nyquist_hz:
            return (f"butterworth edge {top:.6g} Hz is at or above the Nyquist frequency "
                    f"{nyquist_hz:.6g} Hz of the step {step_s:.6g} s; use a smaller [time] step")
        return None

    def sos(self, step_s: float) -> np.ndarray:
        return _butterworth_sos(self.order, self.low_hz, self.high_hz, step_s).copy()

    def apply(self, samples: np.ndarray, step_s: float) -> np.ndarray:
        return signal.sosfilt(self.sos(step_s), samples)


def hat_weights(t_s: np.ndarray, h_per_s: np.ndarray, step_s: float) -> np.ndarray:
    """w_m = ∫ h(s) Λ(s/Δ − m) ds, m = 0, 1, …, for h linear between (t_s, h_per_s) and zero
    outside; t_s ascending, t_s[0] ≥ 0."""
    last = int(math.ceil(t_s[-1] / step_s)) + 1
    nodes = np.union1d(t_s, step_s * np.arange(last + 1))
    nodes = nodes[(nodes >= t_s[0]) & (nodes <= t_s[-1])]
    left, right = nodes[:-1], nodes[1:]
    middle = 0.5 * (left + right)
    hat = np.floor(middle / step_s).astype(np.int64)  # the interval lies in [mΔ, (m+1)Δ]
    values = [np.interp(s, t_s, h_per_s) for s in (left, middle, right)]
    rising = [s / step_s - hat for s in (left, middle, right)]  # Λ(s/Δ − m − 1) there
    sixth = (right - left) / 6.0
    whole = sixth * (values[0] + 4.0 * values[1] + values[2])
    upper = sixth * (values[0] * rising[0] + 4.0 * values[1] * rising[1]
                     + values[2] * rising[2])
    weights = np.zeros(last + 2)
    np.add.at(weights, hat + 1, upper)
    np.add.at(weights, hat, whole - upper)
    return weights


@functools.lru_cache(maxsize=32)
def _response_weights(response: ImpulseResponse, step_s: float) -> np.ndarray:
    """hat_weights of a response table (cached: every point of a detector uses the same;
    the table is hashed by identity)."""
    return hat_weights(response.t_s, response.h_per_s, step_s)


class AnyStep:
    """A chain element that any time step serves (no band edge to check against it)."""

    def check_step(self, step_s: float) -> str | None:
        return None


@dataclasses.dataclass(frozen=True, eq=False)
class ImpulseResponse(AnyStep):
    """A tabulated impulse response: t_s (s, uniform, ≥ 0) and h_per_s (1/s); source names
    the file for messages."""

    t_s: np.ndarray
    h_per_s: np.ndarray
    source: str = ""

    kind = "impulse_response"

    def apply(self, samples: np.ndarray, step_s: float) -> np.ndarray:
        weights = _response_weights(self, step_s)
        samples = np.asarray(samples, dtype=float)
        return signal.convolve(samples, weights)[:samples.size]


@dataclasses.dataclass(frozen=True, eq=False)
class Touchstone(AnyStep):
    """S21 of a 2-port Touchstone file: frequency_hz (ascending, ≥ 0) and s21 (complex)."""

    frequency_hz: np.ndarray
    s21: np.ndarray
    source: str = ""

    kind = "touchstone"

    def transfer(self, frequency_hz: np.ndarray) -> np.ndarray:
        """S21 at frequency_hz: magnitude and unwrapped phase interpolated linearly inside
        the file's range, zero outside it."""
        f = self.frequency_hz
        magnitude = np.interp(frequency_hz, f, np.abs(self.s21), left=0.0, right=0.0)
        phase = np.interp(frequency_hz, f, np.unwrap(np.angle(self.s21)))
        return magnitude * np.exp(1j * phase)

    def response_s(self) -> float:
        """The longest response the file can describe: 1/(finest frequency spacing), or twice
        the largest group delay when that is longer."""
        spacing = np.diff(self.frequency_hz)
        delay = -np.diff(np.unwrap(np.angle(self.s21))) / (2.0 * np.pi * spacing)
        return float(max(1.0 / spacing.min(), 2.0 * np.abs(delay).max()))

    def _check_band(self, frequency_hz: np.ndarray, spectrum: np.ndarray) -> None:
        energy = np.abs(spectrum) ** 2
        energy[1:] *= 2.0  # one-sided: a positive frequency stands for itself and its mirror
        total = energy.sum()
        low, high = self.frequency_hz[0], self.frequency_hz[-1]
        outside = energy[(frequency_hz < low) | (frequency_hz > high)].sum()
        if total == 0.0 or outside <= BAND_ENERGY_FRACTION * total:
            return
        cumulative = np.cumsum(energy) / total
        tail = BAND_ENERGY_FRACTION / 2.0
        need_low = frequency_hz[np.searchsorted(cumulative, tail)]
        need_high = frequency_hz[min(np.searchsorted(cumulative, 1.0 - tail),
                                     frequency_hz.size - 1)]
        missing = [f"{a:.6g} Hz – {b:.6g} Hz" for a, b in
                   ((need_low, min(low, need_high)), (max(high, need_low), need_high)) if a < b]
        missing = missing or ["the frequencies just beyond both of its ends"]
        raise DetectorError(
            f"touchstone file {self.source} covers {low:.6g} Hz – {high:.6g} Hz, but the signal "
            f"entering it holds all but {BAND_ENERGY_FRACTION:g} of its energy in "
            f"{need_low:.6g} Hz – {need_high:.6g} Hz; the file lacks "
            f"{' and '.join(missing)} (extend the file or filter the band before it)")

    def apply(self, samples: np.ndarray, step_s: float) -> np.ndarray:
        samples = np.asarray(samples, dtype=float)
        pad = math.ceil(self.response_s() / step_s)
        if pad > MAX_PAD_SAMPLES:
            raise DetectorError(
                f"touchstone file {self.source} describes a response {self.response_s():.3g} s "
                f"long (from its frequency spacing or group delay), over {MAX_PAD_SAMPLES} "
                f"steps of {step_s:.6g} s; resample the file more coarsely")
        size = fft.next_fast_len(samples.size + pad, real=True)
        spectrum = fft.rfft(samples, size)
        frequency_hz = fft.rfftfreq(size, step_s)
        self._check_band(frequency_hz, spectrum)
        return fft.irfft(spectrum * self.transfer(frequency_hz), size)[:samples.size]


@dataclasses.dataclass(frozen=True)
class Gain(AnyStep):
    """A constant voltage factor (from "20 dB" → 10, or a plain factor)."""

    factor: float

    kind = "gain"

    def apply(self, samples: np.ndarray, step_s: float) -> np.ndarray:
        return self.factor * np.asarray(samples, dtype=float)


ELEMENTS = {cls.kind: cls for cls in (Butterworth, ImpulseResponse, Touchstone, Gain)}
