"""Journal schema, its version and the migration steps that bring an older journal up to date.

Column names are the canonical record field names, so an export or a query needs no mapping.
Timestamps are INTEGER microseconds since the Unix epoch, UTC: exact (a float would round),
compact, and bucketable by hour or day with plain integer arithmetic in SQL.

A migration is a list of SQL statements run inside one transaction together with the version
bump, so a journal is always at exactly one version, never half-migrated.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Sequence
from dataclasses import dataclass

from gateway.errors import StoreError
from gateway.store.alarm_events import ALARM_EVENT_SCHEMA
from gateway.store.conflicts import CONFLICT_SCHEMA
from gateway.store.deadletters import DEAD_LETTER_SCHEMA
from gateway.store.gaps import GAP_SCHEMA
from gateway.store.traces import TRACE_SCHEMA

__all__ = [
    "CALIBRATION_COLUMNS",
    "HOUR_US",
    "MIGRATIONS",
    "QUARANTINE_COLUMNS",
    "RESULT_COLUMNS",
    "SCHEMA_VERSION",
    "STATUS_COLUMNS",
    "TABLES",
    "Migration",
    "migrate",
    "schema_version",
]

# Canonical field order (as in gateway.records), without seq and record_id.
RESULT_COLUMNS: tuple[str, ...] = (
    "station", "line", "cycle", "ended_at", "received_at", "program", "verdict",
    "test_pressure_pa", "pressure_loss_pa", "leak_rate_sccm", "reject_limit_sccm",
    "fill_s", "stabilise_s", "test_s", "part_id", "reason", "lower_limit_sccm",
    "temperature_c", "calibration_ref", "raw", "profile", "part_family", "time_source",
    "supplied",
)  # fmt: skip
CALIBRATION_COLUMNS: tuple[str, ...] = (
    "station", "line", "ended_at", "received_at", "program", "master_loss_pa",
    "standard_loss_pa", "standard_sccm", "standard_ref_pressure_pa", "ratio", "sensitivity",
    "passed", "reason", "raw", "profile", "time_source", "supplied",
)  # fmt: skip
STATUS_COLUMNS: tuple[str, ...] = ("station", "at", "state", "detail")
QUARANTINE_COLUMNS: tuple[str, ...] = (
    "station", "profile", "raw", "reason", "received_at", "line_no",
)  # fmt: skip

#: kind → table, as used by read_after / cursors / backlog.
TABLES: dict[str, str] = {"result": "results", "calibration": "calibrations", "status": "statuses",
                          "trace": "traces", "alarm": "alarm_events"}

# Hourly summaries (see gateway.store.summaries). Schema v1 kept them with per-row triggers,
# which v2 drops: the writer folds each batch in once (summaries.fold_results), and a bulk
# loader that bypasses the journal calls summaries.rebuild_summaries afterwards.
# Hours are UTC, ``hour`` = the hour's start in µs.
HOUR_US = 3_600_000_000


def _part_share(row: str, sign: int) -> str:
    """Trigger SQL adding (+1) or removing (-1) one part's share of its first-test hour."""
    hour = f"({row}.first_ended_at / {HOUR_US}) * {HOUR_US}"
    values = (
        f"{hour}, {row}.station, {row}.line, {row}.program, {sign}, "
        f"{sign} * ({row}.first_verdict = 'pass'), {sign} * ({row}.last_verdict = 'pass'), "
        f"{sign} * {row}.tests"
    )
    delete_empty = (
        f"DELETE FROM part_hours WHERE hour = {hour} AND station = {row}.station "
        f"AND line = {row}.line AND program = {row}.program AND parts = 0;"
        if sign < 0
        else ""
    )
    return (
        f"INSERT INTO part_hours VALUES ({values}) ON CONFLICT DO UPDATE SET "
        "parts = parts + excluded.parts, first_pass = first_pass + excluded.first_pass, "
        "final_pass = final_pass + excluded.final_pass, tests = tests + excluded.tests; "
        + delete_empty
    )


