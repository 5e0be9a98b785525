"""Error classes: every failure a user can cause has one of these, with a message that
says what is wrong and where (file, column, particle, row or time)."""

from __future__ import annotations


class LagfieldError(Exception):
    """Base class of every error lagfield reports to a user (exit code 2 on the CLI)."""

    exit_code = 2


class ConfigError(LagfieldError):
    """The run file is wrong: unknown key, bad type or unit, missing value."""


class UnitError(ConfigError):
    """A unit string that cannot be read, or one of the wrong dimension."""


class DetectorError(ConfigError):
    """A detector cannot be built or run: a bad `[[detectors]]` entry, a file it reads
    (impulse response, Touchstone) that is wrong, or a step too coarse for its band or rate."""


class TrackError(LagfieldError):
    """A track file is unreadable or its content is physically impossible.

    The message names the file, the column, the particle and the data row (counted
    from 1, header excluded) or the time, whichever apply.
    """

    exit_code = 3

    def __init__(self, message: str, *, path=None, column=None, particle=None, row=None,
                 time_s=None):
        where = []
        if path is not None:
            where.append(f"file {path}")
        if column is not None:
            where.append(f"column '{column}'")
        if particle is not None:
            where.append(f"particle {particle}")
        if row is not None:
            where.append(f"row {row}")
        if time_s is not None:
            where.append(f"t = {time_s:.9g} s")
        self.path, self.column, self.particle, self.row, self.time_s = (
            path, column, particle, row, time_s)
        self.reason = message
        super().__init__(f"{message} ({', '.join(where)})" if where else message)


class MotionError(LagfieldError):
    """The reconstructed motion is unphysical (speed reaching c)."""

    exit_code = 4


class ObserverError(LagfieldError):
    """An observer group is empty or badly placed (a track reaches one of its points)."""

    exit_code = 5


class PluginError(LagfieldError):
    """A plugin that a run selected is missing, broken or ambiguous."""

    exit_code = 6


class OutputError(LagfieldError):
    """The output directory cannot be written, or holds results and --overwrite is absent."""

    exit_code = 7
