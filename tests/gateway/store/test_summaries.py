"""The hourly summaries give the same answers as the raw rows, for any range, also after prune.

Reference: pandas groupby over the raw result rows the same store returns (``results()``),
so only the summary path (result_hours / part_hours plus partial-hour edges) is under test.
"""

from __future__ import annotations

import sqlite3
from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from gateway.records import TestResult, Verdict
from gateway.store import Journal, SqliteStore, open_journal
from gateway.store.journal import _result_row
from gateway.store.schema import MIGRATIONS, RESULT_COLUMNS, SCHEMA_VERSION
from gateway.store.summaries import SUMMARY_TABLES, rebuild_summaries
from tests.gateway.store._data import T0, result

pytestmark = pytest.mark.timeout(120)
STATIONS = [("L1-S1", "L1"), ("L1-S2", "L1"), ("L2-S1", "L2")]
PROGRAMS = ["HX-210", "HX-230", "MV-44"]
VERDICTS = ["pass", "pass", "pass", "reject", "gross", "aborted"]
REASONS = {"reject": ["leak above limit", "pressure loss high"], "gross": ["no fill pressure"],
           "aborted": ["operator stop", ""]}  # fmt: skip


def _plant(seed: int, n: int) -> list[TestResult]:
    rng = np.random.default_rng(seed)
    out: list[TestResult] = []
    for i in range(n):
        station, line = STATIONS[int(rng.integers(3))]
        ended = T0 + timedelta(microseconds=int(rng.integers(0, 3 * 86_400_000_000)))
        part = None if rng.random() < 0.1 else f"P{int(rng.integers(0, n // 2)):05d}"
        out.append(
            result(
                i,
                station=station,
                line=line,
                program=PROGRAMS[int(rng.integers(3))],
                ended_at=ended,
                verdict=(verdict := VERDICTS[int(rng.integers(len(VERDICTS)))]),
                leak_rate_sccm=float(np.round(rng.gamma(2.0, 0.3), 4)),
                part_id=part,
                reason=str(rng.choice(REASONS[verdict])) if verdict in REASONS else "",
            )
        )
    return out


def _ref_counts(raw: pd.DataFrame, since, until, by: list[str], bucket) -> pd.DataFrame:
    r = _in(raw, "ended_at", since, until)
    keys = _keys(r, "ended_at", by, bucket)
    return r.groupby([*keys, "verdict"]).size().rename("n").reset_index()


def _in(frame: pd.DataFrame, col: str, since, until) -> pd.DataFrame:
    keep = pd.Series(True, index=frame.index)
    if since is not None:
        keep &= frame[col] >= since
    if until is not None:
        keep &= frame[col] < until
    return frame[keep].copy()


def _keys(frame: pd.DataFrame, col: str, by: list[str], bucket) -> list[str]:
    if bucket:
        frame["bucket"] = frame[col].dt.floor({"hour": "h", "day": "D"}[bucket])
        return [*by, "bucket"]
    return list(by)


def _ref_first_pass(raw: pd.DataFrame, since, until, by: list[str], bucket) -> pd.DataFrame:
    # an aborted test measured nothing: it neither decides a part nor counts among its tests
    tests = raw[raw["part_id"].notna() & (raw["verdict"] != "aborted")].sort_values(
        ["ended_at", "seq"])
    g = tests.groupby("part_id")
    parts = g.first()[["station", "line", "program", "verdict", "ended_at"]]
    parts["final"] = g["verdict"].last()
    parts["tests"] = g.size()
    parts = _in(parts, "ended_at", since, until)
    keys = _keys(parts, "ended_at", by, bucket)
    parts["first_pass"] = parts["verdict"] == "pass"
    parts["final_pass"] = parts["final"] == "pass"
    loose = _in(raw[raw["part_id"].isna()], "ended_at", since, until)
    _keys(loose, "ended_at", by, bucket)
    if keys:
        agg = parts.groupby(keys).agg(
            parts=("tests", "size"), first_pass=("first_pass", "sum"),
            final_pass=("final_pass", "sum"), tests=("tests", "sum"),
        )  # fmt: skip
        agg = agg.join(loose.groupby(keys).size().rename("no_part_id"), how="outer")
        return agg.fillna(0).astype("int64").reset_index()
    return pd.DataFrame([{
        "parts": len(parts), "first_pass": int(parts["first_pass"].sum()),
        "final_pass": int(parts["final_pass"].sum()), "tests": int(parts["tests"].sum()),
        "no_part_id": len(loose),
    }])  # fmt: skip


