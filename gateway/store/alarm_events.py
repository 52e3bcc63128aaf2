"""Alarm events in the journal: the append-only trail of the alarm table's state changes.

The ``alarms`` table holds each occurrence as it is now (raised, acknowledged, cleared are
updates of one row), which a forwarder cannot follow with a cursor. So every change also
appends one ``alarm_events`` row, in the same transaction as the update (``apply_raise``,
``apply_ack``, ``apply_clear`` run inside ``Journal._transaction``): the journal kind
``alarm`` that sinks forward like results, with the same cursor, backlog and pruning.
"""

from __future__ import annotations

import sqlite3
from datetime import datetime
from typing import Any

from gateway.records import AlarmEvent
from gateway.store._sqlite import from_us, to_us

__all__ = ["ALARM_EVENT_COLUMNS", "ALARM_EVENT_SCHEMA", "alarm_event_from", "apply_ack",
           "apply_clear", "apply_raise", "backfill"]

ALARM_EVENT_SCHEMA: tuple[str, ...] = (
    """CREATE TABLE alarm_events (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        alarm_id INTEGER NOT NULL,
        key TEXT NOT NULL,
        rule TEXT NOT NULL,
        station TEXT,
        severity TEXT NOT NULL,
        message TEXT NOT NULL,
        change TEXT NOT NULL,
        at INTEGER NOT NULL,
        since INTEGER NOT NULL,
        by TEXT
    )""",
    "CREATE INDEX ix_alarm_events_at ON alarm_events (at)",
)

#: the columns ``alarm_event_from`` rebuilds a record from, in its order
ALARM_EVENT_COLUMNS = "alarm_id, key, rule, station, severity, message, change, at, since, by"
_INSERT = (f"INSERT OR IGNORE INTO alarm_events (record_id, {ALARM_EVENT_COLUMNS}) "
           "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)")
_OCCURRENCE = "SELECT id, key, rule, station, severity, message, since FROM alarms"


def alarm_event_from(row: tuple[Any, ...]) -> AlarmEvent:
    alarm_id, key, rule, station, severity, message, change, at, since, by = row
    return AlarmEvent(int(alarm_id), key, rule, station, severity, message, change,
                      from_us(at), from_us(since), by)


def _append(conn: sqlite3.Connection, occurrence: tuple[Any, ...], change: str, at: int,
            by: str | None = None) -> None:
    alarm_id, key, rule, station, severity, message, since = occurrence
    event = AlarmEvent(int(alarm_id), key, rule, station, severity, message, change,
                       from_us(at), from_us(since), by)
    conn.execute(_INSERT, (event.record_id, alarm_id, key, rule, station, severity, message,
                           change, at, since, by))


def apply_raise(conn: sqlite3.Connection, condition: Any, at: datetime) -> bool:
    """Open an occurrence for ``condition`` (an ``analytics.alarms.Condition``) and append its
    "raised" event; False when one is already open for its key."""
    now = to_us(at)
    c = condition
    cur = conn.execute(
        "INSERT OR IGNORE INTO alarms (key, rule, station, severity, message, since, "
        "raised_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
        (c.key, c.rule, c.station, c.severity, c.message, to_us(c.since), now),
    )
    if cur.rowcount != 1:
        return False  # already open (another evaluator got there first)
    row = conn.execute(f"{_OCCURRENCE} WHERE id = ?", (cur.lastrowid,)).fetchone()
    _append(conn, row, "raised", now)
    return True


def apply_clear(conn: sqlite3.Connection, key: str, at: datetime) -> bool:
    """Clear the open occurrence of ``key`` and append its "cleared" event."""
    row = conn.execute(f"{_OCCURRENCE} WHERE key = ? AND cleared_at IS NULL", (key,)).fetchone()
    if row is None:
        return False
    now = to_us(at)
    conn.execute("UPDATE alarms SET cleared_at = ? WHERE id = ?", (now, row[0]))
    _append(conn, row, "cleared", now)
    return True


def apply_ack(conn: sqlite3.Connection, alarm_id: int, by: str, at: datetime) -> bool:
    """Acknowledge an open, unacknowledged occurrence and append its "acknowledged" event."""
    row = conn.execute(f"{_OCCURRENCE} WHERE id = ? AND acked_at IS NULL AND cleared_at IS NULL",
                       (alarm_id,)).fetchone()
    if row is None:
        return False
    now = to_us(at)
    conn.execute("UPDATE alarms SET acked_at = ?, acked_by = ? WHERE id = ?", (now, by, alarm_id))
    _append(conn, row, "acknowledged", now, by)
    return True


def backfill(conn: sqlite3.Connection) -> int:
    """Events for open occurrences that have none: alarms raised (and acknowledged) before
    the journal kept events, so their retained MQTT state appears after an upgrade too.
    Returns how many events were appended."""
    rows = conn.execute(
        f"{_OCCURRENCE.replace('FROM alarms', ', raised_at, acked_at, acked_by FROM alarms a')}"
        " WHERE cleared_at IS NULL AND NOT EXISTS "
        "(SELECT 1 FROM alarm_events e WHERE e.alarm_id = a.id) ORDER BY id").fetchall()
    for *occurrence, raised, acked, by in rows:
        _append(conn, tuple(occurrence), "raised", raised)
        if acked is not None:
            _append(conn, tuple(occurrence), "acknowledged", acked, by)
    return len(rows)
