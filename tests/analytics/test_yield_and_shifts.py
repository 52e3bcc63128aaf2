"""Yield on hand-built cases (retests, missing part ids) and the shift calendar across DST."""

from __future__ import annotations

import itertools
from datetime import UTC, date, datetime, timedelta

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from analytics.shifts import ShiftCalendar, counts_to_shifts
from analytics.yields import pareto, pareto_from_counts, yield_from_counts, yield_report

pytestmark = pytest.mark.timeout(60)

BERLIN = ShiftCalendar("Europe/Berlin")


def test_night_shift_lengths_across_dst_in_berlin() -> None:
    # EU rule (Directive 2000/84/EC): clocks change at 01:00 UTC on the last Sunday of March and
    # of October. 2026: 29 March (CET→CEST) and 25 October (CEST→CET).
    spring = BERLIN.window(date(2026, 3, 28), "night")
    assert spring.hours == 7.0
    assert spring.start == datetime(2026, 3, 28, 21, 0, tzinfo=UTC)
    assert spring.end == datetime(2026, 3, 29, 4, 0, tzinfo=UTC)
    autumn = BERLIN.window(date(2026, 10, 24), "night")
    assert autumn.hours == 9.0
    assert autumn.end == datetime(2026, 10, 25, 5, 0, tzinfo=UTC)
    assert BERLIN.window(date(2026, 3, 29), "early").hours == 8.0


def test_night_shift_belongs_to_the_date_it_started() -> None:
    # 03:30 UTC on 29 March 2026 is 05:30 CEST: still the night shift of 28 March.
    assert BERLIN.shift_of(datetime(2026, 3, 29, 3, 30, tzinfo=UTC)) == (date(2026, 3, 28), "night")
    assert BERLIN.shift_of(datetime(2026, 3, 29, 4, 0, tzinfo=UTC)) == (date(2026, 3, 29), "early")
    # Autumn: 00:30 UTC and 01:30 UTC are 02:30 CEST and 02:30 CET, both the same night.
    for hour in (0, 1):
        at = datetime(2026, 10, 25, hour, 30, tzinfo=UTC)
        assert BERLIN.shift_of(at) == (date(2026, 10, 24), "night")


@settings(max_examples=200, deadline=None)
@given(st.datetimes(min_value=datetime(2025, 1, 1), max_value=datetime(2028, 1, 1)))
def test_shift_windows_contain_their_timestamps(naive: datetime) -> None:
    at = naive.replace(tzinfo=UTC)
    shift_date, name = BERLIN.shift_of(at)  # type: ignore[misc]
    w = BERLIN.window(shift_date, name)
    assert w.start <= at < w.end
    # The vectorised assignment agrees with the scalar one.
    frame = BERLIN.assign(pd.Series([at]))
    assert (frame["shift_date"].iloc[0], frame["shift"].iloc[0]) == (shift_date, name)


def test_windows_between_tile_the_day() -> None:
    since = datetime(2026, 10, 24, 0, 0, tzinfo=UTC)
    windows = BERLIN.windows_between(since, since + timedelta(days=3))
    for a, b in itertools.pairwise(windows):
        assert a.end == b.start


def test_overlapping_shifts_are_rejected() -> None:
    with pytest.raises(ValueError, match="overlap"):
        ShiftCalendar("UTC", [("a", "06:00", "15:00"), ("b", "14:00", "22:00")])
    with pytest.raises(ValueError, match="time zone"):
        ShiftCalendar("Mars/Olympus")


def _results(rows: list[tuple[str, str, str | None, str, str]]) -> pd.DataFrame:
    """rows: (ended_at ISO UTC, station, part_id, verdict, reason)."""
    return pd.DataFrame(
        {
            "station": [r[1] for r in rows],
            "line": "L1",
            "program": "HX-210",
            "cycle": range(len(rows)),
            "ended_at": pd.to_datetime([r[0] for r in rows], utc=True),
            "part_id": [r[2] for r in rows],
            "verdict": [r[3] for r in rows],
            "reason": [r[4] for r in rows],
        }
    )


