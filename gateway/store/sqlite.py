"""SqliteStore: the QueryStore over the journal file, read-only, every aggregate in SQL.

The connection is opened with ``mode=ro`` (and ``query_only``), so a dashboard can never write
to the gateway's journal, and WAL lets it read while the gateway writes. SQL text is built only
from fixed fragments and whitelisted column names; every value travels as a bound parameter.
Timestamps are integer microseconds, so hour and day buckets are integer arithmetic.
"""

from __future__ import annotations

import itertools
import math
import sqlite3
import threading
from collections.abc import Sequence
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from gateway.errors import StoreError
from gateway.store._sqlite import sqlite_path, store_error, to_us
from gateway.store.base import (
    GROUP_COLUMNS,
    HISTOGRAM_VALUES,
    VERDICT_GROUP_COLUMNS,
    Bucket,
    GroupColumn,
    VerdictGroupColumn,
)
from gateway.store.schema import (
    CALIBRATION_COLUMNS,
    QUARANTINE_COLUMNS,
    RESULT_COLUMNS,
    SCHEMA_VERSION,
    STATUS_COLUMNS,
    schema_version,
)

__all__ = ["SqliteStore", "open_sqlite_store"]

_HOUR = 3_600_000_000
_BUCKET_US = {"hour": _HOUR, "day": 24 * _HOUR}
_TIME_COLUMNS = ("ended_at", "received_at", "at", "bucket")
_RESULT_SELECT = ("seq", "record_id", *RESULT_COLUMNS)
_CALIBRATION_SELECT = ("seq", "record_id", *CALIBRATION_COLUMNS)
_STATUS_SELECT = ("seq", "record_id", *STATUS_COLUMNS)
_QUARANTINE_SELECT = ("seq", *QUARANTINE_COLUMNS)
_SERIES_COLUMNS = (
    "ended_at", "program", "master_loss_pa", "standard_loss_pa", "standard_sccm", "ratio",
    "sensitivity", "passed", "reason",
)  # fmt: skip


def _us(name: str, value: datetime | None) -> int | None:
    if value is None:
        return None
    if not isinstance(value, datetime) or value.utcoffset() is None:
        raise ValueError(f"{name} must be a timezone-aware datetime, got {value!r}")
    return to_us(value)


class _Where:
    """Accumulates ``AND``-ed conditions from fixed fragments with named parameters."""

    def __init__(self) -> None:
        self.parts: list[str] = []
        self.params: dict[str, Any] = {}

    def time(self, column: str, since: datetime | None, until: datetime | None) -> _Where:
        lo, hi = _us("since", since), _us("until", until)
        if lo is not None and hi is not None and hi < lo:
            raise ValueError(f"until ({until}) is before since ({since})")
        if lo is not None:
            self.parts.append(f"{column} >= :since")
            self.params["since"] = lo
        if hi is not None:
            self.parts.append(f"{column} < :until")
            self.params["until"] = hi
        return self

    def eq(self, column: str, value: str | None) -> _Where:
        if value is not None:
            self.parts.append(f"{column} = :{column}")
            self.params[column] = value
        return self

    def sql(self) -> str:
        return (" WHERE " + " AND ".join(self.parts)) if self.parts else ""


def _group_columns(by: Sequence[str], allowed: Sequence[str] = GROUP_COLUMNS) -> list[str]:
    if isinstance(by, str):
        by = (by,)
    cols = list(dict.fromkeys(by))
    bad = [c for c in cols if c not in allowed]
    if bad:
        raise ValueError(f"cannot group by {bad}; allowed: {', '.join(allowed)}")
    return cols


def _bucket_expr(bucket: Bucket | None, column: str = "ended_at") -> str | None:
    if bucket is None:
        return None
    if bucket not in _BUCKET_US:
        raise ValueError(f"bucket must be 'hour', 'day' or None, got {bucket!r}")
    width = _BUCKET_US[bucket]  # a whitelisted integer, safe to inline
    return f"({column} / {width}) * {width}"


def _names(
    by: Sequence[str], bucket: Bucket | None, allowed: Sequence[str] = GROUP_COLUMNS
) -> list[str]:
    names = _group_columns(by, allowed)
    if bucket is not None:
        _bucket_expr(bucket)  # validates
        names.append("bucket")
    return names