_ROLLUPS: tuple[str, ...] = (
    """CREATE TABLE result_hours (
        hour INTEGER NOT NULL,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        program TEXT NOT NULL,
        verdict TEXT NOT NULL,
        n INTEGER NOT NULL,
        no_part INTEGER NOT NULL,
        leak_sum REAL NOT NULL,
        leak_sumsq REAL NOT NULL,
        leak_min REAL NOT NULL,
        leak_max REAL NOT NULL,
        PRIMARY KEY (hour, station, line, program, verdict)
    ) WITHOUT ROWID""",
    f"""CREATE TRIGGER results_ai_hours AFTER INSERT ON results BEGIN
        INSERT INTO result_hours VALUES (
            (NEW.ended_at / {HOUR_US}) * {HOUR_US}, NEW.station, NEW.line, NEW.program,
            NEW.verdict, 1, NEW.part_id IS NULL, NEW.leak_rate_sccm,
            NEW.leak_rate_sccm * NEW.leak_rate_sccm, NEW.leak_rate_sccm, NEW.leak_rate_sccm)
        ON CONFLICT DO UPDATE SET
            n = n + 1, no_part = no_part + excluded.no_part,
            leak_sum = leak_sum + excluded.leak_sum,
            leak_sumsq = leak_sumsq + excluded.leak_sumsq,
            leak_min = MIN(leak_min, excluded.leak_min),
            leak_max = MAX(leak_max, excluded.leak_max);
    END""",
    # One row per part id: its first and last test (by ended_at, then seq) and how many.
    """CREATE TABLE parts (
        part_id TEXT PRIMARY KEY,
        tests INTEGER NOT NULL,
        first_ended_at INTEGER NOT NULL,
        first_seq INTEGER NOT NULL,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        program TEXT NOT NULL,
        first_verdict TEXT NOT NULL,
        last_ended_at INTEGER NOT NULL,
        last_seq INTEGER NOT NULL,
        last_verdict TEXT NOT NULL
    ) WITHOUT ROWID""",
    "CREATE INDEX ix_parts_first ON parts (first_ended_at)",
    """CREATE TRIGGER results_ai_parts AFTER INSERT ON results
    WHEN NEW.part_id IS NOT NULL BEGIN
        INSERT INTO parts VALUES (
            NEW.part_id, 1, NEW.ended_at, NEW.seq, NEW.station, NEW.line, NEW.program,
            NEW.verdict, NEW.ended_at, NEW.seq, NEW.verdict)
        ON CONFLICT DO UPDATE SET
            tests = tests + 1,
            station = IIF(excluded.first_ended_at < first_ended_at, excluded.station, station),
            line = IIF(excluded.first_ended_at < first_ended_at, excluded.line, line),
            program = IIF(excluded.first_ended_at < first_ended_at, excluded.program, program),
            first_verdict = IIF(excluded.first_ended_at < first_ended_at,
                                excluded.first_verdict, first_verdict),
            first_seq = IIF(excluded.first_ended_at < first_ended_at,
                            excluded.first_seq, first_seq),
            first_ended_at = MIN(excluded.first_ended_at, first_ended_at),
            last_verdict = IIF(excluded.last_ended_at >= last_ended_at,
                               excluded.last_verdict, last_verdict),
            last_seq = IIF(excluded.last_ended_at >= last_ended_at, excluded.last_seq, last_seq),
            last_ended_at = MAX(excluded.last_ended_at, last_ended_at);
    END""",
    # Parts per hour of their first test; a part's contribution moves when its first or last
    # test changes (subtract the old row's share, add the new one's).
    """CREATE TABLE part_hours (
        hour INTEGER NOT NULL,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        program TEXT NOT NULL,
        parts INTEGER NOT NULL,
        first_pass INTEGER NOT NULL,
        final_pass INTEGER NOT NULL,
        tests INTEGER NOT NULL,
        PRIMARY KEY (hour, station, line, program)
    ) WITHOUT ROWID""",
    f"""CREATE TRIGGER parts_ai AFTER INSERT ON parts BEGIN {_part_share("NEW", +1)} END""",
    f"""CREATE TRIGGER parts_au AFTER UPDATE ON parts BEGIN
        {_part_share("OLD", -1)} {_part_share("NEW", +1)}
    END""",
    f"""CREATE TRIGGER parts_ad AFTER DELETE ON parts BEGIN {_part_share("OLD", -1)} END""",
)

