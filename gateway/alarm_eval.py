"""Evaluating the fleet's alarm rules against a store, and keeping their states in the journal.

The gateway runs ``evaluate`` every ``INTERVAL_S`` (and ``leakfleet alarms evaluate`` runs it
once): it reads what each station's rules need from the store, asks ``analytics.fleet`` which
conditions hold, and applies the raise/clear transitions to the journal's alarm table, so the
dashboard, the shift report and a plant's alerting all read one list. The dashboard computes
the same conditions for its tiles through ``fleet_conditions`` (one code path, same answer).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import UTC, datetime, timedelta
from typing import Any

import pandas as pd

from analytics.alarms import (
    AlarmRules,
    Condition,
    clock_skew,
    sink_conditions,
    standard_conditions,
    transitions,
)
from analytics.audit import standards_due
from analytics.fleet import station_conditions

__all__ = ["INTERVAL_S", "clock_now", "evaluate", "fleet_conditions", "rules_from",
           "station_inputs"]

INTERVAL_S = 30.0
RECENT = 60  # newest tests per station the streak, rate and silence rules look at
CAL_HISTORY = timedelta(days=180)


def _when(value: Any) -> datetime | None:
    return None if value is None or pd.isna(value) else pd.Timestamp(value).to_pydatetime()


def station_inputs(store: Any, station: str, now: datetime) -> dict[str, Any]:
    """What one station's rules read from a store (any QueryStore: SQLite or InfluxDB)."""
    recent = store.results(None, None, station=station, limit=RECENT, newest_first=True)
    recent = recent.iloc[::-1]
    times = [t for t in (_when(x) for x in recent.get("ended_at", [])) if t is not None]
    own = (recent[recent["time_source"] == "station"] if "time_source" in recent
           else recent.iloc[0:0])
    skew = clock_skew([_when(x) for x in own.get("ended_at", [])],
                      [_when(x) for x in own.get("received_at", [])])
    return {
        "recent": recent,
        "verdicts": [str(v) for v in recent.get("verdict", [])],
        "times": times,
        "skew": skew,
        "calibrations": store.calibration_series(station, None, now - CAL_HISTORY, None),
    }


def fleet_conditions(
    store: Any,
    now: datetime,
    *,
    maintenance: Mapping[str, Sequence[datetime]],
    rules: AlarmRules,
) -> dict[str, list[Condition]]:
    """Every station's conditions now (stations as the store knows them)."""
    status = store.latest_status_per_station()
    status = status.set_index("station") if not status.empty else status
    quarantine = store.quarantine(now - timedelta(minutes=10), now + timedelta(seconds=1))
    bad = quarantine.groupby("station").size() if not quarantine.empty else pd.Series(dtype=int)
    clashes = _conflict_counts(store, now)
    lost = _recent_gaps(store, now)
    out: dict[str, list[Condition]] = {}
    for station in store.stations()["station"]:
        inp = station_inputs(store, station, now)
        known = station in status.index
        out[station] = station_conditions(
            station, calibrations=inp["calibrations"],
            maintenance=maintenance.get(station, ()), verdicts=inp["verdicts"],
            times=inp["times"],
            state=str(status.loc[station, "state"]) if known else None,
            state_since=_when(status.loc[station, "at"]) if known else None,
            quarantined_10min=int(bad.get(station, 0)), rules=rules, now=now,
            conflicts=clashes.get(station, 0), gaps=lost.get(station, []), skew=inp["skew"],
        )  # fmt: skip
    return out


def _journal_rows(store: Any, sql: str, since: datetime) -> list[tuple[Any, ...]]:
    """Rows of a journal-only table (conflicts, gaps) since ``since``; none for a store that
    is not a SQLite journal (InfluxDB keeps no such tables)."""
    import sqlite3

    from gateway.store._sqlite import to_us

    path = getattr(store, "path", None)
    if path is None:
        return []
    try:
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as conn:
            return conn.execute(sql, (to_us(since),)).fetchall()
    except sqlite3.Error:
        return []


def _conflict_counts(store: Any, now: datetime) -> dict[str, int]:
    """Conflicting re-sends per station over the last day."""
    rows = _journal_rows(store, "SELECT station, COUNT(*) FROM conflicts WHERE detected_at >= ? "
                         "GROUP BY station", now - timedelta(days=1))
    return {str(s): int(n) for s, n in rows}


def rules_from(table: Mapping[str, float | int | None]) -> AlarmRules:
    """The rules with a config's ``[alarms]`` thresholds (``gateway.config.parse_alarms``:
    durations in seconds) over the defaults."""
    seconds = ("calibration_interval", "silent_min", "backlog_age", "clock_ahead", "gap_window")
    given: dict[str, Any] = {}
    for key, value in table.items():
        if value is None:
            continue
        given[key] = timedelta(seconds=float(value)) if key in seconds else value
    return AlarmRules(**given)


def clock_now(store: Any, environ: Mapping[str, str]) -> datetime:
    """Now for the rules: the wall clock, or with ``LEAKFLEET_CLOCK=data`` (a simulated plant
    running faster than real time) when the newest result was received if that is later, as
    the dashboard counts it."""
    if environ.get("LEAKFLEET_CLOCK", "wall").strip() == "data":
        latest = store.latest_results_per_station()
        if not latest.empty and latest["received_at"].notna().any():
            newest = pd.Timestamp(latest["received_at"].max()).to_pydatetime()
            return max(newest, datetime.now(UTC))
    return datetime.now(UTC)


def evaluate(journal: Any, store: Any, now: datetime | None = None,
             rules: AlarmRules | None = None, sinks: Sequence[str] = (),
             standards: Sequence[Any] = (), timezone: str = "UTC") -> int:
    """One evaluation: conditions from ``store`` (and the leak-standard register, judged on
    the plant's local date in ``timezone``), states into ``journal``'s logbook.
    Returns how many alarms were raised or cleared."""
    from zoneinfo import ZoneInfo

    from gateway.store.logbook import Logbook

    now = now or datetime.now(UTC)
    rules = rules or AlarmRules()
    book = Logbook(journal)
    maintenance: dict[str, list[datetime]] = {}
    for e in book.maintenance():
        if e.restarts_baseline:
            maintenance.setdefault(e.station, []).append(e.at)
    conds = [c for cs in fleet_conditions(store, now, maintenance=maintenance, rules=rules)
             .values() for c in cs]
    backlog = getattr(journal, "backlog", None)
    if sinks and callable(backlog):
        oldest: dict[str, tuple[int, timedelta | None]] = {}
        for sink in sinks:
            kinds = backlog(sink)
            count = sum(n for n, _ in kinds.values())
            ages = [now - t for _, t in kinds.values() if t is not None]
            oldest[sink] = (count, max(ages) if ages else None)
        conds += sink_conditions(oldest, rules, now)
    if standards:
        today = now.astimezone(ZoneInfo(timezone)).date()
        conds += standard_conditions(standards_due(standards, today, rules.standard_due_days),
                                     now)
    opened = [a.key for a in book.open_alarms()]
    return book.apply(transitions(conds, opened), now)


def _recent_gaps(store: Any, now: datetime) -> dict[str, list[tuple[int, int, datetime]]]:
    """Gaps recorded over the last day, per station."""
    from gateway.store._sqlite import from_us

    out: dict[str, list[tuple[int, int, datetime]]] = {}
    for station, first, last, at in _journal_rows(
            store, "SELECT station, first, last, at FROM gaps WHERE at >= ?",
            now - timedelta(days=1)):
        out.setdefault(str(station), []).append((int(first), int(last), from_us(at)))
    return out