def test_first_pass_final_and_retest() -> None:
    # Hand-built: P1 passes first time; P2 rejects then passes (on another station); P3
    # rejects twice (final reject); P4 aborted then passes (the abort does not count).
    df = _results([
        ("2026-03-02T06:10Z", "S1", "P1", "pass", ""),
        ("2026-03-02T06:11Z", "S1", "P2", "reject", "leak"),
        ("2026-03-02T06:12Z", "S1", "P3", "reject", "leak"),
        ("2026-03-02T06:13Z", "S2", "P2", "pass", ""),
        ("2026-03-02T06:14Z", "S2", "P3", "gross", "gross leak"),
        ("2026-03-02T06:15Z", "S1", "P4", "aborted", "operator stop"),
        ("2026-03-02T06:16Z", "S1", "P4", "pass", ""),
    ])  # fmt: skip
    r = yield_report(df, by=("station",))
    o = r.overall
    assert (o.tests, o.aborted, o.parts) == (7, 1, 4)
    assert o.first_pass_yield == pytest.approx(2 / 4)
    assert o.final_yield == pytest.approx(3 / 4)
    assert o.retest_rate == pytest.approx(2 / 4) and o.retests == 2
    assert o.test_yield == pytest.approx(3 / 6)
    assert r.basis == "part"
    by_station = {row.group["station"]: row for row in r.rows}
    # Parts belong to the station of their first test: all four started on S1.
    assert by_station["S1"].parts == 4 and by_station["S2"].parts == 0
    assert by_station["S2"].tests == 2 and by_station["S2"].test_yield == pytest.approx(0.5)


def test_missing_part_ids_fall_back_to_test_level() -> None:
    df = _results([
        ("2026-03-02T06:10Z", "S1", None, "pass", ""),
        ("2026-03-02T06:11Z", "S1", None, "reject", "leak"),
        ("2026-03-02T06:12Z", "S1", None, "pass", ""),
    ])  # fmt: skip
    r = yield_report(df)
    assert r.basis == "test" and "no part ids" in r.note
    assert r.overall.first_pass_yield == pytest.approx(2 / 3) == r.overall.test_yield
    assert r.overall.retest_rate == 0.0


def test_mixed_ids_say_so() -> None:
    df = _results([
        ("2026-03-02T06:10Z", "S1", "P1", "reject", "leak"),
        ("2026-03-02T06:11Z", "S1", "P1", "pass", ""),
        ("2026-03-02T06:12Z", "S1", None, "pass", ""),
    ])  # fmt: skip
    r = yield_report(df)
    assert r.basis == "mixed" and "1 test(s) without a part id" in r.note
    assert r.overall.parts == 2 and r.overall.first_pass_yield == pytest.approx(0.5)


def test_yield_by_shift_across_the_spring_dst_night() -> None:
    # Berlin, night of 28→29 March 2026 (7 h). A part rejected at 23:30 CET and retested at
    # 05:45 CEST belongs to the night shift of the 28th; the 06:00 CEST test to the early shift.
    df = _results([
        ("2026-03-28T22:30Z", "S1", "P1", "reject", "leak"),   # 23:30 CET
        ("2026-03-29T03:45Z", "S1", "P1", "pass", ""),         # 05:45 CEST
        ("2026-03-29T04:00Z", "S1", "P2", "pass", ""),         # 06:00 CEST
        ("2026-03-28T20:59Z", "S1", "P3", "pass", ""),         # 21:59 CET, late shift
    ])  # fmt: skip
    r = yield_report(df, by=("shift",), calendar=BERLIN)
    rows = {row.group["shift"]: row for row in r.rows}
    assert set(rows) == {"2026-03-28 late", "2026-03-28 night", "2026-03-29 early"}
    night = rows["2026-03-28 night"]
    assert (night.tests, night.parts, night.first_pass, night.final_pass) == (2, 1, 0, 1)
    day = yield_report(df, by=("day",), calendar=BERLIN)
    assert {row.group["day"] for row in day.rows} == {"2026-03-28", "2026-03-29"}


def test_hourly_counts_to_shifts_across_autumn_dst() -> None:
    # 20:00 UTC 24 Oct → 05:00 UTC 25 Oct 2026 is the 9-hour Berlin night shift.
    hours = pd.date_range("2026-10-24T19:00Z", "2026-10-25T05:00Z", freq="h")
    counts = pd.DataFrame({"bucket": hours, "station": "S1", "verdict": "pass", "n": 1})
    folded, exact = counts_to_shifts(counts, BERLIN)
    assert exact
    by = {
        (str(d), s): n for d, s, n in folded[["shift_date", "shift", "n"]].itertuples(index=False)
    }
    assert by == {("2026-10-24", "late"): 1, ("2026-10-24", "night"): 9, ("2026-10-25", "early"): 1}


def test_half_hour_zone_is_flagged_inexact() -> None:
    india = ShiftCalendar("Asia/Kolkata")  # UTC+05:30: hour buckets straddle 06:00 local
    counts = pd.DataFrame({"bucket": pd.date_range("2026-01-01T00:00Z", periods=3, freq="h"),
                           "verdict": "pass", "n": 1})  # fmt: skip
    _, exact = counts_to_shifts(counts, india)
    assert not exact


