"""Writing results safely: every exporter writes into a fresh temporary directory beside the
target, and only when all have succeeded is it renamed into place, so files appear whole
or not at all. A directory that already holds results is kept unless overwrite is asked."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from pathlib import Path

from .errors import OutputError

SAFETY_NOTE = ("lagfield gives field estimates only. For radiation dose, RF or laser "
               "exposure and shielding decisions follow local regulations and consult the "
               "facility's radiation-safety officer.")


def sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def check_target(directory: Path, overwrite: bool) -> None:
    """Refuse (before any work) a directory that holds results, unless overwrite."""
    if directory.exists() and not directory.is_dir():
        raise OutputError(f"output path {directory} exists and is not a directory")
    if directory.is_dir() and any(directory.iterdir()) and not overwrite:
        raise OutputError(f"output directory {directory} already holds results; "
                          "give --overwrite to replace them, or set [output] dir elsewhere")


def _json_default(value):
    if hasattr(value, "item"):
        return value.item()
    if isinstance(value, Path):
        return str(value)
    return str(value)


def write_results(signals, directory: Path, exporters, plugin_options: dict, *,
                  overwrite: bool) -> list[str]:
    """Run every exporter into a temporary directory, add run.json, then move the whole
    directory into place. Returns the file names written."""
    directory = Path(directory)
    check_target(directory, overwrite)
    directory.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{directory.name}.", suffix=".partial",
                                    dir=directory.parent))
    try:
        written = []
        for exporter in exporters:
            options = dict(plugin_options.get(exporter.name, {}))
            written += list(exporter.write(signals, staging, options) or [])
        with open(staging / "run.json", "w", encoding="utf-8") as stream:
            json.dump(signals.summary, stream, indent=2, default=_json_default)
        written.append("run.json")
        if directory.exists():
            trash = Path(tempfile.mkdtemp(prefix=f".{directory.name}.", suffix=".old",
                                          dir=directory.parent))
            os.replace(directory, trash / directory.name)
            os.replace(staging, directory)
            shutil.rmtree(trash, ignore_errors=True)
        else:
            os.replace(staging, directory)
        return written
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
