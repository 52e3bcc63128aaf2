"""First-pass yield on InfluxDB from the part summaries the sink writes beside the results.

``gateway.sinks.influx_parts`` mirrors the journal's ``part_hours`` (parts per hour of their
first test) and, for parts tested more than once, ``parts`` (a point at the part's first
test). A range is read as the whole hours inside it from the hourly points, as the SQLite
journal reads its own summaries; at its ragged ends each part tested there is judged by its
point if it has one (a retested part: counted where its first test lies, within
``PART_WINDOW`` before the end) and by its only test otherwise; tests without a part id are
counted from the results (``COUNT(cycle) − COUNT(part_id)``: every result has a cycle,
only some a part id).
A database written before the sink wrote summaries has none: the caller then judges parts
from the tests themselves.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from typing import Any

import pandas as pd

from gateway.influxdb.lineprotocol import PART_HOURS_MEASUREMENT as PART_HOURS
from gateway.influxdb.lineprotocol import PARTS_MEASUREMENT as PARTS
from gateway.store.influx_query import BUCKET_NS as _BUCKET_NS
from gateway.store.influx_query import PART_WINDOW
from gateway.store.influx_query import RESULTS as _RESULTS
from gateway.store.influx_query import Where as _Where
from gateway.store.influx_query import ns as _ns
from gateway.store.influx_query import utc as _utc

__all__ = ["first_pass_from_summaries"]

HOUR_NS = 3_600 * 10**9
COUNTS = ["parts", "first_pass", "final_pass", "tests", "no_part_id"]


def first_pass_from_summaries(
    store: Any, since: datetime | None, until: datetime | None, names: Sequence[str],
    bucket: str | None, filters: dict[str, str | None],
) -> pd.DataFrame | None:
    """``first_pass_counts`` rows (``names``, [bucket], COUNTS) or None without summaries."""

    if not store._query(f"SELECT * FROM {PART_HOURS} LIMIT 1"):
        return None
    lo, hi = _ns("since", since), _ns("until", until)
    h0 = None if lo is None else -(-lo // HOUR_NS) * HOUR_NS  # first whole hour
    h1 = None if hi is None else (hi // HOUR_NS) * HOUR_NS  # end of the last whole hour

    def where(a: int | None, b: int | None) -> _Where:
        w = _Where()
        for column, value in filters.items():
            w.eq(column, value)
        if a is not None:
            w.raw("time >= $a", a=a)
        if b is not None:
            w.raw("time < $b", b=b)
        return w

    tags = '"station", "line", "program"'
    frames = []

    def read(measurement: str, fields: str, a: int | None, b: int | None) -> None:
        if a is not None and b is not None and a >= b:
            return
        w = where(a, b)
        frame = store._frame(store._query(
            f"SELECT {fields}, {tags} FROM {measurement}{w.sql()}", w.params))
        if not frame.empty:
            frames.append(frame.assign(no_part_id=0))

    if h0 is not None and h1 is not None and h0 >= h1:
        assert lo is not None and hi is not None
        frames += _ragged(store, filters, lo, hi)  # within one hour: no whole hour
    else:
        read(PART_HOURS, '"parts", "first_pass", "final_pass", "tests"', h0, h1)
        if lo is not None and h0 is not None:
            frames += _ragged(store, filters, lo, h0)
        if hi is not None and h1 is not None:
            frames += _ragged(store, filters, h1, hi)
    loose = store._bounded(_RESULTS, where(None, None), since, until)
    if loose is not None:
        group = [tags, *([f"time({'1h' if bucket == 'hour' else '1d'})"] if bucket else [])]
        counted = store._frame(store._query(
            f'SELECT COUNT("cycle") AS n, COUNT("part_id") AS p FROM {_RESULTS}{loose.sql()} '
            f"GROUP BY {', '.join(group)}" + (" fill(none)" if bucket else ""), loose.params))
        if not counted.empty:
            counted["no_part_id"] = counted["n"].astype("int64") - counted["p"].astype("int64")
            counted = counted[counted["no_part_id"] > 0]
            if not counted.empty:
                frames.append(counted.drop(columns=["n", "p"]).assign(
                    parts=0, first_pass=0, final_pass=0, tests=0))
    if not frames:
        return pd.DataFrame(columns=[*names, *(["bucket"] if bucket else []), *COUNTS])
    both = pd.concat(frames, ignore_index=True)
    both[COUNTS] = both[COUNTS].fillna(0)
    keys = list(names)
    if bucket is not None:
        width = _BUCKET_NS[bucket]
        both["bucket_ns"] = (both["time"].astype("int64") // width) * width
        keys.append("bucket_ns")
    agg = (both.groupby(keys, sort=True)[COUNTS].sum().reset_index() if keys
           else pd.DataFrame([both[COUNTS].sum()]))
    agg[COUNTS] = agg[COUNTS].astype("int64")
    agg = agg[(agg["parts"] > 0) | (agg["no_part_id"] > 0)]
    if bucket is not None:
        agg["bucket"] = _utc(agg["bucket_ns"])
    return agg[[*names, *(["bucket"] if bucket else []), *COUNTS]].reset_index(drop=True)


def _ragged(store: Any, filters: dict[str, str | None], a: int, b: int) -> list[pd.DataFrame]:
    """The parts whose first test lies in [a, b) (less than an hour): those tested there,
    each judged by its ``leak_parts`` point when it was retested, by its one test otherwise;
    then the filters, on the tags of each part's first test."""

    if a >= b:
        return []
    tests = store._frame(store._query(
        'SELECT "part_id", "station", "line", "program", "verdict" '
        f"FROM {_RESULTS} WHERE time >= $a AND time < $b", {"a": a, "b": b}))
    if tests.empty or "part_id" not in tests.columns:
        return []
    tests = tests[tests["part_id"].notna() & (tests["verdict"] != "aborted")]
    if tests.empty:
        return []
    back = a - int(PART_WINDOW.total_seconds()) * 10**9
    retested = store._frame(store._query(
        'SELECT "part_id", "first_pass", "final_pass", "tests", "station", "line", "program" '
        f"FROM {PARTS} WHERE time >= $a AND time < $b", {"a": back, "b": b}))
    known = (retested.drop_duplicates("part_id", keep="last").set_index("part_id")
             if not retested.empty else pd.DataFrame(columns=["time"]))
    first = tests.sort_values("time", kind="stable").drop_duplicates("part_id")
    once = first[~first["part_id"].isin(known.index)]
    passed = (once["verdict"] == "pass").astype("int64")
    rows = [once[["time", "station", "line", "program"]].assign(
        parts=1, first_pass=passed, final_pass=passed, tests=1, no_part_id=0)]
    mine = known[(known["time"] >= a) & (known["time"] < b) & known.index.isin(first["part_id"])]
    if not mine.empty:
        rows.append(mine.reset_index()[["time", "station", "line", "program", "first_pass",
                                        "final_pass", "tests"]].assign(parts=1, no_part_id=0))
    out = []
    for frame in rows:
        for column, value in filters.items():
            if value is not None:
                frame = frame[frame[column] == value]
        if not frame.empty:
            out.append(frame)
    return out
