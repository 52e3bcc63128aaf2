"""The shift report's comparisons (previous shift, target) and alarm states (the journal's).

Expected numbers are counted by hand from the hand-built journal's table (shift_journal.py):
the night shift of 14 January against the late shift before it.
"""

from __future__ import annotations

import json
from datetime import UTC, date, datetime, timedelta, timezone
from pathlib import Path

import pytest
from shift_journal import write_journal

from analytics.alarms import Condition, transitions
from analytics.shift_compare import (
    JournalAlarm,
    alarm_states,
    compare_shift,
    journal_alarms,
    previous_window,
)
from analytics.shifts import ShiftCalendar
from gateway.cli import main

pytest.importorskip("gateway.store", reason="the store package is not part of this build")
pytestmark = pytest.mark.timeout(60)

CAL = ShiftCalendar.from_starts("Europe/Berlin", {"early": "06:00", "late": "14:00",
                                                  "night": "22:00"})


def _local(day: int, hh: int, mm: int = 0) -> datetime:
    """Berlin wall clock in January (CET, UTC+1) to UTC."""
    return datetime(2026, 1, day, hh, mm, tzinfo=timezone(timedelta(hours=1))).astimezone(UTC)


def test_previous_window_is_the_shift_that_ended_when_this_one_began() -> None:
    night = CAL.window(date(2026, 1, 14), "night")
    before = previous_window(CAL, night)
    assert before is not None and (before.shift_date, before.shift) == (date(2026, 1, 14), "late")
    early = previous_window(CAL, CAL.window(date(2026, 1, 15), "early"))
    assert early is not None and (early.shift_date, early.shift) == (date(2026, 1, 14), "night")
    # a calendar with a gap: the day shift's previous is yesterday's
    day_only = ShiftCalendar.from_starts("UTC", {"day": "08:00", "off": "16:00"})
    assert previous_window(day_only, day_only.window(date(2026, 1, 14), "day")) is not None


def test_compare_shift_changes_targets_and_direction() -> None:
    rows = {c.figure: c for c in compare_shift(
        {"first_pass_yield": 0.9, "final_yield": 0.95, "retest_share": 0.1, "tests": 120},
        {"first_pass_yield": 0.92, "final_yield": 0.95, "retest_share": 0.05, "tests": 100},
        {"first_pass_yield": 0.95})}
    fpy = rows["first_pass_yield"]
    assert fpy.change == pytest.approx(-0.02) and fpy.better is False
    assert fpy.versus_target == pytest.approx(-0.05) and fpy.met is False
    assert rows["final_yield"].change == 0 and rows["final_yield"].better is None
    assert rows["retest_share"].better is False  # more retests is worse
    assert rows["tests"].change == 20 and rows["tests"].target is None
    none = compare_shift({"first_pass_yield": None}, None)
    assert all(c.change is None and c.met is None for c in none)


def test_report_compares_with_the_late_shift_and_the_target(tmp_path: Path,
                                                            capsys: pytest.CaptureFixture[str]
                                                            ) -> None:
    url = write_journal(tmp_path)
    assert main(["report", "shift", "--store", url, "--timezone", "Europe/Berlin", "--date",
                 "2026-01-14", "--shift", "night", "--target-yield", "60", "--json"]) == 0
    r = json.loads(capsys.readouterr().out)["result"]
    assert r["previous_shift"] == "2026-01-14 late"
    l1 = {c["figure"]: c for c in r["lines"][0]["comparison"]}
    # night L1: first pass 4 of 7 parts, final 5 of 7, 2 of 5 passes retested, 12 tests;
    # late L1: P7 passed, P1 rejected (still rejected at 22:00), no retested pass, 2 tests
    assert (l1["first_pass_yield"]["this"], l1["first_pass_yield"]["previous"]) == (
        pytest.approx(4 / 7), pytest.approx(1 / 2))
    assert l1["first_pass_yield"]["change"] == pytest.approx(4 / 7 - 1 / 2)
    assert l1["final_yield"]["change"] == pytest.approx(5 / 7 - 1 / 2)
    assert l1["retest_share"]["change"] == pytest.approx(2 / 5)
    assert (l1["tests"]["previous"], l1["tests"]["change"]) == (2, 10)
    assert l1["first_pass_yield"]["target"] == pytest.approx(0.6)
    assert l1["first_pass_yield"]["met"] is False  # 57.1 % < 60 %
    assert r["units"] == {"pressure": "Pa", "leak": "sccm"}
    assert main(["report", "shift", "--store", url, "--date", "2026-01-14", "--shift",
                 "night", "--target-yield", "120"]) == 2
    assert "--target-yield" in capsys.readouterr().err