_V1: tuple[str, ...] = (
    """CREATE TABLE results (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        cycle INTEGER NOT NULL,
        ended_at INTEGER NOT NULL,
        received_at INTEGER NOT NULL,
        program TEXT NOT NULL,
        verdict TEXT NOT NULL,
        test_pressure_pa REAL NOT NULL,
        pressure_loss_pa REAL NOT NULL,
        leak_rate_sccm REAL NOT NULL,
        reject_limit_sccm REAL NOT NULL,
        fill_s REAL NOT NULL,
        stabilise_s REAL NOT NULL,
        test_s REAL NOT NULL,
        part_id TEXT,
        reason TEXT NOT NULL DEFAULT '',
        lower_limit_sccm REAL,
        temperature_c REAL,
        calibration_ref TEXT,
        raw TEXT NOT NULL DEFAULT '',
        profile TEXT NOT NULL DEFAULT '',
        UNIQUE (station, cycle, ended_at)
    )""",
    """CREATE TABLE calibrations (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        ended_at INTEGER NOT NULL,
        received_at INTEGER NOT NULL,
        program TEXT NOT NULL,
        master_loss_pa REAL NOT NULL,
        standard_loss_pa REAL NOT NULL,
        standard_sccm REAL NOT NULL,
        standard_ref_pressure_pa REAL NOT NULL,
        ratio REAL NOT NULL,
        sensitivity REAL NOT NULL,
        passed INTEGER NOT NULL,
        reason TEXT NOT NULL DEFAULT '',
        raw TEXT NOT NULL DEFAULT '',
        profile TEXT NOT NULL DEFAULT '',
        UNIQUE (station, program, ended_at)
    )""",
    """CREATE TABLE statuses (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        at INTEGER NOT NULL,
        state TEXT NOT NULL,
        detail TEXT NOT NULL DEFAULT '',
        UNIQUE (station, at, state)
    )""",
    # Rejected input has no natural key; record_id hashes all of it (including received_at), so
    # only a retried write of the very same rejection is ignored, never two real arrivals.
    """CREATE TABLE quarantine (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        profile TEXT NOT NULL,
        raw TEXT NOT NULL,
        reason TEXT NOT NULL,
        received_at INTEGER NOT NULL,
        line_no INTEGER
    )""",
    """CREATE TABLE sink_cursors (
        sink TEXT NOT NULL,
        kind TEXT NOT NULL,
        seq INTEGER NOT NULL,
        PRIMARY KEY (sink, kind)
    ) WITHOUT ROWID""",
    # Dashboard indexes. The extra trailing columns make them covering for the aggregate
    # queries (verdict counts, histogram, summary), so those never touch the wide table rows.
    "CREATE INDEX ix_results_station_time ON results "
    "(station, ended_at, program, verdict, leak_rate_sccm)",
    "CREATE INDEX ix_results_program_time ON results (program, ended_at)",
    "CREATE INDEX ix_results_time ON results "
    "(ended_at, station, line, program, verdict, leak_rate_sccm)",
    "CREATE INDEX ix_results_part ON results (part_id, ended_at) WHERE part_id IS NOT NULL",
    "CREATE INDEX ix_calibrations_station_time ON calibrations (station, program, ended_at)",
    "CREATE INDEX ix_calibrations_time ON calibrations (ended_at)",
    "CREATE INDEX ix_statuses_station_time ON statuses (station, at)",
    "CREATE INDEX ix_statuses_time ON statuses (at)",
    "CREATE INDEX ix_quarantine_time ON quarantine (received_at)",
    *_ROLLUPS,
)


@dataclass(frozen=True, slots=True)
class Migration:
    """One step from ``version - 1`` to ``version``."""

    version: int
    statements: tuple[str, ...]
    description: str = ""


