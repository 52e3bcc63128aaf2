"""The journal's part summaries, mirrored into InfluxDB beside the results.

First-pass yield judges a part by all of its tests: its first test's verdict and its last
one's. InfluxDB keeps part ids as fields (a tag per part would make a series per part), so it
cannot group by part, and reading every test of a month to judge the parts does not scale
(seconds per million results). The SQLite journal already keeps each part's first and last
test (``parts``) and the parts per hour of their first test (``part_hours``), updated in the
transaction that stores the result; after each batch of results the sink writes the rows that
batch touched as points:

- ``leak_parts``: one point per part tested more than once, at its first test's time (tags
  site, line, station, program; fields part_id, first_pass, final_pass, tests), overwritten
  when a further test changes it (same series and timestamp); a part tested once is its result;
- ``leak_part_hours``: one point per hour of first tests and station (fields parts, first_pass,
  final_pass, tests), overwritten the same way; an hour whose parts moved away is written as
  zeros.

``InfluxStore.first_pass_counts`` reads whole hours from the second, and the ragged ends of a
range from the results there and the first (retested parts are a few per cent: the extra
points stay few). A part whose earlier test reaches the journal after a later one moves
to an earlier hour there; its old point here stays (rare: tests of one part arriving out of
order from two stations).
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterable, Sequence

from gateway.influxdb.lineprotocol import PART_HOURS_MEASUREMENT, PARTS_MEASUREMENT, encode_line
from gateway.records import Record, TestResult
from gateway.store._sqlite import sqlite_path
from gateway.store.schema import HOUR_US

__all__ = ["PARTS", "PART_HOURS", "part_summary_lines"]

PARTS = PARTS_MEASUREMENT
PART_HOURS = PART_HOURS_MEASUREMENT
_CHUNK = 500  # part ids per IN (...) list
#: part_id, first_ended_at (µs), station, line, program, first_verdict, last_verdict, tests
_Part = tuple[str, int, str, str, str, str, str, int]
_Key = tuple[int, str, str, str]  # hour (µs), station, line, program


def part_summary_lines(store_url: str, rows: Iterable[tuple[int, Record]], *,
                       site: str) -> list[str]:
    """The summary points for the parts the results in ``rows`` belong to (none without a
    SQLite journal, or without part ids)."""
    ids = sorted({r.part_id for _, r in rows if isinstance(r, TestResult) and r.part_id})
    if not ids or not store_url.startswith("sqlite:"):
        return []
    path = sqlite_path(store_url)
    with sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=30) as conn:
        parts = _parts(conn, ids)
        keys: list[_Key] = sorted({((p[1] // HOUR_US) * HOUR_US, p[2], p[3], p[4])
                                   for p in parts})
        hours = _hours(conn, keys)
    out = []
    for part_id, first, station, line, program, first_v, last_v, tests in parts:
        if tests < 2:
            continue
        tags: dict[str, str | None] = {"site": site, "line": line, "station": station,
                                       "program": program}
        out.append(encode_line(PARTS, tags, {
            "part_id": part_id, "first_pass": int(first_v == "pass"),
            "final_pass": int(last_v == "pass"), "tests": int(tests)}, first * 1000))
    for key in keys:
        hour, station, line, program = key
        parts_n, first_pass, final_pass, count = hours.get(key, (0, 0, 0, 0))
        tags = {"site": site, "line": line, "station": station, "program": program}
        out.append(encode_line(PART_HOURS, tags, {
            "parts": parts_n, "first_pass": first_pass, "final_pass": final_pass,
            "tests": count}, hour * 1000))
    return out


def _parts(conn: sqlite3.Connection, ids: Sequence[str]) -> list[_Part]:
    out: list[_Part] = []
    for start in range(0, len(ids), _CHUNK):
        chunk = ids[start:start + _CHUNK]
        out += conn.execute(
            "SELECT part_id, first_ended_at, station, line, program, first_verdict, "
            f"last_verdict, tests FROM parts WHERE part_id IN ({','.join('?' * len(chunk))})",
            chunk).fetchall()
    return out


def _hours(conn: sqlite3.Connection, keys: Sequence[_Key]
           ) -> dict[_Key, tuple[int, int, int, int]]:
    out = {}
    for key in keys:
        row = conn.execute("SELECT parts, first_pass, final_pass, tests FROM part_hours "
                           "WHERE hour = ? AND station = ? AND line = ? AND program = ?",
                           key).fetchone()
        if row is not None:
            out[key] = (int(row[0]), int(row[1]), int(row[2]), int(row[3]))
    return out
