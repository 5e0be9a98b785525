"""The `lagfield` command: a thin shell over the Python API.

Results go to stdout; progress (on a terminal only), warnings and the safety note go to
stderr. Every error is one line on stderr, `lagfield: error: ...`, with a non-zero exit
code; `--debug` (before or after the subcommand) shows the traceback instead."""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import re
import sys
import warnings
from pathlib import Path

from . import __version__
from .errors import LagfieldError
from .wording import plural

# numba formats its error messages in colour even for errors it handles itself (loading a
# compiled kernel does), and then registers a terminal reset written at exit, after
# lagfield's own last line; set before numba is imported (it loads with the first run)
os.environ.setdefault("NUMBA_DISABLE_ERROR_MESSAGE_HIGHLIGHTING", "1")

EXIT_BUG = 1  # an unexpected exception: a bug in lagfield or in a plugin
EXIT_USAGE = 2  # the command line itself is wrong (argparse)
EXIT_INTERRUPTED = 130  # Ctrl-C, as shells report SIGINT
EXIT_BROKEN_PIPE = 141  # stdout's reader went away, as shells report SIGPIPE
# options whose value may begin with "-" ("--charge -1e"), which argparse would otherwise
# take for an option of its own
SIGNED_VALUE_OPTIONS = ("--charge", "--workers")


class _Parser(argparse.ArgumentParser):
    """argparse with lagfield's one-line errors."""

    def error(self, message):
        self.exit(EXIT_USAGE, f"lagfield: error: {message} (see '{self.prog} --help')\n")


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="lagfield",
        description="Liénard–Wiechert fields, spectra and radiated energy from sampled "
                    "charged-particle tracks. Field estimates only: for radiation dose, RF "
                    "or laser exposure and shielding decisions follow local regulations and "
                    "consult the facility's radiation-safety officer.")
    parser.add_argument("--version", action="version", version=f"lagfield {__version__}")
    parser.add_argument("--debug", action="store_true",
                        help="show the traceback of an error (also accepted after the "
                             "subcommand)")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND",
                                     parser_class=_Parser)
    run = commands.add_parser("run", help="compute the fields a run file describes")
    run.add_argument("run_file", metavar="RUN.toml", help="the run file (TOML)")
    run.add_argument("--overwrite", action="store_true",
                     help="replace the results of an earlier run in the output directory")
    where = run.add_mutually_exclusive_group()
    where.add_argument("--workers", metavar="N",
                       help="run on N local worker processes (a Dask local cluster; a whole "
                            "number >= 1); overrides the run file's [compute]")
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="run on the Dask scheduler at ADDRESS (tcp://HOST:PORT); "
                            "overrides the run file's [compute]")
    inspect = commands.add_parser(
        "inspect", help="what is in a track file and whether its sampling resolves the "
                        "radiation it implies")
    inspect.add_argument("source", metavar="TRACKS|RUN.toml",
                         help="a track file (CSV, Parquet or a plugin's format), or a run "
                              "file (.toml), whose [tracks] columns, units, charge and format "
                              "are then used")
    inspect.add_argument("--format", metavar="NAME",
                         help="importer name (default: the run file's, else from the file "
                              "ending)")
    inspect.add_argument("--charge", metavar="Q",
                         help="charge per physical particle in C, or with a unit "
                              "(--charge -1e, --charge '-1 e'), when the file has no charge "
                              "column")
    inspect.add_argument("--json", action="store_true", help="machine-readable output")
    commands.add_parser("plugins", help="list the installed importers and exporters")
    for subparser in commands.choices.values():  # `lagfield run X --debug` works too
        subparser.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                               help="show the traceback of an error")
    return parser


def _join_signed_values(argv: list[str]) -> list[str]:
    """'--charge -1e' as '--charge=-1e', so that a signed value is not taken for an
    option (argparse accepts only plain negative numbers such as -1 or -0.5)."""
    joined, rest = [], list(argv)
    while rest:
        arg = rest.pop(0)
        if arg == "--":
            return joined + [arg] + rest
        if arg in SIGNED_VALUE_OPTIONS and rest and re.match(r"-[\d.]", rest[0]):
            arg = f"{arg}={rest.pop(0)}"
        joined.append(arg)
    return joined


def _workers(text: str) -> int:
    from .distributed import check_workers

    text = text.strip()
    return check_workers(int(text) if re.fullmatch(r"[+-]?\d+", text) else text, "--workers")


def _charge_c(text: str) -> float:
    from .units import to_si

    value = text.strip()
    with contextlib.suppress(ValueError):
        value = float(value)
    return to_si(value, "charge", where="--charge")


def _progress():
    """The progress display on a terminal; none when stderr is a file or a pipe."""
    if not sys.stderr.isatty():
        return contextlib.nullcontext(None)
    from .progress import RunProgress

    return RunProgress(sys.stderr)


