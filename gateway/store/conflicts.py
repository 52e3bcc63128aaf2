"""Re-sends that disagree with what the journal holds: kept, not dropped.

A record whose key (station, cycle, end time) matches a stored one is normally a true repeat
(a ring read again after a restart, a line sent twice) and is ignored silently. When its
values differ (a station rebooted with its clock at a fixed date and a reset counter, a
corrected re-send, a reject replacing a pass) the stored record stays and the new one is kept
here with the reason and both raw inputs, so nothing vanishes and a person can decide.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Sequence
from datetime import datetime
from typing import Any

from gateway.clock import utcnow
from gateway.store._sqlite import from_us, to_us

__all__ = ["CONFLICT_SCHEMA", "conflicts", "find_conflicts"]

CONFLICT_SCHEMA: tuple[str, ...] = (
    """CREATE TABLE conflicts (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        kind TEXT NOT NULL,
        record_id TEXT NOT NULL,
        station TEXT NOT NULL,
        detected_at INTEGER NOT NULL,
        reason TEXT NOT NULL,
        stored_raw TEXT,
        new_raw TEXT,
        new_record TEXT NOT NULL,
        UNIQUE (record_id, new_record)
    )""",
    "CREATE INDEX ix_conflicts_station ON conflicts (station, detected_at)",
)

#: the columns two records of the same key must agree on (arrival time, raw text and profile
#: version may differ between true repeats)
_COMPARED = {
    "results": ("program", "verdict", "test_pressure_pa", "pressure_loss_pa", "leak_rate_sccm",
                "reject_limit_sccm", "lower_limit_sccm", "fill_s", "stabilise_s", "test_s",
                "part_id", "reason", "temperature_c", "part_family"),
    "calibrations": ("program", "master_loss_pa", "standard_loss_pa", "standard_sccm",
                     "standard_ref_pressure_pa", "passed"),
}


def find_conflicts(conn: sqlite3.Connection, table: str, columns: Sequence[str],
                   rows: Sequence[tuple[Any, ...]], stations: list[str] | None = None) -> int:
    """Compare ``rows`` (``(record_id, *columns)``, just offered to ``table``) with what the
    table holds under the same ids; store every disagreement. Returns how many were found.
    Runs inside the caller's transaction."""
    compared = _COMPARED[table]
    at = {name: 1 + columns.index(name) for name in (*compared, "station", "raw")}
    found = 0
    for start in range(0, len(rows), 400):
        chunk = rows[start:start + 400]
        marks = ", ".join("?" * len(chunk))
        stored = {r[0]: r[1:] for r in conn.execute(
            f"SELECT record_id, {', '.join(compared)}, raw FROM {table} "
            f"WHERE record_id IN ({marks})", [r[0] for r in chunk])}
        for row in chunk:
            have = stored.get(row[0])
            if have is None:
                continue
            diff = [name for i, name in enumerate(compared) if have[i] != row[at[name]]]
            if not diff:
                continue  # a true repeat
            shown = ", ".join(f"{n} {_plain(have[compared.index(n)])!r} -> "
                              f"{_plain(row[at[n]])!r}" for n in diff[:4])
            new = json.dumps(dict(zip(("record_id", *columns), row, strict=True)), default=str)
            cur = conn.execute(
                "INSERT OR IGNORE INTO conflicts (kind, record_id, station, detected_at, reason, "
                "stored_raw, new_raw, new_record) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                (table.rstrip("s"), row[0], row[at["station"]], to_us(utcnow()),
                 f"re-sent with other values: {shown}", have[-1], row[at["raw"]], new),
            )
            found += cur.rowcount
            if cur.rowcount and stations is not None:
                stations.append(str(row[at["station"]]))
    return found


def _plain(value: Any) -> Any:
    return str(value) if isinstance(value, str) else value  # a StrEnum as its text


def conflicts(journal: Any, station: str | None = None, since: datetime | None = None
              ) -> list[dict[str, Any]]:
    """Stored conflicts, newest first."""
    sql = ("SELECT kind, record_id, station, detected_at, reason, stored_raw, new_raw "
           "FROM conflicts WHERE 1 = 1")
    params: list[Any] = []
    if station is not None:
        sql += " AND station = ?"
        params.append(station)
    if since is not None:
        sql += " AND detected_at >= ?"
        params.append(to_us(since))
    rows = journal._query(sql + " ORDER BY seq DESC", params, "reading conflicts")
    return [{"kind": k, "record_id": rid, "station": st, "detected_at": from_us(at),
             "reason": why, "stored_raw": old, "new_raw": new}
            for k, rid, st, at, why, old, new in rows]
