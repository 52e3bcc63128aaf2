"""The fleet board: worst station first, levels in words and shapes, no reading shown as none.

The ordering and level rules are our own display policy (common practice in plant HMIs: the
most severe, longest-standing problem first; state never shown by colour alone, as ISA-101
style guidance for HMIs recommends, from memory).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pandas as pd

from analytics.alarms import AlarmRules, Condition
from analytics.fleet import (
    LEVELS,
    rank,
    reject_streak,
    standing,
    station_conditions,
    typical_interval,
)

NOW = datetime(2026, 12, 3, 12, tzinfo=UTC)


def _cond(key: str, severity: str, minutes_ago: int, rule: str = "x") -> Condition:
    return Condition(key, rule, "S", severity, NOW - timedelta(minutes=minutes_ago), key)  # type: ignore[arg-type]


def test_levels_have_text_and_shape_not_only_colour() -> None:
    labels = {v[1] for v in LEVELS.values()}
    shapes = {v[2] for v in LEVELS.values()}
    assert len(labels) == len(LEVELS) and len(shapes) == len(LEVELS)


def test_rank_puts_alarm_before_offline_before_warning_before_ok() -> None:
    ok = standing(
        "A", "L1", [], verdicts=["pass"], last_leak_sccm=0.5, last_limit_sccm=2.0, state="online"
    )
    warn = standing(
        "B",
        "L1",
        [_cond("w", "warning", 5)],
        verdicts=["pass"],
        last_leak_sccm=0.5,
        last_limit_sccm=2.0,
        state="online",
    )
    off = standing(
        "C",
        "L2",
        [_cond("link:C", "alarm", 9, rule="offline")],
        verdicts=["pass"],
        last_leak_sccm=0.5,
        last_limit_sccm=2.0,
        state="offline",
    )
    alarm = standing(
        "D",
        "L2",
        [_cond("cal", "alarm", 1)],
        verdicts=["pass"],
        last_leak_sccm=0.5,
        last_limit_sccm=2.0,
        state="online",
    )
    empty = standing(
        "E", "L2", [], verdicts=[], last_leak_sccm=None, last_limit_sccm=None, state=None
    )
    assert [s.station for s in rank([ok, empty, warn, off, alarm])] == ["D", "C", "B", "A", "E"]
    assert [s.level for s in rank([ok, empty, warn, off, alarm])] == [
        "alarm",
        "offline",
        "warning",
        "ok",
        "no data",
    ]


def test_longer_standing_problem_ranks_first_within_a_level() -> None:
    new = standing(
        "A",
        "L1",
        [_cond("a", "alarm", 1)],
        verdicts=["reject"],
        last_leak_sccm=3.0,
        last_limit_sccm=2.0,
        state="online",
    )
    old = standing(
        "B",
        "L1",
        [_cond("b", "alarm", 60)],
        verdicts=["reject"],
        last_leak_sccm=3.0,
        last_limit_sccm=2.0,
        state="online",
    )
    assert [s.station for s in rank([new, old])] == ["B", "A"]


def test_an_aborted_or_gross_test_has_no_reading_not_zero() -> None:
    for verdict in ("aborted", "gross"):
        s = standing(
            "A",
            "L1",
            [],
            verdicts=["pass", verdict],
            last_leak_sccm=0.0,
            last_limit_sccm=2.0,
            state="online",
        )
        assert s.last_leak_sccm is None and s.limit_share is None
    s = standing(
        "A", "L1", [], verdicts=["pass"], last_leak_sccm=0.5, last_limit_sccm=2.0, state="online"
    )
    assert s.limit_share == 0.25


def test_reject_streak_ignores_aborted_tests() -> None:
    assert reject_streak(["pass", "reject", "aborted", "gross", "reject"]) == 3
    assert reject_streak(["reject", "pass"]) == 0
    assert reject_streak([]) == 0


def test_typical_interval_is_the_median_gap() -> None:
    t0 = NOW - timedelta(hours=1)
    times = [t0 + timedelta(seconds=s) for s in (0, 30, 60, 90, 1000)]
    assert typical_interval(times) == timedelta(seconds=30)
    assert typical_interval(times[:2]) is None


def test_a_quiet_but_healthy_station_is_not_in_alarm() -> None:
    """Steady calibrations with ordinary scatter and passing tests raise nothing."""
    t0 = NOW - timedelta(days=5)
    cals = pd.DataFrame(
        {
            "ended_at": [t0 + timedelta(hours=4 * i) for i in range(20)],
            "program": "P1",
            "master_loss_pa": [3.0 + 0.05 * ((i * 7) % 5 - 2) for i in range(20)],
            "sensitivity": [0.02 + 0.0002 * ((i * 3) % 5 - 2) for i in range(20)],
            "passed": True,
            "reason": "",
        }
    )
    times = [NOW - timedelta(seconds=30 * (40 - i)) for i in range(40)]
    conds = station_conditions(
        "S", calibrations=cals, maintenance=(), verdicts=["pass"] * 40, times=times,
        state="online", state_since=t0, quarantined_10min=0, rules=AlarmRules(), now=NOW,
    )  # fmt: skip
    assert conds == []
