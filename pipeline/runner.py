"""`lagfield.run(path)`: the whole job of a run file — read and check the tracks, compute
the fields (and spectra), assemble SPEC's tables and hand them to the exporters."""

from __future__ import annotations

import contextlib
import time
from collections.abc import Mapping
from pathlib import Path

import pandas as pd

from . import config as config_module
from .budget import check_memory
from .detectors import detector_tables
from .distributed import check_scheduler_address, check_workers
from .engine import FieldSettings, TrackEnds, compute_fields, group_windows
from .errors import ConfigError, DetectorError
from .fluence import fluence_table
from .observers import build_group
from .outputs import guarded, open_output, result_bytes
from .registry import get_registry
from .resolution import ResolutionAudit, ShortTracks
from .signals import Signals
from .spectra import SpectrumSettings, frequency_list
from .summary import run_summary
from .tables import fields_table, spectra_table
from .tracks import open_tracks


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
                           u_offset_s=config.tracks.u_offset_s,
                           max_frequency_hz=None if spectrum is None
                           else float(spectrum.frequencies_hz.max()))
    return fields, spectrum


def load_run(source, base_dir=None):
    """(RunConfig, path of the run file or None) of `source`: a run file's path, or its
    content as a dict (as tomllib reads it), whose relative paths resolve against
    `base_dir` (default: the current directory)."""
    if isinstance(source, Mapping):
        base = Path.cwd() if base_dir is None else Path(base_dir)
        return config_module.parse(dict(source), base_dir=base.resolve()), None
    if base_dir is not None:
        raise ConfigError("base_dir applies to a run given as a dict; the paths in a run "
                          "file are relative to the run file")
    return config_module.load(source), Path(source)


def placement(workers, scheduler, compute) -> tuple:
    """(workers, scheduler) of a run, at most one of them set: values given here (the
    command line's) override the run file's [compute]."""
    if workers is not None and scheduler is not None:
        raise ConfigError("give either workers or a scheduler address, not both")
    if workers is not None:
        return check_workers(workers, "workers"), None
    if scheduler is not None:
        return None, check_scheduler_address(scheduler, "scheduler")
    if compute.workers is not None and compute.scheduler is not None:
        raise ConfigError("[compute]: give either workers or scheduler, not both")
    return compute.workers, compute.scheduler


def _counter(progress, total: int):
    """An advance(n) callback that reports progress(done, total), or None."""
    if progress is None:
        return None
    done = 0
    progress(done, total)

    def advance(n: int) -> None:
        nonlocal done
        done += n
        progress(done, total)

    return advance


@guarded  # the output directory is released (and its lock) however the run ends
def run(source, *, base_dir=None, overwrite: bool = False, write: bool = True,
        workers: int | None = None, scheduler: str | None = None, progress=None,
        registry=None) -> Signals:
    """Run the job of a run file and return its tables as a Signals (pandas DataFrames);
    when `write`, also write them to [output] dir through the exporters.

    source: the run file's path, or its content as a dict, whose relative paths then
    resolve against `base_dir` (default: the current directory).
    workers (local processes) or scheduler (a Dask scheduler address) override the run
    file's [compute]; give at most one.
    progress(done, total): called as the fields advance, counting particles × observer
    groups (a particle done for one group is one unit).
    """
    started = time.perf_counter()
    timings = {}
    config, run_file = load_run(source, base_dir)
    workers, scheduler = placement(workers, scheduler, config.compute)
    registry = registry or get_registry()
    exporters = [registry.exporter_info(name) for name in config.output.formats] if write else []
    target = open_output(config.output.dir, overwrite=overwrite) if write else None
    groups = [build_group(observer) for observer in config.observers]
    options = dict(config.tracks.read_options(), min_samples=2, registry=registry)
    collected = TrackEnds()  # gathered during the validation pass: no pass of its own
    audits = (ShortTracks(config.motion.degree), ResolutionAudit(config.motion.degree))

    def visit(track):
        collected.add(track)
        for audit in audits:
            audit.add(track)

    with contextlib.ExitStack() as cluster:
        client = None
        if workers is not None or scheduler is not None:
            from .distributed import connect, start_warm_up

            t0 = time.perf_counter()
            client = cluster.enter_context(connect(workers, scheduler))
            warming = start_warm_up(client)  # the workers load the engine meanwhile
            timings["cluster_s"] = time.perf_counter() - t0
        tracks = open_tracks(config.tracks.path, visit=visit, **options)
        tracks.warnings = [w for audit in audits for w in audit.warnings()]
        ends, particle_ids = collected.ends(), collected.ids()
        timings["read_s"] = time.perf_counter() - started - timings.get("cluster_s", 0.0)
        settings, spectrum = settings_from(config)
        windows = group_windows(groups, ends, settings)
        check_memory(groups, windows, settings, spectrum)  # before any grid is allocated
        if target is not None:  # a full disk is found before the computation
            target.check_space(result_bytes(windows, config.spectrum.count if config.spectrum
                                            else 0, config.output.formats))
        advance = _counter(progress, len(tracks) * len(groups))
        t0 = time.perf_counter()
        if workers is None and scheduler is None:
            results = compute_fields(tracks, groups, settings, spectrum=spectrum,
                                     windows=windows, progress=advance)
        else:
            from .distributed import compute_distributed

            read_options = {k: v for k, v in options.items() if k != "registry"}
            per_chunk = None if advance is None else (lambda n: advance(n * len(groups)))
            results = compute_distributed(client, config.tracks.path, read_options,
                                          particle_ids, groups, settings, spectrum=spectrum,
                                          windows=windows, chunk=config.compute.chunk,
                                          n_rows=tracks.n_rows,
                                          progress=per_chunk)  # n particles of a chunk
            del warming  # done before the field tasks
        timings["compute_s"] = time.perf_counter() - t0
    # the cluster is closed: its work is done
    observers = pd.concat([group.table() for group in groups], ignore_index=True)
    spectra = None
    if spectrum is not None:
        spectra = spectra_table([r.spectra for r in results])
    signals = Signals(observers=observers, fields=fields_table(results), spectra=spectra,
                      fluence=fluence_table(results))
    if config.detectors:  # checked against the signal now, before anything is written
        t0 = time.perf_counter()
        by_group = {result.group.name: result for result in results}
        try:
            signals.voltages, signals.digitized = detector_tables(config.detectors, by_group)
        except DetectorError as exc:
            raise DetectorError(f"{run_file or 'run'}: {exc}") from None
        timings["detectors_s"] = time.perf_counter() - t0
    timings["total_s"] = time.perf_counter() - started
    signals.summary = run_summary(run_file, config, tracks=tracks, results=results,
                                  registry=registry, exporters=exporters, timings=timings,
                                  output=target)
    if target is not None:
        target.commit(signals, exporters, config.plugins)
    return signals