# v2: the summaries are folded in once per batch by ``fold_results`` (in the writer's
# transaction) instead of by per-row triggers, which cost more than half of the insert time.
# The v1 triggers kept the summaries exact, so dropping them leaves the data correct as it is.
_V2: tuple[str, ...] = (
    "DROP TRIGGER results_ai_hours",
    "DROP TRIGGER results_ai_parts",
    "DROP TRIGGER parts_ai",
    "DROP TRIGGER parts_au",
    "DROP TRIGGER parts_ad",
)

# v3: tests per station-hour, verdict and reject reason, so a Pareto by reason reads summaries
# instead of every reject. Backfilled from the stored results in the migration's transaction.
_V3: tuple[str, ...] = (
    """CREATE TABLE reason_hours (
        hour INTEGER NOT NULL,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        program TEXT NOT NULL,
        verdict TEXT NOT NULL,
        reason TEXT NOT NULL,
        n INTEGER NOT NULL,
        PRIMARY KEY (hour, station, line, program, verdict, reason)
    ) WITHOUT ROWID""",
    f"""INSERT INTO reason_hours
    SELECT (ended_at / {HOUR_US}) * {HOUR_US}, station, line, program, verdict, reason, COUNT(*)
    FROM results GROUP BY 1, 2, 3, 4, 5, 6""",
)

# v4: an aborted test measured nothing, so it neither decides a part's first pass nor counts
# among its tests; the part summaries are rebuilt from the measured tests.
_V4: tuple[str, ...] = (
    "DELETE FROM parts",
    """INSERT INTO parts
    WITH t AS (
        SELECT part_id, ended_at, seq, station, line, program, verdict,
               ROW_NUMBER() OVER (PARTITION BY part_id ORDER BY ended_at, seq) AS a,
               ROW_NUMBER() OVER (PARTITION BY part_id ORDER BY ended_at DESC, seq DESC) AS b,
               COUNT(*) OVER (PARTITION BY part_id) AS n
        FROM results WHERE part_id IS NOT NULL AND verdict <> 'aborted')
    SELECT f.part_id, f.n, f.ended_at, f.seq, f.station, f.line, f.program, f.verdict,
           l.ended_at, l.seq, l.verdict
    FROM t f JOIN t l ON l.part_id = f.part_id AND l.b = 1
    WHERE f.a = 1""",
    "DELETE FROM part_hours",
    f"""INSERT INTO part_hours
    SELECT (first_ended_at / {HOUR_US}) * {HOUR_US}, station, line, program, COUNT(*),
           SUM(first_verdict = 'pass'), SUM(last_verdict = 'pass'), SUM(tests)
    FROM parts GROUP BY 1, 2, 3, 4""",
)

# v5: stations that do not send a value leave it absent (NULL), never a made-up zero: limits,
# times, test pressure, and leak rate / loss of gross or aborted tests; a calibration's
# standard flow, reference pressure, ratio (undefined when the master loss is <= 0),
# sensitivity and verdict. Records also say where their time came from (``time_source``) and
# which values the plant's config or the profile supplied (``supplied``, JSON, NULL if none),
# and may carry a part family. SQLite cannot drop NOT NULL in place, so results, calibrations
# and result_hours are rebuilt; the AUTOINCREMENT high-water marks are carried over, since the
# sinks' cursors count on seq never being reused. result_hours counts leak statistics over the
# tests that have a leak rate (``leak_n``), its min/max are NULL for an hour with none.
_V5_RESULTS = """CREATE TABLE results_v5 (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        cycle INTEGER NOT NULL,
        ended_at INTEGER NOT NULL,
        received_at INTEGER NOT NULL,
        program TEXT NOT NULL,
        verdict TEXT NOT NULL,
        test_pressure_pa REAL,
        pressure_loss_pa REAL,
        leak_rate_sccm REAL,
        reject_limit_sccm REAL,
        fill_s REAL,
        stabilise_s REAL,
        test_s REAL,
        part_id TEXT,
        reason TEXT NOT NULL DEFAULT '',
        lower_limit_sccm REAL,
        temperature_c REAL,
        calibration_ref TEXT,
        raw TEXT NOT NULL DEFAULT '',
        profile TEXT NOT NULL DEFAULT '',
        part_family TEXT,
        time_source TEXT NOT NULL DEFAULT 'station',
        supplied TEXT,
        UNIQUE (station, cycle, ended_at)
    )"""
