"""End-to-end speed of lagfield against straightforward NumPy implementations of the same job.

Each invented scenario (tests/benchmarks/numpy_reference.py) is written once as a Parquet
track table in a temporary directory, then run in this process through the public API,
`lagfield.run(run_dict, base_dir=..., write=False)`, and through the NumPy reference, which
reads the same file. Printed per case: both times, their ratio (NumPy / lagfield: above 1,
lagfield is faster), the relative L2 difference of the results, and the NumPy reference's
own sampling error (the same reference at twice its sampling, on a few points). Before
each case lagfield runs once on a tiny version of it, so compilation and imports are not
timed.

  (a) wiggler, 6 electrons × 2000 samples, 67 near points (8 × 8 screen + 3 pickups), one
      window of ~72,000 steps (~5e6 field samples); fields, then fields and 50 spectra;
  (b) 100 electrons on helices × 1000 samples, 96 far-field directions, 300 frequencies,
      coherent;
  (c) a bunch of N electrons × 50 samples through a quadrupole doublet, 4 buttons, time
      domain: seconds per particle, extrapolated to 1e6 particles;
  (d) N betatron electrons × 200 samples, 128 directions in a cone, 200 frequencies,
      incoherent: cost per particle at each N, extrapolated to 1e6.

Run: python tests/benchmarks/bench_end_to_end.py [--quick | --full] [--cases a,b,c,d]
[--profile] [--max-seconds S] [--workers N]. lagfield uses all cores (numba threads in one
process, or N local Dask worker processes; printed); the NumPy reference one (plus whatever
threads its BLAS uses for the matrix products).
"""

from __future__ import annotations

import argparse
import contextlib
import cProfile
import io
import os
import pstats
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
import numpy_reference as ref  # noqa: E402

import lagfield  # noqa: E402

# Sizes per mode: (builder keyword arguments) for each case; c and d are series in N.
SIZES = {
    "quick": {
        "a": dict(n_particles=1, n_samples=500, screen_shape=(4, 4), step_s=12e-15),
        "a+": dict(n_particles=1, n_samples=500, screen_shape=(4, 4), step_s=12e-15,
                   n_frequencies=10),
        "b": dict(n_particles=4, n_samples=400, n_frequencies=40, sphere=(3, 4)),
        "c": [dict(n_particles=20)],
        "d": [dict(n_particles=5, n_frequencies=40, cone=(3, 4)),
              dict(n_particles=20, n_frequencies=40, cone=(3, 4))],
    },
    "default": {
        "a": dict(), "a+": dict(n_frequencies=50), "b": dict(),
        "c": [dict(n_particles=1000), dict(n_particles=10_000)],
        "d": [dict(n_particles=100), dict(n_particles=1000)],
    },
}
SIZES["full"] = dict(SIZES["default"],
                     c=SIZES["default"]["c"] + [dict(n_particles=100_000)],
                     d=SIZES["default"]["d"] + [dict(n_particles=10_000)])
WARM_UP = {"a": dict(n_particles=1, n_samples=200, screen_shape=(2, 2), step_s=60e-15),
           "a+": dict(n_particles=1, n_samples=200, screen_shape=(2, 2), step_s=60e-15,
                      n_frequencies=5),
           "b": dict(n_particles=2, n_samples=200, n_frequencies=10, sphere=(2, 2)),
           "c": dict(n_particles=4), "d": dict(n_particles=2, n_frequencies=10, cone=(2, 2))}
BUILDERS = {"a": ref.wiggler, "a+": ref.wiggler, "b": ref.helices, "c": ref.doublet,
            "d": ref.betatron}
MILLION = 1_000_000


# ------------------------------------------------------------------------------ the two sides
def write_tracks(scenario, directory: Path) -> Path:
    path = directory / "tracks.parquet"
    scenario.tracks.to_parquet(path, index=False)
    return path


def run_lagfield(scenario, directory: Path, profile: bool = False, workers: int = 0):
    """(seconds, Signals) of lagfield.run on the scenario, or (None, message) on an error;
    workers > 0: on that many local Dask workers ([compute] workers)."""
    run = scenario.run_dict("tracks.parquet")
    if workers:
        run["compute"] = {"workers": workers}
    profiler = cProfile.Profile() if profile else None
    start = time.perf_counter()
    try:
        with profiler or contextlib.nullcontext():
            signals = lagfield.run(run, base_dir=directory, write=False)
    except lagfield.LagfieldError as exc:
        return None, f"{type(exc).__name__}: {exc}"
    seconds = time.perf_counter() - start
    if profiler is not None:
        print_profile(profiler)
    return seconds, signals