def _ranges():
    odd = T0 + timedelta(hours=5, minutes=17, seconds=3)
    return [
        (None, None),
        (odd, odd + timedelta(hours=30, minutes=41)),  # partial hours at both ends
        (odd, odd + timedelta(minutes=20)),  # inside one hour
        (T0 + timedelta(hours=2), T0 + timedelta(days=2)),  # whole hours only
        (odd, None),
        (None, odd),
    ]


def _check(store: SqliteStore) -> None:
    raw = store.results()
    for since, until in _ranges():
        for by, bucket in (
            (["station"], None),
            (["line", "program"], "hour"),
            ([], "day"),
            ([], None),
        ):
            got = store.verdict_counts(since, until, by=by, bucket=bucket)  # type: ignore[arg-type]
            want = _ref_counts(raw, since, until, by, bucket)
            pd.testing.assert_frame_equal(got, want, check_dtype=False)
            # the same split by reject reason (the reason_hours summary)
            by_reason = [*by, "reason"]
            got = store.verdict_counts(since, until, by=by_reason, bucket=bucket)  # type: ignore[arg-type]
            want = _ref_counts(raw, since, until, by_reason, bucket)
            pd.testing.assert_frame_equal(got, want, check_dtype=False)

            got_fp = store.first_pass_counts(since, until, by=by, bucket=bucket)  # type: ignore[arg-type]
            want_fp = _ref_first_pass(raw, since, until, by, bucket)
            keys = [*by, *(["bucket"] if bucket else [])]
            if keys:
                want_fp = want_fp[(want_fp["parts"] > 0) | (want_fp["no_part_id"] > 0)]
                want_fp = want_fp.sort_values(keys).reset_index(drop=True)
            else:
                want_fp = want_fp[(want_fp["parts"] > 0) | (want_fp["no_part_id"] > 0)]
                want_fp = want_fp.reset_index(drop=True)
            pd.testing.assert_frame_equal(got_fp, want_fp, check_dtype=False)

            got_s = store.leak_summary(since, until, by=by, bucket=bucket)  # type: ignore[arg-type]
            measured = _in(raw[raw["verdict"] != "aborted"], "ended_at", since, until)
            keys = _keys(measured, "ended_at", by, bucket)
            if keys:
                ref = measured.groupby(keys)["leak_rate_sccm"].agg(
                    ["count", "mean", "std", "min", "max"]
                )
                ref = ref.reset_index()
            else:
                x = measured["leak_rate_sccm"]
                ref = pd.DataFrame(
                    [
                        {
                            "count": len(x),
                            "mean": x.mean(),
                            "std": x.std(),
                            "min": x.min(),
                            "max": x.max(),
                        }
                    ]
                )
                ref = ref[ref["count"] > 0]
            assert list(got_s["n"]) == list(ref["count"])
            for col in ("mean", "std", "min", "max"):
                np.testing.assert_allclose(got_s[col], ref[col], rtol=1e-9, atol=1e-12)


def test_summaries_match_raw_rows(tmp_path: Path) -> None:
    rows = _plant(11, 1500)
    journal = open_journal(str(tmp_path / "s.db"))
    # several batches, each with repeats of earlier rows: repeats must not count twice
    for k in range(0, len(rows), 200):
        journal.write(rows[k : k + 200] + rows[max(0, k - 50) : k])
    # a part whose retest arrives with an end time before its first test (station clock set
    # back): its first test, and so its group and hour, change
    first = result(9001, station="L1-S1", part_id="CLOCK", verdict="reject",
                   ended_at=T0 + timedelta(hours=20))  # fmt: skip
    journal.write([first])
    journal.write([replace(first, cycle=9002, station="L2-S1", line="L2", verdict=Verdict.PASS,
                           ended_at=T0 + timedelta(hours=19))])  # fmt: skip
    with SqliteStore(tmp_path / "s.db") as store:
        _check(store)
        # prune the first day (the journal's received_at = ended_at + 120 ms); the summaries
        # of the touched hours are rebuilt and parts whose every test went disappear
        removed = journal.prune(T0 + timedelta(hours=26, minutes=13), [])
        assert removed > 0
        assert store.results(until=T0 + timedelta(hours=26)).empty
        _check(store)
    journal.close()


