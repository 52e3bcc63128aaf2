"""InfluxStore: the QueryStore over InfluxDB, in InfluxQL through the v1 ``/query`` API.

Reads what the InfluxDB sink wrote (measurements ``leak_results``, ``leak_calibrations``,
``station_status``; see gateway.influxdb.lineprotocol), so the dashboard and ``leakfleet report``
can run on a central InfluxDB exactly as on a gateway's journal. ``influxdb://host:8086/db``
talks to 1.x (or 3 Core); ``influxdb2://host:8086?org=..&bucket=..`` to 2.x's v1 compatibility
endpoint (the bucket needs a DBRP mapping, see deploy/influxdb.md) with the token from
``LEAKFLEET_INFLUX_TOKEN`` in an ``Authorization: Token`` header.

Where the work happens, honestly:
- counts by reject reason: the reason is a free-text field, so the counts per tag group come
  from InfluxQL and only the tests that carry a reason are fetched (narrow) and split in pandas;
- row queries, counts per verdict, leak-rate statistics (COUNT, MEAN, STDDEV, MIN, MAX) and
  hour/day buckets (``GROUP BY time(1h|1d)``, UTC-aligned like the SQLite store's) run in
  InfluxQL; group columns (station, line, program) are tags, so ``GROUP BY`` is native;
- the histogram is one COUNT statement per bin (``WHERE value >= lo AND value < hi``), all in
  one request;
- ``first_pass_counts`` needs each part's first and last test, but InfluxQL cannot group by a
  field (the part id is a field on purpose: it is high-cardinality), so that one query fetches
  the narrow columns (time, part_id, verdict and the group tags) in range, then the whole
  history of the parts found there (a part is judged by all its tests, see QueryStore), and
  groups in pandas;
- quarantine rows are not forwarded to InfluxDB: ``quarantine()`` is always empty here.
Every value travels as a bound parameter (``params`` of ``/query``); identifiers come only from
whitelists. Frames have the SqliteStore's columns and conventions (gateway.store.base).
"""

from __future__ import annotations

import itertools
import math
import threading
from collections.abc import Sequence
from datetime import datetime
from typing import Any

import numpy as np
import pandas as pd

from gateway.errors import ConfigError, StoreError
from gateway.influxdb.http import (
    PASSWORD_ENV,
    TOKEN_ENV,
    InfluxHttp,
    InfluxHttpError,
    parse_influx_url,
)
from gateway.influxdb.lineprotocol import MEASUREMENTS
from gateway.store.base import (
    GROUP_COLUMNS,
    HISTOGRAM_VALUES,
    VERDICT_GROUP_COLUMNS,
    Bucket,
    GroupColumn,
    VerdictGroupColumn,
)
from gateway.store.influx_query import BUCKET_NS as _BUCKET_NS
from gateway.store.influx_query import PART_WINDOW
from gateway.store.influx_query import RESULTS as _RESULTS
from gateway.store.influx_query import Where as _Where
from gateway.store.influx_query import ns as _ns
from gateway.store.influx_query import utc as _utc
from gateway.store.schema import (
    CALIBRATION_COLUMNS,
    QUARANTINE_COLUMNS,
    RESULT_COLUMNS,
    STATUS_COLUMNS,
)

__all__ = ["InfluxStore", "open_influx_store"]

_CALS = MEASUREMENTS["calibration"]
_STATUS = MEASUREMENTS["status"]
_RESULT_SELECT = ("seq", "record_id", *RESULT_COLUMNS)
_CALIBRATION_SELECT = ("seq", "record_id", *CALIBRATION_COLUMNS)
_STATUS_SELECT = ("seq", "record_id", *STATUS_COLUMNS)
_SERIES_COLUMNS = (
    "ended_at", "program", "master_loss_pa", "standard_loss_pa", "standard_sccm", "ratio",
    "sensitivity", "passed", "reason",
)  # fmt: skip
_INTERVAL = {"hour": "1h", "day": "1d"}
_INT_COLUMNS = ("seq", "cycle")
_FLOAT_COLUMNS = (
    "test_pressure_pa", "pressure_loss_pa", "leak_rate_sccm", "reject_limit_sccm", "fill_s",
    "stabilise_s", "test_s", "lower_limit_sccm", "temperature_c", "master_loss_pa",
    "standard_loss_pa", "standard_sccm", "standard_ref_pressure_pa", "ratio", "sensitivity",
)  # fmt: skip


