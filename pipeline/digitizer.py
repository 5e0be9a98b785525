"""The digitizer: an analog voltage trace turned into ADC codes.

Samples fall at t_n = t_0 + n/rate from the window's first time t_0 while t_n ≤ the last
time; the analog trace is interpolated linearly between its grid times (its samples are bin
averages over one step, SPEC, and the rate may not exceed 1/step, so an interpolated value
never claims detail the trace does not hold). Gaussian noise of the given rms is added from
numpy's default_rng(seed), drawn point after point in the order the points are digitized, so
the same seed gives the same table. Codes are round(V/LSB), clipped to −2^(bits−1) …
2^(bits−1) − 1, with LSB = (high − low)/2^bits over a range [low, high] = [−high, high];
the digitized voltage is code × LSB.
"""

from __future__ import annotations

import dataclasses

import numpy as np

MAX_BITS = 32
RATE_TOLERANCE = 1e-9  # relative slack when comparing the rate with 1/step


@dataclasses.dataclass(frozen=True)
class Digitizer:
    """rate_hz; bits; full_scale_v: the range's upper end (the range is symmetric);
    noise_v: rms noise added before rounding; seed of numpy's default_rng."""

    rate_hz: float
    bits: int
    full_scale_v: float
    noise_v: float = 0.0
    seed: int = 0

    @property
    def lsb_v(self) -> float:
        return 2.0 * self.full_scale_v / 2.0 ** self.bits

    @property
    def code_limits(self) -> tuple[int, int]:
        half = 1 << (self.bits - 1)
        return -half, half - 1

    def check_step(self, step_s: float) -> str | None:
        if self.rate_hz * step_s > 1.0 + RATE_TOLERANCE:
            return (f"digitizer rate {self.rate_hz:.6g} Hz is above the field's sample rate "
                    f"1/step = {1.0 / step_s:.6g} Hz; use a [time] step of at most "
                    f"{1.0 / self.rate_hz:.6g} s")
        return None

    def rng(self) -> np.random.Generator:
        return np.random.default_rng(self.seed)

    def digitize(self, t_s: np.ndarray, volts: np.ndarray, rng: np.random.Generator):
        """(times (M,), codes (M,) int64, code × LSB (M,)) of one trace sampled on the grid
        t_s (N,) with values volts (N,); noise drawn from rng."""
        t_s = np.asarray(t_s, dtype=float)
        if t_s.size == 0:
            return np.empty(0), np.empty(0, dtype=np.int64), np.empty(0)
        period_s = 1.0 / self.rate_hz
        count = int(np.floor((t_s[-1] - t_s[0]) / period_s * (1.0 + RATE_TOLERANCE))) + 1
        times = t_s[0] + period_s * np.arange(count)
        analog = np.interp(times, t_s, volts)
        if self.noise_v > 0.0:
            analog = analog + rng.normal(0.0, self.noise_v, size=count)
        lowest, highest = self.code_limits
        codes = np.clip(np.rint(analog / self.lsb_v), lowest, highest).astype(np.int64)
        return times, codes, codes * self.lsb_v
