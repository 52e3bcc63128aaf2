"""Audit computations on hand-built journals: part history, retests, leak-standard due dates."""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta

import pandas as pd
import pytest

from analytics.audit import (
    LeakStandard,
    add_months,
    flag_overdue_calibrations,
    part_history,
    retest_analysis,
    standard_drift,
    standards_due,
)
from analytics.shifts import ShiftCalendar

pytestmark = pytest.mark.timeout(60)

BERLIN = ShiftCalendar("Europe/Berlin")


def _results(rows: list[tuple[str, str, str | None, str, float]]) -> pd.DataFrame:
    """rows: (ended_at ISO UTC, station, part_id, verdict, leak_rate_sccm); limit 2 sccm."""
    return pd.DataFrame({
        "station": [r[1] for r in rows], "line": "L1", "program": "HX-210",
        "cycle": range(len(rows)), "ended_at": pd.to_datetime([r[0] for r in rows], utc=True),
        "part_id": pd.array([r[2] for r in rows], dtype="string"),
        "verdict": [r[3] for r in rows], "leak_rate_sccm": [r[4] for r in rows],
        "reject_limit_sccm": 2.0, "reason": "", "calibration_ref": None,
    })  # fmt: skip


# Hand-built journal (Berlin, CET in January: UTC+1):
#   P1 rejected on S1 at 22:50 local (late shift), retested on S2 at 23:10 local (night): passes
#      marginally (1.9 sccm, inside the 10 % guard band) — a part on two stations, across a shift
#      boundary;
#   P2 rejected at 23:55 local, rejected again and passes at 00:20 local next day — across
#      midnight (same night shift), two rejects before the pass;
#   P3 passes first time; P4 rejects twice and never passes; one test without a part id.
JOURNAL = _results([
    ("2026-01-14T21:50Z", "S1", "P1", "reject", 2.4),
    ("2026-01-14T22:10Z", "S2", "P1", "pass", 1.9),
    ("2026-01-14T22:55Z", "S1", "P2", "reject", 2.2),
    ("2026-01-14T23:05Z", "S1", "P2", "gross", 30.0),
    ("2026-01-14T23:20Z", "S1", "P2", "pass", 0.4),
    ("2026-01-14T23:30Z", "S1", "P3", "pass", 0.1),
    ("2026-01-14T23:40Z", "S1", "P4", "reject", 2.5),
    ("2026-01-14T23:45Z", "S1", "P4", "reject", 2.6),
    ("2026-01-14T23:50Z", "S1", None, "pass", 0.2),
])  # fmt: skip

CALS = pd.DataFrame({
    "station": ["S1", "S1", "S2"], "program": "HX-210",
    "ended_at": pd.to_datetime(
        ["2026-01-14T05:00Z", "2026-01-14T22:00Z", "2026-01-14T05:00Z"], utc=True
    ),
    "master_loss_pa": [20.0, 21.0, 18.0], "standard_loss_pa": [60.0, 61.0, 58.0], "passed": True,
    "sensitivity": 5.0 / 40.0,
})  # fmt: skip


def test_part_history_on_two_stations_with_calibration_in_force() -> None:
    h = part_history(JOURNAL, CALS, "P1")
    assert [t.station for t in h.tests] == ["S1", "S2"]
    assert h.final_verdict == "pass" and h.rejects_before_pass == 1
    assert h.tests[0].calibration_at == datetime(2026, 1, 14, 5, 0, tzinfo=UTC)
    assert h.tests[0].master_loss_pa == 20.0
    assert h.tests[1].master_loss_pa == 18.0  # S2's own calibration
    p2 = part_history(JOURNAL, CALS, "P2")
    # S1 recalibrated at 22:00 UTC: P2's tests after it use the new master loss.
    assert [t.master_loss_pa for t in p2.tests] == [21.0, 21.0, 21.0]
    assert p2.rejects_before_pass == 2
    assert part_history(JOURNAL, CALS, "nope").tests == []


