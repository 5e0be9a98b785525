"""lagfield: Liénard–Wiechert fields, spectra and radiated energy from sampled tracks.

Importing lagfield stays light: numba, matplotlib and pyarrow load only when a run, a
kernel or a plugin needs them.
"""

from .errors import (
    ConfigError,
    LagfieldError,
    MotionError,
    ObserverError,
    OutputError,
    PluginError,
    TrackError,
    UnitError,
)
from .hookspecs import hookimpl
from .signals import Signals
from .tracks import Track, Tracks, open_tracks, read_tracks

__version__ = "0.1.0"


def run(source, **options) -> Signals:
    """Run the job of a run file and return its tables (a Signals of pandas DataFrames).

    source: the run file's path, or its content as a dict (relative paths then resolve
    against base_dir=..., default the current directory). Options: write=False keeps the
    tables in memory only; overwrite, workers, scheduler, progress(done, total) and
    registry as described in `lagfield.runner.run`.
    """
    from .runner import run as _run

    return _run(source, **options)


__all__ = [
    "ConfigError", "LagfieldError", "MotionError", "ObserverError", "OutputError",
    "PluginError", "Signals", "Track", "TrackError", "Tracks", "UnitError", "__version__",
    "hookimpl", "open_tracks", "read_tracks", "run",
]
