"""Memory a run will need, estimated from its time grids and frequency list before any
field is computed, and a refusal that names the observer group, the estimate and what
to change when it cannot fit in the memory available.

What is counted, per observer group (P points, N bins at the longest point, F
frequencies, window W, top frequency f_max, lowest f_min):
  - the time grid: P × N bins of 6 bin integrals, then the E and B arrays made from them;
  - the fields table built from it: one row per bin, about 10 columns of 8 bytes, as
    column arrays and then the table's block (two copies);
  - the spectra: P × F complex vectors Ẽ and a fluence, and their table;
  - the type-3 NUFFT of one point (held by one particle at a time): a fine grid of
    about σ·W·(f_max − f_min) complex numbers (a type-3 transform's fine grid has about
    2σ·X·S/π points for source half-width X = W/2 and angular-frequency half-width
    S = π(f_max − f_min): from memory of Barnett, Magland & af Klinteberg, SIAM J. Sci.
    Comput. 41 (2019), and measured by the benchmark below), with a peak of about four
    grids' worth;
  - the source samples of one particle (with ballistic extension its light covers the
    whole window): at least SAMPLES_PER_BIN per resolved time scale of the window.
Grids and tables of all groups are held together; the per-particle parts one at a time.
The byte counts per item are estimates; tests/benchmarks/bench_budget.py prints them
next to measured peaks.
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

import numpy as np

from .engine import SAMPLES_PER_BIN
from .errors import ConfigError
from .transforms import NUFFT_BYTES_PER_GRID_POINT, NUFFT_MEMORY_BYTES, nufft_grid_points
from .wording import plural

GRID_BYTES_PER_BIN = 12 * 8  # per point and bin: 6 bin integrals, then E and B (6 more)
FIELDS_TABLE_BYTES_PER_ROW = 2 * 10 * 8  # ~10 columns of 8 bytes: column arrays, then the table
SPECTRUM_BYTES_PER_VALUE = 3 * 16 + 8  # per point and frequency: Ẽ (3 complex), fluence
SPECTRA_TABLE_BYTES_PER_ROW = 2 * 12 * 8  # ~12 columns of 8 bytes, built and concatenated
SOURCE_SAMPLE_BYTES = 40 * 8  # motion state (11 floats), refined copies, fields, weights
MEMORY_FRACTION = 0.8  # of the available memory a run may plan to use

TIME_ADVICE = ("enlarge [time] step, shorten the window ([time] start and stop) or use fewer "
               "observer points")
SPECTRA_ADVICE = "use fewer [spectrum] frequencies (count) or fewer observer points"
NUFFT_ADVICE = ("lower the top frequency ([spectrum] frequencies stop) or shorten the window "
                "([time] start and stop)")
SAMPLES_ADVICE = ("enlarge [time] step, lower the top frequency ([spectrum] frequencies "
                  "stop) or shorten the window ([time] start and stop)")


@dataclasses.dataclass(frozen=True)
class Part:
    what: str  # e.g. "time grid (441 points × 2.7e+09 bins)"
    bytes: float
    advice: str
    per_particle: bool = False  # held for one particle at a time (not summed over groups)


@dataclasses.dataclass(frozen=True)
class Estimate:
    group: str
    parts: tuple  # of Part, largest first

    @property
    def held_bytes(self) -> float:
        return sum(p.bytes for p in self.parts if not p.per_particle)

    @property
    def transient_bytes(self) -> float:
        return max((p.bytes for p in self.parts if p.per_particle), default=0.0)

    @property
    def total_bytes(self) -> float:
        return self.held_bytes + self.transient_bytes


def estimate_group(group, start_s, n_bins, settings, spectrum=None) -> Estimate:
    """Estimate of one observer group on the grid (start_s (P,), n_bins (P,)) with
    FieldSettings `settings` and SpectrumSettings `spectrum` (or None)."""
    points = float(group.n_points)
    bins = np.asarray(n_bins, dtype=float)
    window_s = float(bins.max() - 1.0) * settings.step_s
    parts = [
        Part(f"time grid ({plural(group.n_points, 'point')} × {bins.max():.3g} bins)",
             points * bins.max() * GRID_BYTES_PER_BIN, TIME_ADVICE),
        Part(f"fields table ({bins.sum():.3g} rows)", bins.sum() * FIELDS_TABLE_BYTES_PER_ROW,
             TIME_ADVICE)]
    if spectrum is not None:
        f = np.asarray(spectrum.frequencies_hz, dtype=float)
        values = points * f.size
        parts.append(Part(f"spectra ({plural(group.n_points, 'point')} × "
                          f"{plural(f.size, 'frequency', 'frequencies')})",
                          values * (SPECTRUM_BYTES_PER_VALUE + SPECTRA_TABLE_BYTES_PER_ROW),
                          SPECTRA_ADVICE))
        grid = nufft_grid_points(window_s, f.min(), f.max())  # a longer one is cut in pieces
        parts.append(Part(f"NUFFT grid of one point ({grid:.3g} values)",
                          min(grid * NUFFT_BYTES_PER_GRID_POINT, NUFFT_MEMORY_BYTES),
                          NUFFT_ADVICE, per_particle=True))
    if settings.extend == "ballistic":
        samples = SAMPLES_PER_BIN * window_s / settings.resolution_s()
        parts.append(Part(f"source samples of one particle ({samples:.3g})",
                          samples * SOURCE_SAMPLE_BYTES, SAMPLES_ADVICE, per_particle=True))
    return Estimate(group.name, tuple(sorted(parts, key=lambda p: -p.bytes)))


def available_memory_bytes() -> float | None:
    """Memory this process may still use: the smaller of the system's available memory
    (/proc/meminfo MemAvailable, else the physical memory) and the room left under a
    cgroup (v2) limit; None when neither can be read."""
    found = []
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                found.append(float(line.split()[1]) * 1024.0)
    except (OSError, ValueError, IndexError):
        pass
    if not found:
        try:
            found.append(float(os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")))
        except (OSError, ValueError, AttributeError):
            pass
    try:
        cgroup = Path("/sys/fs/cgroup")
        limit = (cgroup / "memory.max").read_text().strip()
        if limit != "max":
            found.append(float(limit) - float((cgroup / "memory.current").read_text()))
    except (OSError, ValueError):
        pass
    return min(found) if found else None


def format_bytes(count: float) -> str:
    """"43.7 TiB": binary prefixes up to EiB, then powers of ten of EiB."""
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if count < 1024.0:
            return f"{count:.3g} {unit}" if unit != "B" else f"{count:.0f} B"
        count /= 1024.0
    return f"{count:.3g} EiB"


def _refusal(names: str, need: float, parts, available: float) -> ConfigError:
    listed = ", ".join(f"{p.what} {format_bytes(p.bytes)}" for p in parts[:3])
    return ConfigError(
        f"{names} would need about {format_bytes(need)} of memory, more than the "
        f"{format_bytes(MEMORY_FRACTION * available)} this run may use "
        f"({MEMORY_FRACTION:.0%} of {format_bytes(available)} available): {listed}. "
        f"To fit, {parts[0].advice}")


def check_memory(groups, windows, settings, spectrum=None, *,
                 available_bytes: float | None = None) -> list[Estimate]:
    """The Estimate of every group; a ConfigError naming the group (or, when only their
    sum is too much, all groups) if the run cannot fit in MEMORY_FRACTION of the
    available memory (`available_bytes`, default: `available_memory_bytes()`)."""
    estimates = [estimate_group(group, start, n_bins, settings, spectrum)
                 for group, (start, n_bins) in zip(groups, windows, strict=True)]
    available = available_memory_bytes() if available_bytes is None else available_bytes
    if available is None:
        return estimates
    allowed = MEMORY_FRACTION * available
    for estimate in estimates:
        if estimate.total_bytes > allowed:
            raise _refusal(f"observer group '{estimate.group}'", estimate.total_bytes,
                           estimate.parts, available)
    total = (sum(e.held_bytes for e in estimates)
             + max((e.transient_bytes for e in estimates), default=0.0))
    if total > allowed:
        names = ", ".join(f"'{e.group}'" for e in estimates)
        parts = sorted((p for e in estimates for p in e.parts), key=lambda p: -p.bytes)
        raise _refusal(f"the observer groups {names} together", total, parts, available)
    return estimates
