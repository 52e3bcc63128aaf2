"""Pressure traces in the journal: one row per curve, the samples packed, not one row per sample.

A curve of a long test holds thousands of samples; as rows they would dwarf the results table.
Packed as little-endian float64 and zlib-compressed they are lossless (the back-down analysis
differences samples a few pascals apart at hundreds of kilopascals, which float32 would round)
and still a few kilobytes each. Traces are kept for a shorter time than results where a plant
says so (``prune_traces``).
"""

from __future__ import annotations

import json
import sys
import zlib
from array import array
from collections.abc import Sequence
from datetime import datetime
from typing import Any, Protocol

from gateway.records import PressureTrace
from gateway.store._sqlite import from_us, to_us

__all__ = ["INSERT_TRACE", "TRACE_COLUMNS", "TRACE_SCHEMA", "pack", "prune_traces", "trace_from",
           "trace_row", "traces", "unpack"]

TRACE_SCHEMA: tuple[str, ...] = (
    """CREATE TABLE traces (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        cycle INTEGER NOT NULL,
        role TEXT NOT NULL,
        program TEXT NOT NULL,
        ended_at INTEGER NOT NULL,
        received_at INTEGER NOT NULL,
        started_at INTEGER NOT NULL,
        sample_interval_s REAL NOT NULL,
        samples INTEGER NOT NULL,
        pressures BLOB NOT NULL,
        phases TEXT NOT NULL,
        profile TEXT NOT NULL,
        time_source TEXT NOT NULL
    )""",
    "CREATE INDEX ix_traces_station_time ON traces (station, role, ended_at)",
)

INSERT_TRACE = (
    "INSERT OR IGNORE INTO traces (record_id, station, line, cycle, role, program, ended_at, "
    "received_at, started_at, sample_interval_s, samples, pressures, phases, profile, "
    "time_source) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
)


class _Journal(Protocol):
    def _query(self, sql: str, params: Sequence[Any], action: str) -> list[tuple[Any, ...]]: ...
    def _execute_write(self, sql: str, params: Sequence[Any], action: str) -> None: ...


def pack(values: Sequence[float]) -> bytes:
    """Little-endian float64, zlib-compressed (the standard library's ``array``: no numpy on
    the gateway's start-up path)."""
    doubles = array("d", values)
    if sys.byteorder == "big":
        doubles.byteswap()
    return zlib.compress(doubles.tobytes(), 6)


def unpack(blob: bytes) -> tuple[float, ...]:
    doubles = array("d")
    doubles.frombytes(zlib.decompress(blob))
    if sys.byteorder == "big":
        doubles.byteswap()
    return tuple(doubles)


def trace_row(t: PressureTrace) -> tuple[Any, ...]:
    return (t.record_id, t.station, t.line, t.cycle, t.role, t.program, to_us(t.ended_at),
            to_us(t.received_at), to_us(t.started_at), t.sample_interval_s,
            len(t.pressures_pa), pack(t.pressures_pa), json.dumps(list(t.phases)), t.profile,
            t.time_source)


#: the columns ``trace_from`` rebuilds a record from, in its order
TRACE_COLUMNS = ("station, line, cycle, role, program, ended_at, received_at, started_at, "
                 "sample_interval_s, pressures, phases, profile, time_source")


def trace_from(row: tuple[Any, ...]) -> PressureTrace:
    (station, line, cycle, role, program, ended, received, started, interval, blob, phases,
     profile, source) = row
    return PressureTrace(
        station=station, line=line, cycle=int(cycle), ended_at=from_us(ended),
        received_at=from_us(received), started_at=from_us(started),
        sample_interval_s=float(interval), pressures_pa=unpack(blob),
        phases=tuple((str(n), float(t)) for n, t in json.loads(phases)), role=role,
        program=program, profile=profile, time_source=source,
    )  # fmt: skip


def traces(
    journal: _Journal,
    station: str,
    *,
    role: str | None = None,
    program: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    limit: int | None = None,
) -> list[PressureTrace]:
    """A station's traces, newest first (all roles unless ``role`` is given)."""
    sql = f"SELECT {TRACE_COLUMNS} FROM traces WHERE station = ?"
    params: list[Any] = [station]
    for column, op, value in (("role", "=", role), ("program", "=", program),
                              ("ended_at", ">=", since), ("ended_at", "<", until)):
        if value is not None:
            sql += f" AND {column} {op} ?"
            params.append(to_us(value) if isinstance(value, datetime) else value)
    sql += " ORDER BY ended_at DESC, seq DESC"
    if limit is not None:
        sql += " LIMIT ?"
        params.append(int(limit))
    return [trace_from(r) for r in journal._query(sql, params, "reading traces")]


def prune_traces(journal: _Journal, older_than: datetime) -> None:
    """Drop traces that ended before ``older_than`` (traces may be kept shorter than results)."""
    journal._execute_write("DELETE FROM traces WHERE ended_at < ?", (to_us(older_than),),
                           "pruning traces")
