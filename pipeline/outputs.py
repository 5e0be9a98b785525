"""Where results go, and how they get there whole.

An output directory may hold anything. lagfield's results in it are the files listed in its
manifest, `.lagfield-results.json`, written together with them; `--overwrite` replaces
exactly those, nothing else is ever touched, and a result name already taken by a file
lagfield did not write is an error naming that file.

A run that writes (`runner.run`):

1. `open_output`, before any computation: creates the directory like ``mkdir -p``, takes a
   lock (`.lagfield.lock`, ``flock``) held until the run ends, completes or clears what an
   interrupted run left behind (and says so), refuses a directory that holds results unless
   overwrite is asked, and makes the staging directory (`.lagfield-staging-*`, inside the
   target, so every rename stays on one file system) that the exporters write into.
   `OutputTarget.check_space` compares an estimate of the tables with the free space.
2. `OutputTarget.commit`, after the computation: the exporters write into staging
   (`exporting.run_exporters`), then run.json; everything is fsynced. A journal
   (`.lagfield-commit.json`, fsynced) lists the moves; each result is renamed over its
   predecessor (``os.replace``: a name always holds the old file or the new one, never
   neither), results of the earlier run that this one did not write are removed, the
   manifest is replaced, the journal removed. A process killed in between leaves the
   journal, and the next run into the directory completes the moves and reports it.

SIGTERM during a run becomes an interruption (the staging directory is removed); during the
moves it is held back until they are done.
"""

from __future__ import annotations

import contextlib
import contextvars
import errno
import fcntl
import functools
import hashlib
import json
import os
import secrets
import shutil
import signal
import threading
import warnings
from pathlib import Path, PurePosixPath

from .errors import OutputError

SAFETY_NOTE = ("lagfield gives field estimates only. For radiation dose, RF or laser "
               "exposure and shielding decisions follow local regulations and consult the "
               "facility's radiation-safety officer.")

SUMMARY_NAME = "run.json"
RESERVED_PREFIX = ".lagfield"  # names lagfield keeps for itself in an output directory
MANIFEST_NAME = ".lagfield-results.json"
LOCK_NAME = ".lagfield.lock"
JOURNAL_NAME = ".lagfield-commit.json"
STAGING_PREFIX = ".lagfield-staging-"
TEMPORARY_PREFIX = ".lagfield-tmp-"
HELD_SIGNALS = ("SIGTERM", "SIGINT", "SIGHUP")  # held back while results are moved

# bytes per table value on disk, by exporter (an estimate for the free-space check; other
# exporters count as text)
BYTES_PER_VALUE = {"parquet": 9, "csv": 26}
TEXT_BYTES_PER_VALUE = 26
PLOT_BYTES_PER_GROUP = 2_000_000  # a few PNG figures per observer group
SPACE_MARGIN = 1.2


def sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


