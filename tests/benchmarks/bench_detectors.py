"""Time of the detector tables per point and per field sample.

Workload: one observer group of P points with N field samples each (a Gaussian pulse on
noise), read by an electrode with an R‖C load, through a band-pass Butterworth, a tabulated
impulse response, a Touchstone cable (written here with scikit-rf) and a gain, then a
digitizer; each stage is also timed alone. One core. Run:
python tests/benchmarks/bench_detectors.py [--points P] [--bins N]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from lagfield.detectors import detector_tables, parse_detectors
from lagfield.engine import GroupFields

STEP_S = 1e-12


def fields(points: int, bins: int) -> GroupFields:
    rng = np.random.default_rng(2)
    t = STEP_S * np.arange(bins)
    e = 1e-3 * rng.normal(size=(points, bins, 3))
    e[:, :, 1] += 1e5 * np.exp(-0.5 * ((t - t[bins // 3]) / 20e-12) ** 2)
    return GroupFields(group=None, step_s=STEP_S, start_s=np.zeros(points),
                       n_bins=np.full(points, bins), e_v_per_m=e, b_t=np.zeros_like(e))


def write_files(folder: Path) -> None:
    import skrf

    t = 0.5e-12 * np.arange(400)
    np.savetxt(folder / "amp.csv", np.column_stack([t, np.exp(-t / 30e-12) / 30e-12]),
               delimiter=",", header="t,h", comments="")
    f = np.linspace(0.0, 0.5 / STEP_S, 2001)
    s = np.zeros((f.size, 2, 2), dtype=complex)
    s[:, 1, 0] = s[:, 0, 1] = 0.8 * np.exp(-2j * np.pi * f * 150e-12 - f / 2e12)
    skrf.Network(frequency=skrf.Frequency.from_f(f, unit="hz"), s=s).write_touchstone(
        filename="cable", dir=folder)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=200)
    parser.add_argument("--bins", type=int, default=20_000)
    args = parser.parse_args()
    group = fields(args.points, args.bins)
    stages = {
        "sensor only": [],
        "butterworth": [{"butterworth": {"band": ["1 GHz", "20 GHz"], "order": 4}}],
        "impulse_response": [{"impulse_response": {"path": "amp.csv"}}],
        "touchstone": [{"touchstone": {"path": "cable.s2p"}}],
        "whole chain": [{"butterworth": {"band": ["1 GHz", "20 GHz"], "order": 4}},
                        {"impulse_response": {"path": "amp.csv"}},
                        {"touchstone": {"path": "cable.s2p"}}, {"gain": "20 dB"}],
    }
    with tempfile.TemporaryDirectory() as folder:
        write_files(Path(folder))
        print(f"{args.points} points × {args.bins} samples")
        for label, chain in stages.items():
            entry = {"name": "button", "observer": "g", "chain": chain,
                     "sensor": {"electrode": {"area": "80 mm2", "normal": [0, -1, 0]}},
                     "load": {"resistance": "50 ohm", "capacitance": "4 pF"}}
            if label == "whole chain":
                entry["digitizer"] = {"rate": "100 GHz", "bits": 12, "range": ["-1 V", "1 V"],
                                      "noise": "1 mV"}
                label += " + digitizer"
            detectors = parse_detectors([entry], base_dir=folder, where="bench")
            start = time.perf_counter()
            detector_tables(detectors, {"g": group})
            elapsed = time.perf_counter() - start
            print(f"  {label:32s} {elapsed:7.3f} s   {elapsed / args.points * 1e3:7.3f} ms/point"
                  f"   {args.points * args.bins / elapsed / 1e6:7.2f} M samples/s")


if __name__ == "__main__":
    main()