def test_retest_counts_are_exact() -> None:
    r = retest_analysis(JOURNAL, by=("station", "shift"), calendar=BERLIN)
    assert r.parts == 4 and r.passed_parts == 3 and r.passed_after_retest == 2
    assert r.share_of_passes_after_retest == pytest.approx(2 / 3)
    assert r.passed_after_two_or_more_rejects == ["P2"]
    assert [m["part_id"] for m in r.marginal_passes] == ["P1"]
    assert r.parts_without_id == 1
    groups = {(g["station"], g["shift"]): g for g in r.by_group}
    # P1's pass ran on S2 in the night shift of the 14th; P2's pass at 00:20 local on the 15th
    # is still the night shift of the 14th.
    assert groups[("S2", "2026-01-14 night")]["passed_after_retest"] == 1
    assert groups[("S1", "2026-01-14 night")]["passes"] == 2
    assert groups[("S1", "2026-01-14 night")]["passed_after_retest"] == 1


def test_retest_share_jump_raises_an_alarm() -> None:
    rows = []
    t = datetime(2026, 2, 2, 7, 0, tzinfo=UTC)
    for day in range(6):
        for i in range(40):
            at = t + timedelta(days=day, minutes=5 * i)
            part = f"D{day}-{i}"
            retest = (i % 20 == 0) if day < 5 else (i % 2 == 0)  # 5 % → 50 % on the last day
            if retest:
                rows.append((at.isoformat(), "S1", part, "reject", 2.3))
                at += timedelta(minutes=1)
            rows.append((at.isoformat(), "S1", part, "pass", 0.5))
    r = retest_analysis(_results(rows), calendar=BERLIN)
    assert [a.period for a in r.alarms] == ["2026-02-07"]
    assert r.alarms[0].retest_share == pytest.approx(0.5)


def test_add_months_across_month_ends_and_leap_days() -> None:
    # Calendar facts (Gregorian): 2028 is a leap year, 2026 and 2029 are not.
    assert add_months(date(2026, 1, 31), 1) == date(2026, 2, 28)
    assert add_months(date(2028, 1, 31), 1) == date(2028, 2, 29)
    assert add_months(date(2028, 2, 29), 12) == date(2029, 2, 28)
    assert add_months(date(2026, 8, 31), 6) == date(2027, 2, 28)
    assert add_months(date(2026, 12, 15), 1) == date(2027, 1, 15)
    assert add_months(date(2026, 3, 31), -1) == date(2026, 2, 28)


def test_standards_due_and_overdue_calibration_flag() -> None:
    standards = [
        LeakStandard("LS-001", "S1", 5.0, 50_000.0, date(2025, 2, 28), interval_months=12),
        LeakStandard("LS-002", "S2", 5.0, 50_000.0, date(2025, 6, 1), due_date=date(2026, 2, 10)),
        LeakStandard("LS-003", "S3", 5.0, 50_000.0, date(2025, 6, 1), due_date=date(2027, 1, 1)),
    ]
    today = date(2026, 2, 11)
    status = {s.serial: s for s in standards_due(standards, today, within_days=30)}
    assert status["LS-001"].due_date == date(2026, 2, 28) and status["LS-001"].status == "due soon"
    assert status["LS-002"].status == "overdue" and status["LS-002"].days_left == -1
    assert status["LS-003"].status == "ok"
    # Valid on its due date, overdue from the day after (local date, Berlin).
    cals = pd.DataFrame({
        "station": ["S2", "S2", "S1"],
        "ended_at": pd.to_datetime(
            ["2026-02-10T22:30Z", "2026-02-10T23:30Z", "2026-02-11T10:00Z"], utc=True
        ),
    })  # fmt: skip
    flagged = flag_overdue_calibrations(cals, standards, "Europe/Berlin")
    # 22:30 UTC = 23:30 CET on the 10th (still valid); 23:30 UTC = 00:30 on the 11th (overdue).
    assert flagged["standard_overdue"].tolist() == [False, True, False]
    assert flagged["standard_serial"].tolist() == ["LS-002", "LS-002", "LS-001"]


def test_standard_drift_reports_slope() -> None:
    std = LeakStandard("LS-001", "S1", 5.0, 50_000.0, date(2026, 1, 1), interval_months=12)
    days = pd.date_range("2026-01-02", periods=12, freq="7D", tz="UTC")
    cals = pd.DataFrame({"station": "S1", "ended_at": days, "passed": True,
                         "sensitivity": [0.125 - 0.001 * i for i in range(12)]})  # fmt: skip
    d = standard_drift(cals, std)
    assert d.status == "drifting" and d.slope_per_day == pytest.approx(-0.001 / 7)
