"""The dashboard's only door to the store: one cached client per URL, cached parameterised queries.

Every function takes the store URL first, so caches are per store; results are cached for a few
seconds (live pages) or a minute (history), which is what keeps many viewers from multiplying
the load on the journal. All aggregation happens in the store (``QueryStore``); this module
only folds already-aggregated rows (hours into local days or shifts). A store that cannot be
opened or read raises ``StoreUnavailable`` with one readable line; nothing connects at import.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

import pandas as pd
import streamlit as st

from gateway.errors import LeakfleetError

if TYPE_CHECKING:
    from gateway.store.base import QueryStore

__all__ = [
    "LIVE_TTL",
    "StoreUnavailable",
    "acknowledge",
    "add_maintenance",
    "calibration_series",
    "calibrations",
    "conflicts",
    "first_pass_counts",
    "fleet_conditions",
    "gaps",
    "histogram",
    "latest",
    "leak_summary",
    "maintenance",
    "newest_record_time",
    "open_alarms",
    "part_report",
    "quarantine",
    "results",
    "sink_backlogs",
    "stations",
    "statuses",
    "trace_stations",
    "traces",
    "verdict_counts",
    "verdicts_of",
]

LIVE_TTL = 4  # s: a little under the live page's refresh
HISTORY_TTL = 60


class StoreUnavailable(Exception):
    """The store cannot be opened or queried; the message is one line for the page."""


@st.cache_resource(show_spinner=False)
def _client(url: str) -> QueryStore:
    from gateway.store import open_store

    return open_store(url)


def _store(url: str) -> QueryStore:
    try:
        return _client(url)
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc


def query_store(url: str) -> QueryStore:
    """The open store, for a report that ``gateway.reports`` builds from it directly."""
    return _store(url)


def _call(url: str, method: str, *args: Any, **kwargs: Any) -> pd.DataFrame:
    store = _store(url)
    try:
        frame: pd.DataFrame = getattr(store, method)(*args, **kwargs)
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc
    return frame


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def stations(url: str) -> pd.DataFrame:
    """Every station with its line ("–" when unknown), sorted by line then station."""
    df = _call(url, "stations")
    df["line"] = df["line"].fillna("–").astype(str)
    return df.sort_values(["line", "station"]).reset_index(drop=True)


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def latest(url: str, kind: str) -> pd.DataFrame:
    """Each station's newest result / status / calibration (kind: result, status, calibration)."""
    method = {
        "result": "latest_results_per_station",
        "status": "latest_status_per_station",
        "calibration": "latest_calibration_per_station",
    }[kind]
    return _call(url, method)


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def newest_record_time(url: str) -> datetime | None:
    """When the newest result was received (the "data" clock): the gateway's clock, which a
    station whose own clock runs ahead cannot pull into the future."""
    df = latest(url, "result")
    if df.empty:
        return None
    column = "received_at" if df["received_at"].notna().any() else "ended_at"
    return pd.Timestamp(df[column].max()).to_pydatetime()


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def results(
    url: str,
    since: datetime | None = None,
    until: datetime | None = None,
    station: str | None = None,
    line: str | None = None,
    program: str | None = None,
    part_id: str | None = None,
    limit: int | None = None,
    newest_first: bool = False,
) -> pd.DataFrame:
    return _call(
        url, "results", since, until, station=station, line=line, program=program,
        part_id=part_id, limit=limit, newest_first=newest_first,
    )  # fmt: skip


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def calibrations(
    url: str,
    since: datetime | None = None,
    until: datetime | None = None,
    station: str | None = None,
    line: str | None = None,
    program: str | None = None,
    limit: int | None = None,
    newest_first: bool = False,
) -> pd.DataFrame:
    return _call(
        url, "calibrations", since, until, station=station, line=line, program=program,
        limit=limit, newest_first=newest_first,
    )  # fmt: skip


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def statuses(
    url: str,
    since: datetime | None = None,
    until: datetime | None = None,
    station: str | None = None,
    limit: int | None = None,
    newest_first: bool = False,
) -> pd.DataFrame:
    return _call(
        url, "statuses", since, until, station=station, limit=limit, newest_first=newest_first
    )


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def quarantine(
    url: str,
    since: datetime | None = None,
    until: datetime | None = None,
    station: str | None = None,
    limit: int | None = None,
) -> pd.DataFrame:
    return _call(url, "quarantine", since, until, station=station, limit=limit, newest_first=True)


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def verdict_counts(
    url: str,
    since: datetime | None,
    until: datetime | None,
    by: Sequence[str] = ("station",),
    bucket: str | None = None,
    station: str | None = None,
    line: str | None = None,
    program: str | None = None,
) -> pd.DataFrame:
    return _call(
        url, "verdict_counts", since, until, by=tuple(by), bucket=bucket, station=station,
        line=line, program=program,
    )  # fmt: skip


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def first_pass_counts(
    url: str,
    since: datetime | None,
    until: datetime | None,
    by: Sequence[str] = ("station",),
    bucket: str | None = None,
    station: str | None = None,
    line: str | None = None,
    program: str | None = None,
) -> pd.DataFrame:
    return _call(
        url, "first_pass_counts", since, until, by=tuple(by), bucket=bucket, station=station,
        line=line, program=program,
    )  # fmt: skip


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def leak_summary(
    url: str,
    since: datetime | None,
    until: datetime | None,
    by: Sequence[str] = ("station",),
    bucket: str | None = None,
    station: str | None = None,
    line: str | None = None,
    program: str | None = None,
) -> pd.DataFrame:
    return _call(
        url, "leak_summary", since, until, by=tuple(by), bucket=bucket, station=station,
        line=line, program=program,
    )  # fmt: skip


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def histogram(
    url: str,
    since: datetime | None,
    until: datetime | None,
    edges: tuple[float, ...],
    station: str | None = None,
    program: str | None = None,
) -> pd.DataFrame:
    return _call(url, "histogram", since, until, list(edges), station=station, program=program)


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def calibration_series(
    url: str,
    station: str,
    program: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
) -> pd.DataFrame:
    df = _call(url, "calibration_series", station, program, since, until)
    return df.assign(station=station)