def _group_columns(by: Sequence[str], allowed: Sequence[str] = GROUP_COLUMNS) -> list[str]:
    cols = list(by)
    bad = [c for c in cols if c not in allowed]
    if bad:
        raise ValueError(f"cannot group by {bad}; allowed: {', '.join(allowed)}")
    return cols


def _check_bucket(bucket: Bucket | None) -> None:
    if bucket is not None and bucket not in _INTERVAL:
        raise ValueError(f"bucket must be 'hour', 'day' or None, got {bucket!r}")


class InfluxStore:
    """QueryStore over one InfluxDB database (or 2.x bucket); see the module docstring."""

    def __init__(self, http: InfluxHttp) -> None:
        self.http = http
        self._lock = threading.Lock()

    # -- plumbing -------------------------------------------------------------------------------
    def _query(self, q: str, params: dict[str, Any] | None = None) -> list[dict[str, Any]]:
        """Series of every statement: ``[{"statement", "tags", "columns", "values"}]``."""
        try:
            with self._lock:
                results = self.http.query(q, bind=params)
        except InfluxHttpError as exc:
            raise StoreError(f"{self.http.target.describe()}: {exc}") from None
        out: list[dict[str, Any]] = []
        for result in results:
            for series in result.get("series", []):
                out.append({
                    "statement": result.get("statement_id", 0),
                    "tags": series.get("tags") or {},
                    "columns": series["columns"],
                    "values": series.get("values") or [],
                })  # fmt: skip
        return out

    def _frame(self, series: list[dict[str, Any]]) -> pd.DataFrame:
        """One frame of every series' points, each with its series' tags (a field of the same
        name wins); built column-wise, as a frame of row dicts costs a dict per point."""
        frames = []
        for s in series:
            if not s["values"]:
                continue
            frame = pd.DataFrame(s["values"], columns=s["columns"])
            for key, value in s["tags"].items():
                if key not in frame.columns:
                    frame[key] = value
            frames.append(frame)
        if not frames:
            return pd.DataFrame()
        return frames[0] if len(frames) == 1 else pd.concat(frames, ignore_index=True)

    def _records(self, frame: pd.DataFrame, columns: Sequence[str], time_col: str) -> pd.DataFrame:
        """Raw points → canonical columns, built the way SqliteStore builds its frames (from
        Python values), so dtypes and missing-value markers come out the same."""
        if frame.empty:
            return pd.DataFrame.from_records([], columns=list(columns))
        frame = frame.rename(columns={"time": time_col})
        if "received_at_ns" in frame.columns:
            frame["received_at"] = frame["received_at_ns"]
        converters = [_converter(c, time_col) for c in columns]
        present = [c in frame.columns for c in columns]
        rows = []
        for rec in frame.to_dict("records"):
            rows.append(tuple(
                conv(rec[c] if ok else None)
                for c, conv, ok in zip(columns, converters, present, strict=True)))
        out = pd.DataFrame.from_records(rows, columns=list(columns))
        for col in (time_col, "received_at"):
            if col in out.columns:
                out[col] = pd.to_datetime(out[col].astype("int64"), unit="us", utc=True)
        if "passed" in out.columns:  # nullable: a station may not judge its calibration
            out["passed"] = out["passed"].astype("boolean")
        return out

    def _rows(
        self, measurement: str, columns: Sequence[str], where: _Where, time_col: str,
        limit: int | None, newest_first: bool,
    ) -> pd.DataFrame:
        order = " ORDER BY time DESC" if newest_first else ""
        lim = ""
        if limit is not None:
            if isinstance(limit, bool) or not isinstance(limit, int) or limit < 0:
                raise ValueError(f"limit must be a non-negative integer, got {limit!r}")
            lim = f" LIMIT {int(limit)}"
        frame = self._frame(self._query(f"SELECT * FROM {measurement}{where.sql()}{order}{lim}",
                                        where.params))
        out = self._records(frame, columns, time_col)
        if not out.empty:
            out = out.sort_values([time_col, "seq"], ascending=not newest_first, kind="stable")
        return out.reset_index(drop=True)

    def _span(self, measurement: str, where: _Where) -> tuple[int, int] | None:
        """First and last point time, for explicit GROUP BY time bounds (InfluxQL would
        otherwise start at the epoch and stop at now())."""
        series = self._query(
            f"SELECT FIRST(record_id) FROM {measurement}{where.sql()}; "
            f"SELECT LAST(record_id) FROM {measurement}{where.sql()}", where.params)
        times = {s["statement"]: s["values"][0][0] for s in series if s["values"]}
        if 0 not in times or 1 not in times:
            return None
        return int(times[0]), int(times[1])

    def _bounded(self, measurement: str, where: _Where, since: datetime | None,
                 until: datetime | None) -> _Where | None:
        """``where`` with both time bounds set (None: nothing in range)."""
        bounded = where.copy()
        if since is not None and until is not None:
            return bounded.time(since, until)
        span = self._span(measurement, where.copy().time(since, until))
        if span is None:
            return None
        lo = _ns("since", since) if since is not None else span[0]
        hi = _ns("until", until) if until is not None else span[1] + 1
        return bounded.raw("time >= $since AND time < $until", since=lo, until=hi)

    def _grouped(
        self, select: str, by: Sequence[str], bucket: Bucket | None, where: _Where | None,
        extra_tags: Sequence[str] = (),
    ) -> pd.DataFrame:
        """One aggregate statement grouped by tags [and time]; rows with tags + columns."""
        if where is None:
            return pd.DataFrame()
        tags = [*by, *extra_tags]
        group = [f'"{t}"' for t in tags]
        if bucket is not None:
            group.append(f"time({_INTERVAL[bucket]})")
        clause = f" GROUP BY {', '.join(group)}" if group else ""
        fill = " fill(none)" if bucket is not None else ""
        frame = self._frame(self._query(
            f"SELECT {select} FROM {_RESULTS}{where.sql()}{clause}{fill}", where.params))
        if frame.empty:
            return frame
        if bucket is not None:
            frame["bucket"] = _utc(frame["time"])
        return frame.drop(columns=["time"])

    # -- rows -----------------------------------------------------------------------------------
    def stations(self) -> pd.DataFrame:
        def newest_line(measurement: str) -> dict[str, str | None]:
            best: dict[str, tuple[int, str | None]] = {}
            q = f'SELECT LAST(record_id) FROM {measurement} GROUP BY "station", "line"'
            for s in self._query(q):
                station, line = s["tags"].get("station"), s["tags"].get("line") or None
                if not station or not s["values"]:
                    continue
                t = int(s["values"][0][0])
                if station not in best or t >= best[station][0]:
                    best[station] = (t, line)
            return {k: v[1] for k, v in best.items()}

        # as SqliteStore: the line of the newest result, else of the newest calibration
        from_results, from_cals = newest_line(_RESULTS), newest_line(_CALS)
        every = set(from_results) | set(from_cals)
        for s in self._query(f'SHOW TAG VALUES FROM {_STATUS} WITH KEY = "station"'):
            every.update(str(v[1]) for v in s["values"])
        rows = [(st, from_results.get(st) or from_cals.get(st)) for st in sorted(every)]
        return pd.DataFrame(rows, columns=["station", "line"], dtype=object)

    def results(
        self, since: datetime | None = None, until: datetime | None = None, *,
        station: str | None = None, line: str | None = None, program: str | None = None,
        part_id: str | None = None, limit: int | None = None, newest_first: bool = False,
    ) -> pd.DataFrame:
        where = (_Where().time(since, until).eq("station", station).eq("line", line)
                 .eq("program", program).eq("part_id", part_id))
        return self._rows(_RESULTS, _RESULT_SELECT, where, "ended_at", limit, newest_first)

    def calibrations(
        self, since: datetime | None = None, until: datetime | None = None, *,
        station: str | None = None, line: str | None = None, program: str | None = None,
        limit: int | None = None, newest_first: bool = False,
    ) -> pd.DataFrame:
        where = (_Where().time(since, until).eq("station", station).eq("line", line)
                 .eq("program", program))
        return self._rows(_CALS, _CALIBRATION_SELECT, where, "ended_at", limit, newest_first)

    def statuses(
        self, since: datetime | None = None, until: datetime | None = None, *,
        station: str | None = None, limit: int | None = None, newest_first: bool = False,
    ) -> pd.DataFrame:
        where = _Where().time(since, until).eq("station", station)
        return self._rows(_STATUS, _STATUS_SELECT, where, "at", limit, newest_first)

    def quarantine(
        self, since: datetime | None = None, until: datetime | None = None, *,
        station: str | None = None, limit: int | None = None, newest_first: bool = False,
    ) -> pd.DataFrame:
        _Where().time(since, until)  # same argument checks as everywhere else
        columns = ("seq", *QUARANTINE_COLUMNS)
        return pd.DataFrame({c: pd.Series(dtype=_empty_dtype(c)) for c in columns})

    def _latest(self, measurement: str, columns: Sequence[str], time_col: str) -> pd.DataFrame:
        frame = self._frame(self._query(
            f'SELECT * FROM {measurement} GROUP BY "station" ORDER BY time DESC LIMIT 1'))
        out = self._records(frame, columns, time_col)
        return out.sort_values("station", kind="stable").reset_index(drop=True)

    def latest_results_per_station(self) -> pd.DataFrame:
        return self._latest(_RESULTS, _RESULT_SELECT, "ended_at")

    def latest_status_per_station(self) -> pd.DataFrame:
        return self._latest(_STATUS, _STATUS_SELECT, "at")

    def latest_calibration_per_station(self) -> pd.DataFrame:
        return self._latest(_CALS, _CALIBRATION_SELECT, "ended_at")

    # -- aggregates -----------------------------------------------------------------------------
    def verdict_counts(
        self, since: datetime | None = None, until: datetime | None = None, *,
        by: Sequence[VerdictGroupColumn] = ("station",), bucket: Bucket | None = None,
        station: str | None = None, line: str | None = None, program: str | None = None,
    ) -> pd.DataFrame:
        names = _group_columns(by, VERDICT_GROUP_COLUMNS)
        _check_bucket(bucket)
        tags = [c for c in names if c != "reason"]
        where = _Where().eq("station", station).eq("line", line).eq("program", program)
        if bucket is not None:
            bounded = self._bounded(_RESULTS, where, since, until)
        else:
            bounded = where.time(since, until)
        frame = self._grouped('COUNT("record_id") AS n', tags, bucket, bounded, ("verdict",))
        cols = [*names, *(["bucket"] if bucket else []), "verdict", "n"]
        if frame.empty:
            return _empty(cols)
        frame["n"] = frame["n"].astype("int64")
        if "reason" in names and bounded is not None:
            frame = self._split_by_reason(frame, tags, bucket, bounded)
        return frame[cols].sort_values(cols[:-1], kind="stable").reset_index(drop=True)

    def _split_by_reason(
        self, totals: pd.DataFrame, tags: Sequence[str], bucket: Bucket | None, where: _Where
    ) -> pd.DataFrame:
        """Counts per tag group and verdict split by reason. The reason is a field (free
        text), which InfluxQL cannot group by: only the tests that carry one are fetched
        (narrow columns; mostly rejects), the rest of each count is reason ""."""
        keys = [*tags, *(["bucket"] if bucket else []), "verdict"]
        select = ", ".join(f'"{c}"' for c in ("reason", *tags, "verdict"))
        given = where.copy().raw('"reason" <> $no_reason', no_reason="")
        rows = self._frame(self._query(f"SELECT {select} FROM {_RESULTS}{given.sql()}",
                                       given.params))  # fmt: skip
        if rows.empty:
            return totals.assign(reason="")
        if bucket is not None:
            width = _BUCKET_NS[bucket]
            rows["bucket"] = _utc((rows["time"].astype("int64") // width) * width)
        named = rows.groupby([*keys, "reason"]).size().rename("n").reset_index()
        per_key = named.groupby(keys)["n"].sum().rename("named").reset_index()
        blank = totals.merge(per_key, on=keys, how="left")
        blank["n"] = blank["n"] - blank["named"].fillna(0).astype("int64")
        blank = blank[blank["n"] > 0].drop(columns=["named"]).assign(reason="")
        return pd.concat([blank, named], ignore_index=True)

    def first_pass_counts(
        self, since: datetime | None = None, until: datetime | None = None, *,
        by: Sequence[GroupColumn] = ("station",), bucket: Bucket | None = None,
        station: str | None = None, line: str | None = None, program: str | None = None,
    ) -> pd.DataFrame:
        names = _group_columns(by)
        _check_bucket(bucket)
        tag_filters = {"station": station, "line": line, "program": program}
        from gateway.store.influx_parts import first_pass_from_summaries

        summarised = first_pass_from_summaries(self, since, until, names, bucket, tag_filters)
        if summarised is not None:
            return summarised
        narrow = '"part_id", "verdict", "seq", "station", "line", "program"'
        # One narrow read, no tag filter: a part is judged by all of its tests, wherever they
        # ran, so the tests of every station within PART_WINDOW of the range are read (part
        # ids are fields: InfluxQL can neither group by them nor ask for them by id without a
        # scan per statement); the range and the filters then pick the tests in range, and
        # the parts by their first test below, as the SQLite store's parts summary does.
        wide = _Where().time(since - PART_WINDOW if since is not None else None,
                             until + PART_WINDOW if until is not None else None)
        around = self._frame(self._query(f"SELECT {narrow} FROM {_RESULTS}{wide.sql()}",
                                         wide.params))
        counts = ["parts", "first_pass", "final_pass", "tests", "no_part_id"]
        cols = [*names, *(["bucket"] if bucket else []), *counts]
        if around.empty:
            return _empty(cols)
        if "part_id" not in around.columns:
            around["part_id"] = None
        in_range = pd.Series(True, index=around.index)
        lo, hi = _ns("since", since), _ns("until", until)
        if lo is not None:
            in_range &= around["time"] >= lo
        if hi is not None:
            in_range &= around["time"] < hi
        for column, value in tag_filters.items():
            if value is not None:
                in_range &= around[column] == value
        frame = around[in_range]
        if frame.empty:
            return _empty(cols)
        no_id = frame[frame["part_id"].isna()]
        ids = frame["part_id"].dropna().unique()
        with_id = around[around["part_id"].isin(ids)]
        parts = _judge_parts(with_id)
        keep = pd.Series(True, index=parts.index)
        if lo is not None:
            keep &= parts["time"] >= lo
        if hi is not None:
            keep &= parts["time"] < hi
        for column, value in tag_filters.items():
            if value is not None:
                keep &= parts[column] == value
        parts = parts[keep]
        loose = no_id.assign(parts=0, first_pass=0, final_pass=0, tests=0, no_part_id=1)
        both = pd.concat([parts, loose[[*parts.columns]]], ignore_index=True)
        if both.empty:
            return _empty(cols)
        keys = list(names)
        if bucket is not None:
            width = _BUCKET_NS[bucket]
            both["bucket_ns"] = (both["time"].astype("int64") // width) * width
            keys.append("bucket_ns")
        if keys:
            agg = both.groupby(keys, sort=True)[counts].sum().reset_index()
        else:
            agg = pd.DataFrame([both[counts].sum()])
        agg[counts] = agg[counts].astype("int64")
        agg = agg[(agg["parts"] > 0) | (agg["no_part_id"] > 0)]
        if agg.empty:
            return _empty(cols)
        if bucket is not None:
            agg["bucket"] = _utc(agg["bucket_ns"])
        return agg[cols].reset_index(drop=True)

    def histogram(
        self, since: datetime | None, until: datetime | None, edges: Sequence[float], *,
        station: str | None = None, line: str | None = None, program: str | None = None,
        value: str = "leak_rate_sccm",
    ) -> pd.DataFrame:
        if value not in HISTOGRAM_VALUES:
            raise ValueError(f"cannot bin {value!r}; allowed: {', '.join(HISTOGRAM_VALUES)}")
        e = [float(x) for x in edges]
        if len(e) < 2 or not all(math.isfinite(x) for x in e):
            raise ValueError("edges must be at least two finite numbers")
        if any(b <= a for a, b in itertools.pairwise(e)):
            raise ValueError("edges must be strictly increasing")
        where = (_Where().time(since, until).eq("station", station).eq("line", line)
                 .eq("program", program))
        params = dict(where.params)
        params.update({f"e{i}": x for i, x in enumerate(e)})
        base = where.sql() + (" AND " if where.parts else " WHERE ")
        v = f'"{value}"'
        last = len(e) - 1
        conds = [f"{v} < $e0"]  # under
        conds += [f"{v} >= $e{i} AND {v} < $e{i + 1}" for i in range(last - 1)]
        conds.append(f"{v} >= $e{last - 1} AND {v} <= $e{last}")  # numpy: last bin closed
        conds.append(f"{v} > $e{last}")  # over
        q = "; ".join(f"SELECT COUNT({v}) FROM {_RESULTS}{base}{c}" for c in conds)
        counts = np.zeros(len(conds), dtype="int64")
        for s in self._query(q, params):
            if s["values"]:
                counts[s["statement"]] = int(s["values"][0][1])
        lo = np.array([-math.inf, *e])
        hi = np.array([*e, math.inf])
        return pd.DataFrame({"bin_lo": lo, "bin_hi": hi, "n": counts})

    def leak_summary(
        self, since: datetime | None = None, until: datetime | None = None, *,
        by: Sequence[GroupColumn] = ("station",), bucket: Bucket | None = None,
        station: str | None = None, line: str | None = None, program: str | None = None,
    ) -> pd.DataFrame:
        names = _group_columns(by)
        _check_bucket(bucket)
        # an aborted test measured nothing: its reading would only distort the statistics
        where = (_Where().eq("station", station).eq("line", line).eq("program", program)
                 .raw('"verdict" <> $aborted', aborted="aborted"))
        bounded = (self._bounded(_RESULTS, where, since, until) if bucket is not None
                   else where.time(since, until))
        # STDDEV is the sample standard deviation (n - 1), null for a single point
        frame = self._grouped(
            'COUNT("leak_rate_sccm") AS n, MEAN("leak_rate_sccm") AS mean, '
            'STDDEV("leak_rate_sccm") AS std, MIN("leak_rate_sccm") AS min, '
            'MAX("leak_rate_sccm") AS max', names, bucket, bounded)
        cols = [*names, *(["bucket"] if bucket else []), "n", "mean", "std", "min", "max"]
        if frame.empty:
            return _empty(cols)
        frame = frame[frame["n"].notna() & (frame["n"] > 0)]
        frame["n"] = frame["n"].astype("int64")
        for c in ("mean", "std", "min", "max"):
            frame[c] = frame[c].astype(float)
        frame.loc[frame["n"] < 2, "std"] = np.nan
        keys = cols[: len(names) + (1 if bucket else 0)]
        if keys:
            frame = frame.sort_values(keys, kind="stable")
        return frame[cols].reset_index(drop=True)

    def calibration_series(
        self, station: str, program: str | None = None, since: datetime | None = None,
        until: datetime | None = None,
    ) -> pd.DataFrame:
        where = _Where().eq("station", station).eq("program", program).time(since, until)
        # only the series' columns: a calibration point carries its raw line and more
        wanted = ", ".join(f'"{c}"' for c in ("seq", *_SERIES_COLUMNS[1:]))
        frame = self._frame(self._query(f"SELECT {wanted} FROM {_CALS}{where.sql()}",
                                        where.params))
        out = self._records(frame, ("seq", *_SERIES_COLUMNS), "ended_at")
        if not out.empty:
            out = out.sort_values(["ended_at", "seq"], kind="stable")
        return out[list(_SERIES_COLUMNS)].reset_index(drop=True)

    def close(self) -> None:
        """Nothing held open: every query is its own HTTP request."""

    def __enter__(self) -> InfluxStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _judge_parts(tests: pd.DataFrame) -> pd.DataFrame:
    """One row per part: its first test's time, station, line and program, and the counts.

    First and last by (time, seq), as the SQLite parts summary orders them; aborted tests
    measured nothing and are left out, as there.
    """
    columns = ["time", "station", "line", "program", "parts", "first_pass", "final_pass",
               "tests", "no_part_id"]
    tests = tests[tests["verdict"] != "aborted"] if not tests.empty else tests
    if tests.empty:
        return pd.DataFrame(columns=columns)
    ordered = tests.sort_values(["time", "seq"], kind="stable")
    grouped = ordered.groupby("part_id", sort=False)
    first = grouped.head(1).set_index("part_id")
    last = grouped.tail(1).set_index("part_id")
    parts = first[["time", "station", "line", "program"]].copy()
    parts["parts"] = 1
    parts["first_pass"] = (first["verdict"] == "pass").astype("int64")
    parts["final_pass"] = (last["verdict"] == "pass").astype("int64").reindex(parts.index)
    parts["tests"] = grouped.size().reindex(parts.index).astype("int64")
    parts["no_part_id"] = 0
    return parts.reset_index(drop=True)[columns]


def _converter(column: str, time_col: str) -> Any:
    def missing(value: Any) -> bool:
        return value is None or (isinstance(value, float) and math.isnan(value))

    if column in (time_col, "received_at"):
        return lambda v: None if missing(v) else int(v) // 1000  # ns → µs
    if column in _INT_COLUMNS:
        return lambda v: None if missing(v) else int(v)
    if column in _FLOAT_COLUMNS:
        return lambda v: None if missing(v) else float(v)
    if column == "time_source":  # points written before records named their clock
        return lambda v: "station" if missing(v) else v
    return lambda v: None if missing(v) else v


def _empty_dtype(column: str) -> Any:
    if column in ("ended_at", "received_at", "at", "bucket"):
        return "datetime64[us, UTC]"
    if column in _INT_COLUMNS or column in ("n", "line_no"):
        return "int64"
    if column in _FLOAT_COLUMNS:
        return float
    if column == "passed":
        return "boolean"
    return object


def _empty(columns: Sequence[str]) -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=_empty_dtype(c)) for c in columns})


def open_influx_store(url: str) -> InfluxStore:
    """``influxdb://host:port/db`` or ``influxdb2://host:port?org=..&bucket=..`` → InfluxStore."""
    import os

    try:
        target = parse_influx_url(url)
    except ValueError as exc:
        raise ConfigError(f"store URL: {exc}") from None
    if target.version == 2:
        token = os.environ.get(TOKEN_ENV)
        if not token:
            raise ConfigError(f"store URL {target.describe()}: set {TOKEN_ENV} to read 2.x")
        return InfluxStore(InfluxHttp(target, token=token))
    return InfluxStore(InfluxHttp(target, password=os.environ.get(PASSWORD_ENV)))

