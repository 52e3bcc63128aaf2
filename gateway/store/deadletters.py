"""Records a sink's server refused (not "down": refused), parked per sink with the reason.

A record the server will never take (a timestamp outside its range, a payload over the
broker's limit) must not stop the sink for ever: the forwarder isolates it by splitting the
batch, parks it here with the server's words, and moves its cursor on. The record itself
stays in the journal; this table says which sink does not have it and why.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from datetime import UTC, datetime
from typing import Any

from gateway.store._sqlite import from_us, to_us

__all__ = ["DEAD_LETTER_SCHEMA", "dead_letters", "park"]

DEAD_LETTER_SCHEMA: tuple[str, ...] = (
    """CREATE TABLE dead_letters (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        sink TEXT NOT NULL,
        kind TEXT NOT NULL,
        record_seq INTEGER NOT NULL,
        record_id TEXT NOT NULL,
        station TEXT NOT NULL,
        at INTEGER NOT NULL,
        reason TEXT NOT NULL,
        record TEXT NOT NULL,
        UNIQUE (sink, kind, record_seq)
    )""",
    "CREATE INDEX ix_dead_letters_sink ON dead_letters (sink, at)",
)


def park(journal: Any, sink: str, kind: str, rows: Sequence[tuple[int, Any]], reason: str
         ) -> None:
    """Park refused records (``(seq, record)`` as the forwarder read them)."""
    now = to_us(datetime.now(UTC))
    for seq, record in rows:
        journal._execute_write(
            "INSERT OR IGNORE INTO dead_letters (sink, kind, record_seq, record_id, station, at, "
            "reason, record) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            # a fleet-wide alarm event has no station: "" keeps the column's NOT NULL
            (sink, kind, int(seq), record.record_id, record.station or "", now, reason[:2000],
             json.dumps(record.to_dict(), default=str)),
            "parking a refused record",
        )


def dead_letters(journal: Any, sink: str | None = None) -> list[dict[str, Any]]:
    sql = ("SELECT sink, kind, record_seq, record_id, station, at, reason, record "
           "FROM dead_letters")
    params: list[Any] = []
    if sink is not None:
        sql += " WHERE sink = ?"
        params.append(sink)
    rows = journal._query(sql + " ORDER BY seq", params, "reading dead letters")
    return [{"sink": s, "kind": k, "record_seq": q, "record_id": rid, "station": st,
             "at": from_us(at), "reason": why, "record": json.loads(rec)}
            for s, k, q, rid, st, at, why, rec in rows]
