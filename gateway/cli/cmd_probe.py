"""``leakfleet probe modbus``: an undocumented Modbus station from every angle, read-only."""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

ORDER = 62
TABLES = ("holding", "input", "coils", "discrete")


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "probe",
        help="read a station's registers read-only and show every way to decode them",
        description="Read-only look at a station an integrator has no register map for.",
    )
    kinds = parser.add_subparsers(dest="probe_kind", metavar="KIND")
    m = kinds.add_parser(
        "modbus",
        help="read holding/input registers and coils/discrete inputs, decode them every way",
        description=(
            "Reads a range of a Modbus station's registers (and coils/discrete inputs) in safe "
            "chunks, never writing, and prints each register as uint16, int16, hex, bits and "
            "characters and each pair as int32/uint32/float32 in the four word/byte orders "
            "(ABCD, CDAB, BADC, DCBA), marking what looks plausible. --watch reads again "
            "every --interval seconds and shows what changes: that is how the counter and "
            "the result block are found. --dump writes what was read as a register dump that "
            "'leakfleet profile check' reads."
        ),
        epilog=(
            "examples:\n"
            "  leakfleet probe modbus tcp://192.0.2.10:502 --device 1 --range 0-299\n"
            "  leakfleet probe modbus tcp://192.0.2.10:502 --device 3 --table input "
            "--range 0-200 --watch 6 --dump station.json\n"
            "  leakfleet probe modbus /dev/ttyUSB0 --device 7 --baudrate 19200 --parity E "
            "--range 1000-1100"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    m.add_argument("endpoint", metavar="ENDPOINT",
                   help="tcp://host:port (Modbus TCP) or a serial device path (Modbus RTU)")
    m.add_argument("--device", type=int, default=1, metavar="ID",
                   help="device id (unit id), 0..247 (default 1)")
    m.add_argument("--range", default="0-99", metavar="FIRST-LAST",
                   help="addresses to read, inclusive (default 0-99; protocol addresses from 0)")
    m.add_argument("--table", default="holding,input", metavar="T[,T]",
                   help="holding, input, coils, discrete, or all (default holding,input)")
    m.add_argument("--watch", type=int, nargs="?", const=5, default=0, metavar="N",
                   help="read N times (default 5) and show what changes")
    m.add_argument("--interval", type=float, default=2.0, metavar="S",
                   help="seconds between watch reads (default 2; at least a station cycle)")
    m.add_argument("--timeout", type=float, default=1.0, metavar="S",
                   help="answer timeout per read (default 1 s)")
    m.add_argument("--max-reads", type=int, default=400, metavar="N",
                   help="read requests allowed in all (default 400)")
    m.add_argument("--chunk", type=int, default=125, metavar="N",
                   help="registers per read (default 125, the protocol's limit)")
    m.add_argument("--baudrate", type=int, default=19200, help="RTU only (default 19200)")
    m.add_argument("--parity", choices=("N", "E", "O"), default="N", help="RTU only")
    m.add_argument("--stopbits", type=int, choices=(1, 2), default=1, help="RTU only")
    m.add_argument("--all-pairs", action="store_true",
                   help="print every pair in every order (default: the plausible floats only)")
    m.add_argument("--dump", type=Path, metavar="FILE", help="write a register dump (JSON)")
    m.add_argument("--force", action="store_true", help="overwrite an existing --dump file")
    m.add_argument("--json", action="store_true", help="machine-readable output")
    m.set_defaults(func=_run_modbus)
    def _usage(args: argparse.Namespace) -> int:
        parser.print_help()
        return 2

    parser.set_defaults(func=_usage)


def _tables(text: str) -> list[str]:
    names = [t.strip() for t in text.split(",") if t.strip()]
    if names == ["all"]:
        return list(TABLES)
    bad = [t for t in names if t not in TABLES]
    if bad or not names:
        raise ValueError(f"--table: expected {', '.join(TABLES)} or all, got {text!r}")
    return names


def _check(args: argparse.Namespace) -> tuple[int, int, list[str]]:
    from gateway.cli.probe_modbus import parse_range

    if not 0 <= args.device <= 247:
        raise ValueError(f"--device: expected 0..247, got {args.device}")
    if not 0.05 <= args.timeout <= 60:
        raise ValueError(f"--timeout: expected 0.05..60 s, got {args.timeout:g}")
    if args.watch and (args.watch < 2 or args.watch > 1000):
        raise ValueError(f"--watch: expected 2..1000 reads, got {args.watch}")
    if args.interval <= 0:
        raise ValueError("--interval: expected a number of seconds above 0")
    if args.dump is not None and args.dump.exists() and not args.force:
        raise ValueError(f"--dump: {args.dump} exists (use --force to overwrite)")
    if args.dump is not None and not args.dump.parent.is_dir():
        raise ValueError(f"--dump: directory {args.dump.parent} does not exist")
    lo, hi = parse_range(args.range)
    return lo, hi, _tables(args.table)


async def _snapshots(args: argparse.Namespace, lo: int, hi: int, tables: list[str]
                     ) -> tuple[list[tuple[datetime, dict[tuple[str, int], int]]], Any]:
    from gateway.cli.probe_modbus import Probe, ReadPlan

    out = []
    last = ReadPlan()
    async with Probe(args.endpoint, device_id=args.device, timeout_s=args.timeout,
                     baudrate=args.baudrate, parity=args.parity, stopbits=args.stopbits,
                     max_reads=args.max_reads, chunk=args.chunk) as probe:
        for i in range(max(1, args.watch)):
            if i:
                await asyncio.sleep(args.interval)
            plan = ReadPlan(reads=last.reads)
            for table in tables:
                await probe.read(table, lo, hi, plan)
            if not args.json and args.watch:
                print(f"read {i + 1}/{args.watch}: {len(plan.values)} values", file=sys.stderr)
            out.append((datetime.now(UTC), plan.values))
            last = plan
    return out, last


def _run_modbus(args: argparse.Namespace) -> int:
    import logging

    lo, hi, tables = _check(args)
    # pymodbus reports every failed connect and timeout itself; this command says it once
    logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
    snaps, plan = asyncio.run(_snapshots(args, lo, hi, tables))
    from gateway.workbench.registers import pair_readings, register_readings
    from gateway.workbench.watch import watch_report

    latest = snaps[-1][1]
    if not latest:
        reasons = "; ".join(sorted({r[3] for r in plan.refused})) or "nothing answered"
        raise ValueError(f"device {args.device} refused every read in {args.range}: {reasons} "
                         "(is the device id right, and does the station serve that table?)")
    report = watch_report([s for _, s in snaps]) if len(snaps) >= 2 else None
    out: dict[str, Any] = {"endpoint": args.endpoint, "device_id": args.device,
                           "reads": plan.reads, "refused": [list(r) for r in plan.refused_ranges()],
                           "tables": {}}
    now = time.time()
    for table in tables:
        block = {a: v for (t, a), v in latest.items() if t == table}
        if not block:
            continue
        if table in ("coils", "discrete"):
            out["tables"][table] = {"bits": [[a, v] for a, v in sorted(block.items())]}
            continue
        out["tables"][table] = {
            "registers": [_row(r) for r in register_readings(block)],
            "pairs": [_row(p) for p in pair_readings(block, now_s=now)
                      if args.all_pairs or args.json or p.hints],
        }
    if report is not None:
        out["watch"] = {
            "snapshots": report.snapshots,
            "changed": [[t, a, n] for (t, a), n in sorted(report.changed.items())],
            "counters": [{"table": c.table, "address": c.address, "width": c.width,
                          "order": c.order, "steps": c.steps, "values": list(c.values)}
                         for c in report.counters],
            "blocks": [list(b) for b in report.blocks],
            "ring": list(report.ring) if report.ring else None,
            "notes": report.notes,
        }
    if args.dump is not None:
        _write_dump(args, snaps)
    if args.json:
        print(json.dumps(out, indent=1, default=str))
    else:
        _print(out, report)
    return 0


def _row(obj: Any) -> dict[str, Any]:
    return {name: getattr(obj, name) for name in obj.__slots__}


def _write_dump(args: argparse.Namespace,
                snaps: list[tuple[datetime, dict[tuple[str, int], int]]]) -> None:
    import os

    from gateway.workbench.dump import Dump, Snapshot, dump_to_json

    text = dump_to_json(Dump(args.device, tuple(Snapshot(at, v) for at, v in snaps),
                             comment=f"leakfleet probe modbus {args.endpoint} --range "
                                     f"{args.range}"))
    flags = os.O_WRONLY | os.O_CREAT | os.O_NOFOLLOW | (os.O_TRUNC if args.force else os.O_EXCL)
    try:
        fd = os.open(args.dump, flags, 0o644)
    except FileExistsError:
        raise ValueError(f"--dump: {args.dump} exists (use --force to overwrite)") from None
    except OSError as exc:
        raise ValueError(f"--dump: cannot write {args.dump}: {exc.strerror}") from None
    with os.fdopen(fd, "w") as f:
        f.write(text)
    print(f"register dump: {args.dump} ({len(snaps)} snapshot(s))", file=sys.stderr)


def _zero_runs(rows: list[dict[str, Any]], table: str, changed: set[tuple[str, int]]
               ) -> list[tuple[int, int | None, dict[str, Any]]]:
    """Rows as (address, None, row), with runs of 4+ unchanged zeros as (first, last, row)."""
    out: list[tuple[int, int | None, dict[str, Any]]] = []
    run: list[dict[str, Any]] = []

    def flush() -> None:
        if len(run) >= 4:
            out.append((run[0]["address"], run[-1]["address"], run[0]))
        else:
            out.extend((r["address"], None, r) for r in run)
        run.clear()

    for r in rows:
        quiet = r["value"] == 0 and (table, r["address"]) not in changed
        if quiet and (not run or r["address"] == run[-1]["address"] + 1):
            run.append(r)
            continue
        flush()
        if quiet:
            run.append(r)
        else:
            out.append((r["address"], None, r))
    flush()
    return out


def _print(out: dict[str, Any], report: Any) -> None:
    from rich.console import Console
    from rich.table import Table

    console = Console()
    changed = set()
    if report is not None:
        changed = {(t, a) for (t, a) in report.changed}
    console.print(f"[bold]{out['endpoint']}[/] device {out['device_id']}: "
                  f"{out['reads']} read(s), read-only")
    for table, data in out["tables"].items():
        if "bits" in data:
            bits = " ".join(f"{a}:{v}{'*' if (table, a) in changed else ''}"
                            for a, v in data["bits"])
            console.print(f"[bold]{table}[/] {bits}")
            continue
        grid = Table(title=f"{table} registers", show_lines=False)
        for col in ("address", "uint16", "int16", "hex", "bits", "chars", "hints"):
            grid.add_column(col, justify="right" if col in ("address", "uint16", "int16")
                            else "left")
        for first, last, r in _zero_runs(data["registers"], table, changed):
            if last is not None:  # a run of unchanged zeros, one row
                grid.add_row(f"{first}-{last}", "0", "0", "0x0000", "", "", "all zero",
                             style="dim")
                continue
            mark = "*" if (table, r["address"]) in changed else ""
            style = "bold yellow" if mark else None
            grid.add_row(f"{r['address']}{mark}", str(r["value"]), str(r["int16"]), r["hex"],
                         r["bits"], r["chars"], " ".join(r["hints"]), style=style)
        console.print(grid)
        if data["pairs"]:
            pairs = Table(title=f"{table} pairs (address, address+1)")
            for col in ("address", "order", "float32", "int32", "uint32", "hints"):
                pairs.add_column(col)
            for p in data["pairs"]:
                pairs.add_row(str(p["address"]), p["order"], f"{p['float32']:.7g}",
                              str(p["int32"]), str(p["uint32"]), " ".join(p["hints"]))
            console.print(pairs)
    for table, lo, hi, why in out["refused"]:
        console.print(f"[dim]{table} {lo}-{hi}: {why}[/]")
    if report is not None:
        console.print("[bold]What changed[/] (* in the tables): "
                      f"{len(report.changed)} address(es) over {report.snapshots} reads")
        for c in report.counters[:5]:
            console.print(f"  counter candidate: {c.label}, stepped {c.steps} time(s): "
                          f"{', '.join(map(str, c.values[-4:]))}")
        for table, lo, hi in report.blocks:
            console.print(f"  changes with the counter: {table} {lo}-{hi}")
        for note in report.notes:
            console.print(f"  {note}")