def to_local_days(counts: pd.DataFrame, timezone: str, count_cols: Sequence[str]) -> pd.DataFrame:
    """Hourly UTC buckets → the plant's local calendar days (sums of the count columns)."""
    if counts.empty:
        return counts.rename(columns={"bucket": "day"})
    keys = [c for c in counts.columns if c not in ("bucket", *count_cols)]
    day = pd.to_datetime(counts["bucket"], utc=True).dt.tz_convert(timezone).dt.date.astype(str)
    return (
        counts.drop(columns="bucket").assign(day=day)
        .groupby(["day", *keys], dropna=False)[list(count_cols)].sum().reset_index()
    )  # fmt: skip


def window(now: datetime, hours: float) -> tuple[datetime, datetime]:
    """[now − hours, now + a second): half-open, so a result stamped ``now`` is inside."""
    return now - timedelta(hours=hours), now + timedelta(seconds=1)


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def programs(url: str) -> pd.DataFrame:
    """Station/program pairs that have results, with their test counts (from the summaries)."""
    df = verdict_counts(url, None, None, by=("station", "program"))
    if df.empty:
        return pd.DataFrame(columns=["station", "program", "n"])
    out: pd.DataFrame = df.groupby(["station", "program"], as_index=False)[["n"]].sum()
    return out


# -- the journal's logbook: maintenance and alarm states (SQLite journals only) ---------------
def _logbook_call(url: str, fn: Any) -> Any:
    """Run ``fn(Logbook)`` on the journal at ``url``; None when the store is not a journal."""
    if not url.startswith("sqlite:"):
        return None
    from gateway.store import open_journal
    from gateway.store.logbook import Logbook

    try:
        with open_journal(url) as journal:
            return fn(Logbook(journal))
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def maintenance(url: str, station: str | None = None) -> pd.DataFrame:
    """Maintenance events (station, at, kind, note, by), oldest first; empty when none."""
    frame = _logbook_call(url, lambda book: book.maintenance_frame(station))
    if frame is None:
        return pd.DataFrame(columns=["station", "at", "kind", "note", "by"])
    frame["at"] = pd.to_datetime(frame["at"], utc=True)
    return frame


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def open_alarms(url: str) -> pd.DataFrame:
    """The journal's open alarms (the gateway's evaluation), oldest first."""
    rows = _logbook_call(url, lambda book: book.open_alarms()) or []
    return pd.DataFrame(
        [
            {
                "id": a.id,
                "station": a.station or "–",
                "severity": a.severity,
                "state": a.state,
                "since": a.since,
                "message": a.message,
                "acked_by": a.acked_by or "",
            }
            for a in rows
        ],
        columns=["id", "station", "severity", "state", "since", "message", "acked_by"],
    )


def add_maintenance(url: str, event: Any) -> bool:
    done = bool(_logbook_call(url, lambda book: book.add_maintenance(event)))
    maintenance.clear()
    fleet_conditions.clear()
    return done