def _summary_tables(path: Path) -> dict[str, list[tuple]]:
    conn = sqlite3.connect(path)
    try:
        return {
            t: conn.execute(f"SELECT * FROM {t} ORDER BY 1, 2, 3, 4").fetchall()
            for t in SUMMARY_TABLES
        }
    finally:
        conn.close()


def test_batch_with_duplicates_counts_each_test_once(tmp_path: Path) -> None:
    rows = _plant(3, 300)
    journal = open_journal(str(tmp_path / "d.db"))
    journal.write(rows[:100])
    # one batch: repeats inside itself, repeats of stored rows, and new rows
    stats = journal.write([*rows[100:200], *rows[150:200], *rows[:100], *rows[100:120]])
    assert (stats.inserted, stats.duplicates) == (100, 170)
    # a batch of nothing but repeats changes nothing
    before = _summary_tables(tmp_path / "d.db")
    assert journal.write(rows[:200]).inserted == 0
    assert _summary_tables(tmp_path / "d.db") == before
    journal.write(rows[200:])
    with SqliteStore(tmp_path / "d.db") as store:
        assert len(store.results()) == 300
        _check(store)
    journal.close()


def test_one_batch_spanning_many_hours_and_days(tmp_path: Path) -> None:
    # one batch across three days (every hour-group at once), against raw rows
    rows = _plant(5, 800)
    journal = open_journal(str(tmp_path / "h.db"))
    journal.write(rows)
    with SqliteStore(tmp_path / "h.db") as store:
        hours = store.verdict_counts(by=[], bucket="hour")
        assert hours["bucket"].nunique() > 48
        _check(store)
    journal.close()


def test_retest_arriving_before_an_earlier_test(tmp_path: Path) -> None:
    journal = open_journal(str(tmp_path / "r.db"))
    at = T0 + timedelta(hours=10, minutes=5)
    late = result(1, part_id="R1", verdict="reject", ended_at=at)
    journal.write([late, result(2, part_id="R2", ended_at=at)])
    # a later batch brings R1's test from three hours earlier on another station (its clock
    # is behind): R1's first test, group and hour change; R1's final verdict stays the reject
    early = result(7, station="L2-S1", line="L2", program="MV-44", part_id="R1",
                   verdict="pass", ended_at=at - timedelta(hours=3))  # fmt: skip
    journal.write([early])
    # within one batch: the retest listed first ends after the first test listed second;
    # and two tests of R3 end at the same microsecond (seq, i.e. arrival, breaks the tie)
    journal.write([
        result(11, part_id="R4", verdict="pass", ended_at=at + timedelta(hours=2)),
        result(12, station="L1-S2", part_id="R4", verdict="reject", ended_at=at),
        result(13, part_id="R3", verdict="reject", ended_at=at + timedelta(hours=1)),
        result(14, station="L1-S2", part_id="R3", verdict="pass", ended_at=at + timedelta(hours=1)),
        result(15, part_id="R3", verdict="gross", ended_at=at - timedelta(hours=5)),
    ])  # fmt: skip
    conn = sqlite3.connect(tmp_path / "r.db")
    parts = {
        r[0]: r[1:]
        for r in conn.execute(
            "SELECT part_id, tests, station, first_verdict, last_verdict FROM parts"
        )
    }
    conn.close()
    assert parts == {
        "R1": (2, "L2-S1", "pass", "reject"),
        "R2": (1, "L1-S1", "pass", "pass"),
        "R3": (3, "L1-S1", "gross", "pass"),  # last: the later-arriving of the tied pair
        "R4": (2, "L1-S2", "reject", "pass"),
    }
    with SqliteStore(tmp_path / "r.db") as store:
        by_hour = store.first_pass_counts(by=["station"], bucket="hour")
        # R1 moved out of 10:00 at L1-S1 into 07:00 at L2-S1; no empty group is left behind
        assert (by_hour["parts"] > 0).all()
        _check(store)
    journal.close()


