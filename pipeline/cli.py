"""The `lagfield` command: a thin shell over the Python API. Errors are one line on
stderr with a non-zero exit code; `--debug` shows the traceback."""

from __future__ import annotations

import argparse
import json
import sys

from .errors import LagfieldError


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lagfield",
        description="Liénard–Wiechert fields, spectra and radiated energy from sampled "
                    "charged-particle tracks.")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    commands = parser.add_subparsers(dest="command", required=True)
    run = commands.add_parser("run", help="compute the fields a run file describes")
    run.add_argument("run_file", help="the run file (TOML)")
    run.add_argument("--overwrite", action="store_true",
                     help="replace results already in the output directory")
    where = run.add_mutually_exclusive_group()
    where.add_argument("--workers", type=int, metavar="N",
                       help="local worker processes (a Dask local cluster)")
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="address of a running Dask scheduler")
    inspect = commands.add_parser(
        "inspect", help="what is in a track file and whether its sampling resolves the "
                        "radiation it implies")
    inspect.add_argument("tracks", help="track file (CSV, Parquet or a plugin's format)")
    inspect.add_argument("--format", help="importer name (default: from the file ending)")
    inspect.add_argument("--charge", metavar="Q",
                         help="charge per particle (C, or with a unit: --charge='-1 e'), "
                              "when the file has no charge column")
    inspect.add_argument("--json", action="store_true", help="machine-readable output")
    commands.add_parser("plugins", help="list the installed importers and exporters")
    return parser


def _cmd_run(args) -> int:
    from .runner import run

    bar = None
    if sys.stderr.isatty():  # progress on a terminal only
        from tqdm import tqdm

        bar = tqdm(unit="particle", desc="fields", file=sys.stderr, leave=False)
    try:
        signals = run(args.run_file, overwrite=args.overwrite, workers=args.workers,
                      scheduler=args.scheduler, progress=bar.update if bar else None)
    finally:
        if bar is not None:
            bar.close()
    summary = signals.summary
    print(f"lagfield {summary['version']}: {summary['particles']} particles, "
          f"{len(signals.observers)} observer points in "
          f"{len(summary['observer_groups'])} group(s), "
          f"{len(signals.fields)} field samples in {summary['timings']['total_s']:.2f} s")
    print(f"results in {summary['output_dir']}: {', '.join(summary['files'])}")
    for warning in summary["warnings"]:
        print(f"warning: {warning}", file=sys.stderr)
    print(f"note: {summary['note']}")
    return 0


def _cmd_inspect(args) -> int:
    from .diagnose import format_report, inspect_tracks

    options = {}
    if args.format:
        options["format"] = args.format
    if args.charge is not None:
        from .units import to_si

        value = args.charge.strip()
        try:
            value = float(value)
        except ValueError:
            pass
        options["charge"] = to_si(value, "charge", where="--charge")
    report = inspect_tracks(args.tracks, **options)
    print(json.dumps(report, indent=2) if args.json else format_report(report))
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


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    handler = {"run": _cmd_run, "inspect": _cmd_inspect, "plugins": _cmd_plugins}[args.command]
    try:
        return handler(args)
    except LagfieldError as exc:
        if args.debug:
            raise
        print(f"lagfield: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("lagfield: interrupted; nothing was written", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
