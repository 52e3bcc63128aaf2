"""Hourly summaries of the results, folded in once per written batch.

``result_hours`` (tests per station-hour and verdict, with leak-rate sums over the tests that
have a leak rate, ``leak_n`` of them), ``reason_hours``
(tests per station-hour, verdict and reject reason), ``parts`` (each
part's first and last test) and ``part_hours`` (parts per hour of their first test) let the
dashboard's yield and summary queries read a few rows per station-hour instead of every result:
SQLite aggregates ~1 µs per row, so a month of a busy plant cannot be summed from the raw rows
within a second. Hours are UTC, ``hour`` = the hour's start in µs.

The writer calls ``fold_results`` inside the batch's own transaction, after the INSERT OR IGNORE:
only rows with a seq above the pre-batch maximum are new, so an ignored repeat never counts.
Aggregating the batch in SQL (one GROUP BY, one upsert per touched key) costs a fraction of
the per-row triggers schema v1 used. A part whose batch brings an earlier test (a retest whose
station clock is behind) moves from one first-test hour to another: its old share of
``part_hours`` is subtracted and its new one added, so the summaries stay exact.
"""

from __future__ import annotations

import sqlite3

from gateway.store.schema import HOUR_US

__all__ = [
    "SUMMARY_TABLES",
    "fold_results",
    "part_shares",
    "rebuild_summaries",
    "settle_part_hours",
]

_H = HOUR_US

# NOT INDEXED keeps the planner on the seq (rowid) range of the new rows: left free, it
# prefers the partial part_id index and reads every stored result with a part id.
# scalar MIN/MAX are NULL when either side is: an hour of gross tests has no leak min/max
_FOLD_HOURS = f"""INSERT INTO result_hours
    SELECT (ended_at / {_H}) * {_H}, station, line, program, verdict, COUNT(*),
           SUM(part_id IS NULL), COUNT(leak_rate_sccm), TOTAL(leak_rate_sccm),
           TOTAL(leak_rate_sccm * leak_rate_sccm), MIN(leak_rate_sccm), MAX(leak_rate_sccm)
    FROM results NOT INDEXED WHERE seq > ? GROUP BY 1, 2, 3, 4, 5
    ON CONFLICT DO UPDATE SET
        n = n + excluded.n, no_part = no_part + excluded.no_part,
        leak_n = leak_n + excluded.leak_n,
        leak_sum = leak_sum + excluded.leak_sum,
        leak_sumsq = leak_sumsq + excluded.leak_sumsq,
        leak_min = MIN(COALESCE(leak_min, excluded.leak_min),
                       COALESCE(excluded.leak_min, leak_min)),
        leak_max = MAX(COALESCE(leak_max, excluded.leak_max),
                       COALESCE(excluded.leak_max, leak_max))"""

_FOLD_REASONS = f"""INSERT INTO reason_hours
    SELECT (ended_at / {_H}) * {_H}, station, line, program, verdict, reason, COUNT(*)
    FROM results NOT INDEXED WHERE seq > ? GROUP BY 1, 2, 3, 4, 5, 6
    ON CONFLICT DO UPDATE SET n = n + excluded.n"""

#: every summary table, in the order rebuild_summaries empties them
SUMMARY_TABLES = ("result_hours", "reason_hours", "parts", "part_hours")

_TEMP = (
    """CREATE TEMP TABLE IF NOT EXISTS fold_parts (
        part_id TEXT PRIMARY KEY, tests INTEGER, first_ended_at INTEGER, first_seq INTEGER,
        station TEXT, line TEXT, program TEXT, first_verdict TEXT, last_ended_at INTEGER,
        last_seq INTEGER, last_verdict TEXT) WITHOUT ROWID""",
    """CREATE TEMP TABLE IF NOT EXISTS part_delta (
        hour INTEGER, station TEXT, line TEXT, program TEXT, parts INTEGER,
        first_pass INTEGER, final_pass INTEGER, tests INTEGER)""",
)

# How a part's summary takes in one more test (or another summary of tests, ``excluded``):
# the earlier first test and the later last test win; on an ended_at tie the lower seq is
# first and the higher seq last (ORDER BY ended_at, seq), and the incoming tests always have
# the higher seqs, so the stored first stays and the incoming last wins.
_MERGE_PART = """ON CONFLICT DO UPDATE SET
        tests = tests + excluded.tests,
        station = IIF(excluded.first_ended_at < first_ended_at, excluded.station, station),
        line = IIF(excluded.first_ended_at < first_ended_at, excluded.line, line),
        program = IIF(excluded.first_ended_at < first_ended_at, excluded.program, program),
        first_verdict = IIF(excluded.first_ended_at < first_ended_at,
                            excluded.first_verdict, first_verdict),
        first_seq = IIF(excluded.first_ended_at < first_ended_at, excluded.first_seq, first_seq),
        first_ended_at = MIN(excluded.first_ended_at, first_ended_at),
        last_verdict = IIF(excluded.last_ended_at >= last_ended_at,
                           excluded.last_verdict, last_verdict),
        last_seq = IIF(excluded.last_ended_at >= last_ended_at, excluded.last_seq, last_seq),
        last_ended_at = MAX(excluded.last_ended_at, last_ended_at)"""

