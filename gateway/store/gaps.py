"""Cycles known to be lost, on record in the journal (never only in a log line).

Two ways a gap is found: a reader knows cycles were overwritten in a station's ring before it
could read them (a ``GapEvent`` with source "ring"), or the journal sees a station's cycle
numbers skip (source "sequence": cycle 41 stored, next one 44, so 42..43 never arrived). A
range a reader has already reported is not recorded twice; a counter that goes back (a station
reset, a wrap, an older record read again after a restart) is not a gap.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Sequence
from datetime import datetime
from typing import Any

from gateway.clock import utcnow
from gateway.records import GapEvent
from gateway.store._sqlite import from_us, to_us

__all__ = ["GAP_SCHEMA", "gaps", "record_gaps"]

GAP_SCHEMA: tuple[str, ...] = (
    """CREATE TABLE gaps (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        line TEXT NOT NULL DEFAULT '',
        at INTEGER NOT NULL,
        first INTEGER NOT NULL,
        last INTEGER NOT NULL,
        source TEXT NOT NULL,
        detail TEXT NOT NULL DEFAULT ''
    )""",
    "CREATE INDEX ix_gaps_station ON gaps (station, at)",
)
_INSERT = ("INSERT OR IGNORE INTO gaps (record_id, station, line, at, first, last, source, "
           "detail) VALUES (?, ?, ?, ?, ?, ?, ?, ?)")
MAX_SEQUENCE_GAP = 100_000  # a jump further than this is a renumbered counter, not lost cycles


def record_gaps(conn: sqlite3.Connection, reported: Sequence[GapEvent], after_seq: int,
                last: dict[str, int]) -> tuple[int, int]:
    """Store the readers' gaps, then the sequence gaps among the results this batch stored
    (seq above ``after_seq``, in arrival order), inside the caller's transaction. ``last``
    holds each station's newest stored cycle and is kept up to date; a station not in it is
    looked up once. Returns (reported gaps stored, sequence gaps found)."""
    n = 0
    for g in reported:
        n += conn.execute(_INSERT, (g.record_id, g.station, g.line, to_us(g.at), g.first,
                                    g.last, g.source, g.detail)).rowcount
    found_seq = 0
    now = utcnow()
    rows = conn.execute("SELECT station, line, cycle FROM results WHERE seq > ? ORDER BY seq",
                        (after_seq,)).fetchall()
    for station, line, cycle in rows:
        if station not in last:
            found = conn.execute("SELECT cycle FROM results WHERE station = ? AND seq <= ? "
                                 "ORDER BY seq DESC LIMIT 1", (station, after_seq)).fetchone()
            if found is None:
                last[station] = cycle  # first result of this station: nothing to compare
                continue
            last[station] = int(found[0])
        prev = last[station]
        if prev + 1 < cycle <= prev + MAX_SEQUENCE_GAP:
            lo, hi = prev + 1, cycle - 1
            covered = conn.execute(
                "SELECT 1 FROM gaps WHERE station = ? AND first <= ? AND last >= ? LIMIT 1",
                (station, hi, lo)).fetchone()
            if covered is None:
                g = GapEvent(station=station, at=now, first=lo, last=hi, source="sequence",
                             detail=f"cycle numbers skipped from {prev} to {cycle}", line=line)
                found_seq += conn.execute(_INSERT, (g.record_id, station, line, to_us(now), lo,
                                                    hi, g.source, g.detail)).rowcount
        last[station] = cycle  # also backwards: a reset or a wrap starts counting again
    return n, found_seq


def gaps(journal: Any, station: str | None = None, since: datetime | None = None
         ) -> list[GapEvent]:
    """Recorded gaps, newest first."""
    sql = "SELECT station, line, at, first, last, source, detail FROM gaps WHERE 1 = 1"
    params: list[Any] = []
    if station is not None:
        sql += " AND station = ?"
        params.append(station)
    if since is not None:
        sql += " AND at >= ?"
        params.append(to_us(since))
    rows = journal._query(sql + " ORDER BY seq DESC", params, "reading gaps")
    return [GapEvent(station=s, line=ln, at=from_us(at), first=f, last=la, source=src,
                     detail=d) for s, ln, at, f, la, src, d in rows]
