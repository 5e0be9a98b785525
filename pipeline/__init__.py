from .hookspecs import hookimpl
from .tracks import Track, Tracks, read_tracks

__version__ = "0.1.0"

__all__ = ["Track", "Tracks", "__version__", "hookimpl", "read_tracks"]
