"""The journal's logbook: maintenance events and the fleet's alarm states.

Both are written by people or by the alarm evaluator rather than by stations, so they live
beside the records in the same journal file (one backup, one retention story) but have their
own small API. Alarm states are what lets two screens, the shift report and a plant's alerting
agree: an alarm has one row per occurrence, raised → (acknowledged by whom, when) → cleared,
and at most one open occurrence per key (a unique partial index enforces it).
"""

from __future__ import annotations

import contextlib
import sqlite3
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from functools import partial
from pathlib import Path
from typing import Any, Protocol

import pandas as pd

from gateway.errors import StoreError
from gateway.records import MaintenanceEvent
from gateway.store._sqlite import from_us, to_us
from gateway.store.alarm_events import apply_ack, apply_clear, apply_raise, backfill

__all__ = ["AlarmRow", "Logbook", "read_alarms"]


class _Journal(Protocol):
    def _query(self, sql: str, params: Sequence[Any], action: str) -> list[tuple[Any, ...]]: ...
    def _execute_write(self, sql: str, params: Sequence[Any], action: str) -> None: ...
    def _transaction(self, work: Callable[[sqlite3.Connection], Any], action: str) -> Any: ...


@dataclass(frozen=True, slots=True)
class AlarmRow:
    """One alarm occurrence as the journal keeps it."""

    id: int
    key: str
    rule: str
    station: str | None
    severity: str
    message: str
    since: datetime
    raised_at: datetime
    acked_at: datetime | None
    acked_by: str | None
    cleared_at: datetime | None

    @property
    def state(self) -> str:
        if self.cleared_at is not None:
            return "cleared"
        return "acknowledged" if self.acked_at is not None else "active"


_ALARM_COLS = ("id, key, rule, station, severity, message, since, raised_at, acked_at, "
               "acked_by, cleared_at")


def _alarm(row: tuple[Any, ...]) -> AlarmRow:
    i, key, rule, station, sev, msg, since, raised, acked, by, cleared = row
    return AlarmRow(int(i), key, rule, station, sev, msg, from_us(since), from_us(raised),
                    None if acked is None else from_us(acked), by,
                    None if cleared is None else from_us(cleared))


class Logbook:
    """Maintenance and alarm states in a journal (``gateway.store.open_journal``)."""

    def __init__(self, journal: _Journal) -> None:
        self._j = journal

    # -- maintenance ------------------------------------------------------------------------
    def add_maintenance(self, event: MaintenanceEvent) -> bool:
        """Store an event; False when the same one (station, time, kind) is already there."""
        before = self._j._query("SELECT COUNT(*) FROM maintenance WHERE record_id = ?",
                                (event.record_id,), "reading maintenance")[0][0]
        if before:
            return False
        assert event.entered_at is not None
        self._j._execute_write(
            "INSERT INTO maintenance (record_id, station, at, kind, note, entered_by, "
            "entered_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
            (event.record_id, event.station, to_us(event.at), event.what, event.note,
             event.by, to_us(event.entered_at)),
            "storing a maintenance event",
        )
        return True

    def maintenance(self, station: str | None = None, since: datetime | None = None
                    ) -> list[MaintenanceEvent]:
        """Events, oldest first (one station's, or all)."""
        sql = "SELECT station, at, kind, note, entered_by, entered_at FROM maintenance"
        where: list[str] = []
        params: list[Any] = []
        if station is not None:
            where.append("station = ?")
            params.append(station)
        if since is not None:
            where.append("at >= ?")
            params.append(to_us(since))
        if where:
            sql += " WHERE " + " AND ".join(where)
        rows = self._j._query(sql + " ORDER BY at, seq", params, "reading maintenance")
        return [MaintenanceEvent(st, from_us(at), kind, note, by, from_us(entered))
                for st, at, kind, note, by, entered in rows]

    def maintenance_frame(self, station: str | None = None) -> pd.DataFrame:
        events = self.maintenance(station)
        return pd.DataFrame(
            [{"station": e.station, "at": e.at, "kind": e.what, "note": e.note, "by": e.by}
             for e in events],
            columns=["station", "at", "kind", "note", "by"],
        )

    # -- alarms -----------------------------------------------------------------------------
    def open_alarms(self) -> list[AlarmRow]:
        rows = self._j._query(f"SELECT {_ALARM_COLS} FROM alarms WHERE cleared_at IS NULL "
                              "ORDER BY since, id", (), "reading alarms")
        return [_alarm(r) for r in rows]

    def alarms(self, since: datetime | None = None, until: datetime | None = None
               ) -> list[AlarmRow]:
        """Every occurrence open at some time in [since, until], oldest first."""
        sql = f"SELECT {_ALARM_COLS} FROM alarms WHERE 1 = 1"
        params: list[Any] = []
        if since is not None:
            sql += " AND (cleared_at IS NULL OR cleared_at >= ?)"
            params.append(to_us(since))
        if until is not None:
            sql += " AND raised_at <= ?"
            params.append(to_us(until))
        return [_alarm(r) for r in self._j._query(sql + " ORDER BY since, id", params,
                                                   "reading alarms")]

    def apply(self, transitions: Iterable[Any], at: datetime | None = None) -> int:
        """Apply ``analytics.alarms.transitions`` (raise / clear); returns how many changed.
        Each change appends its alarm event in the same transaction (gateway.store.
        alarm_events), so a sink forwarding alarms sees every change or none."""
        now = at or datetime.now(UTC)
        n = 0
        for t in transitions:
            if t.change == "raise" and t.condition is not None:
                n += self._j._transaction(partial(apply_raise, condition=t.condition, at=now),
                                          "raising an alarm")
            elif t.change == "clear":
                n += self._j._transaction(partial(apply_clear, key=t.key, at=now),
                                          "clearing an alarm")
        return n

    def backfill_events(self) -> int:
        """Events for open alarms raised before the journal kept events (see
        ``alarm_events.backfill``); the evaluator calls it every round, a no-op after once."""
        return int(self._j._transaction(backfill, "writing alarm events"))

    def acknowledge(self, alarm_id: int, by: str, at: datetime | None = None) -> bool:
        """Acknowledge an open alarm; False when it is not open (or already acknowledged)."""
        if not by.strip() or any(ord(ch) < 32 for ch in by):
            raise ValueError("say who acknowledges (one line of text)")
        when = at or datetime.now(UTC)
        return self._j._transaction(lambda conn: apply_ack(conn, alarm_id, by.strip(), when),
                                    "acknowledging an alarm")


class _ReadOnly:
    """A journal file opened read-only, enough for the logbook's readers (reports)."""

    def __init__(self, conn: sqlite3.Connection) -> None:
        self._conn = conn

    def _query(self, sql: str, params: Sequence[Any], action: str) -> list[tuple[Any, ...]]:
        return self._conn.execute(sql, params).fetchall()

    def _execute_write(self, sql: str, params: Sequence[Any], action: str) -> None:
        raise StoreError(f"{action}: the journal is open read-only")

    def _transaction(self, work: Callable[[sqlite3.Connection], Any], action: str) -> Any:
        raise StoreError(f"{action}: the journal is open read-only")


def read_alarms(path: str | Path, since: datetime | None = None,
                until: datetime | None = None) -> list[AlarmRow] | None:
    """``Logbook.alarms`` of the journal file at ``path`` without opening it for writing (no
    migration, no lock); None when it has no alarm table (an older or foreign file)."""
    try:
        with contextlib.closing(sqlite3.connect(f"file:{path}?mode=ro", uri=True)) as conn:
            return Logbook(_ReadOnly(conn)).alarms(since, until)
    except sqlite3.Error:
        return None