def run_numpy(scenario, tracks_path: Path, groups=None, refined: bool = False):
    """(seconds, {group: arrays}) of the NumPy reference reading the same track file;
    refined: twice the reference's sampling (its own error estimate)."""
    start = time.perf_counter()
    tracks = pd.read_parquet(tracks_path)
    if scenario.far_field:
        samples = 2 * int(tracks.groupby("particle").size().max()) if refined else None
        result = ref.far_spectra(scenario, tracks, groups, samples_per_track=samples)
    else:
        result = ref.near_fields(scenario, tracks, groups, per_half=6 if refined else 3,
                                 seed_per_interval=16 if refined else 8)
    return time.perf_counter() - start, result


def kernel_share(profiler) -> tuple[float, float]:
    """(inside, waiting): fractions of the profiled time spent inside lagfield's compiled
    kernels called from the main thread (own time of the functions defined in
    lagfield/kernels/), and waiting for other threads. cProfile sees the main thread only;
    the source sampling of a batch runs in a thread pool, whose threads run compiled kernels
    only (in runs without spectra), so the wait is kernel time too there."""
    stats = pstats.Stats(profiler).stats
    kernels = str(Path(lagfield.__file__).parent / "kernels") + os.sep
    inside = sum(row[2] for (filename, _, _), row in stats.items()
                 if filename.startswith(kernels))
    waiting = sum(row[2] for (_, _, name), row in stats.items()
                  if name == "<method 'acquire' of '_thread.lock' objects>")
    total = sum(row[2] for row in stats.values())
    return (inside / total, waiting / total) if total else (0.0, 0.0)


def print_profile(profiler, top: int = 8) -> None:
    inside, waiting = kernel_share(profiler)
    print(f"      compiled kernels: {inside:.0%} of the run's time in the main thread, and "
          f"{waiting:.0%} waiting for the sampling threads (own time under cProfile)")
    out = io.StringIO()
    pstats.Stats(profiler, stream=out).sort_stats("tottime").print_stats(top)
    lines = [line for line in out.getvalue().splitlines() if line.strip()]
    start = next(i for i, line in enumerate(lines) if line.lstrip().startswith("ncalls"))
    print("      lagfield profile (top by own time):")
    for line in lines[start:start + top + 1]:
        print("      " + line.replace(str(Path(lagfield.__file__).parent) + os.sep, "lagfield/"))


# ------------------------------------------------------------------------------ comparison
def lagfield_arrays(signals, scenario, group):
    """The same arrays as the NumPy reference's, from lagfield's tables."""
    n_points = len(group.points_m)
    table = signals.observers[signals.observers["observer"] == group.name]
    points = table.sort_values("point")[["x", "y", "z"]].to_numpy()
    if not np.allclose(points, group.points_m, rtol=0.0, atol=1e-12):
        raise SystemExit(f"observer group '{group.name}': lagfield's points differ from the "
                         "reference's geometry")
    if scenario.far_field:
        table = signals.spectra[signals.spectra["observer"] == group.name]
        table = table.sort_values(["point", "f"])
        if scenario.coherent:
            values = np.stack([table[f"E{a}_re"].to_numpy() + 1j * table[f"E{a}_im"].to_numpy()
                               for a in "xyz"], axis=1)
            return values.reshape(n_points, -1, 3)
        return table["fluence"].to_numpy().reshape(n_points, -1)
    fields = signals.fields[signals.fields["observer"] == group.name]
    fields = fields.sort_values(["point", "t"])
    t = fields["t"].to_numpy().reshape(n_points, -1)
    expected = scenario.start_s + scenario.step_s * np.arange(scenario.n_bins)
    if t.shape[1] != scenario.n_bins or np.max(np.abs(t - expected)) > 1e-6 * scenario.step_s:
        raise SystemExit(f"observer group '{group.name}': lagfield's time grid differs")
    e = fields[["Ex", "Ey", "Ez"]].to_numpy().reshape(n_points, -1, 3)
    b = fields[["Bx", "By", "Bz"]].to_numpy().reshape(n_points, -1, 3)
    spectrum = None
    if scenario.frequencies_hz is not None:
        table = signals.spectra[signals.spectra["observer"] == group.name]
        table = table.sort_values(["point", "f"])
        spectrum = np.stack([table[f"E{a}_re"].to_numpy() + 1j * table[f"E{a}_im"].to_numpy()
                             for a in "xyz"], axis=1).reshape(n_points, -1, 3)
    return e, b, spectrum