_V5_CALIBRATIONS = """CREATE TABLE calibrations_v5 (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        ended_at INTEGER NOT NULL,
        received_at INTEGER NOT NULL,
        program TEXT NOT NULL,
        master_loss_pa REAL NOT NULL,
        standard_loss_pa REAL NOT NULL,
        standard_sccm REAL,
        standard_ref_pressure_pa REAL,
        ratio REAL,
        sensitivity REAL,
        passed INTEGER,
        reason TEXT NOT NULL DEFAULT '',
        raw TEXT NOT NULL DEFAULT '',
        profile TEXT NOT NULL DEFAULT '',
        time_source TEXT NOT NULL DEFAULT 'station',
        supplied TEXT,
        UNIQUE (station, program, ended_at)
    )"""
# the v4 columns, spelt out: a migration is history and must not follow later column lists
_V4_RESULT_COLUMNS = (
    "station, line, cycle, ended_at, received_at, program, verdict, test_pressure_pa, "
    "pressure_loss_pa, leak_rate_sccm, reject_limit_sccm, fill_s, stabilise_s, test_s, part_id, "
    "reason, lower_limit_sccm, temperature_c, calibration_ref, raw, profile"
)
_V4_CAL_COLUMNS = (
    "station, line, ended_at, received_at, program, master_loss_pa, standard_loss_pa, "
    "standard_sccm, standard_ref_pressure_pa, ratio, sensitivity, passed, reason, raw, profile"
)
_V5: tuple[str, ...] = (
    "CREATE TABLE v5_seq AS SELECT name, seq FROM sqlite_sequence "
    "WHERE name IN ('results', 'calibrations')",
    _V5_RESULTS,
    f"INSERT INTO results_v5 (seq, record_id, {_V4_RESULT_COLUMNS}) "
    f"SELECT seq, record_id, {_V4_RESULT_COLUMNS} FROM results",
    "DROP TABLE results",
    "ALTER TABLE results_v5 RENAME TO results",
    _V5_CALIBRATIONS,
    f"INSERT INTO calibrations_v5 (seq, record_id, {_V4_CAL_COLUMNS}) "
    f"SELECT seq, record_id, {_V4_CAL_COLUMNS} FROM calibrations",
    "DROP TABLE calibrations",
    "ALTER TABLE calibrations_v5 RENAME TO calibrations",
    "DELETE FROM sqlite_sequence WHERE name IN ('results', 'calibrations')",
    "INSERT INTO sqlite_sequence (name, seq) SELECT name, seq FROM v5_seq",
    "DROP TABLE v5_seq",
    "CREATE INDEX ix_results_station_time ON results "
    "(station, ended_at, program, verdict, leak_rate_sccm)",
    "CREATE INDEX ix_results_program_time ON results (program, ended_at)",
    "CREATE INDEX ix_results_time ON results "
    "(ended_at, station, line, program, verdict, leak_rate_sccm)",
    "CREATE INDEX ix_results_part ON results (part_id, ended_at) WHERE part_id IS NOT NULL",
    "CREATE INDEX ix_calibrations_station_time ON calibrations (station, program, ended_at)",
    "CREATE INDEX ix_calibrations_time ON calibrations (ended_at)",
    """CREATE TABLE result_hours_v5 (
        hour INTEGER NOT NULL,
        station TEXT NOT NULL,
        line TEXT NOT NULL,
        program TEXT NOT NULL,
        verdict TEXT NOT NULL,
        n INTEGER NOT NULL,
        no_part INTEGER NOT NULL,
        leak_n INTEGER NOT NULL,
        leak_sum REAL NOT NULL,
        leak_sumsq REAL NOT NULL,
        leak_min REAL,
        leak_max REAL,
        PRIMARY KEY (hour, station, line, program, verdict)
    ) WITHOUT ROWID""",
    "INSERT INTO result_hours_v5 SELECT hour, station, line, program, verdict, n, no_part, n, "
    "leak_sum, leak_sumsq, leak_min, leak_max FROM result_hours",
    "DROP TABLE result_hours",
    "ALTER TABLE result_hours_v5 RENAME TO result_hours",
)

