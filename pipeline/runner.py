"""`lagfield.run(path)`: the whole job of a run file — read and check the tracks, compute
the fields (and spectra), assemble SPEC's tables and hand them to the exporters."""

from __future__ import annotations

import os
import platform
import time
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from . import config as config_module
from .engine import FieldSettings, TrackEnds, compute_fields, group_windows
from .errors import ConfigError
from .observers import build_group
from .outputs import SAFETY_NOTE, check_target, sha256, write_results
from .registry import get_registry
from .signals import Signals
from .spectra import SpectrumSettings, frequency_list
from .tracks import open_tracks

FIELD_COLUMNS = ["Ex", "Ey", "Ez", "Bx", "By", "Bz"]


def fields_table(results) -> pd.DataFrame:
    """SPEC's fields table from the engine's GroupFields."""
    frames = []
    for result in results:
        for point in range(result.group.n_points):
            n = int(result.n_bins[point])
            values = np.concatenate([result.e_v_per_m[point, :n], result.b_t[point, :n]], axis=1)
            frame = pd.DataFrame(values, columns=FIELD_COLUMNS)
            frame.insert(0, "t", result.times(point))
            frame.insert(0, "point", np.int64(point))
            frame.insert(0, "observer", result.group.name)
            frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def settings_from(config):
    """(FieldSettings, SpectrumSettings or None) of a RunConfig."""
    spectrum = None
    if config.spectrum is not None:
        s = config.spectrum
        spectrum = SpectrumSettings(frequency_list(s.start_hz, s.stop_hz, s.count, s.spacing),
                                    coherent=s.coherent, taper=s.taper)
    fields = FieldSettings(step_s=config.time.step_s, start_s=config.time.start_s,
                           stop_s=config.time.stop_s, align=config.time.align,
                           far_field=config.far_field, degree=config.motion.degree,
                           extend=config.motion.extend, smoothing_m=config.motion.smoothing_m,
                           max_frequency_hz=None if spectrum is None
                           else float(spectrum.frequencies_hz.max()))
    return fields, spectrum


def run(path, *, overwrite: bool = False, write: bool = True, workers: int | None = None,
        scheduler: str | None = None, progress=None, registry=None) -> Signals:
    """Run the job described by the run file at `path`; returns the tables as a Signals
    (pandas DataFrames) and, when `write`, writes them to [output] dir through the
    exporters. `progress(n)` is called as particles complete."""
    started = time.perf_counter()
    timings = {}
    config = config_module.load(path)
    registry = registry or get_registry()
    exporters = [registry.exporter(name) for name in config.output.formats] if write else []
    if write:
        check_target(config.output.dir, overwrite)
    groups = [build_group(observer) for observer in config.observers]
    options = dict(format=config.tracks.format, columns=config.tracks.columns,
                   units=config.tracks.units, charge=config.tracks.charge_c,
                   min_samples=config.motion.degree + 1, u_tolerance=config.tracks.u_tolerance,
                   registry=registry)
    collected = TrackEnds()  # gathered during the validation pass: no pass of its own
    tracks = open_tracks(config.tracks.path, visit=collected.add, **options)
    ends, particle_ids = collected.ends(), collected.ids()
    timings["read_s"] = time.perf_counter() - started
    settings, spectrum = settings_from(config)
    windows = group_windows(groups, ends, settings)
    workers = workers if workers is not None else config.compute.workers
    scheduler = scheduler if scheduler is not None else config.compute.scheduler
    if workers is not None and scheduler is not None:
        raise ConfigError("give either workers or a scheduler address, not both")
    t0 = time.perf_counter()
    if workers is None and scheduler is None:
        results = compute_fields(tracks, groups, settings, spectrum=spectrum,
                                 windows=windows, progress=progress)
    else:
        from .distributed import compute_distributed, connect

        read_options = {k: v for k, v in options.items() if k != "registry"}
        with connect(workers, scheduler) as client:
            results = compute_distributed(client, config.tracks.path, read_options,
                                          particle_ids, groups, settings, spectrum=spectrum,
                                          windows=windows, chunk=config.compute.chunk,
                                          progress=progress)
    timings["compute_s"] = time.perf_counter() - t0
    observers = pd.concat([group.table() for group in groups], ignore_index=True)
    spectra = None
    if spectrum is not None:
        spectra = pd.concat([r.spectra.table() for r in results], ignore_index=True)
    signals = Signals(observers=observers, fields=fields_table(results), spectra=spectra)
    warnings = [f"plugin '{b.name}' ({b.distribution}) could not be loaded: {b.error}"
                for b in registry.broken]
    timings["total_s"] = time.perf_counter() - started
    signals.summary = {
        "program": "lagfield", "version": __version__,
        "python": platform.python_version(),
        "run_file": str(Path(path)), "run": config.raw,
        "inputs": {str(config.tracks.path): {"sha256": sha256(config.tracks.path)},
                   str(Path(path)): {"sha256": sha256(Path(path))}},
        "particles": len(tracks), "observer_groups": [g.name for g in groups],
        "warnings": warnings, "timings": timings,
        "environment": {k: v for k, v in os.environ.items() if k.startswith("LAGFIELD_")},
        "note": SAFETY_NOTE,
        "output_dir": str(config.output.dir) if write else None,
    }
    signals.summary["files"] = []
    if write:
        signals.summary["files"] = write_results(signals, config.output.dir, exporters,
                                                 config.plugins, overwrite=overwrite)
    return signals
