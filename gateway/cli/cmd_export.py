"""``leakfleet export``: what the journal holds, as CSV or Parquet, one row per record."""

from __future__ import annotations

import argparse
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

ORDER = 40

KINDS = ("results", "calibrations", "statuses", "quarantine")
# canonical field names, in record order: the export's columns
COLUMNS: dict[str, tuple[str, ...]] = {
    "results": (
        "station", "line", "cycle", "ended_at", "received_at", "program", "verdict",
        "test_pressure_pa", "pressure_loss_pa", "leak_rate_sccm", "reject_limit_sccm", "fill_s",
        "stabilise_s", "test_s", "part_id", "reason", "lower_limit_sccm", "temperature_c",
        "calibration_ref", "raw", "profile", "part_family", "time_source", "supplied",
        "record_id",
    ),
    "calibrations": (
        "station", "line", "ended_at", "received_at", "program", "master_loss_pa",
        "standard_loss_pa", "standard_sccm", "standard_ref_pressure_pa", "ratio", "sensitivity",
        "passed", "reason", "raw", "profile", "time_source", "supplied", "record_id",
    ),
    "statuses": ("station", "at", "state", "detail", "record_id"),
    "quarantine": ("station", "profile", "raw", "reason", "received_at", "line_no"),
}  # fmt: skip


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "export",
        help="write journalled records as CSV or Parquet",
        description=(
            "Export one kind of record from a store, one row per record, with the canonical "
            "field names as columns (pressures in Pa, leak rates in sccm, times in s, "
            "timestamps ISO 8601 UTC). CSV goes to stdout unless --out is given."
        ),
        epilog="example: leakfleet export --format csv --kind results --since 2026-12-02T06:00",
    )
    parser.add_argument(
        "--store", default="sqlite:///./leakfleet.db", metavar="URL",
        help="store URL (default sqlite:///./leakfleet.db)",
    )
    parser.add_argument("--format", choices=("csv", "parquet"), default="csv",
                        help="output format (default csv; parquet needs --out)")
    parser.add_argument("--kind", choices=KINDS, default="results",
                        help="what to export (default results)")
    parser.add_argument("--since", metavar="T", type=_time,
                        help="from this time: ISO 8601 (no offset = UTC) or an age like 8h, 7d")
    parser.add_argument("--until", metavar="T", type=_time, help="up to this time (same forms)")
    parser.add_argument("--station", metavar="S", help="only this station")
    parser.add_argument("--out", metavar="FILE", type=Path,
                        help="write here instead of stdout (never through a symbolic link; an "
                        "existing file only with --force)")
    parser.add_argument("--force", action="store_true", help="overwrite an existing --out file")
    parser.set_defaults(func=_run)


def check_target(out: Path, force: bool) -> None:
    """Refuse what would surprise: a missing folder, a folder, a link, an existing file."""
    if out.is_symlink():
        raise ValueError(f"{out} is a symbolic link; refusing to write through it (give the "
                         "real path)")
    if out.is_dir():
        raise ValueError(f"{out} is a directory; give a file name, e.g. {out / 'results.csv'}")
    if not out.parent.is_dir():
        raise ValueError(f"{out.parent}: no such directory")
    if out.exists() and not force:
        raise ValueError(f"{out} exists; add --force to overwrite it")


def _write_atomically(out: Path, write: Any) -> None:
    """Write to a new file beside ``out`` and rename it over ``out``: a rename replaces a
    link that appeared meanwhile instead of writing through it, and a failed write leaves
    no half file."""
    import os
    import tempfile

    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", dir=out.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # as an ordinary new file, not mkstemp's 0600
    try:
        write(tmp)
        os.replace(tmp, out)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _time(text: str) -> datetime:
    """ISO 8601 (naive means UTC) or an age before now: ``30m``, ``8h``, ``7d``."""
    units = {"m": "minutes", "h": "hours", "d": "days"}
    t = text.strip()
    if t[:-1].replace(".", "", 1).isdigit() and t[-1:] in units:
        return datetime.now(UTC) - timedelta(**{units[t[-1]]: float(t[:-1])})
    try:
        value = datetime.fromisoformat(t)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected an ISO 8601 time (2026-12-02T06:00) or an age (8h, 7d), got {text!r}"
        ) from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)


def frame_for(store: Any, kind: str, since: datetime | None, until: datetime | None,
              station: str | None) -> Any:
    """The export's rows: the store's query, trimmed to the canonical columns."""
    query = getattr(store, kind)
    frame = query(since, until, station=station)
    columns = [c for c in COLUMNS[kind] if c in frame.columns]
    return frame[columns]


def _run(args: argparse.Namespace) -> int:
    if args.format == "parquet" and args.out is None:
        raise ValueError("--format parquet needs --out FILE (Parquet is not written to a terminal)")
    if args.out is not None:
        check_target(args.out, args.force)
    from gateway.store import open_store

    store = open_store(args.store)
    try:
        frame = frame_for(store, args.kind, args.since, args.until, args.station)
    finally:
        close = getattr(store, "close", None)
        if callable(close):
            close()
    if args.format == "parquet":
        _write_atomically(args.out, lambda tmp: frame.to_parquet(tmp, index=False))
    else:
        for col in frame.columns:
            if str(frame[col].dtype).startswith("datetime64"):
                frame[col] = frame[col].map(_iso)
        if args.out is None:
            frame.to_csv(sys.stdout, index=False, lineterminator="\n")
        else:
            _write_atomically(args.out,
                              lambda tmp: frame.to_csv(tmp, index=False, lineterminator="\n"))
    if args.out is not None:
        print(f"{len(frame)} {args.kind} row(s) written to {args.out}", file=sys.stderr)
    return 0


def _iso(value: Any) -> str:
    """A timestamp cell as ISO 8601 (empty for a missing one)."""
    return "" if value is None or value != value else str(value.isoformat())
