"""The hourly summaries give the same answers as the raw rows, for any range, also after prune.

Reference: pandas groupby over the raw result rows the same store returns (``results()``),
so only the summary path (result_hours / part_hours plus partial-hour edges) is under test.
"""

from __future__ import annotations

from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from gateway.records import TestResult, Verdict
from gateway.store import SqliteStore, open_journal
from tests.gateway.store._data import T0, result

pytestmark = pytest.mark.timeout(120)
STATIONS = [("L1-S1", "L1"), ("L1-S2", "L1"), ("L2-S1", "L2")]
PROGRAMS = ["HX-210", "HX-230", "MV-44"]
VERDICTS = ["pass", "pass", "pass", "reject", "gross", "aborted"]


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
                verdict=VERDICTS[int(rng.integers(len(VERDICTS)))],
                leak_rate_sccm=float(np.round(rng.gamma(2.0, 0.3), 4)),
                part_id=part,
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
    tests = raw[raw["part_id"].notna()].sort_values(["ended_at", "seq"])
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