def agreement(signals, scenario, reference) -> str:
    """Relative L2 differences, per group and quantity."""
    parts = []
    for group in scenario.groups:
        ours, theirs = lagfield_arrays(signals, scenario, group), reference[group.name]
        if scenario.far_field:
            what = "Ẽ" if scenario.coherent else "F"
            parts.append(f"{group.name} {what} {ref.relative_l2(ours, theirs):.1e}")
            continue
        text = (f"{group.name} E {ref.relative_l2(ours[0], theirs[0]):.1e}"
                f" B {ref.relative_l2(ours[1], theirs[1]):.1e}")
        if ours[2] is not None:
            text += f" Ẽ {ref.relative_l2(ours[2], theirs[2]):.1e}"
        parts.append(text)
    return "; ".join(parts)


def self_error(scenario, tracks_path, reference) -> str:
    """The reference against itself at twice its sampling, on the three points of each
    group where its result is largest."""
    parts = []
    for group in scenario.groups:
        values = reference[group.name]
        values = values if scenario.far_field else values[0]
        size = np.linalg.norm(np.abs(values).reshape(len(group.points_m), -1), axis=1)
        keep = np.sort(np.argsort(size)[-3:])
        subset = ref.Group(group.spec, group.points_m[keep], group.origin_m)
        _, fine = run_numpy(scenario, tracks_path, [subset], refined=True)
        coarse = reference[group.name]
        fine = fine[group.name]
        if scenario.far_field:
            parts.append(f"{group.name} {ref.relative_l2(coarse[keep], fine):.1e}")
        else:
            error = ref.relative_l2(coarse[0][keep], fine[0])
            if fine[2] is not None:
                error = max(error, ref.relative_l2(coarse[2][keep], fine[2]))
            parts.append(f"{group.name} {error:.1e}")
    return "; ".join(parts)


# ------------------------------------------------------------------------------ cases
def run_case(key, sizes, options, workdir: Path) -> list:
    """Rows (case, size, lagfield s, numpy s, agreement, self error) of one case."""
    series = sizes if isinstance(sizes, list) else [sizes]
    warm = BUILDERS[key](**WARM_UP[key])
    warm_dir = workdir / f"{key}-warm"
    warm_dir.mkdir()
    write_tracks(warm, warm_dir)
    started = time.perf_counter()
    run_lagfield(warm, warm_dir, workers=options.workers)
    print(f"  case {key}: warm-up run {time.perf_counter() - started:.1f} s (not counted)")
    rows, lag_per_particle, numpy_per_particle = [], None, None
    for index, size in enumerate(series):
        scenario = BUILDERS[key](**size)
        n = scenario.tracks["particle"].nunique()
        label = (f"{n} × {len(scenario.tracks) // n} samples, "
                 f"{sum(len(g.points_m) for g in scenario.groups)} points, "
                 f"{scenario.field_samples():.2g} field samples"
                 + ("" if scenario.frequencies_hz is None
                    else f", {scenario.frequencies_hz.size} frequencies"))
        directory = workdir / f"{key}-{index}"
        directory.mkdir()
        path = write_tracks(scenario, directory)
        print(f"  case {key} ({scenario.description}): {label}", flush=True)
        if key == "c" and index == 0 and not options.profile:  # an extra, untimed run
            run_lagfield(scenario, directory, profile=True)  # in process, to see the kernels
        row = {"case": key, "n": n, "label": label}
        projected = None if lag_per_particle is None else lag_per_particle * n
        if projected is not None and projected > options.max_seconds:
            row["lagfield"] = f"skipped (projected {projected:.0f} s)"
        else:
            seconds, signals = run_lagfield(scenario, directory,
                                            profile=options.profile and index == 0,
                                            workers=options.workers)
            if seconds is None:
                row["lagfield"] = f"failed: {signals}"
                print(f"    lagfield failed: {signals}")
            else:
                row["lagfield_s"] = seconds
                lag_per_particle = seconds / n
        projected = None if numpy_per_particle is None else numpy_per_particle * n
        if "lagfield_s" not in row and "failed" not in row["lagfield"]:
            row["numpy"] = "skipped with lagfield" + (
                "" if projected is None else f" (projected {projected:.0f} s)")
        elif projected is not None and projected > options.max_seconds:
            row["numpy"] = f"skipped (projected {projected:.0f} s)"
        else:
            row["numpy_s"], reference = run_numpy(scenario, path)
            numpy_per_particle = row["numpy_s"] / n
            if "lagfield_s" in row:
                row["agreement"] = agreement(signals, scenario, reference)
            if index == 0:
                row["self"] = self_error(scenario, path, reference)
        print_row(row)
        rows.append(row)
    return rows