def acknowledge(url: str, alarm_id: int, by: str) -> bool:
    done = bool(_logbook_call(url, lambda book: book.acknowledge(alarm_id, by)))
    open_alarms.clear()
    return done


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def fleet_conditions(
    url: str,
    now: datetime,
    alarms: tuple[tuple[str, float | int | None], ...] = (),
    standards: tuple[Any, ...] = (),
    timezone: str = "UTC",
) -> dict[str, list[Any]]:
    """Each station's alarm conditions now, by the gateway's own evaluation code, with the
    config's ``[alarms]`` thresholds and its leak standards due (as the journal's list has
    them)."""
    from zoneinfo import ZoneInfo

    from analytics.alarms import standard_conditions
    from analytics.audit import standards_due
    from gateway.alarm_eval import fleet_conditions as evaluate
    from gateway.alarm_eval import rules_from

    events = maintenance(url)
    starts = events[events["kind"] != "note"]
    by_station = {
        str(s): [pd.Timestamp(t).to_pydatetime() for t in g["at"]]
        for s, g in starts.groupby("station")
    }
    store = _store(url)
    rules = rules_from(dict(alarms))
    try:
        out = evaluate(store, now, maintenance=by_station, rules=rules)
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc
    today = now.astimezone(ZoneInfo(timezone)).date()
    for c in standard_conditions(standards_due(standards, today, rules.standard_due_days), now):
        if c.station in out:
            out[c.station].append(c)
    return out


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def sink_backlogs(url: str) -> pd.DataFrame:
    """Per sink that has ever confirmed a record: waiting records and the oldest one's time."""
    if not url.startswith("sqlite:"):
        return pd.DataFrame(columns=["sink", "kind", "waiting", "oldest"])
    from gateway.store import open_journal

    rows = []
    try:
        with open_journal(url) as journal:
            sinks = [r[0] for r in journal._query(
                "SELECT DISTINCT sink FROM sink_cursors ORDER BY sink", (), "reading sinks")]
            for sink in sinks:
                for kind, (n, oldest) in journal.backlog(sink).items():
                    rows.append({"sink": sink, "kind": kind, "waiting": n, "oldest": oldest})
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc
    return pd.DataFrame(rows, columns=["sink", "kind", "waiting", "oldest"])


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def traces(url: str, station: str, role: str | None = None, limit: int = 50) -> list[Any]:
    """A station's pressure traces, newest first (from the journal or from InfluxDB)."""
    if not url.startswith("sqlite:"):
        from gateway.store.influx_traces import influx_traces

        try:
            return influx_traces(_store(url), station, role=role, limit=limit)
        except (LeakfleetError, OSError, ValueError) as exc:
            raise StoreUnavailable(str(exc)) from exc
    from gateway.store import open_journal
    from gateway.store.traces import traces as read

    try:
        with open_journal(url) as journal:
            return read(journal, station, role=role, limit=limit)
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def part_report(url: str, part_id: str, until: datetime) -> dict[str, Any]:
    """Every test of one part with the calibration in force: the same report as
    ``leakfleet report part`` (``gateway.reports.part``), its JSON result."""
    from gateway.reports.common import Filters
    from gateway.reports.part import part_report_of

    store = _store(url)
    try:
        report = part_report_of(store, Filters(datetime(1970, 1, 1, tzinfo=UTC), until),
                                part_id)
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc
    return dict(report.result)


def verdicts_of(url: str, station: str, curves: list[Any]) -> dict[str, str]:
    """Per result curve (record_id), its result's verdict: the result with the same cycle and
    time (a curve takes its result's time)."""
    if not curves:
        return {}
    lo = min(t.ended_at for t in curves)
    hi = max(t.ended_at for t in curves) + timedelta(seconds=1)
    frame = results(url, lo, hi, station=station)
    if frame.empty:
        return {}
    found = {(int(c), pd.Timestamp(e).value // 1000): str(v) for c, e, v in
             zip(frame["cycle"], frame["ended_at"], frame["verdict"], strict=True)}
    out: dict[str, str] = {}
    for t in curves:
        verdict = found.get((t.cycle, pd.Timestamp(t.ended_at).value // 1000))
        if verdict is not None:
            out[t.record_id] = verdict
    return out


@st.cache_data(ttl=HISTORY_TTL, show_spinner=False)
def trace_stations(url: str) -> list[str]:
    if not url.startswith("sqlite:"):
        from gateway.store.influx_traces import influx_trace_stations

        try:
            return influx_trace_stations(_store(url))
        except (LeakfleetError, OSError) as exc:
            raise StoreUnavailable(str(exc)) from exc
    from gateway.store import open_journal

    try:
        with open_journal(url) as journal:
            rows = journal._query("SELECT DISTINCT station FROM traces ORDER BY station", (),
                                  "reading traces")
    except (LeakfleetError, sqlite3.Error, OSError) as exc:
        raise StoreUnavailable(str(exc)) from exc
    return [str(r[0]) for r in rows]


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def conflicts(url: str) -> pd.DataFrame:
    """Re-sends that disagreed with the stored record, newest first (journals only)."""
    from gateway.store.conflicts import conflicts as read

    rows = _logbook_call(url, lambda book: read(book._j)) or []
    return pd.DataFrame(rows, columns=["kind", "record_id", "station", "detected_at", "reason",
                                       "stored_raw", "new_raw"])


@st.cache_data(ttl=LIVE_TTL, show_spinner=False)
def gaps(url: str) -> pd.DataFrame:
    """Lost cycles on record, newest first (journals only)."""
    from gateway.store.gaps import gaps as read

    rows = _logbook_call(url, lambda book: read(book._j)) or []
    return pd.DataFrame([{"station": g.station, "at": g.at, "first": g.first, "last": g.last,
                          "source": g.source, "detail": g.detail} for g in rows],
                        columns=["station", "at", "first", "last", "source", "detail"])