# The batch's parts, one new row at a time in seq order into a small temp table: an upsert
# per row is ~15x cheaper than window functions over the batch (measured, SQLite 3.40).
_BATCH_PARTS = f"""INSERT INTO temp.fold_parts
    SELECT part_id, 1, ended_at, seq, station, line, program, verdict, ended_at, seq, verdict
    FROM results NOT INDEXED WHERE seq > ? AND part_id IS NOT NULL AND verdict <> 'aborted'
    ORDER BY seq
    {_MERGE_PART}"""

# ...then each batch part into its stored summary, one upsert per part.
_UPSERT_PARTS = f"INSERT INTO parts SELECT * FROM temp.fold_parts WHERE true {_MERGE_PART}"

_ADD_PART_HOURS = """ON CONFLICT DO UPDATE SET
        parts = parts + excluded.parts, first_pass = first_pass + excluded.first_pass,
        final_pass = final_pass + excluded.final_pass, tests = tests + excluded.tests"""

# part_shares(+1) for a batch whose parts are all new: their stored summaries are then exactly
# the batch's rows, so the shares come from those without looking each part up again.
_NEW_PART_SHARES = f"""INSERT INTO part_hours
    SELECT (first_ended_at / {_H}) * {_H} AS h, station AS s, line AS l, program AS g,
           COUNT(*), SUM(first_verdict = 'pass'), SUM(last_verdict = 'pass'), SUM(tests)
    FROM temp.fold_parts WHERE true GROUP BY h, s, l, g
    {_ADD_PART_HOURS}"""

_SETTLE = (
    f"""INSERT INTO part_hours
    SELECT hour, station, line, program, SUM(parts), SUM(first_pass), SUM(final_pass),
           SUM(tests)
    FROM temp.part_delta WHERE true GROUP BY hour, station, line, program
    {_ADD_PART_HOURS}""",
    # an hour-group that lost its last part is removed, as if it never had one
    """DELETE FROM part_hours WHERE parts = 0 AND (hour, station, line, program) IN
    (SELECT hour, station, line, program FROM temp.part_delta WHERE parts < 0)""",
    "DELETE FROM temp.part_delta",
)


def _ensure_temp(conn: sqlite3.Connection) -> None:
    for statement in _TEMP:
        conn.execute(statement)


def part_shares(conn: sqlite3.Connection, sign: int, keys: str) -> int:
    """Add (+1) or take back (-1) the ``part_hours`` share of the parts listed in ``keys``.

    ``keys`` is a fixed table name with a ``part_id`` primary key (never user input). Shares
    are added straight into ``part_hours``; ones taken back wait in ``temp.part_delta`` for
    ``settle_part_hours``, which also drops the groups they leave empty. Take back before
    changing ``parts``, add after. Returns how many hour-groups the shares touched.
    """
    share = f"""(p.first_ended_at / {_H}) * {_H} AS h, p.station AS s, p.line AS l,
        p.program AS g, {sign} * COUNT(*), {sign} * SUM(p.first_verdict = 'pass'),
        {sign} * SUM(p.last_verdict = 'pass'), {sign} * SUM(p.tests)
        FROM {keys} k CROSS JOIN parts p ON p.part_id = k.part_id GROUP BY h, s, l, g"""
    if sign == 1:
        sql = f"INSERT INTO part_hours SELECT {share} {_ADD_PART_HOURS}"
    elif sign == -1:
        _ensure_temp(conn)
        sql = f"INSERT INTO temp.part_delta SELECT {share}"
    else:
        raise ValueError("sign must be +1 or -1")
    return int(conn.execute(sql).rowcount)


def settle_part_hours(conn: sqlite3.Connection) -> None:
    """Apply the shares taken back by ``part_shares`` to ``part_hours``."""
    for statement in _SETTLE:
        conn.execute(statement)


def fold_results(conn: sqlite3.Connection, after_seq: int) -> None:
    """Add the results with seq > ``after_seq`` (the ones just inserted) to the summaries.

    Runs inside the caller's transaction; ``after_seq`` is ``MAX(seq)`` read before the
    insert, so exactly the newly stored rows count.
    """
    conn.execute(_FOLD_HOURS, (after_seq,))
    conn.execute(_FOLD_REASONS, (after_seq,))
    _ensure_temp(conn)
    conn.execute("DELETE FROM temp.fold_parts")
    if conn.execute(_BATCH_PARTS, (after_seq,)).rowcount <= 0:
        return  # no part ids in the batch
    moved = part_shares(conn, -1, "temp.fold_parts")  # parts seen before (retests)
    conn.execute(_UPSERT_PARTS)
    if not moved:
        conn.execute(_NEW_PART_SHARES)
        return
    part_shares(conn, +1, "temp.fold_parts")
    settle_part_hours(conn)


def rebuild_summaries(conn: sqlite3.Connection) -> None:
    """Recompute every summary from the stored results (after a raw bulk load, or a repair)."""
    for table in SUMMARY_TABLES:
        conn.execute(f"DELETE FROM {table}")
    fold_results(conn, 0)
