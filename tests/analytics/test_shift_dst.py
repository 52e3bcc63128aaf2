"""Shift boundaries at wall times the clock change repeats or skips: shift_of, assign and
window always agree.

Outside sources: the IANA time zone database through Python's zoneinfo (Europe/Berlin goes
from 03:00 CEST back to 02:00 CET on 2026-10-25 and from 02:00 CET to 03:00 CEST on
2026-03-29) and PEP 495 (fold = 0 is a repeated wall time's first occurrence, the rule the
calendar states for a boundary).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo

import pandas as pd
import pytest

from analytics.shifts import ShiftCalendar

BERLIN = ZoneInfo("Europe/Berlin")


@pytest.mark.parametrize(("start", "boundary"), [
    (datetime(2026, 10, 24, 22, 0, tzinfo=UTC), "02:30"),  # repeated hour (autumn)
    (datetime(2026, 3, 28, 22, 0, tzinfo=UTC), "02:30"),   # skipped hour (spring)
    (datetime(2026, 10, 24, 22, 0, tzinfo=UTC), "02:00"),
])
def test_shift_of_assign_and_window_agree_across_a_clock_change(start: datetime,
                                                                 boundary: str) -> None:
    cal = ShiftCalendar.from_starts("Europe/Berlin", {"night": "22:00", "dawn": boundary,
                                                      "day": "10:00"})
    times = [start + timedelta(minutes=5 * i) for i in range(12 * 8)]
    assigned = cal.assign(pd.Series(times))
    for t, (_, row) in zip(times, assigned.iterrows(), strict=True):
        got = cal.shift_of(t)
        assert got is not None
        assert got == (row["shift_date"], row["shift"]), t
        w = cal.window(*got)
        assert w.start <= t < w.end, (t, w)


def test_the_repeated_hour_boundary_is_its_first_occurrence() -> None:
    cal = ShiftCalendar.from_starts("Europe/Berlin", {"night": "22:00", "dawn": "02:30",
                                                      "day": "10:00"})
    first = datetime(2026, 10, 25, 2, 30, tzinfo=BERLIN)              # fold 0: 00:30 UTC
    second = datetime(2026, 10, 25, 2, 30, fold=1, tzinfo=BERLIN)     # fold 1: 01:30 UTC
    assert first.astimezone(UTC).hour == 0 and second.astimezone(UTC).hour == 1
    assert cal.shift_of(first) == (first.date(), "dawn")
    assert cal.shift_of(second) == (first.date(), "dawn")  # after the boundary, both times
    night = cal.window(datetime(2026, 10, 24).date(), "night")
    assert night.end == first.astimezone(UTC)