def print_row(row) -> None:
    lag, num = row.get("lagfield_s"), row.get("numpy_s")
    text = f"    lagfield {lag:.2f} s" if lag is not None else f"    lagfield {row['lagfield']}"
    text += f", numpy {num:.2f} s" if num is not None else f", numpy {row['numpy']}"
    if lag is not None and num is not None:
        text += f", ratio numpy/lagfield {num / lag:.2f}"
    print(text)
    per = [f"{name} {row[key] / row['n'] * 1e3:.3g} ms/particle"
           for name, key in (("lagfield", "lagfield_s"), ("numpy", "numpy_s")) if key in row]
    if row["case"] in ("c", "d") and per:
        print("    " + ", ".join(per))
    if "agreement" in row:
        print(f"    agreement (relative L2): {row['agreement']}")
    if "self" in row:
        print(f"    numpy reference vs itself at twice its sampling: {row['self']}")


def summary(rows) -> None:
    print("\nSummary")
    print(f"  {'case':<4} {'particles':>9} {'lagfield s':>11} {'numpy s':>9} {'ratio':>7}  "
          "agreement (relative L2)")
    for row in rows:
        lag, num = row.get("lagfield_s"), row.get("numpy_s")
        ratio = f"{num / lag:7.2f}" if lag and num else f"{'-':>7}"
        print(f"  {row['case']:<4} {row['n']:>9} "
              + (f"{lag:11.2f}" if lag is not None else f"{'-':>11}")
              + (f" {num:9.2f}" if num is not None else f" {'-':>9}")
              + f" {ratio}  {row.get('agreement', row.get('lagfield', ''))}"
              + (f"  [numpy vs itself: {row['self']}]" if "self" in row else ""))
    for key in ("c", "d"):
        series = [r for r in rows if r["case"] == key]
        for name, column in (("lagfield", "lagfield_s"), ("numpy", "numpy_s")):
            timed = [r for r in series if column in r]
            if timed:
                last = timed[-1]
                per = last[column] / last["n"]
                print(f"  case {key}, {name}: {per * 1e3:.3g} ms per particle at N = "
                      f"{last['n']}; 1e6 particles ≈ {per * MILLION / 3600:.2f} h "
                      "(extrapolated linearly)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--quick", action="store_true", help="tiny sizes (a smoke run)")
    mode.add_argument("--full", action="store_true", help="also N = 1e5 (c) and 1e4 (d)")
    parser.add_argument("--cases", default="a,a+,b,c,d",
                        help="comma-separated cases among a, a+ (a with spectra), b, c, d")
    parser.add_argument("--profile", action="store_true",
                        help="print lagfield's cProfile top entries (first size of each case; "
                        "that timed run then includes cProfile's overhead)")
    parser.add_argument("--max-seconds", type=float, default=1800.0,
                        help="skip a size whose time, projected from the previous size, "
                        "exceeds this (default 1800)")
    parser.add_argument("--workers", type=int, default=0,
                        help="run lagfield on this many local Dask workers (default: in "
                        "process, numba threads on all cores)")
    options = parser.parse_args()
    sizes = SIZES["quick" if options.quick else "full" if options.full else "default"]
    import numba

    placement = (f"{options.workers} Dask workers" if options.workers else
                 f"in process, numba threads {numba.get_num_threads()}")
    print(f"lagfield {lagfield.__version__}; {placement}; {os.cpu_count()} cores; "
          f"load average {os.getloadavg()[0]:.1f}")
    rows = []
    with tempfile.TemporaryDirectory(prefix="lagfield-bench-") as tmp:
        for key in options.cases.split(","):
            rows += run_case(key.strip(), sizes[key.strip()], options, Path(tmp))
    summary(rows)


if __name__ == "__main__":
    main()
