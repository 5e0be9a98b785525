"""The memory estimate of lagfield.budget next to measured peaks.

Two workloads, each in a fresh process so that its peak resident memory is its own:
(1) the type-3 NUFFT of one point's spectrum over a window W up to a top frequency
f_max (the estimate's "NUFFT grid" part); (2) a whole in-process run of a plane of
observer points with a spectrum (the estimate's total), after a one-point warm-up run
(imports, compilation). Prints estimate and measured increase of the peak.
Run: python tests/benchmarks/bench_budget.py [--quick]
"""

from __future__ import annotations

import argparse
import pathlib
import resource
import subprocess
import sys
import tempfile

import numpy as np

MIB = 2.0**20


def peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def nufft(window_s: float, top_hz: float) -> None:
    from lagfield import budget, spectra
    from lagfield.config import ObserverConfig
    from lagfield.engine import FieldSettings
    from lagfield.observers import build_group

    t = np.sort(np.random.default_rng(1).random(40_000)) * window_s
    e = np.stack([np.sin(2e9 * t)] * 3, axis=1)
    f = np.linspace(0.0, top_hz, 2000)
    group = build_group(ObserverConfig("p", "points", points_m=((0.0, 0.0, 1.0),)))
    estimate = budget.estimate_group(group, np.zeros(1), np.array([11]),
                                     FieldSettings(step_s=window_s / 10, extend="none"),
                                     spectra.SpectrumSettings(f))
    part = next(p for p in estimate.parts if p.what.startswith("NUFFT"))
    spectra.window_spectrum(t[:10], e[:10], 0.0, window_s, f[:2])  # imports
    before = peak_mib()
    spectra.window_spectrum(t, e, 0.0, window_s, f)
    print(f"NUFFT W = {window_s:g} s, f_max = {top_hz:g} Hz: estimate "
          f"{part.bytes / MIB:7.0f} MiB, measured {peak_mib() - before:7.0f} MiB")


def _run_file(folder: pathlib.Path, name: str, side: int, step: str) -> pathlib.Path:
    path = folder / name
    path.write_text(
        '[tracks]\npath = "tracks.csv"\ncharge = "-1 e"\n[[observers]]\nname = "screen"\n'
        "plane = { center = [0.2, 0, 0.5], u = [1, 0, 0], v = [0, 1, 0], size = [0.2, 0.2], "
        f'shape = [{side}, {side}] }}\n[time]\nstep = "{step}"\nstart = "1 ns"\n'
        'stop = "3 ns"\n[spectrum]\nfrequencies = { start = "1 GHz", stop = "100 GHz", '
        "count = 500 }\n", encoding="utf-8")
    return path


def run(side: int, step: str) -> None:
    import pandas as pd
    from scipy import constants

    import lagfield
    import lagfield.runner
    from lagfield import budget

    seen = []

    def recording(*args, **kwargs):
        seen[:] = budget.check_memory(*args, **kwargs)
        return seen

    lagfield.runner.check_memory = recording
    folder = pathlib.Path(tempfile.mkdtemp())
    beta = 0.99
    t = np.linspace(-1e-9, 1e-9, 201)
    pd.DataFrame({"particle": 0, "t": t, "x": 0.0, "y": 0.0, "z": beta * constants.c * t,
                  "ux": 0.0, "uy": 0.0, "uz": beta / np.sqrt(1 - beta**2)}).to_csv(
        folder / "tracks.csv", index=False)
    lagfield.run(_run_file(folder, "small.toml", 1, "10 ps"), write=False)
    before = peak_mib()
    lagfield.run(_run_file(folder, "run.toml", side, step), write=False)
    total = sum(e.total_bytes for e in seen)
    print(f"run {side}x{side} points, step {step}: estimate {total / MIB:7.0f} MiB, "
          f"measured {peak_mib() - before:7.0f} MiB")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller workloads")
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    options = parser.parse_args()
    if options.child:
        kind, first, second = options.child
        if kind == "nufft":
            nufft(float(first), float(second))
        else:
            run(int(first), second)
        return
    scale = 0.25 if options.quick else 1.0
    jobs = [("nufft", "1e-6", f"{top * scale:g}") for top in (5e12, 2e13)]
    jobs += [("run", str(max(1, int(side * scale**0.5))), step)
             for side, step in ((21, "1 ps"), (41, "0.25 ps"))]
    for job in jobs:
        subprocess.run([sys.executable, __file__, "--child", *job], check=True)


if __name__ == "__main__":
    main()