def test_yield_from_counts() -> None:
    counts = pd.DataFrame({"station": ["S1", "S1", "S1", "S2"],
                           "verdict": ["pass", "reject", "aborted", "pass"],
                           "n": [90, 8, 2, 50]})  # fmt: skip
    first = pd.DataFrame(
        {"station": ["S1", "S1", "S2"], "verdict": ["pass", "reject", "pass"], "n": [85, 10, 50]}
    )
    out = yield_from_counts(counts, first, by=["station"]).set_index("station")
    assert out.loc["S1", "test_yield"] == pytest.approx(90 / 98)
    assert out.loc["S1", "first_pass_yield"] == pytest.approx(85 / 95)
    assert out.loc["S2", "first_pass_yield"] == 1.0


def test_pareto() -> None:
    df = _results([
        ("2026-03-02T06:10Z", "S1", None, "reject", "leak"),
        ("2026-03-02T06:11Z", "S1", None, "reject", "leak"),
        ("2026-03-02T06:12Z", "S1", None, "gross", "no pressure"),
        ("2026-03-02T06:13Z", "S1", None, "reject", ""),
        ("2026-03-02T06:14Z", "S1", None, "pass", ""),
    ])  # fmt: skip
    p = pareto(df)
    assert [(r.category, r.n) for r in p.rows] == [
        ("leak", 2),
        ("(no reason given)", 1),
        ("no pressure", 1),
    ]
    assert p.rows[-1].cumulative_share == pytest.approx(1.0)
    v = pareto(df, column="verdict", verdicts=None)
    assert v.rows[0].category == "reject" and v.total == 5
    c = pareto_from_counts(pd.DataFrame({"verdict": ["pass", "reject"], "n": [9, 1]}))
    assert c.rows[0].share == pytest.approx(0.9)


def test_yield_from_store_shaped_first_pass_counts_by_shift() -> None:
    # Hourly first-pass counts in the store's shape (a part sits in the hour of its first test)
    # fold into Berlin shifts and give first-pass and final yield per shift.
    fp = pd.DataFrame({
        "station": "S1",
        "bucket": pd.to_datetime(["2026-03-28T20:00Z", "2026-03-28T21:00Z", "2026-03-29T03:00Z",
                                  "2026-03-29T04:00Z"], utc=True),
        "parts": [10, 20, 30, 5], "first_pass": [9, 18, 24, 5], "final_pass": [10, 20, 29, 5],
        "tests": [11, 22, 37, 5], "no_part_id": 0,
    })  # fmt: skip
    folded, exact = counts_to_shifts(fp, BERLIN)
    assert exact and set(folded.columns) >= {"shift_date", "shift", "station", "parts", "tests"}
    night = folded[(folded["shift"] == "night")].iloc[0]
    assert (int(night["parts"]), int(night["first_pass"])) == (50, 42)  # 21:00Z and 03:00Z
    verdicts = pd.DataFrame({"shift": ["night", "night"], "verdict": ["pass", "reject"],
                             "n": [52, 7]})  # fmt: skip
    out = yield_from_counts(verdicts, folded[folded["shift"] == "night"], by=["shift"])
    assert out.loc[0, "first_pass_yield"] == pytest.approx(42 / 50)
    assert out.loc[0, "final_yield"] == pytest.approx(49 / 50)


def test_to_dict_turns_missing_values_into_null() -> None:
    import json

    from analytics._result import jsonable

    assert json.loads(json.dumps(jsonable({"a": pd.NA, "b": pd.NaT, "c": float("nan")}))) == {
        "a": None, "b": None, "c": None
    }  # fmt: skip


def test_pareto_from_store_counts_equals_pareto_of_rows() -> None:
    """The dashboard's Pareto of reasons from the store's counts is the one the rows give."""
    rows = pd.DataFrame({
        "verdict": ["reject", "reject", "gross", "pass", "reject", "aborted", "reject"],
        "reason": ["above reject limit", "above reject limit", "test pressure not reached",
                   "", None, "cycle stopped by operator", " above reject limit "],
    })  # fmt: skip
    counts = rows.assign(reason=rows["reason"].fillna("")).groupby(
        ["reason", "verdict"], as_index=False).size().rename(columns={"size": "n"})
    want = pareto(rows, column="reason")
    got = pareto_from_counts(counts, column="reason", verdicts=("reject", "gross"))
    assert got == want
    assert [(r.category, r.n) for r in got.rows][:1] == [("above reject limit", 3)]
