"""A station spewing noise fills at most ``keep`` quarantine rows a minute; the rest are
counted, and the count is on record in the journal with a status saying why."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

from gateway.garbage import GarbageLimiter
from gateway.records import Rejected
from gateway.runtime import _FlaggingOutbox

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def _junk(i: int, station: str = "S1") -> Rejected:
    return Rejected(station=station, profile="lf-delim@1.0", raw=f"\x7f#{i}", reason="noise",
                    received_at=T0)


def test_limiter_keeps_the_first_and_counts_the_rest() -> None:
    lim = GarbageLimiter(keep=3, window_s=60)
    kept = [lim.admit(_junk(i), T0 + timedelta(seconds=i))[0] for i in range(10)]
    assert kept == [True] * 3 + [False] * 7
    keep, closed = lim.admit(_junk(99), T0 + timedelta(seconds=61))
    assert keep is True  # a new minute
    [summary] = closed
    assert summary.station == "S1" and "7 more unreadable input(s)" in summary.reason
    assert lim.admit(_junk(1, "S2"), T0 + timedelta(seconds=62))[0] is True  # per station


class _Writer:
    accepting = True

    def __init__(self) -> None:
        self.items: list[Any] = []

    async def put(self, items: list[Any]) -> None:
        self.items.extend(items)


async def test_outbox_bounds_quarantine_and_records_the_rest() -> None:
    writer = _Writer()
    box = _FlaggingOutbox(writer, {"S1": None})  # type: ignore[arg-type]
    await box.put([_junk(i) for i in range(250)])
    assert len([i for i in writer.items if isinstance(i, Rejected)]) == 100
    await box.flush_garbage()
    summaries = [i for i in writer.items if isinstance(i, Rejected) and not i.raw]
    assert len(summaries) == 1 and "150 more" in summaries[0].reason
