"""``leakfleet import``: a station's own history files, through its profile, into the journal."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

ORDER = 42


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "import",
        help="read a station's historical log files into the journal",
        description=(
            "Reads a station's own log or export files (text, as its printer or USB port "
            "wrote them) through the station's profile, exactly as the gateway reads it live, "
            "and stores the records in the journal. Importing a file twice stores nothing "
            "twice; an interrupted import goes on where it stopped (progress is kept in "
            "JOURNAL.imports.json); lines the profile cannot read go to the quarantine with "
            "their reason. The station comes from a gateway config (--config, --station) or "
            "is described on the command line (--profile, --station, --line, --timezone)."
        ),
        epilog=(
            "examples:\n"
            "  leakfleet import logs/2025-*.txt --config gateway.toml --station L1-S2\n"
            "  leakfleet import old.txt --profile lf-delim --station L1-S2 --line L1 "
            "--timezone Europe/Berlin --store sqlite:///leakfleet.db"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("files", nargs="+", type=Path, metavar="FILE", help="history files")
    parser.add_argument("--station", required=True, metavar="ID", help="the station's id")
    parser.add_argument("--config", metavar="FILE",
                        help="gateway config naming the station (its profile, line, zone, "
                        "programs and program parameters)")
    parser.add_argument("--profile", metavar="NAME|FILE",
                        help="profile, when no --config is given")
    parser.add_argument("--line", default="", help="the station's line (without --config)")
    parser.add_argument("--timezone", default="UTC",
                        help="the station's local time zone (without --config; default UTC)")
    parser.add_argument("--store", metavar="URL",
                        help="journal (default: the config's store, else "
                        "sqlite:///./leakfleet.db)")
    parser.add_argument("--jobs", type=int, default=1, metavar="N",
                        help="processes parsing in parallel (default 1; 2 may help on "
                        "large files)")
    parser.add_argument("--chunk-lines", type=int, default=20_000, metavar="N",
                        help="lines parsed and committed at a time (default 20000)")
    parser.add_argument("--restart", action="store_true",
                        help="ignore earlier progress and read every file from the start")
    parser.add_argument("--json", action="store_true", help="machine-readable summary")
    parser.set_defaults(func=_run)


def _station(args: argparse.Namespace) -> tuple[Any, Any, str]:
    """(profile, context, store URL) from the config or the command line."""
    from gateway.errors import ConfigError
    from gateway.profiles import StationContext, load_profile

    if args.config:
        from gateway.config import load_config
        from gateway.runtime import build_targets

        config = load_config(args.config, store=args.store)
        targets = {t.station: t for t in build_targets(config, {})}
        if args.station not in targets:
            known = ", ".join(sorted(targets)) or "none"
            raise ConfigError(f"{args.config}: no station {args.station!r} (stations: {known})")
        t = targets[args.station]
        return t.profile, t.context, args.store or config.store
    if not args.profile:
        raise ConfigError("give --config FILE (with --station) or --profile NAME")
    profile = load_profile(args.profile)
    ctx = StationContext(station=args.station, line=args.line, timezone=args.timezone)
    return profile, ctx, args.store or "sqlite:///./leakfleet.db"


def _run(args: argparse.Namespace) -> int:
    if args.jobs < 1 or args.jobs > 64:
        raise ValueError(f"--jobs: expected 1..64, got {args.jobs}")
    if args.chunk_lines < 1:
        raise ValueError("--chunk-lines: expected 1 or more")
    for f in args.files:
        if not f.is_file():
            raise ValueError(f"{f}: no such file" if not f.exists() else f"{f}: not a file")
    profile, ctx, store = _station(args)
    from gateway.importer import import_file, state_path
    from gateway.store import open_journal
    from gateway.store._sqlite import sqlite_path

    journal = open_journal(store)
    summaries = []
    try:
        for f in args.files:
            stats = _one(f, args, profile, ctx, journal, state_path(Path(sqlite_path(store))),
                         import_file)
            summaries.append(stats.to_dict())
            if not args.json:
                print(f"{f}: {stats.lines} line(s), {stats.results} result(s) and "
                      f"{stats.calibrations} calibration(s) read; {stats.stored} stored, "
                      f"{stats.repeats} already there, {stats.quarantined} quarantined"
                      + "".join(f"; {n}" for n in stats.notes))
    finally:
        journal.close()
    if args.json:
        print(json.dumps({"station": args.station, "files": summaries}, indent=1))
    return 0


def _one(f: Path, args: argparse.Namespace, profile: Any, ctx: Any, journal: Any,
         state: Path, import_file: Any) -> Any:
    kwargs = dict(profile=profile, ctx=ctx, journal=journal, state_file=state,
                  lines_per_chunk=args.chunk_lines, jobs=args.jobs, restart=args.restart)
    if args.json or not sys.stderr.isatty():
        return import_file(f, **kwargs)
    from rich.progress import BarColumn, DownloadColumn, Progress, TimeRemainingColumn

    with Progress("[progress.description]{task.description}", BarColumn(), DownloadColumn(),
                  TimeRemainingColumn(), transient=True) as bar:
        task = bar.add_task(f.name, total=f.stat().st_size)
        return import_file(f, **kwargs, progress=lambda done: bar.update(task, completed=done))
