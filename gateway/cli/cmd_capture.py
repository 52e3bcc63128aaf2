"""``leakfleet capture``: record what a serial station sends, read-only, for ``profile check``."""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import json
import os
import sys
import time
from collections.abc import AsyncIterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

ORDER = 61


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "capture",
        help="record what a serial station sends into a capture file (read-only)",
        description=(
            "Listens to a serial station (a serial device, or a serial device server over TCP) "
            "and writes every byte it sends, unchanged, to a capture file that "
            "'leakfleet profile check PROFILE FILE' reads; a second file FILE.times.jsonl says "
            "when each piece arrived. Nothing is ever sent to the station: a station that only "
            "answers queries (request mode) stays silent here. Stops after --lines lines, "
            "--seconds seconds or Ctrl-C. --try listens briefly at the usual baud rates and "
            "parities and shows which turns the bytes into readable text."
        ),
        epilog=(
            "examples:\n"
            "  leakfleet capture tcp://192.0.2.20:4001 --lines 50 --out station.txt\n"
            "  leakfleet capture /dev/ttyUSB0 --baudrate 9600 --parity E --bytesize 7 "
            "--seconds 120 --out station.txt\n"
            "  leakfleet capture /dev/ttyUSB0 --try"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("endpoint", metavar="ENDPOINT",
                        help="tcp://host:port, a serial device path, or a pyserial URL "
                        "(socket://host:port, rfc2217://host:port)")
    parser.add_argument("--out", type=Path, default=Path("capture.txt"), metavar="FILE",
                        help="capture file (default capture.txt; never overwritten without "
                        "--force)")
    parser.add_argument("--force", action="store_true", help="overwrite an existing file")
    parser.add_argument("--lines", type=int, default=0, metavar="N",
                        help="stop after N line ends (default: no line limit)")
    parser.add_argument("--seconds", type=float, default=60.0, metavar="S",
                        help="stop after S seconds (default 60)")
    parser.add_argument("--baudrate", type=int, default=9600)
    parser.add_argument("--bytesize", type=int, choices=(5, 6, 7, 8), default=8)
    parser.add_argument("--parity", choices=("N", "E", "O", "M", "S"), default="N")
    parser.add_argument("--stopbits", type=float, choices=(1, 1.5, 2), default=1)
    parser.add_argument("--try", dest="try_settings", action="store_true",
                        help="serial only: listen at the usual settings and rank them")
    parser.add_argument("--try-seconds", type=float, default=3.0, metavar="S",
                        help="listening time per setting with --try (default 3)")
    parser.add_argument("--json", action="store_true", help="machine-readable summary")
    parser.set_defaults(func=_run)


def _check(args: argparse.Namespace) -> None:
    if args.seconds <= 0 or args.seconds > 7 * 86400:
        raise ValueError(f"--seconds: expected above 0 and at most a week, got {args.seconds:g}")
    if args.lines < 0:
        raise ValueError("--lines: expected 0 (no limit) or more")
    if not 50 <= args.baudrate <= 4_000_000:
        raise ValueError(f"--baudrate: expected 50..4000000, got {args.baudrate}")
    if args.try_settings and args.endpoint.startswith(("tcp://", "socket://")):
        raise ValueError("--try: a TCP device server fixes the line settings itself; set them "
                         "there (or try a serial device path)")


@contextlib.asynccontextmanager
async def _open(endpoint: str, settings: tuple[int, int, str, float],
                timeout_s: float) -> AsyncIterator[asyncio.StreamReader]:
    """A reader for the endpoint; the writer is closed unused (we never send)."""
    from gateway.drivers.lines import split_host_port

    writer: Any = None
    try:
        if endpoint.startswith("tcp://"):
            host, port = split_host_port(endpoint[len("tcp://"):])
            reader, writer = await asyncio.wait_for(asyncio.open_connection(host, port),
                                                    timeout_s)
        elif "://" in endpoint and not endpoint.startswith(("socket://", "rfc2217://")):
            raise ValueError(f"endpoint {endpoint!r}: expected tcp://host:port, a serial device "
                             "path, socket://host:port or rfc2217://host:port")
        else:
            import serial_asyncio_fast

            baud, size, parity, stop = settings
            reader, writer = await asyncio.wait_for(
                serial_asyncio_fast.open_serial_connection(
                    url=endpoint, baudrate=baud, bytesize=size, parity=parity, stopbits=stop),
                timeout_s,
            )
    except (OSError, TimeoutError) as exc:
        from gateway.errors import TransportError

        if isinstance(exc, ConnectionRefusedError):
            why = "connection refused (nothing listening there)"
        elif isinstance(exc, TimeoutError):
            why = "no connection within the time allowed"
        else:
            why = exc.strerror or str(exc)
        raise TransportError(f"cannot open {endpoint}: {why}") from None
    try:
        yield reader
    finally:
        if writer is not None:
            writer.close()
            with contextlib.suppress(OSError, ConnectionError):
                await writer.wait_closed()


async def _listen(endpoint: str, settings: tuple[int, int, str, float], seconds: float,
                  lines: int, sink: Any = None) -> tuple[bytes, int]:
    """Bytes received within ``seconds`` (stopping early at ``lines`` line ends)."""
    data = bytearray()
    ends = 0
    deadline = time.monotonic() + seconds
    async with _open(endpoint, settings, min(seconds, 10.0)) as reader:
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                break
            try:
                chunk = await asyncio.wait_for(reader.read(4096), left)
            except TimeoutError:
                break
            except OSError as exc:
                from gateway.errors import TransportError

                raise TransportError(f"{endpoint}: read failed: {exc}") from None
            if not chunk:
                break  # the other end closed
            data += chunk
            ends += chunk.count(b"\n")
            if sink is not None:
                sink(chunk)
            if lines and ends >= lines:
                break
    return bytes(data), ends


def _run(args: argparse.Namespace) -> int:
    _check(args)
    if args.try_settings:
        return _try(args)
    out: Path = args.out
    if out.is_dir():
        raise ValueError(f"--out: {out} is a directory")
    if not out.parent.is_dir():
        raise ValueError(f"--out: directory {out.parent} does not exist")
    flags = os.O_WRONLY | os.O_CREAT | os.O_NOFOLLOW | (os.O_TRUNC if args.force else os.O_EXCL)
    times_path = out.with_name(out.name + ".times.jsonl")
    try:
        fd = os.open(out, flags, 0o644)
        tfd = os.open(times_path, flags, 0o644)
    except FileExistsError as exc:
        raise ValueError(f"--out: {exc.filename} exists (use --force to overwrite)") from None
    except OSError as exc:
        raise ValueError(f"--out: cannot write {exc.filename}: {exc.strerror}") from None
    settings = (args.baudrate, args.bytesize, args.parity, args.stopbits)
    offset = 0
    with os.fdopen(fd, "wb") as raw, os.fdopen(tfd, "w") as stamps:

        def sink(chunk: bytes) -> None:
            nonlocal offset
            raw.write(chunk)
            raw.flush()
            stamps.write(json.dumps({"at": datetime.now(UTC).isoformat(), "offset": offset,
                                     "bytes": len(chunk)}) + "\n")
            offset += len(chunk)
            if not args.json:
                print(f"\r{offset} bytes", end="", file=sys.stderr, flush=True)

        with contextlib.suppress(KeyboardInterrupt):  # Ctrl-C ends a capture: keep what came
            asyncio.run(_listen(args.endpoint, settings, args.seconds, args.lines, sink))
    if not args.json:
        print(file=sys.stderr)
    from gateway.workbench.text import readability

    captured = out.read_bytes()
    score = readability(captured)
    summary = {"file": str(out), "times": str(times_path), "bytes": len(captured),
               "line_ends": captured.count(b"\n"), "text_share": round(score.text_share, 3),
               "verdict": score.verdict}
    if args.json:
        print(json.dumps(summary))
    elif not captured:
        for path in (out, times_path):  # nothing to keep: no empty capture left behind
            path.unlink(missing_ok=True)
        raise ValueError(
            f"silence: nothing arrived from {args.endpoint} in {args.seconds:g} s (a station "
            "in request mode answers only queries; otherwise check the endpoint, the cable "
            "and the line settings, or try --try)"
        )
    else:
        print(f"captured {len(captured)} bytes, {summary['line_ends']} line end(s) into {out} "
              f"({score.verdict}, {score.text_share:.0%} text); next: leakfleet profile check "
              f"PROFILE {out}")
    return 0


def _try(args: argparse.Namespace) -> int:
    from gateway.workbench.text import COMMON_SETTINGS, readability

    rows = []
    for settings in COMMON_SETTINGS:
        data, _ = asyncio.run(_listen(args.endpoint, settings, args.try_seconds, 0))
        r = readability(data)
        rows.append((settings, r))
        if not args.json:
            baud, size, parity, stop = settings
            print(f"{baud:>6} {size}{parity}{stop:g}: {r.bytes:>5} bytes, {r.text_share:>4.0%} "
                  f"text, {r.line_ends:>3} line end(s)  {r.verdict}", file=sys.stderr)
    best = max(rows, key=lambda x: (x[1].score, x[1].bytes))
    if args.json:
        print(json.dumps({"tried": [{"settings": list(s), "bytes": r.bytes,
                                     "text_share": r.text_share, "line_ends": r.line_ends,
                                     "verdict": r.verdict} for s, r in rows],
                          "best": list(best[0]) if best[1].bytes else None}))
        return 0
    if best[1].bytes == 0:
        raise ValueError(f"silence at every setting tried on {args.endpoint}: the station sends "
                         "nothing unasked (request mode?) or is not connected")
    baud, size, parity, stop = best[0]
    print(f"best: --baudrate {baud} --bytesize {size} --parity {parity} --stopbits {stop:g} "
          f"({best[1].verdict})")
    return 0