def test_rebuild_equals_the_batch_fold(tmp_path: Path) -> None:
    rows = _plant(7, 600)
    path = tmp_path / "b.db"
    journal = open_journal(str(path))
    for k in range(0, len(rows), 50):
        journal.write(rows[k : k + 50] + rows[max(0, k - 10) : k])
    journal.close()
    folded = _summary_tables(path)
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("BEGIN")
    rebuild_summaries(conn)
    conn.execute("COMMIT")
    conn.close()
    rebuilt = _summary_tables(path)
    assert rebuilt["parts"] == folded["parts"]
    assert rebuilt["reason_hours"] == folded["reason_hours"]
    assert rebuilt["part_hours"] == folded["part_hours"]
    # sums of floats may differ in the last bits with the order of addition
    assert len(rebuilt["result_hours"]) == len(folded["result_hours"])
    for a, b in zip(rebuilt["result_hours"], folded["result_hours"], strict=True):
        assert a[:8] == b[:8] and a[10:] == b[10:]
        np.testing.assert_allclose(a[8:10], b[8:10], rtol=1e-12)


def test_v1_journal_migrates_with_correct_summaries(tmp_path: Path) -> None:
    rows = _plant(13, 600)
    path = tmp_path / "v1.db"
    Journal(path, migrations=MIGRATIONS[:1]).close()  # schema v1, summaries by triggers
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("BEGIN")  # rows as a v1 build wrote them, repeats ignored
    v1_columns = RESULT_COLUMNS[: RESULT_COLUMNS.index("part_family")]  # what v1 had
    v1_insert = (f"INSERT OR IGNORE INTO results (record_id, {', '.join(v1_columns)}) "
                 f"VALUES ({', '.join('?' * (len(v1_columns) + 1))})")
    conn.executemany(
        v1_insert, [_result_row(r)[: len(v1_columns) + 1] for r in rows[:400] + rows[300:350]]
    )
    conn.execute("COMMIT")
    conn.close()
    journal = open_journal(str(path))
    assert journal.version == SCHEMA_VERSION
    conn = sqlite3.connect(path)
    assert conn.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'").fetchall() == []
    conn.close()
    with SqliteStore(path) as store:
        _check(store)  # what the v1 triggers kept is still right
    for k in range(400, len(rows), 100):  # and later batches fold in on top of it
        journal.write(rows[k : k + 100] + rows[k - 30 : k])
    with SqliteStore(path) as store:
        _check(store)
    journal.close()


def test_an_aborted_first_test_does_not_decide_the_part(tmp_path: Path) -> None:
    """An operator abort measured nothing, so the part's first *measured* test decides its
    first pass (common practice; analytics/yields.py computes it the same way), and a part
    that was only ever aborted has no decision at all."""
    from analytics.yields import yield_report

    at = T0 + timedelta(hours=10)
    rows = [
        result(1, part_id="A1", verdict="aborted", ended_at=at),
        result(2, part_id="A1", verdict="pass", ended_at=at + timedelta(minutes=2)),
        result(3, part_id="A2", verdict="aborted", ended_at=at + timedelta(minutes=4)),
        result(4, part_id="A3", verdict="reject", ended_at=at + timedelta(minutes=6)),
        result(5, part_id="A3", verdict="pass", ended_at=at + timedelta(minutes=8)),
    ]
    journal = open_journal(str(tmp_path / "a.db"))
    journal.write(rows[:1])
    journal.write(rows[1:])  # the abort and the pass arrive in different batches
    journal.close()
    with SqliteStore(tmp_path / "a.db") as store:
        got = store.first_pass_counts()
    assert got[["parts", "first_pass", "final_pass", "tests"]].iloc[0].tolist() == [2, 1, 2, 3]
    frame = pd.DataFrame([r.to_dict() for r in rows])
    report = yield_report(frame)
    assert (report.overall.parts, report.overall.first_pass_yield) == (2, 0.5)
