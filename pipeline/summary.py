"""run.json: what a run read, how it ran and what it found, assembled once at its end.

Paths are relative to the folder of the run file (the current directory for a run given
as a dict); the list of files written is filled in by `OutputTarget.commit`.
"""

from __future__ import annotations

import dataclasses
import math
import os
import platform
from pathlib import Path

import numpy as np

from . import __version__
from .detectors import FILE_READERS
from .outputs import SAFETY_NOTE, caught_warnings, sha256

ENVIRONMENT_PREFIX = "LAGFIELD_"
# thread settings of the libraries lagfield computes with (numba, OpenMP, BLAS)
THREAD_VARIABLES = ("NUMBA_NUM_THREADS", "NUMBA_THREADING_LAYER", "NUMBA_DISABLE_JIT",
                    "OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS")


def environment(variables=None) -> dict[str, str]:
    """The environment variables that can change what a run does, as set."""
    variables = os.environ if variables is None else variables
    return {name: value for name, value in sorted(variables.items())
            if name.startswith(ENVIRONMENT_PREFIX) or name in THREAD_VARIABLES}


def _relative(path: Path, base: Path) -> str:
    return Path(os.path.relpath(Path(path).resolve(), base)).as_posix()


def group_record(result, align: str, n_particles: int) -> dict:
    """Time window and source sampling of one group's GroupFields: start, stop, step (s)
    and bins (per point when align is "point"); source samples in all and per particle per
    output bin (bins of the window that spans every point's); with spectra, the count of
    each quadrature route taken (spectra.SpectrumAccumulator.transforms)."""
    step = float(result.step_s)
    start = np.asarray(result.start_s, dtype=float)
    bins = np.asarray(result.n_bins, dtype=np.int64)
    stop = start + (bins - 1) * step
    window = {"start_s": float(start.min()), "stop_s": float(stop.max()), "step_s": step,
              "bins": int(round((stop.max() - start.min()) / step)) + 1}
    if align == "point":
        window["points"] = [{"point": p, "start_s": float(start[p]), "stop_s": float(stop[p]),
                             "bins": int(bins[p])} for p in range(bins.size)]
    samples = int(getattr(result, "source_samples", 0))
    per_bin = samples / (max(n_particles, 1) * window["bins"])
    record = {"points": int(bins.size), "window": window, "source_samples": samples,
              "source_samples_per_bin": per_bin}
    spectra = getattr(result, "spectra", None)
    if spectra is not None:  # how many spectra (particles × points, or one per point for a
        # buffer of particles) each route made
        spectra.flush()
        record["spectra_routes"] = {route: int(n) for route, n in
                                    sorted(spectra.transforms.items())}
    return record


def u_offset_record(run_file_s, tracks) -> dict:
    """The offset of the momentum samples a run used (s) and where it came from."""
    importer_s = getattr(tracks, "u_offset_s", None)
    if run_file_s is not None:
        return {"u_offset_s": float(run_file_s), "from": "run file"}
    if importer_s is not None:
        return {"u_offset_s": float(importer_s), "from": "importer"}
    return {"u_offset_s": 0.0, "from": "default"}


def _number(value: float) -> float | None:
    """A float for JSON: None for an infinite value (JSON has no infinity)."""
    return None if math.isinf(value) else float(value)


def _element_record(element, path, base: Path) -> dict:
    """One chain element as resolved: its kind and SI values; a file's path (relative to
    the run file's folder) and what was read from it."""
    if element.kind == "butterworth":
        return {"kind": element.kind, "order": element.order,
                "low_hz": element.low_hz, "high_hz": element.high_hz}
    if element.kind == "gain":
        return {"kind": element.kind, "factor": element.factor}
    record = {"kind": element.kind, "path": _relative(path, base)}
    if element.kind == "impulse_response":
        return dict(record, rows=int(element.t_s.size), t_first_s=float(element.t_s[0]),
                    t_last_s=float(element.t_s[-1]),
                    area=float(np.trapezoid(element.h_per_s, element.t_s)))
    return dict(record, frequencies=int(element.frequency_hz.size),
                f_first_hz=float(element.frequency_hz[0]),
                f_last_hz=float(element.frequency_hz[-1]))


def detector_record(detector, base: Path) -> dict:
    """A DetectorConfig as resolved, SI values: the observer group and points, the sensor
    (with its load), the chain in order and the digitizer."""
    sensor = {"kind": detector.sensor.kind}
    sensor.update({key: _number(value) if isinstance(value, float) else list(value)
                   for key, value in dataclasses.asdict(detector.sensor).items()})
    files = iter(detector.inputs)  # the files of the chain's file elements, in order
    digitizer = detector.digitizer
    return {
        "observer": detector.observer,
        "points": None if detector.points is None else list(detector.points),
        "sensor": sensor,
        "chain": [_element_record(element, next(files) if element.kind in FILE_READERS
                                  else None, base) for element in detector.chain],
        "digitizer": None if digitizer is None else {
            "rate_hz": digitizer.rate_hz, "bits": digitizer.bits,
            "range_v": [-digitizer.full_scale_v, digitizer.full_scale_v],
            "lsb_v": digitizer.lsb_v, "codes": list(digitizer.code_limits),
            "noise_v": digitizer.noise_v, "seed": digitizer.seed},
    }


def run_summary(run_file, config, *, tracks, results, registry, exporters=(), timings,
                output=None) -> dict:
    """The content of run.json. run_file: the run file's path (None for a dict); results:
    the GroupFields of every group; exporters: registry PluginInfo of the exporters used;
    output: the OutputTarget (None when nothing is written)."""
    base = Path(run_file).resolve().parent if run_file is not None else Path.cwd()
    inputs = [p for p in (config.tracks.path, run_file) if p is not None]
    inputs += [p for detector in config.detectors for p in detector.inputs]
    warnings = [f"plugin '{b.name}' ({b.distribution}) could not be loaded: {b.error}"
                for b in registry.broken]
    for source in (config, tracks, output):
        warnings += [str(w) for w in (getattr(source, "warnings", None) or ())]
    warnings += list(getattr(output, "notes", None) or ()) + caught_warnings()
    importer = getattr(tracks, "importer", None)
    return {
        "program": "lagfield", "version": __version__,
        "python": platform.python_version(),
        "run_file": None if run_file is None else str(run_file), "run": config.raw,
        "inputs": {_relative(p, base): {"sha256": sha256(Path(p))} if Path(p).is_file()
                   else {"series": True} for p in inputs},  # a pattern or a directory
        "importer": None if importer is None else str(importer),
        "exporters": [info.label for info in exporters],
        "particles": len(tracks),
        "u_offset": u_offset_record(config.tracks.u_offset_s, tracks),
        "observer_groups": [result.group.name for result in results],
        "groups": {result.group.name: group_record(result, config.time.align, len(tracks))
                   for result in results},
        "detectors": {d.name: detector_record(d, base) for d in config.detectors},
        "warnings": warnings, "timings": timings, "environment": environment(),
        "note": SAFETY_NOTE,
        "output_dir": None if output is None else _relative(output.directory, base),
        "files": [],
    }