class _Span:
    """A time range split into whole UTC hours (summaries) and the partial hours at its ends."""

    def __init__(self, lo: int | None, hi: int | None) -> None:
        if lo is not None and hi is not None and hi < lo:
            raise ValueError("until is before since")
        h1 = None if lo is None else -(-lo // _HOUR) * _HOUR
        h2 = None if hi is None else (hi // _HOUR) * _HOUR
        self.params: dict[str, int] = {}
        self._raw: list[tuple[int | None, int | None]] = []
        self._summary: tuple[int | None, int | None] | None = (h1, h2)
        if h1 is not None and h2 is not None and h1 >= h2:
            self._raw, self._summary = [(lo, hi)], None
        else:
            if lo is not None and h1 is not None and lo < h1:
                self._raw.append((lo, h1))
            if hi is not None and h2 is not None and h2 < hi:
                self._raw.append((h2, hi))

    def raw(self, column: str) -> str | None:
        """Condition on a raw time column for the partial hours, or None when there are none."""
        parts = []
        for i, (lo, hi) in enumerate(self._raw):
            conds = []
            if lo is not None:
                self.params[f"r{i}lo"] = lo
                conds.append(f"{column} >= :r{i}lo")
            if hi is not None:
                self.params[f"r{i}hi"] = hi
                conds.append(f"{column} < :r{i}hi")
            parts.append("(" + " AND ".join(conds) + ")")
        return " OR ".join(parts) if parts else None

    def summary(self) -> str | None:
        """Condition on ``hour`` for the whole hours, or None when the range has none."""
        if self._summary is None:
            return None
        h1, h2 = self._summary
        conds = []
        if h1 is not None:
            self.params["h1"] = h1
            conds.append("hour >= :h1")
        if h2 is not None:
            self.params["h2"] = h2
            conds.append("hour < :h2")
        return " AND ".join(conds) or "1"


def _limit(limit: int | None) -> str:
    if limit is None:
        return ""
    if isinstance(limit, bool) or not isinstance(limit, int) or limit < 0:
        raise ValueError(f"limit must be a non-negative integer, got {limit!r}")
    return f" LIMIT {int(limit)}"


def _bin_expr(value: str, n_edges: int) -> str:
    """Bin index of ``value`` against edges :e0..:eN, as a nested CASE (binary search).

    -1 below the first edge, N-1 for the closed last bin, N above the last edge: the same
    assignment numpy.histogram makes, in log2(N) comparisons per row.
    """
    last = n_edges - 1

    def search(a: int, b: int) -> str:  # bins a..b-1, value known to be within [e_a, e_b]
        if b - a == 1:
            return str(a)
        m = (a + b) // 2
        return f"CASE WHEN {value} < :e{m} THEN {search(a, m)} ELSE {search(m, b)} END"

    return (
        f"CASE WHEN {value} < :e0 THEN -1 WHEN {value} > :e{last} THEN {last} "
        f"ELSE {search(0, last)} END"
    )


class SqliteStore:
    """QueryStore over a journal file (see the module docstring)."""

    def __init__(self, path: Path | str, *, busy_timeout_s: float = 5.0) -> None:
        self.path = Path(path)
        if not self.path.is_file():
            raise StoreError(f"journal {self.path}: no such file (has the gateway run yet?)")
        uri = f"{self.path.resolve().as_uri()}?mode=ro"
        try:
            self._conn = sqlite3.connect(
                uri, uri=True, timeout=busy_timeout_s, check_same_thread=False
            )
            self._conn.execute("PRAGMA query_only = ON")
            self._conn.execute("PRAGMA cache_size = -65536")
            version = schema_version(self._conn)
        except sqlite3.Error as exc:
            raise store_error(exc, self.path, "opening for queries") from exc
        if version == 0:
            self._conn.close()
            raise StoreError(f"journal {self.path}: not a leakfleet journal (no schema)")
        if version > SCHEMA_VERSION:
            self._conn.close()
            raise StoreError(
                f"journal {self.path}: schema version {version} is newer than this build "
                f"understands ({SCHEMA_VERSION}); upgrade leakfleet"
            )
        # one connection shared by threads (Streamlit sessions): queries take turns
        self._lock = threading.Lock()

    # -- plumbing -------------------------------------------------------------------------------
    def _fetch(self, sql: str, params: dict[str, Any], columns: Sequence[str]) -> pd.DataFrame:
        with self._lock:
            try:
                rows = self._conn.execute(sql, params).fetchall()
            except sqlite3.Error as exc:
                raise store_error(exc, self.path, "querying") from exc
        frame = pd.DataFrame.from_records(rows, columns=list(columns))
        for col in _TIME_COLUMNS:
            if col in frame.columns:
                frame[col] = pd.to_datetime(frame[col].astype("int64"), unit="us", utc=True)
        if "passed" in frame.columns:  # nullable: a station may not judge its calibration
            frame["passed"] = frame["passed"].astype("boolean")
        return frame

    def _rows(
        self,
        table: str,
        columns: Sequence[str],
        where: _Where,
        order_col: str,
        limit: int | None,
        newest_first: bool,
    ) -> pd.DataFrame:
        direction = "DESC" if newest_first else "ASC"
        sql = (
            f"SELECT {', '.join(columns)} FROM {table}{where.sql()} "
            f"ORDER BY {order_col} {direction}, seq {direction}{_limit(limit)}"
        )
        return self._fetch(sql, where.params, columns)

    # -- rows -----------------------------------------------------------------------------------
    def stations(self) -> pd.DataFrame:
        # Loose index scan: hop from one station to the next in the station index instead of
        # reading every row; then each station's line from its newest result.
        sql = """
        WITH RECURSIVE
          r(station) AS (
            SELECT MIN(station) FROM results
            UNION ALL
            SELECT (SELECT MIN(station) FROM results WHERE station > r.station)
            FROM r WHERE r.station IS NOT NULL),
          c(station) AS (
            SELECT MIN(station) FROM calibrations
            UNION ALL
            SELECT (SELECT MIN(station) FROM calibrations WHERE station > c.station)
            FROM c WHERE c.station IS NOT NULL),
          s(station) AS (
            SELECT MIN(station) FROM statuses
            UNION ALL
            SELECT (SELECT MIN(station) FROM statuses WHERE station > s.station)
            FROM s WHERE s.station IS NOT NULL),
          every(station) AS (
            SELECT station FROM r WHERE station IS NOT NULL
            UNION SELECT station FROM c WHERE station IS NOT NULL
            UNION SELECT station FROM s WHERE station IS NOT NULL)
        SELECT station,
               COALESCE(
                 (SELECT line FROM results x WHERE x.station = every.station
                  ORDER BY ended_at DESC LIMIT 1),
                 (SELECT line FROM calibrations y WHERE y.station = every.station
                  ORDER BY ended_at DESC LIMIT 1)) AS line
        FROM every ORDER BY station
        """
        return self._fetch(sql, {}, ("station", "line"))

    def results(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
        part_id: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        where = (
            _Where()
            .time("ended_at", since, until)
            .eq("station", station)
            .eq("line", line)
            .eq("program", program)
            .eq("part_id", part_id)
        )
        return self._rows("results", _RESULT_SELECT, where, "ended_at", limit, newest_first)

    def calibrations(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        where = (
            _Where()
            .time("ended_at", since, until)
            .eq("station", station)
            .eq("line", line)
            .eq("program", program)
        )
        return self._rows(
            "calibrations", _CALIBRATION_SELECT, where, "ended_at", limit, newest_first
        )

    def statuses(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        where = _Where().time("at", since, until).eq("station", station)
        return self._rows("statuses", _STATUS_SELECT, where, "at", limit, newest_first)

    def quarantine(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        where = _Where().time("received_at", since, until).eq("station", station)
        return self._rows(
            "quarantine", _QUARANTINE_SELECT, where, "received_at", limit, newest_first
        )

    def _latest(self, table: str, columns: Sequence[str], time_col: str) -> pd.DataFrame:
        # one index probe per station (newest row in the (station, time) index)
        sql = f"""
        WITH RECURSIVE s(station) AS (
            SELECT MIN(station) FROM {table}
            UNION ALL
            SELECT (SELECT MIN(station) FROM {table} WHERE station > s.station)
            FROM s WHERE s.station IS NOT NULL)
        SELECT {", ".join("t." + c for c in columns)}
        FROM s JOIN {table} t ON t.seq = (
            SELECT seq FROM {table} WHERE station = s.station
            ORDER BY {time_col} DESC, seq DESC LIMIT 1)
        ORDER BY t.station
        """
        return self._fetch(sql, {}, columns)

    def latest_results_per_station(self) -> pd.DataFrame:
        return self._latest("results", _RESULT_SELECT, "ended_at")

    def latest_status_per_station(self) -> pd.DataFrame:
        return self._latest("statuses", _STATUS_SELECT, "at")

    def latest_calibration_per_station(self) -> pd.DataFrame:
        return self._latest("calibrations", _CALIBRATION_SELECT, "ended_at")

    # -- aggregates -----------------------------------------------------------------------------
    # Counts and sums read the hourly summaries (result_hours, part_hours) for the whole UTC
    # hours inside the range and the raw rows only for the partial hours at its two ends, so
    # the cost follows the number of station-hours, not of results; the answer is the same.

    def _aggregate(
        self,
        names: list[str],
        bucket: Bucket | None,
        parts: Sequence[tuple[str, str, str, str]],
        outer: str,
        filters: _Where,
        since: datetime | None,
        until: datetime | None,
        extra_keys: Sequence[str] = (),
    ) -> list[tuple[Any, ...]]:
        """Run ``outer`` over the UNION ALL of ``parts``.

        Each part is (table, time column, aggregate select list, extra condition); a time
        column of ``hour`` marks a summary table, read for whole hours only.
        """
        span = _Span(_us("since", since), _us("until", until))
        filt = "".join(" AND " + p for p in filters.parts)
        keys = [*names, *extra_keys]
        group = f" GROUP BY {', '.join(keys)}" if keys else ""
        subs = []
        for table, time_col, aggs, cond in parts:
            where = span.summary() if time_col == "hour" else span.raw(time_col)
            if where is None:
                continue
            exprs = [*names[: len(names) - (bucket is not None)]]
            bucket_sql = _bucket_expr(bucket, time_col)
            if bucket_sql is not None:
                exprs.append(f"{bucket_sql} AS bucket")
            select = ", ".join([*exprs, *extra_keys, aggs])
            subs.append(f"SELECT {select} FROM {table} WHERE ({where}){cond}{filt}{group}")
        if not subs:
            return []
        params = {**filters.params, **span.params}
        order = f" ORDER BY {', '.join(keys)}" if keys else ""
        sql = f"SELECT {', '.join([*keys, outer])} FROM ({' UNION ALL '.join(subs)}){group}{order}"
        with self._lock:
            try:
                return self._conn.execute(sql, params).fetchall()
            except sqlite3.Error as exc:
                raise store_error(exc, self.path, "querying") from exc

    def _frame(self, rows: list[tuple[Any, ...]], columns: Sequence[str]) -> pd.DataFrame:
        frame = pd.DataFrame.from_records(rows, columns=list(columns))
        if "bucket" in frame.columns:
            frame["bucket"] = pd.to_datetime(frame["bucket"].astype("int64"), unit="us", utc=True)
        return frame

    def verdict_counts(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        by: Sequence[VerdictGroupColumn] = ("station",),
        bucket: Bucket | None = None,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
    ) -> pd.DataFrame:
        names = _names(by, bucket, VERDICT_GROUP_COLUMNS)
        filters = _Where().eq("station", station).eq("line", line).eq("program", program)
        # by reason: the reason_hours summary (the same counts, split by reason)
        hours = "reason_hours" if "reason" in names else "result_hours"
        rows = self._aggregate(
            names, bucket,
            [("results", "ended_at", "COUNT(*) AS n", ""),
             (hours, "hour", "SUM(n) AS n", "")],
            "SUM(n)", filters, since, until, extra_keys=("verdict",),
        )  # fmt: skip
        frame = self._frame(rows, [*names, "verdict", "n"])
        frame["n"] = frame["n"].astype("int64")
        return frame

    def first_pass_counts(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        by: Sequence[GroupColumn] = ("station",),
        bucket: Bucket | None = None,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
    ) -> pd.DataFrame:
        names = _names(by, bucket)
        filters = _Where().eq("station", station).eq("line", line).eq("program", program)
        zeros = "0 AS parts, 0 AS first_pass, 0 AS final_pass, 0 AS tests"
        rows = self._aggregate(
            names, bucket,
            [("parts", "first_ended_at",
              "COUNT(*) AS parts, SUM(first_verdict = 'pass') AS first_pass, "
              "SUM(last_verdict = 'pass') AS final_pass, SUM(tests) AS tests, 0 AS no_part", ""),
             ("part_hours", "hour",
              "SUM(parts) AS parts, SUM(first_pass) AS first_pass, "
              "SUM(final_pass) AS final_pass, SUM(tests) AS tests, 0 AS no_part", ""),
             ("results", "ended_at", f"{zeros}, COUNT(*) AS no_part", " AND part_id IS NULL"),
             ("result_hours", "hour", f"{zeros}, SUM(no_part) AS no_part", " AND no_part > 0")],
            "SUM(parts), SUM(first_pass), SUM(final_pass), SUM(tests), SUM(no_part)",
            filters, since, until,
        )  # fmt: skip
        counts = ["parts", "first_pass", "final_pass", "tests", "no_part_id"]
        frame = self._frame(rows, [*names, *counts])
        frame[counts] = frame[counts].fillna(0).astype("int64")
        frame = frame[(frame["parts"] > 0) | (frame["no_part_id"] > 0)]
        return frame.reset_index(drop=True)

    def histogram(
        self,
        since: datetime | None,
        until: datetime | None,
        edges: Sequence[float],
        *,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
        value: str = "leak_rate_sccm",
    ) -> pd.DataFrame:
        if value not in HISTOGRAM_VALUES:
            raise ValueError(f"cannot bin {value!r}; allowed: {', '.join(HISTOGRAM_VALUES)}")
        e = [float(x) for x in edges]
        if len(e) < 2 or not all(math.isfinite(x) for x in e):
            raise ValueError("edges must be at least two finite numbers")
        if any(b <= a for a, b in itertools.pairwise(e)):
            raise ValueError("edges must be strictly increasing")
        where = (
            _Where()
            .time("ended_at", since, until)
            .eq("station", station)
            .eq("line", line)
            .eq("program", program)
        )
        params = dict(where.params)
        params.update({f"e{i}": x for i, x in enumerate(e)})
        sql = (
            f"SELECT {_bin_expr(value, len(e))} AS b, COUNT(*) FROM results{where.sql()}"
            f"{' AND' if where.parts else ' WHERE'} {value} IS NOT NULL GROUP BY b"
        )  # a test without the value (a gross leak with no rate) is in no bin
        with self._lock:
            try:
                rows = self._conn.execute(sql, params).fetchall()
            except sqlite3.Error as exc:
                raise store_error(exc, self.path, "querying") from exc
        bins = len(e) - 1
        counts = np.zeros(bins + 2, dtype="int64")  # [under, bin 0 .. bin N-1, over]
        for index, n in rows:
            counts[int(index) + 1] = n
        lo = np.array([-math.inf, *e])
        hi = np.array([*e, math.inf])
        return pd.DataFrame({"bin_lo": lo, "bin_hi": hi, "n": counts})

    def leak_summary(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        by: Sequence[GroupColumn] = ("station",),
        bucket: Bucket | None = None,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
    ) -> pd.DataFrame:
        names = _names(by, bucket)
        filters = _Where().eq("station", station).eq("line", line).eq("program", program)
        # an aborted test measured nothing: its reading would only distort the statistics;
        # n counts the tests that have a leak rate (a gross leak often has none)
        not_aborted = " AND verdict <> 'aborted'"
        rows = self._aggregate(
            names, bucket,
            [("results", "ended_at",
              "COUNT(leak_rate_sccm) AS n, TOTAL(leak_rate_sccm) AS s1, "
              "TOTAL(leak_rate_sccm * leak_rate_sccm) AS s2, MIN(leak_rate_sccm) AS lo, "
              "MAX(leak_rate_sccm) AS hi", not_aborted),
             ("result_hours", "hour",
              "SUM(leak_n) AS n, TOTAL(leak_sum) AS s1, TOTAL(leak_sumsq) AS s2, "
              "MIN(leak_min) AS lo, MAX(leak_max) AS hi", not_aborted)],
            "SUM(n), SUM(s1), SUM(s2), MIN(lo), MAX(hi)", filters, since, until,
        )  # fmt: skip
        raw = self._frame(rows, [*names, "n", "s1", "s2", "min", "max"])
        raw = raw[raw["n"].notna() & (raw["n"] > 0)]
        n = raw["n"].astype("int64")
        s1 = raw["s1"].astype(float)
        s2 = raw["s2"].astype(float)
        # textbook sum-of-squares variance; clip tiny negative round-off to zero
        var = ((s2 - s1 * s1 / n) / (n - 1)).where(n > 1).clip(lower=0.0)
        frame = raw[names].copy()
        frame["n"] = n
        frame["mean"] = s1 / n
        frame["std"] = np.sqrt(var)
        frame["min"] = raw["min"].astype(float)
        frame["max"] = raw["max"].astype(float)
        return frame.reset_index(drop=True)

    def calibration_series(
        self,
        station: str,
        program: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
    ) -> pd.DataFrame:
        where = _Where().eq("station", station).eq("program", program)
        where.time("ended_at", since, until)
        sql = (
            f"SELECT {', '.join(_SERIES_COLUMNS)} FROM calibrations{where.sql()} "
            "ORDER BY ended_at, seq"
        )
        return self._fetch(sql, where.params, _SERIES_COLUMNS)

    def close(self) -> None:
        with self._lock:
            self._conn.close()

    def __enter__(self) -> SqliteStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def open_sqlite_store(url: str) -> SqliteStore:
    """``sqlite:///path.db`` or a bare path → a read-only SqliteStore."""
    return SqliteStore(sqlite_path(url))