def _rows(*alarms: tuple[int, str | None, datetime, datetime | None, datetime | None]
          ) -> list[dict[str, object]]:
    return [{"id": i, "station": st, "rule": "r", "severity": "alarm", "message": "m",
             "raised_at": raised, "acked_at": acked, "acked_by": "Jo" if acked else None,
             "cleared_at": cleared} for i, st, raised, acked, cleared in alarms]


def test_alarm_states_at_the_end_of_the_shift() -> None:
    night = CAL.window(date(2026, 1, 14), "night")
    rows = _rows(
        (1, "S1", _local(14, 23), _local(15, 1), None),   # acknowledged in the shift, open
        (2, "S1", _local(15, 2), None, None),             # active: S1 is active (worst)
        (3, "S2", _local(15, 2), None, _local(15, 3)),    # cleared in the shift
        (4, "S3", _local(15, 4), _local(15, 7), None),    # acknowledged only after the shift
        (5, "S4", _local(14, 10), None, _local(14, 12)),  # cleared before: not listed
        (6, "S5", _local(15, 6), None, None),             # raised after: not listed
        (7, None, _local(15, 1), None, None),             # fleet-wide
    )
    listed = journal_alarms(rows, night)
    assert [a.id for a in listed] == [1, 7, 2, 3, 4]
    assert {a.id: a.state_at_end for a in listed} == {
        1: "acknowledged", 2: "active", 3: "cleared", 4: "active", 7: "active"}
    assert alarm_states(listed) == {"S1": ("active", 2), "S3": ("active", 1), None: ("active", 1)}
    assert isinstance(listed[0], JournalAlarm)


def test_station_state_agrees_with_the_journal_list_the_dashboard_shows(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from gateway.store import open_journal
    from gateway.store.logbook import Logbook

    url = write_journal(tmp_path)

    def cond(key: str, station: str) -> Condition:
        return Condition(key, key.split(":")[0], station, "alarm", _local(14, 23), key)

    streak, silent = cond("reject-streak:L1-S1", "L1-S1"), cond("silent:L2-S1", "L2-S1")
    garbage = cond("garbage:L1-S2", "L1-S2")
    with open_journal(url) as j:
        book = Logbook(j)
        book.apply(transitions([streak, silent, garbage], []), _local(14, 23, 50))
        book.acknowledge(next(a.id for a in book.open_alarms() if a.key == streak.key), "Jo",
                         _local(15, 0, 30))
        book.apply(transitions([streak, silent], [a.key for a in book.open_alarms()]),
                   _local(15, 2, 30))
        dashboard = {a.station: a.state for a in book.open_alarms()}  # the fleet page's list
    assert main(["report", "shift", "--store", url, "--timezone", "Europe/Berlin", "--date",
                 "2026-01-14", "--shift", "night", "--json"]) == 0
    r = json.loads(capsys.readouterr().out)["result"]
    states = {s["station"]: (s["alarm_state"], s["open_alarms"])
              for sec in r["lines"] for s in sec["stations"]}
    assert states == {"L1-S1": ("acknowledged", 1), "L1-S2": ("clear", 0),
                      "L2-S1": ("active", 1)}
    assert {st: state for st, (state, n) in states.items() if n} == dashboard
    listed = {a["station"]: a["state_at_end"] for sec in r["lines"]
              for a in sec["journal_alarms"]}
    assert listed == {"L1-S1": "acknowledged", "L1-S2": "cleared", "L2-S1": "active"}
    assert r["alarms_known"] is True
