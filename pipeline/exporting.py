"""Running exporter plugins contained.

Each exporter gets its own copy of the results (tables shared copy-on-write, a deep copy
of the summary), so nothing it changes reaches the next exporter or the caller. Any failure
becomes one PluginError naming the plugin and its distribution (`registry.contained`).
After each exporter, what it returned is checked against what is really in the staging
directory: names relative, inside it, existing; files written by an earlier exporter left
alone; lagfield's own names (run.json, `.lagfield*`) not used. Files an exporter wrote but
did not name are results all the same: what is on disk is what gets recorded.
"""

from __future__ import annotations

import copy
import dataclasses
import os
from pathlib import Path, PurePath

from .errors import PluginError
from .outputs import RESERVED_PREFIX, SUMMARY_NAME, list_files
from .registry import contained


def _copy_on_write() -> bool:
    """True when pandas shares data between a DataFrame and its shallow copies only until
    one of them is written (always from pandas 3)."""
    import pandas as pd

    if int(pd.__version__.split(".")[0]) >= 3:
        return True
    return bool(pd.get_option("mode.copy_on_write"))


def private_copy(signals):
    """A copy of `signals` that can be changed without changing `signals`."""
    import pandas as pd

    deep = not _copy_on_write()
    values = {}
    for field in dataclasses.fields(signals):
        value = getattr(signals, field.name)
        if isinstance(value, pd.DataFrame):
            values[field.name] = value.copy(deep=deep)
        else:
            values[field.name] = copy.deepcopy(value)
    return dataclasses.replace(signals, **values)


def _snapshot(root: Path) -> dict[str, tuple]:
    """{relative name: (inode, size, mtime_ns)} of every file under root."""
    out = {}
    for name in list_files(root):
        status = os.lstat(root / name)
        out[name] = (status.st_ino, status.st_size, status.st_mtime_ns)
    return out


def _check_returned(label: str, returned, staging: Path) -> None:
    """PluginError unless what an exporter returned is a list of relative paths that exist
    inside `staging`. None (nothing said) is allowed: the directory is what counts."""
    if returned is None:
        return
    if isinstance(returned, str | bytes) or not isinstance(returned, list | tuple):
        raise PluginError(f"{label} returned {type(returned).__name__} "
                          f"{returned!r:.80}; it must return a list of the file names it wrote")
    root = os.path.realpath(staging)
    for item in returned:
        if not isinstance(item, str | os.PathLike):
            raise PluginError(f"{label} returned {item!r:.80} among its file names; "
                              "each must be a file name (str)")
        name = PurePath(item)
        if name.is_absolute() or ".." in name.parts or not name.parts:
            raise PluginError(f"{label} returned the file name '{item}': names must "
                              "be relative to the directory it was given, without '..'")
        path = staging / name
        if not os.path.lexists(path):
            raise PluginError(f"{label} says it wrote '{item}', but there is no such "
                              "file in the directory it was given")
        if os.path.commonpath([root, os.path.realpath(path)]) != root:
            raise PluginError(f"{label} returned '{item}', which leads outside the "
                              "directory it was given")


def run_exporters(signals, staging: Path, exporters, plugin_options: dict) -> list[str]:
    """Call every exporter (registry PluginInfo) on its own copy of `signals` with its
    `[plugins.<name>]` options, writing into `staging`; returns the files now there."""
    before = _snapshot(staging)
    for info in exporters:
        label = info.quoted
        options = copy.deepcopy(dict(plugin_options.get(info.name, {})))
        with contained(info, f"writing results into {staging}"):
            returned = info.plugin.write(private_copy(signals), staging, options)
        _check_returned(label, returned, staging)
        after = _snapshot(staging)
        for name, identity in before.items():
            if after.get(name) != identity:
                raise PluginError(f"{label} changed or removed '{name}', written by "
                                  "an exporter before it; give the two exporters different "
                                  "file names")
        for name in set(after) - set(before):
            if name == SUMMARY_NAME or name.startswith(RESERVED_PREFIX):
                raise PluginError(f"{label} wrote '{name}', a name lagfield keeps for "
                                  "itself")
        before = after  # what this exporter left is what the next one must leave alone
    return sorted(before)
