"""The gateway's clock: the wall clock, or a demo plant's while ``use_clock`` is in force."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pandas as pd

from gateway import clock
from gateway.alarm_eval import clock_now
from gateway.drivers.base import utcnow


def test_receipt_stamps_follow_the_clock_in_force_and_the_wall_clock_after() -> None:
    fixed = datetime(2031, 5, 6, 7, 8, 9, tzinfo=UTC)
    with clock.use_clock(lambda: fixed):
        assert utcnow() == fixed == clock.utcnow()
    assert abs(utcnow() - datetime.now(UTC)) < timedelta(minutes=1)


class _Store:
    def __init__(self, received: list[datetime]) -> None:
        self.frame = pd.DataFrame({"station": [f"S{i}" for i in range(len(received))],
                                   "ended_at": pd.to_datetime(received, utc=True),
                                   "received_at": pd.to_datetime(received, utc=True)})

    def latest_results_per_station(self) -> pd.DataFrame:
        return self.frame


def test_the_data_clock_is_the_newest_receipt_when_it_is_later_than_the_wall() -> None:
    ahead = datetime.now(UTC) + timedelta(hours=3)
    store = _Store([ahead - timedelta(minutes=1), ahead])
    assert clock_now(store, {"LEAKFLEET_CLOCK": "data"}) == ahead
    assert clock_now(store, {}) < ahead - timedelta(hours=2)  # wall clock by default
    behind = _Store([datetime(2020, 1, 1, tzinfo=UTC)])  # an old history: the wall clock
    assert clock_now(behind, {"LEAKFLEET_CLOCK": "data"}) > datetime(2026, 1, 1, tzinfo=UTC)