_V6: tuple[str, ...] = (
    # maintenance events and notes: a seal change, a new fixture or leak standard restarts a
    # station's calibration baselines (analytics.alarms.epochs); notes only annotate charts
    """CREATE TABLE maintenance (
        seq INTEGER PRIMARY KEY AUTOINCREMENT,
        record_id TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        at INTEGER NOT NULL,
        kind TEXT NOT NULL,
        note TEXT NOT NULL DEFAULT '',
        entered_by TEXT NOT NULL DEFAULT '',
        entered_at INTEGER NOT NULL
    )""",
    "CREATE INDEX ix_maintenance_station_time ON maintenance (station, at)",
    # one row per alarm occurrence: raised, maybe acknowledged (by whom, when), cleared; at
    # most one open occurrence per key, so every screen and report agrees on what is open
    """CREATE TABLE alarms (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        key TEXT NOT NULL,
        rule TEXT NOT NULL,
        station TEXT,
        severity TEXT NOT NULL,
        message TEXT NOT NULL,
        since INTEGER NOT NULL,
        raised_at INTEGER NOT NULL,
        acked_at INTEGER,
        acked_by TEXT,
        cleared_at INTEGER
    )""",
    "CREATE UNIQUE INDEX ix_alarms_open ON alarms (key) WHERE cleared_at IS NULL",
    "CREATE INDEX ix_alarms_raised ON alarms (raised_at)",
)

MIGRATIONS: tuple[Migration, ...] = (
    Migration(1, _V1, "initial schema"),
    Migration(2, _V2, "summaries folded in per batch, not by per-row triggers"),
    Migration(3, _V3, "tests per hour by reject reason"),
    Migration(4, _V4, "aborted tests leave the part summaries"),
    Migration(5, _V5, "absent values stay absent; time source, supplied values, part family"),
    Migration(6, _V6, "maintenance events and alarm states"),
    Migration(7, TRACE_SCHEMA, "pressure traces, one packed row per curve"),
    Migration(8, CONFLICT_SCHEMA, "re-sends that disagree with the stored record"),
    Migration(9, GAP_SCHEMA, "cycles known to be lost"),
    Migration(10, DEAD_LETTER_SCHEMA, "records a sink's server refused"),
    Migration(11, ALARM_EVENT_SCHEMA, "alarm state changes as forwardable events"),
)
SCHEMA_VERSION = MIGRATIONS[-1].version


def schema_version(conn: sqlite3.Connection) -> int:
    """0 for a fresh file, else the version stored in ``meta``."""
    has_meta = conn.execute(
        "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'meta'"
    ).fetchone()
    if not has_meta:
        return 0
    row = conn.execute("SELECT schema_version FROM meta").fetchone()
    return 0 if row is None else int(row[0])


def migrate(
    conn: sqlite3.Connection, migrations: Sequence[Migration] = MIGRATIONS, *, where: str = ""
) -> int:
    """Bring the journal up to the newest version; each pending step runs once, atomically.

    ``conn`` must be in autocommit mode (``isolation_level=None``); the write lock is taken
    first (BEGIN IMMEDIATE) so two processes opening a fresh journal cannot both migrate it.
    Returns the resulting version.
    """
    target = migrations[-1].version if migrations else 0
    conn.execute("BEGIN IMMEDIATE")
    try:
        current = schema_version(conn)
        if current > target:
            raise StoreError(
                f"journal {where}: schema version {current} is newer than this build "
                f"understands ({target}); upgrade leakfleet"
            )
        if current == 0:
            conn.execute("CREATE TABLE IF NOT EXISTS meta (schema_version INTEGER NOT NULL)")
            conn.execute("INSERT INTO meta (schema_version) VALUES (0)")
        for step in migrations:
            if step.version <= current:
                continue
            for statement in step.statements:
                conn.execute(statement)
            conn.execute("UPDATE meta SET schema_version = ?", (step.version,))
            current = step.version
        conn.execute("COMMIT")
    except BaseException:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
        raise
    return current
