"""The journal: the gateway's local source of truth, and the seam every forwarder reads from.

Every accepted record is committed here before anything else sees it. Forwarders read forward
from a persisted per-sink cursor (``read_after`` / ``set_cursor``), so a sink that is down delays
its data and never loses it; ``prune`` only removes what every listed sink has passed.

Durability: SQLite in WAL mode with ``synchronous=NORMAL``. A ``write()`` that returned has its
transaction appended to the WAL file in the operating system's page cache, so a crash or
``kill -9`` of the gateway process loses nothing already acknowledged (tested). What NORMAL gives
up against FULL is the fsync at every commit: after an operating-system crash or power loss the
most recent commits (those since the last checkpoint's fsync) can be rolled back, but the file is
never corrupted. Pass ``durable=True`` (``synchronous=FULL``) where a power cut must not lose
even the last batch; it costs one fsync per batch.

Threading: the runtime calls the journal from one writer at a time via ``asyncio.to_thread``
(which may use a different pool thread each call), so the connection allows any thread and a
lock serialises calls. Forwarders may share the same object.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import sqlite3
import threading
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any, Literal, TypeVar

from gateway.errors import StoreError
from gateway.records import (
    CalibrationEvent,
    GapEvent,
    PressureTrace,
    Record,
    Rejected,
    StationState,
    StationStatus,
    TestResult,
    Verdict,
    supplied_pairs,
)
from gateway.store._sqlite import from_us, sqlite_path, store_error, to_us
from gateway.store.alarm_events import ALARM_EVENT_COLUMNS, alarm_event_from
from gateway.store.conflicts import find_conflicts
from gateway.store.gaps import record_gaps
from gateway.store.guard import JournalGone
from gateway.store.schema import (
    CALIBRATION_COLUMNS,
    HOUR_US,
    MIGRATIONS,
    QUARANTINE_COLUMNS,
    RESULT_COLUMNS,
    STATUS_COLUMNS,
    TABLES,
    Migration,
    migrate,
)
from gateway.store.summaries import fold_results, part_shares, settle_part_hours
from gateway.store.traces import INSERT_TRACE, TRACE_COLUMNS, trace_from, trace_row

__all__ = ["Journal", "Kind", "WriteStats", "open_journal", "quarantine_id"]

Kind = Literal["result", "calibration", "status", "trace", "alarm"]
KINDS: tuple[Kind, ...] = ("result", "calibration", "status", "trace", "alarm")
_T = TypeVar("_T")
#: page cache of the writer's connection (negative: KiB), see Journal.__init__
CACHE_SIZE = -32768


@dataclass(frozen=True, slots=True)
class WriteStats:
    """What one ``write()`` did: new records, ignored repeats, new quarantine rows.

    ``inserted`` counts new results, calibrations and statuses; ``quarantined`` new quarantine
    rows; ``duplicates`` every item (of any kind) that was already in the journal.
    """

    inserted: int = 0
    duplicates: int = 0
    quarantined: int = 0
    conflicts: int = 0  # repeats of a stored key with other values (kept in ``conflicts``)
    gaps: int = 0  # ranges of lost cycles recorded (reported by readers, or skipped numbers)
    conflict_stations: tuple[str, ...] = ()  # the station of each conflict


def quarantine_id(item: Rejected) -> str:
    """Identity of one rejection, so a retried batch does not quarantine it twice."""
    key = "|".join(
        (item.station, item.profile, item.reason, item.received_at.isoformat(), str(item.line_no))
    )
    digest = hashlib.blake2b(key.encode(), digest_size=12)
    digest.update(b"\0" + item.raw.encode("utf-8", "surrogatepass"))
    return digest.hexdigest()


# Row builders: one attribute fetch per column, in column order, nothing else. Enum members
# are StrEnums, which sqlite3 binds as their text without a ``.value`` lookup.
def _supplied_text(pairs: tuple[tuple[str, str], ...]) -> str | None:
    return json.dumps(dict(pairs), separators=(",", ":")) if pairs else None


def _supplied_from(text: str | None) -> tuple[tuple[str, str], ...]:
    return supplied_pairs(json.loads(text)) if text else ()


def _result_row(r: TestResult) -> tuple[Any, ...]:
    return (
        r.record_id, r.station, r.line, r.cycle, to_us(r.ended_at), to_us(r.received_at),
        r.program, r.verdict, r.test_pressure_pa, r.pressure_loss_pa, r.leak_rate_sccm,
        r.reject_limit_sccm, r.fill_s, r.stabilise_s, r.test_s, r.part_id, r.reason,
        r.lower_limit_sccm, r.temperature_c, r.calibration_ref, r.raw, r.profile,
        r.part_family, r.time_source, _supplied_text(r.supplied) if r.supplied else None,
    )  # fmt: skip


def _calibration_row(c: CalibrationEvent) -> tuple[Any, ...]:
    return (
        c.record_id, c.station, c.line, to_us(c.ended_at), to_us(c.received_at), c.program,
        c.master_loss_pa, c.standard_loss_pa, c.standard_sccm, c.standard_ref_pressure_pa,
        c.ratio, c.sensitivity, None if c.passed is None else int(c.passed), c.reason, c.raw,
        c.profile, c.time_source, _supplied_text(c.supplied),
    )  # fmt: skip


def _status_row(s: StationStatus) -> tuple[Any, ...]:
    return (s.record_id, s.station, to_us(s.at), s.state, s.detail)


def _quarantine_row(q: Rejected) -> tuple[Any, ...]:
    return (
        quarantine_id(q),
        q.station,
        q.profile,
        q.raw,
        q.reason,
        to_us(q.received_at),
        q.line_no,
    )


def _insert_sql(table: str, columns: Sequence[str]) -> str:
    cols = ("record_id", *columns)
    return (
        f"INSERT OR IGNORE INTO {table} ({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})"
    )


_INSERT_RESULT = _insert_sql("results", RESULT_COLUMNS)
_INSERT_CALIBRATION = _insert_sql("calibrations", CALIBRATION_COLUMNS)
_INSERT_STATUS = _insert_sql("statuses", STATUS_COLUMNS)
_INSERT_QUARANTINE = _insert_sql("quarantine", QUARANTINE_COLUMNS)
_MAX_RESULT_SEQ = "SELECT MAX(seq) FROM results"


# Record rebuilders for read_after (rows come back in the SELECT column order below).
def _result_from(row: tuple[Any, ...]) -> TestResult:
    (st, ln, cy, end, rec, prog, verdict, tp, loss, leak, rl, fill, stab, test, part, reason,
     lower, temp, cal, raw, prof, family, time_source, supplied) = row  # fmt: skip
    return TestResult(
        st, ln, cy, from_us(end), from_us(rec), prog, Verdict(verdict), tp, loss, leak, rl,
        fill, stab, test, part, reason, lower, temp, cal, raw, prof, family, time_source,
        _supplied_from(supplied),
    )  # fmt: skip


def _calibration_from(row: tuple[Any, ...]) -> CalibrationEvent:
    (st, ln, end, rec, prog, master, std_loss, std_sccm, ref_p, ratio, sens, passed, reason,
     raw, prof, time_source, supplied) = row  # fmt: skip
    return CalibrationEvent(
        st, ln, from_us(end), from_us(rec), prog, master, std_loss, std_sccm, ref_p, ratio,
        sens, None if passed is None else bool(passed), reason, raw, prof, time_source,
        _supplied_from(supplied),
    )  # fmt: skip


def _status_from(row: tuple[Any, ...]) -> StationStatus:
    st, at, state, detail = row
    return StationStatus(st, from_us(at), StationState(state), detail)


_READERS: dict[str, tuple[str, Callable[[tuple[Any, ...]], Record]]] = {
    "result": (
        f"SELECT seq, {', '.join(RESULT_COLUMNS)} FROM results WHERE seq > ? ORDER BY seq LIMIT ?",
        _result_from,
    ),
    "calibration": (
        f"SELECT seq, {', '.join(CALIBRATION_COLUMNS)} FROM calibrations "
        "WHERE seq > ? ORDER BY seq LIMIT ?",
        _calibration_from,
    ),
    "status": (
        f"SELECT seq, {', '.join(STATUS_COLUMNS)} FROM statuses WHERE seq > ? ORDER BY seq LIMIT ?",
        _status_from,
    ),
    "trace": (
        f"SELECT seq, {TRACE_COLUMNS} FROM traces WHERE seq > ? ORDER BY seq LIMIT ?",
        trace_from,
    ),
    "alarm": (
        f"SELECT seq, {ALARM_EVENT_COLUMNS} FROM alarm_events WHERE seq > ? ORDER BY seq LIMIT ?",
        alarm_event_from,
    ),
}
# Which column tells a row's age, per table (statuses carry no received_at; "at" is the
# gateway's own observation time, so it plays that role).
_AGE_COLUMN = {"results": "received_at", "calibrations": "received_at", "statuses": "at",
               "traces": "received_at", "alarm_events": "at"}


def _check_kind(kind: str) -> str:
    if kind not in TABLES:
        raise ValueError(f"kind must be one of {', '.join(TABLES)}, got {kind!r}")
    return TABLES[kind]


class Journal:
    """Synchronous SQLite journal; see the module docstring for durability and threading."""

    def __init__(
        self,
        path: Path | str,
        *,
        durable: bool = False,
        busy_timeout_s: float = 5.0,
        migrations: Sequence[Migration] = MIGRATIONS,
    ) -> None:
        self.path = Path(path)
        self._lock = threading.Lock()
        try:
            if str(self.path) != ":memory:":
                self.path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise StoreError(f"journal {self.path}: cannot create its directory ({exc})") from exc
        try:
            self._conn = sqlite3.connect(
                str(self.path),
                timeout=busy_timeout_s,
                isolation_level=None,  # we issue BEGIN/COMMIT ourselves
                check_same_thread=False,
            )
        except sqlite3.Error as exc:
            raise store_error(exc, self.path, "opening") from exc
        try:
            mode = self._conn.execute("PRAGMA journal_mode=WAL").fetchone()[0]
            if str(mode).lower() != "wal" and str(self.path) != ":memory:":
                raise StoreError(
                    f"journal {self.path}: the filesystem does not support WAL mode "
                    f"(got {mode!r}); put the journal on a local disk"
                )
            self._conn.execute(f"PRAGMA synchronous={'FULL' if durable else 'NORMAL'}")
            # a larger page cache keeps the unique-key and dashboard index pages of a big
            # journal in memory, which is what insert speed depends on (SQLite default: 2 MB)
            self._conn.execute(f"PRAGMA cache_size = {CACHE_SIZE}")
            self.version = migrate(self._conn, migrations, where=str(self.path))
            self._identity = _file_id(self.path)
            self._last_cycle: dict[str, int] = {}  # per station, for sequence gaps
        except sqlite3.Error as exc:
            self._conn.close()
            raise store_error(exc, self.path, "opening and migrating") from exc
        except BaseException:
            self._conn.close()
            raise

    # -- write side ---------------------------------------------------------------------------
    def write(
        self,
        items: Iterable[
            TestResult | CalibrationEvent | StationStatus | Rejected | PressureTrace | GapEvent
        ],
    ) -> WriteStats:
        """Store a batch in ONE transaction; repeats of stored records are counted, not stored.

        On failure nothing of the batch is stored and StoreError says why; the journal stays
        consistent, so the caller may retry the same batch later (repeats are ignored).
        """
        if self._identity is not None and _file_id(self.path) != self._identity:
            raise JournalGone(f"journal {self.path} was deleted or replaced while in use; "
                              "stopping (what was committed is kept, see the log)")
        results: list[tuple[Any, ...]] = []
        calibrations: list[tuple[Any, ...]] = []
        statuses: list[tuple[Any, ...]] = []
        rejected: list[tuple[Any, ...]] = []
        curves: list[tuple[Any, ...]] = []
        lost: list[GapEvent] = []
        for item in items:
            # exact type dispatch: cheaper than isinstance chains on the hot path
            t = type(item)
            if t is TestResult:
                results.append(_result_row(item))  # type: ignore[arg-type]
            elif t is Rejected:
                rejected.append(_quarantine_row(item))  # type: ignore[arg-type]
            elif t is StationStatus:
                statuses.append(_status_row(item))  # type: ignore[arg-type]
            elif t is CalibrationEvent:
                calibrations.append(_calibration_row(item))  # type: ignore[arg-type]
            elif t is PressureTrace:
                curves.append(trace_row(item))  # type: ignore[arg-type]
            elif t is GapEvent:
                lost.append(item)  # type: ignore[arg-type]
            else:
                raise TypeError(f"cannot journal a {t.__name__}")
        total = (len(results) + len(calibrations) + len(statuses) + len(rejected) + len(curves)
                 + len(lost))
        if total == 0:
            return WriteStats()
        with self._lock:
            conn = self._conn
            try:
                conn.execute("BEGIN IMMEDIATE")
                # rowcount, not total_changes: the summaries' own writes must not count
                inserted = quarantined = new = 0
                before = conn.execute(_MAX_RESULT_SEQ).fetchone()[0] or 0
                if results:
                    # new rows get seqs above the current maximum: that is how the summary
                    # fold tells them from the stored ones (and from ignored repeats)
                    new = conn.executemany(_INSERT_RESULT, results).rowcount
                    if new > 0:
                        fold_results(conn, before)
                    inserted += new
                found_gaps = 0
                if lost or new > 0:
                    stored_gaps, found_gaps = record_gaps(conn, lost, before, self._last_cycle)
                    inserted += stored_gaps
                    found_gaps += stored_gaps
                clashes = 0
                clash_at: list[str] = []
                if results and new < len(results):  # some were repeats: true ones, or not?
                    clashes += find_conflicts(conn, "results", RESULT_COLUMNS, results,
                                              clash_at)
                if calibrations:
                    new_cal = conn.executemany(_INSERT_CALIBRATION, calibrations).rowcount
                    inserted += new_cal
                    if new_cal < len(calibrations):
                        clashes += find_conflicts(conn, "calibrations", CALIBRATION_COLUMNS,
                                                  calibrations, clash_at)
                if statuses:
                    inserted += conn.executemany(_INSERT_STATUS, statuses).rowcount
                if rejected:
                    quarantined = conn.executemany(_INSERT_QUARANTINE, rejected).rowcount
                if curves:
                    inserted += conn.executemany(INSERT_TRACE, curves).rowcount
                conn.execute("COMMIT")
            except sqlite3.Error as exc:
                self._rollback()
                raise store_error(exc, self.path, f"writing a batch of {total}") from exc
            except BaseException:
                self._rollback()
                raise
        return WriteStats(inserted, total - inserted - quarantined - clashes, quarantined,
                          clashes, found_gaps, tuple(clash_at))

    def _rollback(self) -> None:
        self._last_cycle.clear()  # it may hold cycles of the batch that is undone
        try:
            if self._conn.in_transaction:
                self._conn.execute("ROLLBACK")
        except sqlite3.Error:
            # SQLite may already have rolled back (e.g. on SQLITE_FULL); nothing else to undo.
            pass

    # -- forwarder side -------------------------------------------------------------------------
    def read_after(self, kind: Kind, after_seq: int, limit: int) -> list[tuple[int, Record]]:
        """Up to ``limit`` records of ``kind`` with seq > ``after_seq``, oldest first."""
        _check_kind(kind)
        if limit <= 0:
            return []
        sql, build = _READERS[kind]
        rows = self._query(sql, (after_seq, limit), f"reading {kind} records")
        return [(row[0], build(row[1:])) for row in rows]

    def max_seq(self, kind: Kind) -> int:
        """Highest seq ever assigned for ``kind`` (0 when none), even if pruned since.

        Seqs only grow and are never reused, but may have gaps (an ignored duplicate can use
        one up), so count with ``backlog``, never by subtracting seqs.
        """
        table = _check_kind(kind)
        rows = self._query("SELECT seq FROM sqlite_sequence WHERE name = ?", (table,), "reading")
        return int(rows[0][0]) if rows else 0

    def last_cycles(self) -> dict[str, int]:
        """Per station, the cycle of its newest journalled result (the runtime's resume point).

        Plain SQL on the writer's connection, so the gateway never loads the query side
        (pandas) just to start.
        """
        rows = self._query(
            "SELECT station, cycle FROM results "
            "WHERE seq IN (SELECT MAX(seq) FROM results GROUP BY station)",
            (),
            "reading resume points",
        )
        return {str(station): int(cycle) for station, cycle in rows}

    def get_cursor(self, sink: str, kind: Kind) -> int:
        """Last seq ``sink`` confirmed for ``kind`` (0 when it never confirmed one)."""
        _check_kind(kind)
        rows = self._query(
            "SELECT seq FROM sink_cursors WHERE sink = ? AND kind = ?", (sink, kind), "reading"
        )
        return int(rows[0][0]) if rows else 0

    def set_cursor(self, sink: str, kind: Kind, seq: int) -> None:
        """Persist that ``sink`` has everything of ``kind`` up to and including ``seq``."""
        _check_kind(kind)
        if not sink:
            raise ValueError("sink name must be non-empty")
        if isinstance(seq, bool) or not isinstance(seq, int) or seq < 0:
            raise ValueError(f"cursor seq must be a non-negative integer, got {seq!r}")
        self._execute_write(
            "INSERT INTO sink_cursors (sink, kind, seq) VALUES (?, ?, ?) "
            "ON CONFLICT (sink, kind) DO UPDATE SET seq = excluded.seq",
            (sink, kind, seq),
            f"saving the cursor of sink {sink!r}",
        )

    def backlog(self, sink: str) -> dict[Kind, tuple[int, datetime | None]]:
        """Per kind: how many records ``sink`` has not confirmed, and the oldest one's time.

        The time is the first unsent record's ``received_at`` (``at`` for statuses): seq is
        arrival order, so that is the record that has waited longest.
        """
        out: dict[Kind, tuple[int, datetime | None]] = {}
        for kind in KINDS:
            table = TABLES[kind]
            cursor = self.get_cursor(sink, kind)
            (count,) = self._query(
                f"SELECT COUNT(*) FROM {table} WHERE seq > ?", (cursor,), "reading the backlog"
            )[0]
            oldest = self._query(
                f"SELECT {_AGE_COLUMN[table]} FROM {table} WHERE seq > ? ORDER BY seq LIMIT 1",
                (cursor,),
                "reading the backlog",
            )
            out[kind] = (int(count), from_us(oldest[0][0]) if oldest else None)
        return out

    def prune(
        self,
        older_than: datetime | None,
        sinks: Sequence[str] | Mapping[str, Sequence[str]],
        *,
        kind_cutoffs: Mapping[str, datetime] | None = None,
    ) -> int:
        """Delete records older than ``older_than`` that every listed sink has confirmed.

        ``sinks`` lists the enabled sinks, or per kind the sinks that forward that kind (a
        sink that never sends a kind must not hold it back). ``kind_cutoffs`` prunes a kind
        sooner (pressure curves kept for a shorter time than results); ``older_than`` None
        prunes nothing else. With no sinks listed, age alone decides. Quarantine rows (which no
        sink forwards) go by age. The summaries of the hours and parts touched are rebuilt
        from the rows that remain, so they always describe what is stored. Returns the number
        of rows deleted.
        """
        deleted = 0
        with self._lock:
            conn = self._conn
            try:
                conn.execute("BEGIN IMMEDIATE")
                for kind in KINDS:
                    table = TABLES[kind]
                    at = [t for t in (older_than, (kind_cutoffs or {}).get(kind)) if t is not None]
                    if not at:
                        continue
                    cutoff = to_us(max(at))
                    bound: int | None = None
                    listed = sinks.get(kind, ()) if isinstance(sinks, Mapping) else sinks
                    for sink in listed:
                        row = conn.execute(
                            "SELECT seq FROM sink_cursors WHERE sink = ? AND kind = ?",
                            (sink, kind),
                        ).fetchone()
                        seq = int(row[0]) if row else 0
                        bound = seq if bound is None else min(bound, seq)
                    if bound == 0:
                        continue  # a listed sink has confirmed nothing of this kind yet
                    cond = f"{_AGE_COLUMN[table]} < :cutoff"
                    if bound is not None:
                        cond += " AND seq <= :bound"
                    params = {"cutoff": cutoff, "bound": bound}
                    if kind == "result":
                        deleted += self._prune_results(cond, params)
                    else:
                        deleted += conn.execute(
                            f"DELETE FROM {table} WHERE {cond}", params
                        ).rowcount
                if older_than is not None:
                    deleted += conn.execute(
                        "DELETE FROM quarantine WHERE received_at < ?", (to_us(older_than),)
                    ).rowcount
                conn.execute("COMMIT")
            except sqlite3.Error as exc:
                self._rollback()
                raise store_error(exc, self.path, "pruning") from exc
            except BaseException:
                self._rollback()
                raise
        return deleted

    def _prune_results(self, cond: str, params: dict[str, Any]) -> int:
        """Delete results matching ``cond`` and keep the summaries true to the rest."""
        conn = self._conn
        h = HOUR_US
        conn.execute("CREATE TEMP TABLE IF NOT EXISTS prune_hours (hour INTEGER PRIMARY KEY)")
        conn.execute("CREATE TEMP TABLE IF NOT EXISTS prune_parts (part_id TEXT PRIMARY KEY)")
        conn.execute("DELETE FROM prune_hours")
        conn.execute("DELETE FROM prune_parts")
        conn.execute(
            f"INSERT OR IGNORE INTO prune_hours SELECT (ended_at / {h}) * {h} FROM results "
            f"WHERE {cond}",
            params,
        )
        conn.execute(
            "INSERT OR IGNORE INTO prune_parts SELECT part_id FROM results "
            f"WHERE {cond} AND part_id IS NOT NULL",
            params,
        )
        n = conn.execute(f"DELETE FROM results WHERE {cond}", params).rowcount
        conn.execute("DELETE FROM result_hours WHERE hour IN (SELECT hour FROM prune_hours)")
        conn.execute(
            f"""INSERT INTO result_hours
            SELECT p.hour, r.station, r.line, r.program, r.verdict, COUNT(*),
                   SUM(r.part_id IS NULL), COUNT(r.leak_rate_sccm), TOTAL(r.leak_rate_sccm),
                   TOTAL(r.leak_rate_sccm * r.leak_rate_sccm), MIN(r.leak_rate_sccm),
                   MAX(r.leak_rate_sccm)
            FROM prune_hours p JOIN results r
              ON r.ended_at >= p.hour AND r.ended_at < p.hour + {h}
            GROUP BY p.hour, r.station, r.line, r.program, r.verdict"""
        )
        conn.execute("DELETE FROM reason_hours WHERE hour IN (SELECT hour FROM prune_hours)")
        conn.execute(
            f"""INSERT INTO reason_hours
            SELECT p.hour, r.station, r.line, r.program, r.verdict, r.reason, COUNT(*)
            FROM prune_hours p JOIN results r
              ON r.ended_at >= p.hour AND r.ended_at < p.hour + {h}
            GROUP BY p.hour, r.station, r.line, r.program, r.verdict, r.reason"""
        )
        # parts that lost tests: drop their summary, rebuild it from the tests that remain,
        # and move their share of part_hours from the old first-test hour to the new one
        part_shares(conn, -1, "temp.prune_parts")
        conn.execute("DELETE FROM parts WHERE part_id IN (SELECT part_id FROM prune_parts)")
        conn.execute(
            """INSERT INTO parts
            WITH t AS (
                SELECT part_id, ended_at, seq, station, line, program, verdict,
                       ROW_NUMBER() OVER (PARTITION BY part_id ORDER BY ended_at, seq) AS a,
                       ROW_NUMBER() OVER (PARTITION BY part_id
                                          ORDER BY ended_at DESC, seq DESC) AS b,
                       COUNT(*) OVER (PARTITION BY part_id) AS n
                FROM results WHERE part_id IN (SELECT part_id FROM prune_parts)
                  AND verdict <> 'aborted')
            SELECT f.part_id, f.n, f.ended_at, f.seq, f.station, f.line, f.program, f.verdict,
                   l.ended_at, l.seq, l.verdict
            FROM t f JOIN t l ON l.part_id = f.part_id AND l.b = 1
            WHERE f.a = 1"""
        )
        part_shares(conn, +1, "temp.prune_parts")
        settle_part_hours(conn)
        return n

    def rescue(self) -> Path | None:
        """After ``JournalGone``: a complete copy of what this connection holds (the committed
        records of a deleted or renamed file), beside the original path. None if it fails."""
        target = self.path.with_name(f"{self.path.name}.rescued-{os.getpid()}.db")
        with self._lock:
            try:
                self._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
                self._conn.execute("VACUUM INTO ?", (str(target),))
            except sqlite3.Error:
                return None
        return target

    def close(self) -> None:
        """Checkpoint and close; safe to call twice. The checkpoint is explicit because a
        reader still open elsewhere (the dashboard) keeps SQLite from doing it on close, which
        left megabytes of WAL beside a stopped journal."""
        with self._lock:
            with contextlib.suppress(sqlite3.Error):
                self._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            try:
                self._conn.close()
            except sqlite3.Error as exc:
                raise store_error(exc, self.path, "closing") from exc

    def __enter__(self) -> Journal:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- helpers --------------------------------------------------------------------------------
    def _query(self, sql: str, params: Sequence[Any], action: str) -> list[tuple[Any, ...]]:
        with self._lock:
            try:
                return self._conn.execute(sql, params).fetchall()
            except sqlite3.Error as exc:
                raise store_error(exc, self.path, action) from exc

    def _transaction(self, work: Callable[[sqlite3.Connection], _T], action: str) -> _T:
        """Run ``work`` on the writer's connection in one transaction (all of it or nothing)."""
        with self._lock:
            try:
                self._conn.execute("BEGIN IMMEDIATE")
                out = work(self._conn)
                self._conn.execute("COMMIT")
            except sqlite3.Error as exc:
                self._rollback()
                raise store_error(exc, self.path, action) from exc
            except BaseException:
                self._rollback()
                raise
            return out

    def _execute_write(self, sql: str, params: Sequence[Any], action: str) -> None:
        with self._lock:
            try:
                self._conn.execute(sql, params)
            except sqlite3.Error as exc:
                self._rollback()
                raise store_error(exc, self.path, action) from exc


def _file_id(path: Path) -> tuple[int, int] | None:
    """(device, inode) of the file at ``path``; None for an in-memory journal or no file."""
    if str(path) == ":memory:":
        return None
    try:
        st = path.stat()
    except FileNotFoundError:
        return (-1, -1)
    return (st.st_dev, st.st_ino)


def open_journal(url: str, *, durable: bool = False) -> Journal:
    """Open (creating directories, schema and pending migrations) the journal at ``url``.

    ``url`` is ``sqlite:///relative/path.db``, ``sqlite:////absolute/path.db`` or a bare path.
    """
    return Journal(sqlite_path(url), durable=durable)