# --------------------------------------------------------------------------- file system
def fsync_path(path: Path) -> None:
    """Flush a file or a directory (its entries) to the disk."""
    fd = os.open(path, os.O_RDONLY | (os.O_DIRECTORY if os.path.isdir(path) else 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _write_json(path: Path, data) -> None:
    """Write `data` as JSON to `path` whole or not at all: a temporary file beside it,
    fsynced, renamed over it, the directory fsynced."""
    temporary = path.parent / f"{TEMPORARY_PREFIX}{os.getpid()}-{secrets.token_hex(4)}"
    with open(temporary, "w", encoding="utf-8") as stream:
        json.dump(data, stream, indent=2)
        stream.flush()
        os.fsync(stream.fileno())
    os.replace(temporary, path)
    fsync_path(path.parent)


def _read_json(path: Path, what: str) -> dict:
    try:
        with open(path, encoding="utf-8") as stream:
            data = json.load(stream)
    except (OSError, ValueError) as exc:
        raise OutputError(f"cannot read {what} {path}: {exc}") from None
    if not isinstance(data, dict):
        raise OutputError(f"{what} {path} is not what lagfield writes (not a JSON object)")
    return data


@contextlib.contextmanager
def _io(what: str):
    """Turn an OSError in the block into one OutputError saying what could not be done."""
    try:
        yield
    except OSError as exc:
        reason = exc.strerror or str(exc)
        if exc.errno in (errno.ENOSPC, errno.EDQUOT):
            reason += " (the disk or your quota is full)"
        raise OutputError(f"cannot {what}: {reason}") from exc


def make_directory(directory: Path) -> list[Path]:
    """Create `directory` and its missing parents (like ``mkdir -p``, honouring the umask);
    returns the directories created, outermost first. OutputError if a file stands in the
    way or a parent cannot be written."""
    if os.path.lexists(directory) and not directory.is_dir():
        raise OutputError(f"output path {directory} exists and is not a directory")
    missing = []
    path = directory
    while not os.path.lexists(path):
        missing.append(path)
        path = path.parent
    if not path.is_dir():
        raise OutputError(f"cannot create output directory {directory}: {path} is a file, "
                          "not a directory")
    created = []
    for path in reversed(missing):
        try:
            os.mkdir(path)
        except FileExistsError:
            continue  # made meanwhile by someone else: not ours
        except OSError as exc:
            for made in reversed(created):
                with contextlib.suppress(OSError):
                    os.rmdir(made)
            raise OutputError(f"cannot create output directory {directory}: "
                              f"{exc.strerror or exc} ({path})") from None
        created.append(path)
    return created


def list_files(root: Path) -> list[str]:
    """Every file (symbolic links included, not followed) under `root`, as sorted relative
    POSIX paths."""
    names = []
    for folder, subfolders, files in os.walk(root):
        base = PurePosixPath(Path(folder).relative_to(root).as_posix())
        links = [d for d in subfolders if os.path.islink(os.path.join(folder, d))]
        names += [str(base / name) if str(base) != "." else name for name in files + links]
    return sorted(names)


def _safe(name) -> bool:
    """A name lagfield may write or remove in an output directory: relative, plain, not
    one of its own working names."""
    if not isinstance(name, str) or not name:
        return False
    path = PurePosixPath(name)
    return (not path.is_absolute() and ".." not in path.parts and "\\" not in name
            and not path.parts[0].startswith(RESERVED_PREFIX))


def _parents(name: str) -> list[str]:
    """'a/b/c.png' -> ['a', 'a/b']."""
    parts = PurePosixPath(name).parts
    return ["/".join(parts[:i]) for i in range(1, len(parts))]


# --------------------------------------------------------------------------- manifest
def read_manifest(directory: Path) -> dict | None:
    """The manifest of the results lagfield wrote in `directory`, or None."""
    path = directory / MANIFEST_NAME
    if not os.path.lexists(path):
        return None
    data = _read_json(path, "the list of lagfield's results")
    files, dirs = data.get("files"), data.get("dirs", [])
    if not (isinstance(files, list) and isinstance(dirs, list)
            and all(_safe(name) for name in files + dirs)):
        raise OutputError(f"the list of lagfield's results {path} is damaged; remove it and "
                          "lagfield's results beside it by hand")
    return {"files": files, "dirs": dirs}


def _foreign_summary(path: Path) -> str:
    """The message for a run.json that no manifest claims."""
    try:
        with open(path, encoding="utf-8") as stream:
            ours = json.load(stream).get("program") == "lagfield"
    except (OSError, ValueError, AttributeError):
        ours = False
    if ours:
        return (f"{path} is from an earlier lagfield run that kept no list of the files it "
                f"wrote ({MANIFEST_NAME}), so lagfield cannot tell its results from your "
                "files there; move that run's files away, or set [output] dir elsewhere")
    return (f"{path} was not written by lagfield, and this run writes its {SUMMARY_NAME} "
            "there; move that file, or set [output] dir elsewhere")


# --------------------------------------------------------------------------- commit
def apply_journal(directory: Path, journal: dict) -> int:
    """Carry out (or finish) the moves a journal lists; returns how many files it put in
    place. Each step is skipped when already done, so this may be repeated after a crash."""
    staging = directory / journal["staging"]
    previous = set(journal["previous"])
    placed = 0
    touched = {directory}
    for name in journal["files"]:
        source, target = staging / name, directory / name
        if not os.path.lexists(source):
            continue  # already in place
        if os.path.lexists(target) and name not in previous:
            raise OutputError(f"{target} appeared after an interrupted run of lagfield was "
                              f"about to write its own '{name}' there; move that file away "
                              "and run again to complete the earlier run's results")
        for parent in _parents(name):
            with contextlib.suppress(FileExistsError):
                os.mkdir(directory / parent)
        os.replace(source, target)
        touched.add(target.parent)
        placed += 1
    for name in journal["remove"]:
        target = directory / name
        if os.path.lexists(target) and not (target.is_dir() and not target.is_symlink()):
            os.unlink(target)
            touched.add(target.parent)
    for name in sorted(journal["remove_dirs"], key=lambda d: d.count("/"), reverse=True):
        with contextlib.suppress(OSError):  # kept when anything else is inside
            os.rmdir(directory / name)
    _write_json(directory / MANIFEST_NAME, journal["manifest"])
    for folder in touched:
        if folder.is_dir():
            fsync_path(folder)
    return placed


def recover(directory: Path) -> list[str]:
    """Complete a commit that a killed run left half done and remove what interrupted runs
    left; called with the lock held (so nothing found belongs to a live run). Returns what
    was found and done, for run.json and the terminal."""
    notes = []
    journal_path = directory / JOURNAL_NAME
    if os.path.lexists(journal_path):
        journal = _read_json(journal_path, "the journal of an interrupted run")
        names = [journal.get("staging")] + [name for key in ("files", "previous", "remove",
                                                             "remove_dirs")
                                            for name in journal.get(key, [None])]
        if not (str(names[0]).startswith(STAGING_PREFIX) and "/" not in names[0]
                and all(_safe(name) for name in names[1:])):
            raise OutputError(f"the journal of an interrupted run {journal_path} is damaged; "
                              "check the results beside it by hand, then remove it")
        with _io(f"complete the interrupted writing of results in {directory}"):
            placed = apply_journal(directory, journal)
            os.unlink(journal_path)
            fsync_path(directory)
            shutil.rmtree(directory / journal["staging"], ignore_errors=True)
        notes.append(f"the writing of results into {directory} by an earlier run (process "
                     f"{journal.get('pid')}) was interrupted; lagfield completed it now "
                     f"({placed} of {len(journal['files'])} files were still to be moved)")
    leftovers = sorted(directory.glob(f"{STAGING_PREFIX}*")) + sorted(
        directory.glob(f"{TEMPORARY_PREFIX}*"))
    for leftover in leftovers:
        with _io(f"remove {leftover}, left by an interrupted run"):
            if leftover.is_dir() and not leftover.is_symlink():
                shutil.rmtree(leftover)
            else:
                os.unlink(leftover)
        notes.append(f"removed {leftover.name} from {directory}: the unfinished output of an "
                     "interrupted run (none of it had replaced any result)")
    return notes


class OutputTarget:
    """An output directory held for one run: lock, staging directory, earlier results.
    Made by `open_output`; `commit` puts the results in place; `close` releases it."""

    def __init__(self, directory, overwrite: bool = False):
        self.directory = Path(directory)
        self.overwrite = overwrite
        self.notes: list[str] = []  # what was found and done on opening
        self.created: list[Path] = []  # directories made for this run, outermost first
        self.staging: Path | None = None
        self.previous = {"files": [], "dirs": []}  # manifest of an earlier run
        self.files: list[str] = []  # what commit put in place
        self.committed = False
        self._lock_fd: int | None = None
        self._closed = False
        self._handlers: dict = {}

    # ----------------------------------------------------------------- opening
    def _open(self) -> None:
        self.created = make_directory(self.directory)
        self._lock()
        self.notes += recover(self.directory)
        self.previous = self._earlier_results()
        with _io(f"write in output directory {self.directory}"):
            self.staging = self._new_staging()
        self._trap_termination()

    def _lock(self) -> None:
        path = self.directory / LOCK_NAME
        for _ in range(10):
            with _io(f"write in output directory {self.directory}"):
                fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o666)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = os.read(fd, 64).decode("ascii", "replace").strip() or "unknown"
                os.close(fd)
                raise OutputError(f"another lagfield run (process {holder}) is writing to "
                                  f"{self.directory}; wait for it to finish, or set [output] "
                                  "dir elsewhere") from None
            try:  # the file may have been removed by the run that held it: lock it anew
                same = os.fstat(fd).st_ino == os.stat(path).st_ino
            except FileNotFoundError:
                same = False
            if same:
                os.ftruncate(fd, 0)
                os.write(fd, f"{os.getpid()}\n".encode())
                self._lock_fd = fd
                return
            os.close(fd)
        raise OutputError(f"cannot lock output directory {self.directory}")

    def _earlier_results(self) -> dict:
        manifest = read_manifest(self.directory)
        if manifest is None:
            summary = self.directory / SUMMARY_NAME
            if os.path.lexists(summary):
                raise OutputError(_foreign_summary(summary))
            return {"files": [], "dirs": []}
        present = [n for n in manifest["files"] if os.path.lexists(self.directory / n)]
        if present and not self.overwrite:
            shown = ", ".join(present[:4]) + (", …" if len(present) > 4 else "")
            raise OutputError(f"output directory {self.directory} already holds results of an "
                              f"earlier run ({shown}); give --overwrite to replace them (only "
                              "those files), or set [output] dir elsewhere")
        return manifest

    def _new_staging(self) -> Path:
        while True:
            path = self.directory / f"{STAGING_PREFIX}{os.getpid()}-{secrets.token_hex(4)}"
            try:
                os.mkdir(path)  # honours the umask, unlike tempfile.mkdtemp
                return path
            except FileExistsError:
                continue

    def _trap_termination(self) -> None:
        """SIGTERM becomes an interruption (KeyboardInterrupt), so that the staging
        directory is removed; only from the main thread, and only where no handler of the
        program's own is installed."""
        if threading.current_thread() is not threading.main_thread():
            return
        if signal.getsignal(signal.SIGTERM) is signal.SIG_DFL:
            self._handlers[signal.SIGTERM] = signal.SIG_DFL
            signal.signal(signal.SIGTERM, _interrupt)

    # ----------------------------------------------------------------- space
    def check_space(self, estimate_bytes: float) -> None:
        """OutputError when the file system of the directory has less free space than
        `estimate_bytes` (see `result_bytes`)."""
        from .budget import format_bytes

        free = shutil.disk_usage(self.directory).free
        if estimate_bytes > free:
            raise OutputError(f"output directory {self.directory}: the results need about "
                              f"{format_bytes(estimate_bytes)} but only {format_bytes(free)} "
                              "is free there; free some space, or set [output] dir elsewhere")

    # ----------------------------------------------------------------- commit
    def _check_names(self, files: list[str]) -> None:
        """OutputError when a result would replace, or sit under, a file lagfield did not
        write."""
        previous = set(self.previous["files"])
        for name in files:
            for parent in _parents(name):
                path = self.directory / parent
                if os.path.lexists(path) and (path.is_symlink() or not path.is_dir()):
                    raise OutputError(f"{path} is in the way of the result '{name}' (a "
                                      "directory is needed there); move it, or set [output] "
                                      "dir elsewhere")
            path = self.directory / name
            if not os.path.lexists(path):
                continue
            if name not in previous:
                raise OutputError(f"{path} was not written by lagfield, and this run writes "
                                  f"its own '{name}' there; move that file, or set [output] "
                                  "dir elsewhere")
            if path.is_dir() and not path.is_symlink():
                raise OutputError(f"{path} is a directory where this run writes the file "
                                  f"'{name}'; move it, or set [output] dir elsewhere")

    def commit(self, signals, exporters, plugin_options: dict) -> list[str]:
        """Run the exporters (a list of registry PluginInfo) into the staging directory,
        write run.json, and put everything in place. Sets signals.summary["files"] and
        returns that list."""
        from .exporting import run_exporters

        staging = self.staging
        files = run_exporters(signals, staging, exporters, plugin_options)
        signals.summary["files"] = sorted(files + [SUMMARY_NAME])
        with _io(f"write results in {staging}"):
            with open(staging / SUMMARY_NAME, "w", encoding="utf-8") as stream:
                json.dump(signals.summary, stream, indent=2, default=_json_default)
            files = list_files(staging)  # the truth, whatever the exporters said
            for name in files:
                if not os.path.islink(staging / name):
                    fsync_path(staging / name)
            for folder in {staging / p for name in files for p in _parents(name)} | {staging}:
                fsync_path(folder)
        # run.json goes last: once it is new, everything else is
        files = [n for n in files if n != SUMMARY_NAME] + [SUMMARY_NAME]
        self._check_names(files)
        needed = {parent for name in files for parent in _parents(name)}
        kept_dirs = set(self.previous["dirs"]) & needed
        new_dirs = {d for d in needed if not os.path.lexists(self.directory / d)}
        journal = {
            "program": "lagfield", "pid": os.getpid(), "staging": staging.name,
            "files": files, "previous": self.previous["files"],
            "remove": sorted(set(self.previous["files"]) - set(files)),
            "remove_dirs": sorted(set(self.previous["dirs"]) - needed),
            "manifest": {"program": "lagfield", "files": sorted(files),
                         "dirs": sorted(kept_dirs | new_dirs)},
        }
        with held_signals(), _io(f"put the results in place in {self.directory}"):
            _write_json(self.directory / JOURNAL_NAME, journal)
            apply_journal(self.directory, journal)
            os.unlink(self.directory / JOURNAL_NAME)
            fsync_path(self.directory)
            self.committed = True
        shutil.rmtree(staging, ignore_errors=True)
        self.files = signals.summary["files"]
        return self.files

    # ----------------------------------------------------------------- closing
    def close(self) -> None:
        """Release the directory: remove the staging directory (the results when commit
        did not run), the lock file, and directories made for a run that wrote nothing."""
        if self._closed:
            return
        self._closed = True
        for number, handler in self._handlers.items():
            signal.signal(number, handler)
        if self.staging is not None:
            shutil.rmtree(self.staging, ignore_errors=True)
        if self._lock_fd is not None:
            with contextlib.suppress(OSError):
                os.unlink(self.directory / LOCK_NAME)
            os.close(self._lock_fd)
            self._lock_fd = None
        if not self.committed:
            for made in reversed(self.created):
                with contextlib.suppress(OSError):  # kept if anything else is inside
                    os.rmdir(made)

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self.close()


def _interrupt(number, frame):
    raise KeyboardInterrupt(f"terminated by signal {signal.Signals(number).name}")


@contextlib.contextmanager
def held_signals():
    """Hold back termination signals (main thread only) for the duration of the block.
    One that arrived meanwhile ends the process at its end if nothing else handled that
    signal; a Python handler (KeyboardInterrupt) is not called: the run is done then."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending = []
    numbers = [getattr(signal, name) for name in HELD_SIGNALS if hasattr(signal, name)]
    saved = {n: signal.signal(n, lambda number, frame: pending.append(number))
             for n in numbers}
    try:
        yield
    finally:
        for number, handler in saved.items():
            signal.signal(number, handler)
        for number in pending[:1]:
            if saved[number] is signal.SIG_DFL:
                os.kill(os.getpid(), number)


def _json_default(value):
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "tolist"):
        return value.tolist()
    return str(value)


def result_bytes(windows, n_frequencies: int, formats) -> float:
    """Estimated size on disk of the results: the field rows (bins of every point; 9
    values each), spectrum rows (11 values), per exporter; plots a fixed amount per group.
    `windows`: [(start_s (P,), n_bins (P,))] per group."""
    field_rows = sum(float(sum(n_bins)) for _, n_bins in windows)
    points = sum(len(n_bins) for _, n_bins in windows)
    values = 9 * field_rows + 11 * points * n_frequencies + 8 * points
    total = 0.0
    for name in formats:
        if name == "plots":
            total += PLOT_BYTES_PER_GROUP * len(windows)
        else:
            total += values * BYTES_PER_VALUE.get(name, TEXT_BYTES_PER_VALUE)
    return SPACE_MARGIN * total


# --------------------------------------------------------------------------- run scope
_open_targets: contextvars.ContextVar[list | None] = contextvars.ContextVar(
    "lagfield_open_targets", default=None)
_caught_warnings: contextvars.ContextVar[list | None] = contextvars.ContextVar(
    "lagfield_caught_warnings", default=None)


def open_output(directory, *, overwrite: bool = False) -> OutputTarget:
    """Make ready the output directory of a run, before any computation (see the module
    docstring): an OutputTarget holding the lock, or one clear OutputError with nothing
    left behind. Within a function decorated with `guarded` it is closed when the function
    ends; otherwise use it as a context manager."""
    target = OutputTarget(directory, overwrite)
    registered = _open_targets.get()
    if registered is not None:
        registered.append(target)
    try:
        target._open()
    except BaseException:
        target.close()
        raise
    return target


def guarded(function):
    """Decorator of a run: every OutputTarget opened during the call is closed when it
    returns or raises (lock released, unfinished results removed), and Python warnings
    issued during it are kept for run.json (`caught_warnings`); they are shown again if the
    run fails."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        caught, targets = [], []
        try:
            with warnings.catch_warnings(record=True) as caught:
                targets_token = _open_targets.set(targets)
                warnings_token = _caught_warnings.set(caught)
                try:
                    return function(*args, **kwargs)
                finally:
                    for target in reversed(targets):
                        target.close()
                    _open_targets.reset(targets_token)
                    _caught_warnings.reset(warnings_token)
        except BaseException:
            # a failed run has no run.json: what it found and did is said here instead
            for item in caught:
                warnings.warn_explicit(item.message, item.category, item.filename,
                                       item.lineno)
            for note in (note for target in targets for note in target.notes):
                warnings.warn(note, OutputWarning, stacklevel=2)
            raise

    return wrapper


class OutputWarning(UserWarning):
    """What lagfield found and did in an output directory left by an interrupted run."""


def caught_warnings() -> list[str]:
    """The Python warnings issued so far in the current `guarded` call, as text."""
    return [f"{item.category.__name__}: {item.message}" for item in
            (_caught_warnings.get() or [])]