def _cmd_run(args) -> int:
    from .distributed import check_scheduler_address

    options = {"overwrite": args.overwrite}  # flags checked before the engine loads
    if args.workers is not None:
        options["workers"] = _workers(args.workers)
    if args.scheduler is not None:
        options["scheduler"] = check_scheduler_address(args.scheduler, "--scheduler")
    from .outputs import SAFETY_NOTE
    from .runner import run

    with _progress() as progress:
        signals = run(args.run_file, progress=progress, **options)
    summary = signals.summary
    n_groups = len(summary["observer_groups"])
    print(f"lagfield {summary['version']}: {plural(summary['particles'], 'particle')}, "
          f"{plural(len(signals.observers), 'observer point')} in "
          f"{plural(n_groups, 'group')}, {plural(len(signals.fields), 'field sample')} in "
          f"{summary['timings']['total_s']:.2f} s")
    # run.json gives the output directory relative to the run file's folder
    output_dir = Path(args.run_file).parent / summary["output_dir"]
    print(f"results in {output_dir}: {', '.join(summary['files'])}")
    for warning in summary["warnings"]:
        print(f"lagfield: warning: {_one_line(warning)}", file=sys.stderr)
    print(f"note: {SAFETY_NOTE}", file=sys.stderr)
    return 0


def _cmd_inspect(args) -> int:
    from .diagnose import format_report, inspect_run, inspect_tracks

    options = {}
    if args.format:
        options["format"] = args.format
    if args.charge is not None:
        options["charge"] = _charge_c(args.charge)
    if Path(args.source).suffix.lower() == ".toml":
        report = inspect_run(args.source, **options)
    else:
        try:
            report = inspect_tracks(args.source, **options)
        except LagfieldError as exc:
            if "[tracks]" in str(exc):  # the fix is a run file's [tracks] table
                exc.args = (f"{exc}; to inspect with a run file's [tracks] settings: "
                            "lagfield inspect RUN.toml",)
            raise
    print(json.dumps(report, indent=2) if args.json else format_report(report))
    if not report["valid"]:  # the same refusal `run` would make
        sys.stdout.flush()
        from .errors import MotionError

        raise MotionError(f"{plural(report['n_refused'], 'track')} would be refused by a "
                          f"run; the first: {report['refused'][0]['message']}")
    return 0


def _cmd_plugins(args) -> int:
    from .registry import get_registry

    registry = get_registry()
    for title, table in (("importers", registry.importers), ("exporters", registry.exporters)):
        print(f"{title}:")
        for name in sorted(table):
            for info in table[name]:
                print(f"  {name:<10} {info.distribution:<24} {info.plugin.description}")
    if registry.broken:
        print("broken plugins:")
        for broken in registry.broken:
            print(f"  {broken.name:<10} {broken.distribution:<24} {broken.error}")
    return 0


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


@contextlib.contextmanager
def _warnings_as_lines():
    """Python warnings shown as `lagfield: warning: ...` lines on stderr, each text once
    (a numerical warning can repeat for every particle)."""
    shown = set()

    def show(message, category, filename, lineno, file=None, line=None):
        text = _one_line(f"{category.__name__}: {message}")
        if text not in shown:
            shown.add(text)
            print(f"lagfield: warning: {text}", file=sys.stderr)

    previous, warnings.showwarning = warnings.showwarning, show
    try:
        yield
    finally:
        warnings.showwarning = previous


def _silence_stdout() -> None:
    """Point stdout at /dev/null, so the interpreter's final flush of a closed pipe does
    not print a complaint."""
    import os

    with contextlib.suppress(OSError, ValueError):
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())


def main(argv=None) -> int:
    """Run the command line `argv` (default: sys.argv[1:]); returns the exit code."""
    argv = _join_signed_values(sys.argv[1:] if argv is None else list(argv))
    try:
        args = _parser().parse_args(argv)
    except SystemExit as exc:  # --help, --version or a usage error, already printed
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    handler = {"run": _cmd_run, "inspect": _cmd_inspect, "plugins": _cmd_plugins}[args.command]
    try:
        with _warnings_as_lines():
            return handler(args)
    except BrokenPipeError:  # stdout closed early (`lagfield inspect ... | head -1`)
        _silence_stdout()
        return EXIT_BROKEN_PIPE
    except LagfieldError as exc:
        if args.debug:
            raise
        print(f"lagfield: error: {_one_line(exc)}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        if args.debug:
            raise
        print("lagfield: interrupted; no results were written", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:
        if args.debug:
            raise
        print(f"lagfield: error: unexpected {type(exc).__name__}: {_one_line(exc)}. This is "
              "a bug in lagfield or a plugin; rerun with --debug to see the traceback and "
              "please report it",
              file=sys.stderr)
        return EXIT_BUG


if __name__ == "__main__":
    sys.exit(main())
